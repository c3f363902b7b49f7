"""Exceptions raised by the chemistry core.

The tree is small on purpose; the HTTP edge maps each class to one problem type:

    ProtolyteError            base class, never raised itself
    ├── InputError            a stream or request that cannot be computed as given
    │                         (unknown species, unit that does not fit, missing pH …);
    │                         carries ``field``, a JSON-pointer-like path such as
    │                         ``/composition/2/unit``
    ├── SolveError            the numerics failed for a valid input (root outside the
    │                         model pH range, no convergence, ionic strength beyond any
    │                         activity model); carries ``reason``, a short stable code
    └── UnreachableSetpoint   a dose target the reagent cannot reach; carries the
                              reachable pH range
"""

from __future__ import annotations

__all__ = ["ProtolyteError", "InputError", "SolveError", "UnreachableSetpoint"]


class ProtolyteError(Exception):
    """Base class of every error the core raises on purpose."""

    def __init__(self, message: str) -> None:
        super().__init__(message)
        self.message = message


class InputError(ProtolyteError):
    """The input is well-formed but chemically or physically not computable."""

    def __init__(self, message: str, field: str = "") -> None:
        super().__init__(message)
        self.field = field


class SolveError(ProtolyteError):
    """The solver could not produce a trustworthy answer for a valid input."""

    def __init__(self, message: str, reason: str) -> None:
        super().__init__(message)
        self.reason = reason


class UnreachableSetpoint(ProtolyteError):
    """The requested pH cannot be reached with the reagent; states what can."""

    def __init__(self, message: str, reachable_min_ph: float, reachable_max_ph: float) -> None:
        super().__init__(message)
        self.reachable_min_ph = reachable_min_ph
        self.reachable_max_ph = reachable_max_ph
