"""README and CI stay in step with the code: quick start, test command, units, safety."""

from __future__ import annotations

import re
from pathlib import Path

from models.units import UNIT_CONVENTIONS

ROOT = Path(__file__).resolve().parents[1]
README = (ROOT / "README.md").read_text(encoding="utf-8")


def _section(title: str) -> str:
    match = re.search(rf"^## {re.escape(title)}\n(.*?)(?=^## |\Z)", README, flags=re.M | re.S)
    assert match, f"README has no section {title!r}"
    return match.group(1)


def test_quick_start_has_exactly_two_commands() -> None:
    blocks = re.findall(r"```sh\n(.*?)```", _section("Quick start"), flags=re.S)
    commands = [line for block in blocks for line in block.splitlines() if line.strip()]
    assert len(commands) == 2
    serve, test = commands
    assert "pip install -c constraints.txt -e ." in serve and serve.endswith("protolyte serve")
    assert "python -m pytest" in test


def test_readme_test_command_is_the_ci_command() -> None:
    ci_lines = (ROOT / ".ci" / "run").read_text(encoding="utf-8").splitlines()
    ci_test = [line for line in ci_lines if "python -m pytest" in line]
    assert len(ci_test) == 1
    blocks = re.findall(r"```sh\n(.*?)```", _section("Quick start"), flags=re.S)
    readme_test = [line for block in blocks for line in block.splitlines() if "python -m pytest" in line][0]
    assert readme_test.endswith(ci_test[0].strip())
    assert "python3 -m venv .venv" in ci_lines and ". .venv/bin/activate" in ci_lines


def test_first_paragraph_states_the_job() -> None:
    first = README.split("\n\n")[1]
    for word in ("historian", "engineers", "integrators", "pH"):
        assert word in first


def test_every_unit_convention_is_in_the_readme() -> None:
    units = _section("Units and conventions")
    for unit, text in UNIT_CONVENTIONS.items():
        assert f"| `{unit}` | {text} |" in units


def test_plant_safety_and_placeholder_sections() -> None:
    safety = _section("Plant safety").lower()
    for phrase in ("advisory", "licensed operators", "permits", "final control elements", "interlocks"):
        assert phrase in safety
    _section("Chemistry")
    _section("Performance")


def test_every_route_has_a_curl_example() -> None:
    for route in ("/v1/equilibrium ", "/v1/equilibrium/batch", "/v1/systems", "/v1/reagents", "/v1/dose", "/v1/titration-curve", "/v1/blend", "/healthz", "/readyz", "/metrics"):
        assert f"http://127.0.0.1:8000{route.strip()}" in README, route
