"""Column-wise batches: many streams with the same analytes, as a historian exports them.

Where every row has the same composition entries (one column per analyte), the whole
batch is converted and assembled with array operations only — no per-row Python —
and the results come back as columns. Custom systems, calibration and alkalinity
inputs are per-stream features: use ``models.equilibrium.solve_many`` for those.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from models import units, water
from models.activity import model_code
from models.derived import (
    PHENOLPHTHALEIN_ENDPOINT_PH,
    alkalinities_eq_kg,
    buffer_capacity,
)
from models.errors import InputError
from models.fractions import cumulative_pk
from models.masses import formula_mass_g_mol
from models.prepare import water_terms
from models.solver import STATUS_MESSAGES, BalanceProblem, BalanceState, solve_balance
from models.thermo import ThermoDatabase, load_database

__all__ = ["ColumnBatch", "problem_from_columns", "solve_columns"]


@dataclass(frozen=True)
class ColumnBatch:
    """A column batch ready for the solver."""

    problem: BalanceProblem
    density_kg_l: NDArray[np.float64]
    system_names: tuple[str, ...]


def problem_from_columns(
    columns: Mapping[str, tuple[ArrayLike, str]],
    temperature_c: ArrayLike = 25.0,
    activity_model: str = "davies",
    *,
    co2_partial_pressure_atm: ArrayLike | None = None,
    db: ThermoDatabase | None = None,
) -> ColumnBatch:
    """Build the solver's problem from ``{name: (values, unit)}`` columns [unit of each].

    Values must be finite and ≥ 0 (InputError naming the column otherwise).
    """
    db = db or load_database()
    sizes = {np.size(v) for v, _ in columns.values()}
    n = max(sizes | {np.size(temperature_c)})
    t = np.broadcast_to(np.asarray(temperature_c, dtype=float), (n,))
    if not np.all((t >= 0) & (t <= 100)):
        raise InputError("temperature must be between 0 and 100 °C", "temperature_c")
    rho = water.density_kg_l(t)
    strong_charge = np.zeros(n)
    strong_ionic = np.zeros(n)
    systems = []
    totals = []
    for name, (values, unit) in columns.items():
        v = np.broadcast_to(np.asarray(values, dtype=float), (n,))
        if not np.all(np.isfinite(v) & (v >= 0)):
            raise InputError(f"{name}: every value must be a finite number ≥ 0", name)
        ion = db.strong_ions.get(name)
        sysd = db.systems.get(name)
        if ion is None and sysd is None:
            raise InputError(f"unknown species or system {name!r}", name)
        kind = "strong_ion" if ion else "system"
        amount = units.to_mol_per_l(
            v, unit, kind=kind, formula=ion.formula if ion else sysd.mass_formula,
            charge=ion.charge if ion else 0, as_atoms={} if ion else sysd.as_atoms, name=name,
        )
        molal = amount if units.is_per_kg(unit) else amount / rho
        if ion is not None:
            strong_charge += ion.charge * molal
            strong_ionic += ion.charge**2 * molal
        else:
            systems.append(sysd)
            totals.append(molal)
    is_open = np.zeros((n, max(1, len(systems))), dtype=bool)
    open_neutral = np.zeros_like(is_open, dtype=float)
    if co2_partial_pressure_atm is not None:
        names = [s.name for s in systems]
        if "carbonate" not in names:
            systems.append(db.systems["carbonate"])
            totals.append(np.zeros(n))
            is_open = np.zeros((n, len(systems)), dtype=bool)
            open_neutral = np.zeros_like(is_open, dtype=float)
        k = [s.name for s in systems].index("carbonate")
        is_open[:, k] = True
        open_neutral[:, k] = 10.0 ** db.log_kh_co2(t) * np.broadcast_to(co2_partial_pressure_atm, (n,))
    k_max = max(1, len(systems))
    p_max = 1 + max([s.n_steps for s in systems] + [1])
    cum = np.full((n, k_max, p_max), np.inf)
    cum[..., 0] = 0.0
    charge = np.zeros((1, k_max, p_max))
    size = np.zeros((1, k_max, p_max))
    total = np.zeros((n, k_max))
    for k, s in enumerate(systems):
        ns = s.n_steps + 1
        cum[:, k, :ns] = cumulative_pk(s.pka(t))
        charge[0, k, :ns] = s.charges
        size[0, k, :ns] = s.ion_size_angstrom
        total[:, k] = totals[k]
    problem = BalanceProblem(
        strong_charge=strong_charge,
        strong_ionic=strong_ionic,
        activity_code=np.full(n, model_code(activity_model)),
        **water_terms(np.ascontiguousarray(t), db),
        total=total,
        is_open=is_open,
        open_neutral=open_neutral,
        cum_pk=cum,
        charge=np.broadcast_to(charge, (n, k_max, p_max)).copy(),
        ion_size=np.broadcast_to(size, (n, k_max, p_max)).copy(),
    )
    return ColumnBatch(problem, np.asarray(rho, dtype=float), tuple(s.name for s in systems))


def solve_columns(batch: ColumnBatch, *, derived: bool = True) -> dict[str, NDArray]:
    """Solve a column batch; results as columns (NaN where a row failed, with ``status``).

    Columns: ph, ionic_strength_mol_l, charge_balance_residual_mol_l, iterations,
    status (reason code), and with ``derived`` buffer_capacity_mmol_l_per_ph,
    alkalinity_total_mg_l_as_caco3, alkalinity_phenolphthalein_mg_l_as_caco3.
    """
    st: BalanceState = solve_balance(batch.problem)
    ok = st.status == 0
    rho = batch.density_kg_l
    out: dict[str, NDArray] = {
        "ph": np.where(ok, st.ph, np.nan),
        "ionic_strength_mol_l": np.where(ok, st.ionic_strength * rho, np.nan),
        "charge_balance_residual_mol_l": st.residual * rho,
        "iterations": st.iterations,
        "status": np.array([STATUS_MESSAGES[k] for k in sorted(STATUS_MESSAGES)], dtype=object)[st.status],
    }
    if derived:
        p = batch.problem
        ph = np.where(ok, st.ph, 7.0)
        beta = buffer_capacity(p, ph, st.ionic_strength)
        eq = formula_mass_g_mol("CaCO3") / 2.0 * 1e3
        total_eq, phen_eq = alkalinities_eq_kg(p, ph, st.log_gamma_species, st.log_gamma_h, st.log_gamma_oh)
        total = np.maximum(total_eq, 0.0) * rho * eq
        phen = np.where(ph > PHENOLPHTHALEIN_ENDPOINT_PH, np.maximum(phen_eq, 0.0), 0.0) * rho * eq
        out["buffer_capacity_mmol_l_per_ph"] = np.where(ok, beta * rho * 1e3, np.nan)
        out["alkalinity_total_mg_l_as_caco3"] = np.where(ok, total, np.nan)
        out["alkalinity_phenolphthalein_mg_l_as_caco3"] = np.where(ok, phen, np.nan)
    return out
