"""Shared fixtures of the service tests: app factory, clients, an invented plant stream."""

from __future__ import annotations

import copy
import io
import json
import logging
from collections.abc import Callable, Iterator
from typing import Any

import pytest
from fastapi import FastAPI
from fastapi.testclient import TestClient

from service.app import create_app
from service.core import Core
from service.settings import Settings

#: Tamsworth Vale creamery, effluent equalisation tank (an invented site).
CREAMERY_STREAM: dict[str, Any] = {
    "temperature_c": 31.5,
    "activity_model": "davies",
    "composition": [
        {"name": "Na+", "value": 410.0, "unit": "mg/L"},
        {"name": "K+", "value": 96.0, "unit": "mg/L"},
        {"name": "Ca2+", "value": 58.0, "unit": "mg/L"},
        {"name": "Cl-", "value": 520.0, "unit": "mg/L"},
        {"name": "carbonate", "value": 6.4, "unit": "mmol/L"},
        {"name": "phosphate", "value": 18.0, "unit": "mg/L as P"},
        {"name": "ammonia", "value": 22.0, "unit": "mg/L as N"},
        {"name": "whey_acid", "value": 0.4, "unit": "mmol/L"},
    ],
    "custom_systems": [{"name": "whey_acid", "pka": [4.2, 5.6], "top_charge": 0}],
}


@pytest.fixture
def stream() -> dict[str, Any]:
    """A fresh copy of the creamery stream (tests may mutate it)."""
    return copy.deepcopy(CREAMERY_STREAM)


AppFactory = Callable[..., TestClient]


@pytest.fixture
def make_client() -> Iterator[AppFactory]:
    """Build ``create_app(Settings(**overrides), core)`` and enter its lifespan."""
    opened: list[TestClient] = []

    def factory(core: Core | None = None, raise_server_exceptions: bool = True, **overrides: Any) -> TestClient:
        app: FastAPI = create_app(Settings(**overrides), core)
        client = TestClient(app, raise_server_exceptions=raise_server_exceptions)
        client.__enter__()
        opened.append(client)
        return client

    yield factory
    for client in opened:
        client.__exit__(None, None, None)


@pytest.fixture
def client(make_client: AppFactory) -> TestClient:
    """A client of the app with default settings and the real core."""
    return make_client()


@pytest.fixture
def access_lines() -> Iterator[Callable[[], list[dict[str, Any]]]]:
    """The JSON access lines logged while the test runs, parsed (call to read them)."""
    from service.logging import JsonFormatter

    buffer = io.StringIO()
    handler = logging.StreamHandler(buffer)
    handler.setFormatter(JsonFormatter())
    access = logging.getLogger("protolyte.access")
    access.addHandler(handler)
    try:
        yield lambda: [json.loads(line) for line in buffer.getvalue().splitlines()]
    finally:
        access.removeHandler(handler)
