"""The slot-filling constructors of models.results build the same records as the classes."""

from __future__ import annotations

import dataclasses

import pytest

from models.results import (
    Alkalinity,
    EquilibriumResult,
    SpeciesAmount,
    SystemSpeciation,
    new_result,
    new_species,
    new_system,
)


@pytest.mark.parametrize(
    ("build", "cls"),
    [(new_species, SpeciesAmount), (new_system, SystemSpeciation), (new_result, EquilibriumResult)],
)
def test_builder_sets_every_field_like_the_class(build, cls) -> None:
    values = [object() for _ in dataclasses.fields(cls)]
    got = build(*values)
    want = cls(*values)
    assert type(got) is cls and got == want
    assert [getattr(got, f.name) for f in dataclasses.fields(cls)] == values
    assert build(**{f.name: v for f, v in zip(dataclasses.fields(cls), values)}) == want
    with pytest.raises(dataclasses.FrozenInstanceError):
        setattr(got, dataclasses.fields(cls)[0].name, 1)


def test_builder_needs_every_field() -> None:
    with pytest.raises(TypeError):
        new_species("H+", 1, 1e-7, 1e-7)  # type: ignore[call-arg]
    assert new_result.__code__.co_argcount == len(dataclasses.fields(EquilibriumResult))
    assert Alkalinity.__slots__  # the records stay slotted (the builders fill slots)
