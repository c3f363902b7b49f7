"""Buffer capacity and alkalinities give the same bits whether their evaluations are
stacked in one pass (small batches) or made one by one (large batches)."""

from __future__ import annotations

import numpy as np
import models.derived as derived
from models.equilibrium import solve_many
from models.stream import Entry, StreamSpec


def _streams(n: int) -> list[StreamSpec]:
    """Invented process waters with activity corrections (demo data)."""
    rng = np.random.default_rng(7)
    models = ("davies", "extended_debye_huckel")  # β with activity for every stream
    return [
        StreamSpec(
            (
                Entry("Na+", float(rng.uniform(0.5, 40.0)), "mmol/L"),
                Entry("Cl-", float(rng.uniform(0.0, 30.0)), "mmol/L"),
                Entry("carbonate", float(rng.uniform(0.1, 5.0)), "mmol/L"),
                Entry("phosphate", float(rng.uniform(0.0, 2.0)), "mmol/L"),
                Entry("ammonia", float(rng.uniform(0.0, 3.0)), "mmol/L"),
            ),
            temperature_c=float(rng.uniform(5.0, 60.0)),
            activity_model=models[i % 2],
        )
        for i in range(n)
    ]


def _derived_numbers(specs: list[StreamSpec]) -> list[tuple]:
    return [(r.buffer_capacity_mmol_l_per_ph, r.alkalinity) for r in solve_many(specs)]


def test_a_batch_above_the_stacking_limit_gives_the_bits_of_small_batches() -> None:
    specs = _streams(derived.STACK_MAX_STREAMS + 60)
    one_by_one = _derived_numbers(specs)  # above the limit: evaluations one by one
    stacked = [x for start in range(0, len(specs), 500) for x in _derived_numbers(specs[start:start + 500])]
    assert len(one_by_one) == len(specs)
    assert stacked == one_by_one
