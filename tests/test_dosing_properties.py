"""Properties of dosing on many random streams (hypothesis).

* pH is monotone in the dose of a strong base (non-decreasing) and of an acid
  (non-increasing). Reason (textbook acid–base chemistry): the charge balance is linear in
  the dose, F(pH; d) = F(pH; 0) + d·ΔF(pH) with ∂F/∂pH > 0 (the buffer capacity), so
  dpH/dd = −ΔF/(∂F/∂pH) has the sign of the reagent's charge effect, which is fixed for
  NaOH, KOH, Ca(OH)2, Mg(OH)2, HCl, HNO3, H2SO4 and CO2. It is *not* fixed for NaHCO3 or
  Na2CO3 (a bicarbonate dose lowers a stream above pH ≈ 8.3), so they are left out here.
* plan_doses' final pH equals the setpoint within 0.001 whenever it returns a plan, and the
  dosed stream it hands back solves to that pH from scratch (issue 4).
* A setpoint reported unreachable lies outside the reachable range it states.

Run length: 50 examples per property in CI; ``HYPOTHESIS_PROFILE=long`` → 1000, e.g.

    HYPOTHESIS_PROFILE=long .venv/bin/python -m pytest tests/test_dosing_properties.py

Settings are applied per test (no profile is registered or loaded globally).
"""

from __future__ import annotations

import os

import numpy as np
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from models.dosing import SETPOINT_TOLERANCE_PH, DosePlan, dose_curve, plan_doses
from models.equilibrium import solve
from models.errors import InputError, UnreachableSetpoint
from models.reagents import load_reagents
from models.stream import ACTIVITY_MODELS, Entry, StreamSpec
from models.thermo import load_database

LONG = os.environ.get("HYPOTHESIS_PROFILE") == "long"
PROPERTY = settings(
    max_examples=1000 if LONG else 50,
    deadline=None,
    suppress_health_check=[HealthCheck.too_slow],
)

DB = load_database()
R = load_reagents()
SYSTEMS = tuple(
    s for s in ("carbonate", "phosphate", "ammonia", "acetate", "sulfate", "borate", "citrate",
                "sulfide", "fluoride", "silicate", "hypochlorite", "cyanide")
    if s in DB.systems
)
STRONG = ("Na+", "K+", "Ca2+", "Mg2+", "Cl-", "NO3-")
BASES = ("NaOH", "KOH", "Ca(OH)2", "Mg(OH)2")
ACIDS = ("HCl", "HNO3", "H2SO4", "CO2")
#: pH steps smaller than the solver's own tolerance (1e-10) are not a reversal
NOISE_PH = 1e-8


@st.composite
def streams(draw) -> StreamSpec:
    systems = draw(st.lists(st.sampled_from(SYSTEMS), min_size=1, max_size=3, unique=True))
    ions = draw(st.lists(st.sampled_from(STRONG), min_size=0, max_size=3, unique=True))
    entries = [Entry(s, draw(st.floats(1e-3, 10.0)), "mmol/L") for s in systems]
    entries += [Entry(i, draw(st.floats(0.0, 10.0)), "mmol/L") for i in ions]
    return StreamSpec(
        tuple(entries),
        temperature_c=draw(st.floats(min_value=0.0, max_value=90.0)),
        activity_model=draw(st.sampled_from(ACTIVITY_MODELS)),
    )


def _assert_outside_solubility_table(err: InputError, reagent: str, spec: StreamSpec) -> None:
    """The one refusal a valid random stream may earn: a temperature the reagent's
    solubility table does not cover (Mg(OH)2 is tabulated at 25 °C only)."""
    assert err.field == "/temperature_c", err.message
    table = R[reagent].solubility_table
    assert table and not table[0][0] <= spec.temperature_c <= table[-1][0]


def _curve_ph(spec: StreamSpec, reagent: str, top_mmol: float) -> np.ndarray:
    doses = np.linspace(0.0, top_mmol * 1e-3, 41)
    return dose_curve(spec, R[reagent], doses).ph


@PROPERTY
@given(streams(), st.sampled_from(BASES), st.floats(0.01, 20.0))
def test_ph_never_falls_as_a_strong_base_is_dosed(spec: StreamSpec, reagent: str, top: float) -> None:
    ph = _curve_ph(spec, reagent, top)
    assert np.all(np.diff(ph) >= -NOISE_PH), ph


@PROPERTY
@given(streams(), st.sampled_from(ACIDS), st.floats(0.01, 20.0))
def test_ph_never_rises_as_an_acid_is_dosed(spec: StreamSpec, reagent: str, top: float) -> None:
    ph = _curve_ph(spec, reagent, top)
    assert np.all(np.diff(ph) <= NOISE_PH), ph


@PROPERTY
@given(streams(), st.sampled_from(tuple(R)), st.floats(2.0, 12.0))
def test_a_returned_plan_puts_the_stream_at_the_setpoint(
    spec: StreamSpec, reagent: str, setpoint: float
) -> None:
    (res,) = plan_doses([spec], R[reagent], setpoint)
    if isinstance(res, DosePlan):
        assert abs(res.final_ph - setpoint) <= SETPOINT_TOLERANCE_PH
        assert res.dose_mol_l >= 0.0
        # the dosed stream, as an analysis, solves to the same pH from scratch
        assert abs(solve(res.final_spec).ph - setpoint) <= SETPOINT_TOLERANCE_PH
    elif isinstance(res, InputError):
        _assert_outside_solubility_table(res, reagent, spec)
    else:
        assert isinstance(res, UnreachableSetpoint), res


@PROPERTY
@given(streams(), st.sampled_from(tuple(R)), st.floats(2.0, 12.0))
def test_an_unreachable_setpoint_lies_outside_the_stated_range(
    spec: StreamSpec, reagent: str, setpoint: float
) -> None:
    (res,) = plan_doses([spec], R[reagent], setpoint)
    if isinstance(res, UnreachableSetpoint):
        assert res.reachable_min_ph <= res.reachable_max_ph
        inside = res.reachable_min_ph + 1e-6 < setpoint < res.reachable_max_ph - 1e-6
        assert not inside, (res.message, setpoint)
    elif isinstance(res, InputError):
        _assert_outside_solubility_table(res, reagent, spec)
    else:
        lo, hi = res.reachable_ph
        assert lo - SETPOINT_TOLERANCE_PH <= setpoint <= hi + SETPOINT_TOLERANCE_PH
