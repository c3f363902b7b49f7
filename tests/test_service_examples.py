"""Every request example in the committed OpenAPI document is answered with a result.

An integrator's first call is often the documented example: it must work as shown.
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from fastapi.testclient import TestClient

from service.app import app

DOC = json.loads((Path(__file__).parents[1] / "openapi" / "openapi.json").read_text(encoding="utf-8"))


def _stream_examples() -> list[dict]:
    schema = DOC["components"]["schemas"]["Stream"]
    return list(schema.get("examples", []))


@pytest.mark.parametrize("example", _stream_examples())
def test_each_stream_example_solves(example: dict) -> None:
    with TestClient(app) as client:
        res = client.post("/v1/equilibrium", json=example)
    assert res.status_code == 200, res.text
    assert 0.0 < res.json()["ph"] < 14.5


def test_there_are_stream_examples() -> None:
    assert len(_stream_examples()) >= 2
