"""Cross-field checks of a stream that JSON Schema cannot state (no chemistry).

Each finding is a :class:`service.problems.FieldError` whose pointer is relative to
the request body (``prefix`` scopes it, e.g. ``/items/3`` inside a batch).
"""

from __future__ import annotations

from service.problems import FieldError
from service.schemas import Stream

__all__ = ["structural_errors"]


def structural_errors(stream: Stream, prefix: str = "") -> list[FieldError]:
    """Duplicate names, unordered pKa, ΔH of the wrong length, balance_on without measured_ph."""
    errors: list[FieldError] = []
    seen: dict[str, int] = {}
    for i, entry in enumerate(stream.composition):
        if entry.name in seen:
            errors.append(
                FieldError(
                    pointer=f"{prefix}/composition/{i}/name",
                    detail=f"{entry.name!r} is already given at /composition/{seen[entry.name]}; "
                    "give each species or system once (add the amounts up)",
                    code="duplicate_name",
                )
            )
        else:
            seen[entry.name] = i
    declared: dict[str, int] = {}
    for i, system in enumerate(stream.custom_systems):
        base = f"{prefix}/custom_systems/{i}"
        if system.name in declared:
            errors.append(
                FieldError(
                    pointer=f"{base}/name",
                    detail=f"custom system {system.name!r} is already declared at /custom_systems/{declared[system.name]}",
                    code="duplicate_name",
                )
            )
        else:
            declared[system.name] = i
        if any(b <= a for a, b in zip(system.pka, system.pka[1:])):
            errors.append(
                FieldError(
                    pointer=f"{base}/pka",
                    detail="pKa values must be listed most acidic first, strictly increasing",
                    code="pka_order",
                )
            )
        if system.delta_h_kj_mol is not None and len(system.delta_h_kj_mol) != len(system.pka):
            errors.append(
                FieldError(
                    pointer=f"{base}/delta_h_kj_mol",
                    detail=f"give one enthalpy per pKa: {len(system.pka)} expected, "
                    f"{len(system.delta_h_kj_mol)} given",
                    code="length_mismatch",
                )
            )
    if stream.balance_on is not None and stream.measured_ph is None:
        errors.append(
            FieldError(
                pointer=f"{prefix}/balance_on",
                detail="balance_on calibrates to a measured pH: give measured_ph too, or drop balance_on",
                code="needs_measured_ph",
            )
        )
    return errors
