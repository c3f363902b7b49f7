"""Schemathesis, in-process: the committed OpenAPI document against the ASGI app.

All default checks run (no server errors, status codes, content types, headers and
response bodies as documented, negative data rejected, unsupported methods → 405).
One setting differs from the defaults, on purpose: for *schema-valid* data, 422 is an
accepted answer besides 2xx. A JSON Schema cannot state that a unit fits a species,
that a custom name is declared, or that an ionic strength is within any activity
model; such streams are refused by the core with a 422 problem naming the field, and
that is the documented behaviour (settings in ``openapi/schemathesis.toml``).
Examples per operation are bounded so CI stays fast;
the longer run is the ``st run`` command in the README.
"""

from __future__ import annotations

from pathlib import Path

import schemathesis
from schemathesis.config import SchemathesisConfig

from service.app import create_app
from service.settings import Settings

DOCUMENT = Path(__file__).resolve().parents[1] / "openapi" / "openapi.json"

CONFIG = SchemathesisConfig.from_str((DOCUMENT.parent / "schemathesis.toml").read_text(encoding="utf-8"))
assert CONFIG.projects.default.generation.max_examples == 25

app = create_app(Settings())
schema = schemathesis.openapi.from_path(DOCUMENT, config=CONFIG)
schema.app = app


@schema.parametrize()
def test_api_conforms_to_committed_document(case: schemathesis.Case) -> None:
    case.call_and_validate()
