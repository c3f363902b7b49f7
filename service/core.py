"""The seam between the edge and the chemistry core, injected into the app factory.

:func:`default_core` binds the real ``models`` functions; tests may pass a
:class:`Core` of their own to ``create_app`` instead of monkeypatching.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

from models.results import EquilibriumResult, StreamFailure
from models.stream import StreamSpec

__all__ = ["Core", "Dosing", "default_core"]


@dataclass(frozen=True, slots=True)
class Dosing:
    """The core's dosing answers (``models.advice``)."""

    resolve_reagent: Callable[..., Any]
    advise_dose: Callable[..., Any]
    advise_curve: Callable[..., Any]
    advise_blend: Callable[..., Any]


@dataclass(frozen=True, slots=True)
class Core:
    """The core functions the service calls."""

    solve: Callable[[StreamSpec], EquilibriumResult]
    solve_many: Callable[[Sequence[StreamSpec]], list[EquilibriumResult | StreamFailure]]
    load_database: Callable[[], Any]
    load_reagents: Callable[[], Mapping[str, Any]] | None = None
    reagents_version: Callable[[], str] | None = None
    dosing: Dosing | None = None


def default_core() -> Core:
    """The real chemistry core from ``models``."""
    from models import equilibrium, thermo

    try:
        from models import reagents
    except ImportError:  # the reagent catalogue has not landed: GET /v1/reagents is absent
        load_reagents = None
        reagents_version = None
    else:
        load_reagents = reagents.load_reagents
        reagents_version = reagents.catalogue_version
    try:
        from models import advice
    except ImportError:  # dosing has not landed: /v1/dose, /v1/titration-curve, /v1/blend are absent
        dosing = None
    else:
        dosing = Dosing(advice.resolve_reagent, advice.advise_dose, advice.advise_curve, advice.advise_blend)
    return Core(
        solve=equilibrium.solve,
        solve_many=equilibrium.solve_many,
        load_database=thermo.load_database,
        load_reagents=load_reagents,
        reagents_version=reagents_version,
        dosing=dosing,
    )
