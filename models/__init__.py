"""Protolyte's chemistry core: thermodynamic data, activity models, the charge-balance
solver, alkalinity, calibration and dosing. Pure numpy/scipy; nothing here knows HTTP.

The public surface is below; everything else is reachable through its module
(``models.solver``, ``models.columns``, …) for the service, the CLI and the tests.
"""

from models.advice import (
    SAFETY_NOTE,
    advise_blend,
    advise_curve,
    advise_dose,
    advise_doses,
    resolve_reagent,
)
from models.equilibrium import solve, solve_many
from models.errors import InputError, ProtolyteError, SolveError, UnreachableSetpoint
from models.reagents import load_reagents
from models.results import EquilibriumResult, StreamFailure
from models.stream import ACTIVITY_MODELS, CustomSystem, Entry, StreamSpec
from models.thermo import load_database

__all__ = [
    "ACTIVITY_MODELS",
    "SAFETY_NOTE",
    "CustomSystem",
    "Entry",
    "EquilibriumResult",
    "InputError",
    "ProtolyteError",
    "SolveError",
    "StreamFailure",
    "StreamSpec",
    "UnreachableSetpoint",
    "advise_blend",
    "advise_curve",
    "advise_dose",
    "advise_doses",
    "load_database",
    "load_reagents",
    "resolve_reagent",
    "solve",
    "solve_many",
]
