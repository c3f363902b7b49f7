"""The OpenAPI document: problem+json error responses, request-id header, security.

FastAPI documents its own 422 schema and puts every response under
``application/json``; :func:`build_openapi` rewrites error responses to the named
``Problem`` schema under ``application/problem+json``, adds the ``X-Request-ID``
header to every response, states the optional API key and the batch cap.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

from fastapi import FastAPI
from fastapi.openapi.utils import get_openapi

from service.problems import PROBLEM_MEDIA_TYPE, Problem

__all__ = ["ERROR_RESPONSES", "READ_ERROR_RESPONSES", "build_openapi", "dumps_openapi", "write_openapi"]

_P: dict[str, Any] = {"model": Problem}
#: Error responses of every POST /v1 route.
ERROR_RESPONSES: dict[int | str, dict[str, Any]] = {
    400: {**_P, "description": "The body is not valid JSON."},
    401: {**_P, "description": "Missing or wrong `X-API-Key` (only when the server requires a key)."},
    413: {**_P, "description": "Body over the size limit (`PROTOLYTE_BODY_LIMIT_BYTES`)."},
    415: {**_P, "description": "Body not sent as `application/json`."},
    422: {
        **_P,
        "description": (
            "Invalid request (`errors` names each field by JSON Pointer; a batch over its item "
            "cap names `/items`), or a stream the "
            "solver cannot compute (`input-error`, `solve-failed`, `unreachable-setpoint`)."
        ),
    },
    500: {**_P, "description": "An internal defect (logged under the request id)."},
    503: {**_P, "description": "Time budget exceeded, or the service is not ready yet."},
}
#: Error responses of every GET /v1 route.
READ_ERROR_RESPONSES: dict[int | str, dict[str, Any]] = {
    k: v for k, v in ERROR_RESPONSES.items() if k in (401, 500, 503)
}

_REQUEST_ID_HEADER = {
    "description": "The request id: the caller's `X-Request-ID` if it matched `[A-Za-z0-9._-]{1,64}`, else a generated one.",
    "schema": {"type": "string", "pattern": "^[A-Za-z0-9._-]{1,64}$"},
}
_DESCRIPTION = (
    "Protolyte predicts the pH and acid–base speciation of process streams from their "
    "analysis: equilibrium pH, species, ionic strength, buffer capacity and alkalinity. "
    "Every error is an RFC 9457 problem (`application/problem+json`). Results are advisory: "
    "dosing must be confirmed by the plant's licensed operators, local codes and permits "
    "govern, and outputs must never drive final control elements without the plant's own "
    "interlocks."
)


def build_openapi(app: FastAPI, *, api_key_required: bool, batch_max_items: int) -> dict[str, Any]:
    """The document for ``app`` (cached on ``app.openapi_schema``)."""
    if app.openapi_schema:
        return app.openapi_schema
    doc = get_openapi(
        title=app.title,
        version=app.version,
        description=_DESCRIPTION,
        routes=app.routes,
        tags=[
            {"name": "equilibrium", "description": "Equilibrium pH and speciation of streams."},
            {"name": "dosing", "description": "Reagent dose to a setpoint, titration curves, blends (advisory)."},
            {"name": "catalogue", "description": "Built-in systems and reagents, with sources."},
        ],
    )
    problem_ref = {"$ref": "#/components/schemas/Problem"}
    for path, item in doc.get("paths", {}).items():
        for operation in item.values():
            for status, response in operation.get("responses", {}).items():
                if str(status)[0] in "45":
                    response["content"] = {PROBLEM_MEDIA_TYPE: {"schema": problem_ref}}
                response.setdefault("headers", {})["X-Request-ID"] = _REQUEST_ID_HEADER
            if path.startswith("/v1/"):
                operation["security"] = (
                    [{"ApiKeyAuth": []}] if api_key_required else [{"ApiKeyAuth": []}, {}]
                )
    schemas = doc.get("components", {}).get("schemas", {})
    items = schemas.get("BatchRequest", {}).get("properties", {}).get("items")
    if items is not None:
        items["maxItems"] = batch_max_items
    app.openapi_schema = doc
    return doc


def dumps_openapi(doc: dict[str, Any]) -> str:
    """The committed file's exact text (stable key order, UTF-8, trailing newline)."""
    return json.dumps(doc, indent=2, ensure_ascii=False) + "\n"


def write_openapi(doc: dict[str, Any], path: Path) -> None:
    """Write the document to ``path`` (parents created)."""
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(dumps_openapi(doc), encoding="utf-8")
