"""Fast constructors of the core's frozen records, for the paths that build many of them."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import fields
from typing import Any

__all__ = ["slot_builder"]


def slot_builder(cls: type) -> Callable[..., Any]:
    """A constructor of the frozen slots dataclass ``cls`` taking every field (in
    declaration order, or by keyword), without defaults or checks: it fills the slots
    directly instead of going through the frozen ``__setattr__`` guard (about 2.5× cheaper
    per record). The record equals ``cls(...)`` with the same arguments; ``cls`` must have
    no ``__post_init__``. For hot loops only (result tables, batch conversion)."""
    names = [f.name for f in fields(cls)]
    body = "; ".join(f"_set_{n}(o, {n})" for n in names)
    env: dict[str, Any] = {f"_set_{n}": cls.__dict__[n].__set__ for n in names}
    env.update(_new=object.__new__, _cls=cls)
    exec(f"def build({', '.join(names)}):\n    o = _new(_cls); {body}; return o", env)  # noqa: S102
    return env["build"]
