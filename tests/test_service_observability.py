"""Metrics names and labels, request ids, and the JSON access log."""

from __future__ import annotations

import io
import json
import logging
import os
import subprocess
import sys
import textwrap
from collections.abc import Callable
from pathlib import Path
from typing import Any

from fastapi.testclient import TestClient

from service.metrics import METRIC_NAMES
from service.middleware import accept_request_id

EXPECTED = (
    "protolyte_http_requests_total",
    "protolyte_http_request_duration_seconds",
    "protolyte_solver_iterations",
    "protolyte_solve_failures_total",
    "protolyte_batch_size",
    "protolyte_coalesced_group_size",
    "protolyte_streams_solved_total",
    "protolyte_build_info",
)


def _exercise(client: TestClient, stream: dict[str, Any]) -> str:
    bad = {"composition": [{"name": "sulfate", "value": 1.0, "unit": "mg/L as N"}]}
    client.post("/v1/equilibrium", json=stream)
    client.post("/v1/equilibrium/batch", json={"items": [stream, bad]})
    client.get("/no/such/path/123")
    return client.get("/metrics").text


def test_metric_names_are_exactly_the_agreed_ones() -> None:
    assert METRIC_NAMES == EXPECTED


def test_metrics_present_after_requests(client: TestClient, stream: dict[str, Any]) -> None:
    text = _exercise(client, stream)
    for name in EXPECTED:
        assert f"# TYPE {name.removesuffix('_total')}" in text, name
    assert 'protolyte_http_requests_total{method="POST",route="/v1/equilibrium",status="200"} 1.0' in text
    assert 'protolyte_http_requests_total{method="GET",route="unmatched",status="404"} 1.0' in text
    assert "/no/such/path" not in text  # raw paths never become labels
    assert "protolyte_streams_solved_total 2.0" in text
    assert 'protolyte_solve_failures_total{reason="invalid_input"} 1.0' in text
    assert "protolyte_batch_size_count 1.0" in text
    assert "protolyte_solver_iterations_count 2.0" in text
    assert 'protolyte_build_info{database_version="' in text
    assert 'protolyte_http_request_duration_seconds_bucket{le="0.001",method="POST",route="/v1/equilibrium"}' in text


def test_multiprocess_mode_aggregates_from_directory(tmp_path: Path) -> None:
    script = textwrap.dedent(
        """
        from fastapi.testclient import TestClient
        from service.app import create_app
        from service.settings import Settings
        body = {"composition": [{"name": "Na+", "value": 1.0, "unit": "mmol/L"},
                                {"name": "Cl-", "value": 1.0, "unit": "mmol/L"}]}
        with TestClient(create_app(Settings())) as c:
            c.post("/v1/equilibrium", json=body)
            print(c.get("/metrics").text)
        """
    )
    env = {**os.environ, "PROMETHEUS_MULTIPROC_DIR": str(tmp_path)}
    out = subprocess.run([sys.executable, "-c", script], env=env, capture_output=True, text=True, timeout=120)
    assert out.returncode == 0, out.stderr
    assert list(tmp_path.glob("*.db")), "no multiprocess value files written"
    assert 'protolyte_http_requests_total{method="POST",route="/v1/equilibrium",status="200"} 1.0' in out.stdout
    assert "protolyte_streams_solved_total 1.0" in out.stdout
    assert "process_resident_memory_bytes" not in out.stdout  # per-process collectors are off in this mode


def test_request_id_echoed_when_safe(client: TestClient) -> None:
    r = client.get("/healthz", headers={"X-Request-ID": "hist-2025.03.01_0007"})
    assert r.headers["x-request-id"] == "hist-2025.03.01_0007"


def test_request_id_generated_when_absent_or_unsafe(client: TestClient) -> None:
    generated = client.get("/healthz").headers["x-request-id"]
    assert len(generated) == 32 and int(generated, 16) >= 0
    for unsafe in ("a b", "x" * 65, "id;rm -rf", "<script>", "caf\xe9".encode("latin-1")):
        rid = client.get("/healthz", headers={"X-Request-ID": unsafe}).headers["x-request-id"]
        assert len(rid) == 32 and int(rid, 16) >= 0
    assert client.get("/healthz").headers["x-request-id"] != generated


def test_accept_request_id_pattern() -> None:
    assert accept_request_id("A-z_0.9") == "A-z_0.9"
    assert accept_request_id("x" * 64) == "x" * 64
    assert accept_request_id("x" * 65) != "x" * 65
    assert accept_request_id(None) != accept_request_id(None)


def test_one_json_access_line_per_request(
    client: TestClient, stream: dict[str, Any], access_lines: Callable[[], list[dict[str, Any]]]
) -> None:
    client.post("/v1/equilibrium/batch", json={"items": [stream, stream]}, headers={"X-Request-ID": "log-check-1"})
    lines = access_lines()
    assert len(lines) == 1
    line = lines[0]
    assert line["request_id"] == "log-check-1"
    assert line["method"] == "POST" and line["route"] == "/v1/equilibrium/batch"
    assert line["status"] == 200 and line["batch_size"] == 2
    assert line["duration_seconds"] > 0 and line["level"] == "info" and "timestamp" in line


def test_fresh_request_ids_are_uuid4_hex_and_distinct() -> None:
    import uuid

    from service.middleware import fresh_request_id

    ids = [fresh_request_id() for _ in range(600)]  # more than one pool refill
    assert len(set(ids)) == len(ids)
    for rid in ids[:300:7]:
        u = uuid.UUID(rid)
        assert u.hex == rid and u.version == 4 and u.variant == uuid.RFC_4122


def test_direct_access_line_is_the_formatters_line() -> None:
    import re

    from service.logging import configure_logging, flush_access_lines, write_access_line

    root = logging.getLogger()
    saved = (list(root.handlers), root.level)
    buffer = io.StringIO()
    try:
        for h in saved[0]:  # pytest's capture handlers: not the serving configuration
            root.removeHandler(h)
        configure_logging("INFO", buffer)
        access = logging.getLogger("protolyte.access")
        fields = {"request_id": "r-1", "method": "POST", "route": "/v1/equilibrium", "status": 200,
                  "duration_seconds": 0.000123, "batch_size": None}
        assert write_access_line(access, fields)
        flush_access_lines()
        access.info("request", extra=fields)
        direct, logged = buffer.getvalue().splitlines()
        ts = re.compile(r'"timestamp":"[^"]+"')
        assert ts.sub("", direct) == ts.sub("", logged)
        assert json.loads(direct)["timestamp"].endswith("+00:00")
        # any other configuration: the caller logs through logging
        extra = logging.StreamHandler(io.StringIO())
        access.addHandler(extra)
        try:
            assert not write_access_line(access, fields)
        finally:
            access.removeHandler(extra)
        configure_logging("WARNING", buffer)
        assert not write_access_line(access, fields)
    finally:
        for h in list(root.handlers):
            root.removeHandler(h)
        for h in saved[0]:
            root.addHandler(h)
        root.setLevel(saved[1])
