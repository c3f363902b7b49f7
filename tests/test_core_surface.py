"""The core's public surface is explicit and knows nothing of HTTP."""

from __future__ import annotations

import ast
from pathlib import Path

import models

MODELS_DIR = Path(models.__file__).parent


def test_public_surface_is_pinned() -> None:
    assert sorted(models.__all__) == sorted(
        [
            "ACTIVITY_MODELS", "SAFETY_NOTE", "CustomSystem", "Entry", "EquilibriumResult",
            "InputError", "ProtolyteError", "SolveError", "StreamFailure", "StreamSpec",
            "UnreachableSetpoint", "advise_blend", "advise_curve", "advise_dose",
            "advise_doses", "load_database", "load_reagents", "resolve_reagent", "solve",
            "solve_many",
        ]
    )
    for name in models.__all__:
        assert hasattr(models, name), name


def test_models_imports_no_web_framework() -> None:
    # "the chemistry knows nothing of HTTP" (project rule): no module of models/ imports
    # the web stack.
    banned = {"fastapi", "starlette", "pydantic", "uvicorn", "httpx", "prometheus_client", "service"}
    for path in MODELS_DIR.glob("*.py"):
        tree = ast.parse(path.read_text(encoding="utf-8"))
        for node in ast.walk(tree):
            if isinstance(node, ast.Import):
                roots = {a.name.split(".")[0] for a in node.names}
            elif isinstance(node, ast.ImportFrom) and node.module:
                roots = {node.module.split(".")[0]}
            else:
                continue
            assert not roots & banned, f"{path.name} imports {roots & banned}"
