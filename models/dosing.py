"""Reagent dosing to a pH setpoint, titration curves and process gain.

A dose d [mol of active substance per litre of stream] adds ``d·adds[x]`` of each
strong ion and system total the reagent carries (``Reagent.adds``), so the charge
balance is linear in d at fixed activity coefficients:

    F(pH; d) = F(pH; 0) + d · ΔF(pH)

At the setpoint pH the dose therefore follows exactly from F(pH_set; d) = 0, with the
ionic strength (which depends on d) iterated to self-consistency — the full
equilibrium model (activities, temperature, open CO2) at every step. Because pH is
monotone in the dose, that d is the unique root; the dosed stream is then solved
forward and its pH returned as ``final_ph`` (checked against the setpoint).
Volumes: the reagent's own volume is neglected (dose ≪ stream), stated in the docs.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field, replace
import numpy as np
from numpy.typing import NDArray

from models.derived import buffer_capacity
from models.equilibrium import solve_arrays
from models.errors import InputError, SolveError, UnreachableSetpoint
from models.reagents import Reagent
from models.prepare import Assembled, ParsedStream, parse_stream
from models.activity import IDEAL
from models.solver import (
    BalanceKernel,
    I_ATOL,
    I_RTOL,
    MAX_OUTER,
    OK,
    PH_MAX,
    PH_MIN,
    BalanceProblem,
    balance,
    gammas,
    ionic_strength_of,
    solve_balance,
    species_state,
)
from models import water
from models.stream import Entry, StreamSpec
from models.units import is_per_kg, to_mol_per_l
from models.thermo import ThermoDatabase, load_database

__all__ = [
    "MAX_DOSE_MOL_L",
    "SETPOINT_TOLERANCE_PH",
    "HIGH_GAIN_RULE",
    "DosePlan",
    "DoseCurve",
    "plan_doses",
    "dose_curve",
]

#: Largest dose considered [mol/L of stream]: beyond this the reagent volume would no
#: longer be negligible and the answer is not a dosing problem any more.
MAX_DOSE_MOL_L = 1.0
#: |final pH − setpoint| that a returned dose must meet [pH].
SETPOINT_TOLERANCE_PH = 1e-3
#: Rule of thumb of the trade (common practice, no single source): when a 1 % error in
#: reagent flow moves the pH by more than 0.1 unit at the setpoint, one dosing stage
#: cannot hold the pH; use two stages or more buffering (equalisation).
HIGH_GAIN_RULE = (0.01, 0.1)
GAIN_STEP_PH = 1e-4


@dataclass(frozen=True)
class DosePlan:
    """Dose of active substance for one stream [mol/L], with the model's verdict."""

    dose_mol_l: float
    initial_ph: float
    final_ph: float
    gain_ph_per_mol_l: float
    reachable_ph: tuple[float, float]
    already_met: bool
    final_spec: StreamSpec
    warnings: list[str] = field(default_factory=list)


@dataclass(frozen=True)
class DoseCurve:
    """pH and β [mol/L per pH] at each dose [mol/L]; equivalence-point doses [mol/L]."""

    dose_mol_l: NDArray[np.float64]
    ph: NDArray[np.float64]
    beta_mol_l: NDArray[np.float64]
    equivalence_dose_mol_l: tuple[float, ...]
    equivalence_ph: tuple[float, ...]


def _with_reagent_slots(spec: StreamSpec, reagent: Reagent, db: ThermoDatabase) -> StreamSpec:
    names = {e.name for e in spec.composition}
    extra = tuple(
        Entry(x, 0.0, "mol/L") for x in reagent.adds if x in db.systems and x not in names
    )
    return replace(spec, composition=spec.composition + extra) if extra else spec


def dosed_spec(spec: StreamSpec, reagent: Reagent, dose_mol_l: float) -> StreamSpec:
    """The stream after a dose [mol/L], as an analysis: the entries the reagent adds to
    are restated in mol/L with the dose included; the rest are kept as given."""
    db = load_database()
    out: list[Entry] = []
    for e in spec.composition:
        if e.name not in reagent.adds:
            out.append(e)
            continue
        ion = db.strong_ions.get(e.name)
        sysd = db.systems[e.name] if ion is None else None
        mol = float(
            to_mol_per_l(
                e.value, e.unit,
                kind="strong_ion" if ion else "system",
                formula=ion.formula if ion else sysd.mass_formula,
                charge=ion.charge if ion else 0,
                as_atoms={} if ion else sysd.as_atoms,
                name=e.name,
            )
        )
        if is_per_kg(e.unit):
            mol *= float(water.density_kg_l(spec.temperature_c))
        out.append(Entry(e.name, mol + dose_mol_l * reagent.adds[e.name], "mol/L"))
    present = {e.name for e in out}
    out += [Entry(x, dose_mol_l * c, "mol/L") for x, c in reagent.adds.items() if x not in present]
    return replace(spec, composition=tuple(out))


def _direction(asm: Assembled, reagent: Reagent, db: ThermoDatabase) -> tuple[NDArray, NDArray, NDArray]:
    """Per unit dose [per mol/L]: Δ strong charge, Δ Σmz², Δ totals (N, K), molal."""
    n = asm.problem.n_streams
    rho = asm.density_kg_l
    d_charge = np.zeros(n)
    d_ionic = np.zeros(n)
    d_total = np.zeros_like(asm.problem.total)
    for name, coef in reagent.adds.items():
        if name in db.strong_ions:
            z = db.strong_ions[name].charge
            d_charge += coef * z / rho
            d_ionic += coef * z * z / rho
        for i, slots in enumerate(asm.slots):
            for k, s in enumerate(slots):
                if s.name == name and not asm.problem.is_open[i, k]:
                    d_total[i, k] += coef / rho[i]
    return d_charge, d_ionic, d_total


def _shift(p: BalanceProblem, d: NDArray, dc: NDArray, di: NDArray, dt: NDArray) -> BalanceProblem:
    fields = {k: getattr(p, k) for k in p.__dataclass_fields__}
    fields["strong_charge"] = p.strong_charge + d * dc
    fields["strong_ionic"] = p.strong_ionic + d * di
    fields["total"] = p.total + d[:, None] * dt
    return BalanceProblem(**fields)


def dose_at_ph(
    p: BalanceProblem, ph: NDArray, dc: NDArray, di: NDArray, dt: NDArray, ionic0: NDArray
) -> tuple[NDArray, NDArray]:
    """Dose [mol/L] that puts each stream exactly at ``ph``; NaN where the reagent
    cannot move the balance that way (ΔF = 0). Returns (dose, converged).

    At fixed γ: F(pH; d) = F(pH; 0) + d·(Δstrong + Σ_k Δtotal_k·z̄_k(pH)); the ionic
    strength of the dosed stream, I(0) + d·(Δ(Σmz²)/2 + Σ_k Δtotal_k·<z²>_k/2), is
    iterated to self-consistency.
    """
    kern = BalanceKernel(p)
    ionic = ionic0.copy()
    d = np.zeros_like(ph)
    conv = np.zeros(ph.shape, dtype=bool)
    for _ in range(MAX_OUTER):
        lg, lh, loh = kern.log_gammas(ionic)
        _, _, i0, pos, neg, zbar, z2bar = kern.evaluate(ph, lg, lh, loh, slot_means=True)
        df = dc + (dt * zbar).sum(axis=1)
        with np.errstate(divide="ignore", invalid="ignore"):
            d = np.where(df != 0, -(pos - neg) / df, np.nan)
        dd = np.nan_to_num(d)
        new = np.maximum(i0 + 0.5 * dd * (di + (dt * z2bar).sum(axis=1)), 0.0)
        conv = (p.activity_code == IDEAL) | (np.abs(new - ionic) <= I_ATOL + I_RTOL * new)
        ionic = new
        if conv.all():
            break
    return d, conv


def _forward(p: BalanceProblem, d: NDArray, dc, di, dt) -> tuple[NDArray, NDArray, NDArray]:
    st = solve_balance(_shift(p, d, dc, di, dt))
    return st.ph, st.ionic_strength, st.status


def _ceiling(
    reagent: Reagent, db: ThermoDatabase, parsed: list[ParsedStream]
) -> tuple[NDArray, list[InputError | None]]:
    """Largest dose [mol/L] per stream: what a slurry can dissolve (solubility table of
    the reagent), CO2 saturation at 1 atm (Henry constant), else MAX_DOSE_MOL_L; and per
    stream the InputError of a temperature outside the reagent's solubility table."""
    cap = np.full(len(parsed), MAX_DOSE_MOL_L)
    errors: list[InputError | None] = [None] * len(parsed)
    for i, ps in enumerate(parsed):
        limit_mol_kg = None
        if reagent.form == "gas" and reagent.formula == "CO2":
            limit_mol_kg = float(10.0 ** db.log_kh_co2(ps.temperature_c))  # at 1 atm
        else:
            try:
                sol = reagent.solubility_g_per_100g_h2o(ps.temperature_c)
            except InputError as exc:
                errors[i] = InputError(exc.message, "/temperature_c")
                continue
            if sol is not None:
                limit_mol_kg = sol * 10.0 / reagent.molar_mass_g_mol
        if limit_mol_kg is not None:
            cap[i] = min(cap[i], limit_mol_kg * ps.density_kg_l)
    return cap, errors


def plan_doses(
    specs: Sequence[StreamSpec],
    reagent: Reagent,
    setpoint_ph: float | Sequence[float],
    db: ThermoDatabase | None = None,
) -> list[DosePlan | Exception]:
    """Dose of ``reagent`` bringing each stream to its setpoint, in one vectorized pass.

    Each item is a DosePlan or the exception that stream earned (InputError,
    SolveError, UnreachableSetpoint with the reachable pH range).
    """
    db = db or load_database()
    n = len(specs)
    sp = np.broadcast_to(np.asarray(setpoint_ph, dtype=float), (n,)).copy()
    out: list[DosePlan | Exception | None] = [None] * n
    parsed: list[ParsedStream] = []
    where: list[int] = []
    for i, spec in enumerate(specs):
        try:
            if spec.balance_on is not None or any(e.name == "alkalinity" for e in spec.composition):
                raise InputError(
                    "dose a calibrated analysis: calibrate with POST /v1/equilibrium first and "
                    "post the closed composition", "/stream/balance_on",
                )
            parsed.append(parse_stream(_with_reagent_slots(spec, reagent, db), db))
            where.append(i)
        except InputError as exc:
            out[i] = exc
    if parsed:
        _plan(parsed, [specs[i] for i in where], reagent, sp[where], db, out, where)
    return [o for o in out if o is not None]


def _plan(parsed, specs, reagent, sp, db, out, where) -> None:
    sv = solve_arrays(parsed, db)
    asm, p = sv.assembled, sv.problem
    dc, di, dt = _direction(asm, reagent, db)
    ph0 = sv.state.ph
    status0 = sv.state.status
    base = reagent.kind == "base"
    cap, cap_errors = _ceiling(reagent, db, parsed)
    ph_cap, _, status_cap = _forward(p, cap, dc, di, dt)
    for _ in range(40):  # a limit dose the model cannot solve (I past every activity
        bad = status_cap != OK  # model) says nothing: back off to one it can
        if not bad.any():
            break
        cap = np.where(bad, cap / 2.0, cap)
        ph_cap, _, status_cap = _forward(p, cap, dc, di, dt)
    dose, conv = dose_at_ph(p, sp, dc, di, dt, sv.state.ionic_strength)
    # The reagent moves the pH from the stream's own pH toward the pH at the limit dose:
    # usually up for a base, but a weak one (NaHCO3) lowers an alkaline stream.
    lo, hi = np.minimum(ph0, ph_cap), np.maximum(ph0, ph_cap)
    met = np.abs(ph0 - sp) <= SETPOINT_TOLERANCE_PH
    dose = np.where(met, 0.0, dose)
    ok_dose = np.isfinite(dose) & (dose >= 0) & (dose <= cap * (1 + 1e-9))
    final_ph, _, status_f = _forward(p, np.where(ok_dose, dose, 0.0), dc, di, dt)
    gain = _gain(p, sp, dc, di, dt, sv.state.ionic_strength)
    # The pH move a ±1 % reagent-flow error really gives, by forward solves: near an
    # equivalence point the linear gain × 1 % overstates it (pH cannot move 20 units)
    # or, just before the inflection, understates it.
    d_ok = np.where(ok_dose, dose, 0.0)
    swing = np.zeros_like(d_ok)
    # Only where the linear estimate comes within a factor 10 of the threshold (the curve
    # can bend up sharply just before an inflection, so not closer than that).
    linear = np.abs(np.nan_to_num(gain)) * HIGH_GAIN_RULE[0] * d_ok
    near = np.nonzero((d_ok > 0) & (linear > HIGH_GAIN_RULE[1] / 10))[0]
    if near.size:
        sub = p.take(near)
        for f in (1.0 - HIGH_GAIN_RULE[0], 1.0 + HIGH_GAIN_RULE[0]):
            moved = _forward(sub, d_ok[near] * f, dc[near], di[near], dt[near])[0]
            swing[near] = np.maximum(swing[near], np.abs(moved - final_ph[near]))
    high = (d_ok > 0) & (swing > HIGH_GAIN_RULE[1])
    for j, i in enumerate(where):
        if cap_errors[j] is not None:
            out[i] = cap_errors[j]
            continue
        if status0[j] != OK:
            from models.equilibrium import STATUS_MESSAGES, failure_message  # reason, not a code

            code = int(status0[j])
            out[i] = SolveError("the stream itself does not solve: " + failure_message(code), STATUS_MESSAGES[code])
            continue
        reach = (float(lo[j]), float(hi[j]))
        if not met[j] and not (ok_dose[j] and conv[j]):
            raises = ph_cap[j] > ph0[j] if ph_cap[j] != ph0[j] else base
            what = "raises" if raises else "lowers"
            wrong = (sp[j] < ph0[j]) if raises else (sp[j] > ph0[j])
            why = (
                f"{reagent.name} {what} pH: it cannot take this stream from pH {ph0[j]:.2f} to {sp[j]:.2f}"
                if wrong
                else f"setpoint {sp[j]:.2f} is beyond what {reagent.name} can reach"
            )
            out[i] = UnreachableSetpoint(
                f"{why}; reachable with {reagent.name}: pH {reach[0]:.2f} to {reach[1]:.2f} "
                f"(between the stream's own pH {ph0[j]:.2f} and pH {ph_cap[j]:.2f} at the limit "
                f"dose of {cap[j] * 1e3:.4g} mmol/L)",
                reach[0], reach[1],
            )
            continue
        if status_f[j] != OK or (not met[j] and abs(final_ph[j] - sp[j]) > SETPOINT_TOLERANCE_PH):
            out[i] = SolveError("the dosed stream did not settle at the setpoint", "dose_not_converged")
            continue
        d = float(dose[j])
        warnings: list[str] = []
        g = float(gain[j])
        if high[j]:
            warnings.append(
                f"process gain is high: a 1 % error in reagent flow moves the pH by "
                f"{swing[j]:.2f} at the setpoint (rule of thumb of the trade: above "
                f"{HIGH_GAIN_RULE[1]} pH, single-stage control is impractical; use two stages "
                "or equalise the stream first)"
            )
        out[i] = DosePlan(
            dose_mol_l=d,
            initial_ph=float(ph0[j]),
            final_ph=float(final_ph[j]),
            gain_ph_per_mol_l=g,
            reachable_ph=reach,
            already_met=bool(met[j]),
            final_spec=dosed_spec(specs[j], reagent, d),
            warnings=warnings,
        )


def _gain(p, sp, dc, di, dt, ionic) -> NDArray:
    """dpH/d(dose) [pH per mol/L] at the setpoint: 1 / (d dose / d pH) by central difference."""
    up, _ = dose_at_ph(p, sp + GAIN_STEP_PH, dc, di, dt, ionic)
    down, _ = dose_at_ph(p, sp - GAIN_STEP_PH, dc, di, dt, ionic)
    with np.errstate(divide="ignore", invalid="ignore"):
        return (2 * GAIN_STEP_PH) / (up - down)


def dose_curve(
    spec: StreamSpec,
    reagent: Reagent,
    doses_mol_l: NDArray[np.float64],
    db: ThermoDatabase | None = None,
) -> DoseCurve:
    """pH and β of one stream at each dose, all doses in one vectorized solve."""
    db = db or load_database()
    ps = parse_stream(_with_reagent_slots(spec, reagent, db), db)
    doses = np.asarray(doses_mol_l, dtype=float)
    sv = solve_arrays([ps] * doses.size, db)
    asm, p = sv.assembled, sv.problem
    dc, di, dt = _direction(asm, reagent, db)
    shifted = _shift(p, doses, dc, di, dt)
    st = solve_balance(shifted)
    bad = st.status != OK
    if bad.any():
        k = int(np.argmax(bad))
        raise SolveError(
            f"the curve leaves the model at {doses[k] * 1e3:.4g} mmol/L (pH range {PH_MIN:g}–{PH_MAX:g})",
            "curve_outside_model",
        )
    beta = buffer_capacity(shifted, st.ph, st.ionic_strength) * asm.density_kg_l
    eq_d, eq_ph = _equivalence_points(doses, st.ph)
    return DoseCurve(doses, st.ph, beta, eq_d, eq_ph)


def _equivalence_points(d: NDArray, ph: NDArray) -> tuple[tuple[float, ...], tuple[float, ...]]:
    """Inflections of the curve: local maxima of |dpH/d dose| that stand out (3× the
    median slope), refined by a parabola through the three slopes around each."""
    if d.size < 5:
        return (), ()
    slope = np.abs(np.diff(ph) / np.diff(d))
    mid = 0.5 * (d[1:] + d[:-1])
    floor = 3.0 * np.median(slope)
    found_d: list[float] = []
    found_ph: list[float] = []
    for k in range(1, slope.size - 1):
        if slope[k] > slope[k - 1] and slope[k] >= slope[k + 1] and slope[k] > floor:
            y0, y1, y2 = slope[k - 1], slope[k], slope[k + 1]
            den = y0 - 2 * y1 + y2
            shift = 0.5 * (y0 - y2) / den if den != 0 else 0.0
            x = mid[k] + shift * (mid[k + 1] - mid[k])
            found_d.append(float(x))
            found_ph.append(float(np.interp(x, d, ph)))
    return tuple(found_d), tuple(found_ph)
