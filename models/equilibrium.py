"""Equilibrium of streams: the public entry points of the core.

``solve_many`` takes a batch of StreamSpec and solves all of them in one vectorized
pass (parse → assemble → calibrate where asked → charge balance → derived quantities);
a stream that fails carries a StreamFailure in its place. ``solve`` is the one-stream
form that raises instead.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from models import derived
from models.activity import VALIDITY_LIMIT_MOL_KG
from models.calibration import close_at_ph
from models.derived import TOTAL_ENDPOINT_PH
from models.errors import InputError, SolveError
from models.prepare import CARBONATE, Assembled, ParsedStream, assemble, parse_stream
from models.results import (
    Calibration,
    EquilibriumResult,
    SpeciesAmount,
    StreamFailure,
    SystemSpeciation,
    new_result,
    new_species,
    new_system,
)
from models.solver import (
    NOT_CONVERGED,
    OK,
    PH_MAX,
    PH_MIN,
    STATUS_MESSAGES,
    BalanceProblem,
    BalanceState,
    balance,
    gammas,
    solve_balance,
)
from models.stream import ACTIVITY_MODELS, StreamSpec
from models.thermo import ThermoDatabase, load_database

__all__ = ["Solved", "failure_message", "solve", "solve_arrays", "solve_many"]



@dataclass(frozen=True)
class Solved:
    """A solved batch: problem (after calibration), state, and per-stream extras."""

    assembled: Assembled
    problem: BalanceProblem
    state: BalanceState
    added_mol_kg: NDArray[np.float64]
    carbonate_from_alkalinity: NDArray[np.float64]
    calibration_error: list[str]
    balance_on: list[str | None]
    warnings: list[list[str]]


def failure_message(status: int) -> str:
    """A plant engineer's sentence for a solver status code."""
    if STATUS_MESSAGES[status] == "ph_below_model_range":
        return (
            f"the charge balance has no root above pH {PH_MIN:g}: the stream is more acidic "
            "than the model covers; check the strong-acid and anion amounts"
        )
    if STATUS_MESSAGES[status] == "ph_above_model_range":
        return (
            f"the charge balance has no root below pH {PH_MAX:g}: the stream is more alkaline "
            "than the model covers; check the strong-base and cation amounts"
        )
    if STATUS_MESSAGES[status] == "ionic_strength_out_of_range":
        return "the ionic strength exceeds 3 mol/kg, beyond every activity model offered here"
    return "the pH and ionic-strength iteration did not converge; no result is returned"


def _state_at_fixed_ph(p: BalanceProblem, ph: NDArray, ionic: NDArray) -> BalanceState:
    lg, lh, loh = gammas(p, ionic)
    f, _, scale, *_ = balance(p, ph, lg, lh, loh)
    n = ph.shape[0]
    return BalanceState(ph, ionic, lg, lh, loh, f, scale, np.ones(n, dtype=int), np.zeros(n, dtype=int))


def _scatter(full, idx: NDArray, part):
    """A copy of the dataclass of arrays ``full`` with rows ``idx`` taken from ``part``."""
    out = {}
    for name in full.__dataclass_fields__:
        arr = getattr(full, name).copy()
        arr[idx] = getattr(part, name)
        out[name] = arr
    return type(full)(**out)


def solve_arrays(parsed: list[ParsedStream], db: ThermoDatabase) -> Solved:
    """Solve parsed streams in one vectorized pass (calibration included)."""
    asm = assemble(parsed, db)
    p = asm.problem
    n = len(parsed)
    measured = np.full(n, np.nan)
    bal = np.zeros(n)
    alk = np.full(n, np.nan)
    carb_slot = np.full(n, -1)
    charge_of = {"Na+": 1.0, "Cl-": -1.0}
    # Only calibrated streams (measured pH, balance ion or alkalinity) need a look.
    for i in [i for i, s in enumerate(parsed) if s.measured_ph is not None or s.alkalinity_eq_kg is not None
              or s.balance_on is not None]:
        s = parsed[i]
        if s.measured_ph is not None:
            measured[i] = s.measured_ph
        bal[i] = charge_of.get(s.balance_on or "", 0.0)
        if s.alkalinity_eq_kg is not None:
            alk[i] = s.alkalinity_eq_kg
            carb_slot[i] = [x.name for x in s.systems].index(CARBONATE)
    added = np.zeros(n)
    carb = np.full(n, np.nan)
    errors = [""] * n
    fixed = np.nonzero((bal != 0) | (carb_slot >= 0))[0]
    ionic_fixed = np.zeros(0)
    if fixed.size:
        sub, add_f, carb_f, ionic_fixed, conv = close_at_ph(
            p.take(fixed),
            measured[fixed],
            balance_charge=bal[fixed],
            alkalinity_eq_kg=np.nan_to_num(alk[fixed]),
            carbonate_slot=carb_slot[fixed],
            endpoint_ph=TOTAL_ENDPOINT_PH,
        )
        p = _scatter(p, fixed, sub)
        added[fixed] = add_f
        carb[fixed] = np.where(carb_slot[fixed] >= 0, carb_f, np.nan)
        for j, i in enumerate(fixed):
            if parsed[i].balance_on is not None:
                asm.strong_molal[i, asm.strong_names.index(parsed[i].balance_on)] += add_f[j]
            errors[i] = _calibration_error(parsed[i], add_f[j], carb_f[j], bool(conv[j]))
    free = np.nonzero(bal == 0)[0]
    pinned = np.nonzero(bal != 0)[0]
    if pinned.size == 0:
        state = solve_balance(p)
    else:
        pos = np.searchsorted(fixed, pinned)
        at_ph = _state_at_fixed_ph(p.take(pinned), measured[pinned], ionic_fixed[pos])
        if free.size == 0:
            state = at_ph
        else:
            state = _scatter(solve_balance(p), pinned, at_ph)
    return Solved(
        asm, p, state, added, carb, errors,
        [s.balance_on for s in parsed], [list(s.warnings) for s in parsed],
    )


#: Calibration error text of a numerical (not an input) failure.
CALIBRATION_NOT_CONVERGED = "calibration to the measured pH did not converge"


def _calibration_error(s: ParsedStream, added: float, carb: float, converged: bool) -> str:
    if not converged:
        return CALIBRATION_NOT_CONVERGED
    if s.alkalinity_eq_kg is not None and not (carb >= 0.0):
        return (
            "the measured alkalinity is lower than what the other bases and water already "
            f"contribute at pH {s.measured_ph:g}: no carbonate total can match it"
        )
    if s.balance_on is not None and added < 0.0:
        other = "Cl-" if s.balance_on == "Na+" else "Na+"
        return (
            f"closing the charge balance at pH {s.measured_ph:g} would need a negative amount "
            f"of {s.balance_on} ({added * s.density_kg_l * 1e3:.4g} mmol/L): the analysis has "
            f"an excess of {'cations' if s.balance_on == 'Na+' else 'anions'}; balance on {other} instead"
        )
    return ""


def solve_many(
    specs: Sequence[StreamSpec], db: ThermoDatabase | None = None
) -> list[EquilibriumResult | StreamFailure]:
    """Solve a batch in one vectorized call; order kept, failures in place."""
    db = db or load_database()
    out: list[EquilibriumResult | StreamFailure | None] = [None] * len(specs)
    parsed: list[ParsedStream] = []
    where: list[int] = []
    for i, spec in enumerate(specs):
        try:
            parsed.append(parse_stream(spec, db))
            where.append(i)
        except InputError as exc:
            out[i] = StreamFailure("input", "invalid_input", exc.message, exc.field)
    if parsed:
        solved = solve_arrays(parsed, db)
        extras = derived.compute(solved, db)
        table = _Tables.of(solved, extras)
        for j, i in enumerate(where):
            out[i] = _result(j, solved, extras, table, db)
    return [o for o in out if o is not None]


def solve(spec: StreamSpec, db: ThermoDatabase | None = None) -> EquilibriumResult:
    """Solve one stream; raise InputError or SolveError instead of returning a failure."""
    res = solve_many([spec], db)[0]
    if isinstance(res, StreamFailure):
        if res.kind == "input":
            raise InputError(res.message, res.field)
        raise SolveError(res.message, res.reason)
    return res


@dataclass(frozen=True)
class _Tables:
    """Whole-batch arrays turned into Python lists once (cheap per-stream access).

    Activities are products of the same floats in the same order as a per-species
    c·γ/ρ (or c·γ·(1/ρ)) in Python, done elementwise in numpy: the same IEEE results."""

    sys_rows: list     # per stream: (m [mol/L], γ, activity, fraction) of its system
                       # species, flat in slot order (padding left out)
    layout: list       # per stream: _Layout of its slots
    tot: list          # (N, K) totals [mol/L]
    h: list            # (N, 6) m(H+), γ(H+), m(OH-), γ(OH-) [mol/L], a(H+), a(OH-)
    strong: list       # (N, S) strong ions [mol/L]
    strong_g: list     # (N, S)
    strong_a: list     # (N, S)
    scalars: list      # (N, 8) pH, I, β, residual, T, ρ, iterations, status
    is_open: list      # (N, K)
    added: list        # (N,) calibration: strong ion added [mol/kg]
    carb: list         # (N,) calibration: carbonate from alkalinity [mol/kg] or NaN
    code: list         # (N,) activity model code
    strong_charges: tuple[int, ...]

    @staticmethod
    def of(sv: Solved, ex: derived.Derived) -> _Tables:
        st, p, rho = sv.state, sv.problem, sv.assembled.density_kg_l
        m, m_h, m_oh = ex.species
        tot = m.sum(axis=-1)
        with np.errstate(invalid="ignore", divide="ignore"):
            frac = np.where(tot[..., None] > 0, m / tot[..., None], 0.0)
        r = rho[:, None, None]
        with np.errstate(all="ignore"):  # failed rows may hold NaN/inf: never read
            m_l = m * r
            g = 10.0**st.log_gamma_species
            act = m_l * g * (1.0 / rho)[:, None, None]
            ch, gh, coh, goh = m_h * rho, 10**st.log_gamma_h, m_oh * rho, 10**st.log_gamma_oh
            h = np.stack([ch, gh, coh, goh, ch * gh / rho, coh * goh / rho], axis=1)
            strong = sv.assembled.strong_molal * rho[:, None]
            strong_g = 10.0**ex.strong_log_gamma
            strong_a = strong * strong_g / rho[:, None]
            per_species = np.stack([m_l, g, act, frac])
        sys_rows, layout = _gather_layouts(sv.assembled.slots, per_species)
        return _Tables(
            sys_rows, layout,
            (tot * rho[:, None]).tolist(), h.tolist(),
            strong.tolist(), strong_g.tolist(), strong_a.tolist(),
            np.stack(
                [st.ph, st.ionic_strength * rho, ex.beta_mol_kg * rho * 1e3, st.residual * rho,
                 sv.assembled.temperature_c, rho, st.iterations, st.status], axis=1,
            ).tolist(),
            p.is_open.tolist(),
            sv.added_mol_kg.tolist(),
            sv.carbonate_from_alkalinity.tolist(),
            p.activity_code.tolist(),
            tuple(load_database().strong_ions[s].charge for s in sv.assembled.strong_names),
        )


@dataclass(frozen=True)
class _Layout:
    """A slot layout's species, flat in slot order, and each slot's span in that order."""

    names: tuple[str, ...]
    charges: tuple[int, ...]
    spans: tuple[tuple[int, int], ...]


def _gather_layouts(slots: list, per_species: NDArray) -> tuple[list, list]:
    """Per stream, the (4, N, K, P) quantities of its real system species as four flat
    lists, gathered once per layout (streams sharing their systems in slot order)."""
    q, n, k_max, p_max = per_species.shape
    flat = per_species.reshape(q, n, k_max * p_max)
    groups: dict[tuple[int, ...], list[int]] = {}
    for j, sl in enumerate(slots):
        key = tuple(map(id, sl))
        rows = groups.get(key)
        if rows is None:
            groups[key] = [j]
        else:
            rows.append(j)
    sys_rows: list = [None] * n
    layout: list = [None] * n
    for rows in groups.values():
        sl = slots[rows[0]]
        idx: list[int] = []
        spans = []
        for k, sd in enumerate(sl):
            spans.append((len(idx), len(idx) + len(sd.species)))
            idx.extend(range(k * p_max, k * p_max + len(sd.species)))
        lay = _Layout(
            tuple(sp for sd in sl for sp in sd.species), tuple(z for sd in sl for z in sd.charges), tuple(spans)
        )
        got = flat[:, rows][:, :, idx].transpose(1, 0, 2).tolist()
        for r, j in enumerate(rows):
            sys_rows[j] = got[r]
            layout[j] = lay
    return sys_rows, layout


def _result(
    j: int, sv: Solved, ex: derived.Derived, tb: _Tables, db: ThermoDatabase
) -> EquilibriumResult | StreamFailure:
    parsed_warn: list[str] = sv.warnings[j] + list(ex.warnings[j])
    if sv.calibration_error[j] == CALIBRATION_NOT_CONVERGED:
        # The numerics failed for a valid input: a solve failure, not an input error.
        return StreamFailure("solve", STATUS_MESSAGES[NOT_CONVERGED], failure_message(NOT_CONVERGED))
    if sv.calibration_error[j]:
        field = "/composition" if "alkalinity" in sv.calibration_error[j] else "/balance_on"
        return StreamFailure("input", "calibration_impossible", sv.calibration_error[j], field)
    ph, ionic_l, beta_l, resid_l, temp, rho, iters, status_f = tb.scalars[j]
    status = int(status_f)
    if status != OK:
        return StreamFailure("solve", STATUS_MESSAGES[status], failure_message(status))
    asm = sv.assembled
    mh, gh, moh, goh, ah, aoh = tb.h[j]
    species: list[SpeciesAmount] = [new_species("H+", 1, mh, ah, gh), new_species("OH-", -1, moh, aoh, goh)]
    for name, z, c, a, g in zip(asm.strong_names, tb.strong_charges, tb.strong[j], tb.strong_a[j], tb.strong_g[j]):
        if c > 0.0:
            species.append(new_species(name, z, c, a, g))
    systems: list[SystemSpeciation] = []
    m_row, g_row, a_row, f_row = tb.sys_rows[j]
    t_row, open_row, lay = tb.tot[j], tb.is_open[j], tb.layout[j]
    for k, (sd, (lo, hi)) in enumerate(zip(asm.slots[j], lay.spans)):
        total = t_row[k]
        fr = dict(zip(sd.species, f_row[lo:hi])) if total > 0 else {sp: float(q == 0) for q, sp in enumerate(sd.species)}
        systems.append(new_system(sd.name, total, fr, open_row[k]))
    species += map(new_species, lay.names, lay.charges, m_row, a_row, g_row)
    ionic = ionic_l / rho
    model = ACTIVITY_MODELS[tb.code[j]]
    limit = VALIDITY_LIMIT_MOL_KG[model]
    if ionic > limit:
        parsed_warn.append(
            f"ionic strength {ionic:.3g} mol/kg is above the {limit:g} mol/kg validity limit "
            f"of the {model} activity model: treat the pH as approximate"
        )
    calib = None
    added, cfa = tb.added[j], tb.carb[j]
    if added or cfa == cfa:  # calibrated: something added, or a carbonate total (not NaN)
        calib = Calibration(
            _balance_ion(sv, j),
            added * rho,
            None if cfa != cfa else cfa * rho,
        )
    return new_result(
        ph=ph,
        temperature_c=temp,
        activity_model=model,
        ionic_strength_mol_l=ionic_l,
        buffer_capacity_mmol_l_per_ph=beta_l,
        alkalinity=ex.alkalinity[j],
        species=tuple(species),
        systems=tuple(systems),
        charge_balance_residual_mol_l=resid_l,
        iterations=int(iters),
        database_version=db.version,
        calcite_saturation_index=ex.calcite_si[j],
        langelier_index=ex.langelier[j],
        conductivity_estimate_us_cm=ex.conductivity_us_cm[j],
        calibration=calib,
        warnings=tuple(parsed_warn),
    )


def _balance_ion(sv: Solved, j: int) -> str | None:
    return sv.balance_on[j]

