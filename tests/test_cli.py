"""The ``protolyte`` command: solve (CSV and JSON back-fill), openapi, serve."""

from __future__ import annotations

import csv
import json
import os
import signal
import socket
import subprocess
import sys
import time
import urllib.request
from pathlib import Path
from typing import Any

import pytest

from fastapi.testclient import TestClient

from service.cli import main

ROOT = Path(__file__).resolve().parents[1]

# Ridgeway Quarry settling pond, hourly historian export (an invented site).
HISTORIAN_CSV = """\
timestamp,Na+ [mg/L],Ca2+ [mg/L],Cl- [mg/L],carbonate [mmol/L],ammonia [mg/L as N],temperature_c,sample_point
2025-03-01T00:00Z,46,40,71,2.0,1.5,14.2,pond-outlet
2025-03-01T01:00Z,47,41,72,x,1.5,14.0,pond-outlet
2025-03-01T02:00Z,45,,70,2.1,1.4,13.9,pond-outlet
2025-03-01T03:00Z,46,40,71,2.0,1.5,104,pond-outlet
2025-03-01T04:00Z,44,39,69,1.9,1.6,13.7,pond-outlet
"""


def _write(tmp_path: Path, text: str, name: str = "export.csv") -> Path:
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def _read_csv(path: Path) -> list[dict[str, str]]:
    with path.open(newline="", encoding="utf-8") as handle:
        return list(csv.DictReader(handle))


def test_solve_csv_reports_bad_rows_and_solves_the_rest(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    out = tmp_path / "out.csv"
    code = main(["solve", str(_write(tmp_path, HISTORIAN_CSV)), "--output", str(out), "--chunk-size", "2"])
    assert code == 1  # some rows failed, output still complete
    rows = _read_csv(out)
    assert [r["row"] for r in rows] == ["1", "2", "3", "4", "5"]
    assert [r["ok"] for r in rows] == ["true", "false", "false", "false", "true"]
    assert rows[0]["timestamp"] == "2025-03-01T00:00Z" and rows[0]["sample_point"] == "pond-outlet"
    for good in (rows[0], rows[4]):
        assert 0.0 < float(good["ph"]) < 14.0
        assert float(good["ionic_strength_mol_l"]) > 0
    assert rows[1]["error_field"] == "carbonate [mmol/L]"
    assert rows[2]["error_field"] == "Ca2+ [mg/L]" and "missing" in rows[2]["error_detail"]
    assert rows[3]["error_field"] == "temperature_c"
    err = capsys.readouterr().err
    assert "row 2: column 'carbonate [mmol/L]'" in err
    assert "row 4: column 'temperature_c'" in err
    assert "2 rows solved, 3 failed" in err


def test_solve_csv_matches_the_http_service(tmp_path: Path, client: TestClient) -> None:
    out = tmp_path / "out.csv"
    main(["solve", str(_write(tmp_path, HISTORIAN_CSV)), "--output", str(out)])
    first = _read_csv(out)[0]
    body = {
        "temperature_c": 14.2,
        "composition": [
            {"name": "Na+", "value": 46.0, "unit": "mg/L"},
            {"name": "Ca2+", "value": 40.0, "unit": "mg/L"},
            {"name": "Cl-", "value": 71.0, "unit": "mg/L"},
            {"name": "carbonate", "value": 2.0, "unit": "mmol/L"},
            {"name": "ammonia", "value": 1.5, "unit": "mg/L as N"},
        ],
    }
    served = client.post("/v1/equilibrium", json=body).json()
    assert float(first["ph"]) == pytest.approx(served["ph"], rel=1e-12)


def test_missing_cells_can_be_omitted(tmp_path: Path) -> None:
    out = tmp_path / "out.csv"
    main(["solve", str(_write(tmp_path, HISTORIAN_CSV)), "--output", str(out), "--missing", "omit"])
    assert _read_csv(out)[2]["ok"] == "true"


def test_solve_json_in_and_out(tmp_path: Path, stream: dict[str, Any]) -> None:
    bad = {"composition": [{"name": "sulfate", "value": 1.0, "unit": "mg/L as N"}]}
    src = _write(tmp_path, json.dumps([stream, bad]), "streams.json")
    out = tmp_path / "out.json"
    assert main(["solve", str(src), "--output", str(out)]) == 1
    items = json.loads(out.read_text(encoding="utf-8"))
    assert [i["ok"] for i in items] == [True, False]
    assert 0 < items[0]["result"]["ph"] < 14
    assert items[1]["errors"][0]["pointer"] == "/composition/0/unit"


def test_all_rows_good_exits_zero(tmp_path: Path) -> None:
    text = "Na+ [mmol/L],Cl- [mmol/L],carbonate [mmol/L]\n1,1,0.5\n2,2,1\n"
    out = tmp_path / "o.json"
    assert main(["solve", str(_write(tmp_path, text)), "--output", str(out), "--format", "json"]) == 0
    assert len(json.loads(out.read_text())) == 2


@pytest.mark.parametrize(
    "text",
    ["", "timestamp,flow\n1,2\n", "Na+ [ppm]\n3\n"],
    ids=["empty", "no-composition-columns", "unknown-unit"],
)
def test_unreadable_input_exits_two(tmp_path: Path, text: str, capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["solve", str(_write(tmp_path, text))]) == 2
    assert "protolyte:" in capsys.readouterr().err


def test_openapi_command_writes_and_checks(tmp_path: Path) -> None:
    target = tmp_path / "openapi.json"
    assert main(["openapi", "--output", str(target)]) == 0
    assert target.read_text(encoding="utf-8") == (ROOT / "openapi" / "openapi.json").read_text(encoding="utf-8")
    assert main(["openapi", "--output", str(target), "--check"]) == 0
    target.write_text("{}", encoding="utf-8")
    assert main(["openapi", "--output", str(target), "--check"]) == 1


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def _wait_ready(port: int, proc: subprocess.Popen[str], seconds: float = 60.0) -> None:
    deadline = time.monotonic() + seconds
    while time.monotonic() < deadline:
        if proc.poll() is not None:
            raise AssertionError(f"server exited with {proc.returncode}: {proc.stdout.read() if proc.stdout else ''}")
        try:
            with urllib.request.urlopen(f"http://127.0.0.1:{port}/readyz", timeout=1) as r:
                if r.status == 200:
                    return
        except OSError:
            time.sleep(0.2)
    raise AssertionError("server did not become ready")


@pytest.mark.parametrize("workers", [1, 2])
def test_serve_answers_on_loopback_and_stops_on_sigterm(workers: int, tmp_path: Path) -> None:
    port = _free_port()
    env = {**os.environ, "PROTOLYTE_PORT": str(port), "PROMETHEUS_MULTIPROC_DIR": str(tmp_path / "metrics")}
    env.pop("PROTOLYTE_HOST", None)
    cmd = [sys.executable, "-m", "service.cli", "serve", "--workers", str(workers)]
    proc = subprocess.Popen(cmd, env=env, cwd=ROOT, stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True)
    try:
        _wait_ready(port, proc)
        body = json.dumps({"composition": [{"name": "Na+", "value": 1.0, "unit": "mmol/L"},
                                           {"name": "Cl-", "value": 1.0, "unit": "mmol/L"}]}).encode()
        req = urllib.request.Request(
            f"http://127.0.0.1:{port}/v1/equilibrium", data=body,
            headers={"content-type": "application/json", "X-Request-ID": "serve-test"},
        )
        with urllib.request.urlopen(req, timeout=10) as r:
            assert r.status == 200 and r.headers["X-Request-ID"] == "serve-test"
            assert 0 < json.loads(r.read())["ph"] < 14
        with urllib.request.urlopen(f"http://127.0.0.1:{port}/metrics", timeout=10) as r:
            assert 'route="/v1/equilibrium"' in r.read().decode()
    finally:
        proc.send_signal(signal.SIGTERM)
        try:
            output, _ = proc.communicate(timeout=40)
        except subprocess.TimeoutExpired:
            proc.kill()
            raise
    # uvicorn re-raises the signal after a graceful shutdown (-15); gunicorn's master exits 0
    assert proc.returncode in (0, -signal.SIGTERM), output
    assert "Application shutdown complete" in output or "Shutting down: Master" in output, output
    access = [json.loads(line) for line in output.splitlines() if line.startswith("{") and '"protolyte.access"' in line]
    assert any(a["request_id"] == "serve-test" and a["status"] == 200 for a in access), output
    assert "uvicorn.access" not in output
