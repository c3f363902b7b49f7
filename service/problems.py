"""RFC 9457 problem details: the one place where errors become HTTP responses.

Every error the service answers is ``application/problem+json`` with ``type``,
``title``, ``status``, ``detail`` and ``instance`` (the request id). Validation
problems add ``errors``: a list of ``{pointer, detail, code}`` where ``pointer`` is a
JSON Pointer (RFC 6901) into the request body.

Mapping, in one table:

| source | status | type slug |
| --- | --- | --- |
| body is not JSON | 400 | ``malformed-json`` |
| missing or wrong ``X-API-Key`` | 401 | ``unauthorized`` |
| unknown path | 404 | ``not-found`` |
| method not offered on the path | 405 (+ ``Allow``) | ``method-not-allowed`` |
| body over the size limit | 413 | ``content-too-large`` |
| body not ``application/json`` | 415 | ``unsupported-media-type`` |
| schema validation, batch over its item cap | 422 | ``validation-error`` |
| ``models.errors.InputError`` | 422 | ``input-error`` |
| ``models.errors.SolveError`` | 422 | ``solve-failed`` |
| ``models.errors.UnreachableSetpoint`` | 422 | ``unreachable-setpoint`` |
| time budget exceeded, not ready | 503 | ``time-budget-exceeded``, ``not-ready`` |
| anything else (a defect) | 500 | ``internal-error`` |
"""

from __future__ import annotations

import logging
from collections.abc import Iterable, Mapping, Sequence
from http import HTTPStatus
from typing import Any

from fastapi import FastAPI, Request
from fastapi.exceptions import RequestValidationError
from fastapi.responses import JSONResponse
from pydantic import BaseModel, ConfigDict, Field
from starlette.exceptions import HTTPException as StarletteHTTPException

from models.errors import InputError, ProtolyteError, SolveError, UnreachableSetpoint

__all__ = [
    "PROBLEM_MEDIA_TYPE",
    "REQUEST_ID_SCOPE_KEY",
    "TYPE_PREFIX",
    "FieldError",
    "Problem",
    "ProblemError",
    "install_problem_handlers",
    "make_problem",
    "request_id_of",
    "summarise",
    "pointer_from_loc",
    "problem_from_core_error",
    "problem_response",
    "field_errors_from_pydantic",
]

PROBLEM_MEDIA_TYPE = "application/problem+json"
#: Problem ``type`` URIs are URNs under this prefix (not meant to be dereferenced).
TYPE_PREFIX = "urn:protolyte:problem:"
REQUEST_ID_SCOPE_KEY = "protolyte.request_id"

_log = logging.getLogger("protolyte.errors")

_TITLES: dict[str, str] = {
    "malformed-json": "Malformed JSON",
    "unauthorized": "Missing or wrong API key",
    "not-found": "Not found",
    "method-not-allowed": "Method not allowed",
    "content-too-large": "Request too large",
    "unsupported-media-type": "Unsupported media type",
    "validation-error": "Invalid request",
    "input-error": "Stream cannot be computed as given",
    "solve-failed": "No trustworthy equilibrium for this stream",
    "unreachable-setpoint": "Setpoint cannot be reached with this reagent",
    "time-budget-exceeded": "Time budget exceeded",
    "not-ready": "Service not ready",
    "internal-error": "Internal error",
}
_SLUG_BY_STATUS: dict[int, str] = {
    400: "malformed-json",
    401: "unauthorized",
    404: "not-found",
    405: "method-not-allowed",
    413: "content-too-large",
    415: "unsupported-media-type",
    422: "validation-error",
    503: "not-ready",
    500: "internal-error",
}


class FieldError(BaseModel):
    """One invalid field of a request."""

    model_config = ConfigDict(extra="forbid")

    pointer: str = Field(
        description="JSON Pointer (RFC 6901) into the request body; empty string = the whole body.",
        examples=["/composition/2/unit"],
    )
    detail: str = Field(description="What is wrong with the field, in plain words.")
    code: str | None = Field(
        default=None,
        description="Short stable machine-readable code of the error (for example `finite_number`).",
        examples=["finite_number"],
    )


class Problem(BaseModel):
    """An RFC 9457 problem details object; every error response of the service is one."""

    model_config = ConfigDict(extra="forbid")

    type: str = Field(
        description="URI identifying the problem type (a URN under `urn:protolyte:problem:`).",
        examples=["urn:protolyte:problem:validation-error"],
    )
    title: str = Field(description="Short summary of the problem type.")
    status: int = Field(ge=100, le=599, description="HTTP status code of this occurrence.")
    detail: str = Field(description="Explanation of this occurrence, for a plant engineer.")
    instance: str | None = Field(
        default=None,
        description="The request id (the `X-Request-ID` response header) of this occurrence.",
    )
    errors: list[FieldError] | None = Field(
        default=None, description="Each invalid field (validation and input errors)."
    )
    reason: str | None = Field(
        default=None,
        description="Short stable code of a solver failure (type `solve-failed`), e.g. `no_convergence`.",
    )
    reachable_min_ph: float | None = Field(
        default=None, description="Lowest pH the reagent can reach [-] (type `unreachable-setpoint`)."
    )
    reachable_max_ph: float | None = Field(
        default=None, description="Highest pH the reagent can reach [-] (type `unreachable-setpoint`)."
    )


class ProblemError(Exception):
    """Raised by edge code to answer with a problem; mapped by :func:`install_problem_handlers`."""

    def __init__(
        self,
        status: int,
        detail: str,
        *,
        slug: str | None = None,
        errors: Sequence[FieldError] | None = None,
        headers: Mapping[str, str] | None = None,
        **extensions: Any,
    ) -> None:
        super().__init__(detail)
        self.status = status
        self.detail = detail
        self.slug = slug or _SLUG_BY_STATUS.get(status, "internal-error")
        self.errors = list(errors) if errors is not None else None
        self.headers = dict(headers or {})
        self.extensions = extensions

    def to_problem(self, instance: str | None = None) -> Problem:
        """The problem object this error answers with."""
        return make_problem(
            self.status, self.slug, self.detail, instance, self.errors, **self.extensions
        )


def make_problem(
    status: int,
    slug: str,
    detail: str,
    instance: str | None = None,
    errors: Sequence[FieldError] | None = None,
    **extensions: Any,
) -> Problem:
    """Build a :class:`Problem` of a known type slug."""
    title = _TITLES.get(slug) or HTTPStatus(status).phrase
    return Problem(
        type=TYPE_PREFIX + slug,
        title=title,
        status=status,
        detail=detail,
        instance=instance,
        errors=list(errors) if errors is not None else None,
        **extensions,
    )


def problem_response(problem: Problem, headers: Mapping[str, str] | None = None) -> JSONResponse:
    """Serialise a problem as ``application/problem+json``."""
    return JSONResponse(
        problem.model_dump(mode="json", exclude_none=True),
        status_code=problem.status,
        media_type=PROBLEM_MEDIA_TYPE,
        headers=dict(headers or {}),
    )


def _escape(token: object) -> str:
    return str(token).replace("~", "~0").replace("/", "~1")


def pointer_from_loc(loc: Iterable[object]) -> str:
    """JSON Pointer of a pydantic error location, without FastAPI's leading ``body``."""
    parts = list(loc)
    if parts and parts[0] in ("body", "query", "header", "path", "cookie"):
        parts = parts[1:]
    return "".join("/" + _escape(p) for p in parts)


def _plain_message(error: Mapping[str, Any]) -> str:
    kind = error.get("type", "")
    loc = list(error.get("loc", ()))
    if kind == "extra_forbidden":
        return f"unknown field {str(loc[-1])!r}: not part of the schema (check the spelling)"
    if kind == "missing":
        return "required field is missing"
    if kind == "finite_number":
        return "must be a finite number (NaN and infinity are not measurements)"
    return str(error.get("msg", "invalid value"))


def field_errors_from_pydantic(
    errors: Iterable[Mapping[str, Any]], prefix: str = ""
) -> list[FieldError]:
    """Translate pydantic error dicts into :class:`FieldError` items."""
    return [
        FieldError(
            pointer=prefix + pointer_from_loc(e.get("loc", ())),
            detail=_plain_message(e),
            code=str(e.get("type", "")) or None,
        )
        for e in errors
    ]


def summarise(errors: Sequence[FieldError], limit: int = 3) -> str:
    """One sentence naming the first few bad fields."""
    parts = [f"{e.pointer or '(body)'}: {e.detail}" for e in errors[:limit]]
    more = f" (and {len(errors) - limit} more)" if len(errors) > limit else ""
    noun = "field is" if len(errors) == 1 else "fields are"
    return f"{len(errors)} {noun} invalid: " + "; ".join(parts) + more


def problem_from_core_error(exc: ProtolyteError, prefix: str = "") -> Problem:
    """Map an exception of the chemistry core to its 422 problem (``prefix`` scopes pointers)."""
    if isinstance(exc, InputError):
        errors = [FieldError(pointer=prefix + exc.field, detail=exc.message, code="input_error")]
        return make_problem(422, "input-error", exc.message, errors=errors)
    if isinstance(exc, SolveError):
        return make_problem(422, "solve-failed", exc.message, reason=exc.reason)
    if isinstance(exc, UnreachableSetpoint):
        return make_problem(
            422,
            "unreachable-setpoint",
            exc.message,
            reachable_min_ph=exc.reachable_min_ph,
            reachable_max_ph=exc.reachable_max_ph,
        )
    return make_problem(422, "input-error", exc.message)


def request_id_of(request: Request) -> str | None:
    """The request id the middleware assigned, if any."""
    value = request.scope.get(REQUEST_ID_SCOPE_KEY)
    return value if isinstance(value, str) else None


def _with_id(problem: Problem, request: Request) -> Problem:
    return problem.model_copy(update={"instance": request_id_of(request)})


async def _on_http_exception(request: Request, exc: Exception) -> JSONResponse:
    assert isinstance(exc, StarletteHTTPException)
    status = exc.status_code
    slug = _SLUG_BY_STATUS.get(status, "internal-error" if status >= 500 else "not-found")
    phrase = HTTPStatus(status).phrase
    detail = exc.detail if isinstance(exc.detail, str) and exc.detail != phrase else ""
    if status == 404:
        detail = f"There is no resource at {request.url.path!r}; see /docs for the routes."
    elif status == 405:
        allow = (exc.headers or {}).get("Allow", "")
        detail = f"{request.method} is not offered on {request.url.path!r}; allowed: {allow}."
    elif status == 413:
        detail = detail or "The request body is larger than this server accepts."
    if slug not in _TITLES:
        slug = "internal-error" if status >= 500 else "not-found"
    problem = make_problem(status, slug, detail or phrase, request_id_of(request))
    if status not in _SLUG_BY_STATUS:
        problem = problem.model_copy(
            update={"type": "about:blank", "title": phrase}
        )
    return problem_response(problem, exc.headers)


async def _on_validation_error(request: Request, exc: Exception) -> JSONResponse:
    assert isinstance(exc, RequestValidationError)
    raw = list(exc.errors())
    bad_json = [e for e in raw if e.get("type") == "json_invalid"]
    if bad_json:
        err = bad_json[0]
        ctx = err.get("ctx") or {}
        loc = list(err.get("loc", ()))
        position = loc[-1] if loc else "?"
        detail = f"The request body is not valid JSON ({ctx.get('error', 'decode error')} at character {position})."
        problem = make_problem(400, "malformed-json", detail, request_id_of(request))
        return problem_response(problem)
    errors = field_errors_from_pydantic(raw)
    problem = make_problem(422, "validation-error", summarise(errors), request_id_of(request), errors)
    return problem_response(problem)


async def _on_problem_error(request: Request, exc: Exception) -> JSONResponse:
    assert isinstance(exc, ProblemError)
    return problem_response(exc.to_problem(request_id_of(request)), exc.headers)


async def _on_core_error(request: Request, exc: Exception) -> JSONResponse:
    assert isinstance(exc, ProtolyteError)
    return problem_response(_with_id(problem_from_core_error(exc), request))


async def _on_unexpected(request: Request, exc: Exception) -> JSONResponse:
    """Answer a defect with a bare 500 problem; Starlette re-raises afterwards, so it is logged."""
    rid = request_id_of(request)
    _log.error("unhandled error", extra={"request_id": rid, "error_type": type(exc).__name__})
    problem = make_problem(
        500,
        "internal-error",
        "The service hit an internal defect; the failure is logged under this request id.",
        rid,
    )
    headers = {"X-Request-ID": rid} if rid else None
    return problem_response(problem, headers)


def install_problem_handlers(app: FastAPI) -> None:
    """Register every exception-to-problem mapping on ``app``."""
    app.add_exception_handler(StarletteHTTPException, _on_http_exception)
    app.add_exception_handler(RequestValidationError, _on_validation_error)
    app.add_exception_handler(ProblemError, _on_problem_error)
    app.add_exception_handler(ProtolyteError, _on_core_error)
    app.add_exception_handler(Exception, _on_unexpected)
