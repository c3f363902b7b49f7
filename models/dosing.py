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
from functools import lru_cache

import numpy as np
from numpy.typing import NDArray

from models import water
from models.activity import IDEAL
from models.derived import buffer_capacity
from models.equilibrium import failure_message, solve_arrays
from models.errors import InputError, SolveError, UnreachableSetpoint
from models.prepare import Assembled, ParsedStream, parse_stream
from models.reagents import Reagent
from models.solver import (
    I_ATOL,
    I_RTOL,
    MAX_OUTER,
    OK,
    PH_MAX,
    BalanceKernel,
    BalanceProblem,
    solve_balance,
)
from models.stream import Entry, StreamSpec
from models.thermo import ThermoDatabase, load_database
from models.units import is_per_kg, to_mol_per_l

__all__ = [
    "HIGH_GAIN_RULE",
    "MAX_DOSE_MOL_L",
    "SETPOINT_TOLERANCE_PH",
    "DoseCurve",
    "DosePlan",
    "dose_curve",
    "plan_doses",
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
    stream: StreamSpec
    reagent: Reagent
    warnings: list[str] = field(default_factory=list)

    @property
    def final_spec(self) -> StreamSpec:
        """The dosed stream as an analysis (built on demand: most batch callers need
        only the numbers)."""
        return dosed_spec(self.stream, self.reagent, self.dose_mol_l)


@dataclass(frozen=True)
class DoseCurve:
    """pH and β [mol/L per pH] at each dose [mol/L]; equivalence-point doses [mol/L]."""

    dose_mol_l: NDArray[np.float64]
    ph: NDArray[np.float64]
    beta_mol_l: NDArray[np.float64]
    equivalence_dose_mol_l: tuple[float, ...]
    equivalence_ph: tuple[float, ...]


def _ph_text(ph: float, digits: int = 2) -> str:
    """A pH for a message: fixed decimals, and never "-0.00"."""
    text = f"{ph:.{digits}f}"
    return text[1:] if text.startswith("-") and float(text) == 0.0 else text


def _distinct_ph(a: float, b: float) -> tuple[str, str]:
    """Two pH values to 2 decimals, or to as many more (up to 4) as tell them apart, so a
    message never reads "from pH 7.00 to 7.00"."""
    for digits in (2, 3, 4):
        sa, sb = _ph_text(a, digits), _ph_text(b, digits)
        if sa != sb:
            break
    return sa, sb


def _reagent_slots(reagent: Reagent, db: ThermoDatabase) -> tuple[str, ...]:
    """The systems whose totals ``reagent`` adds to (each needs a slot in the stream)."""
    return tuple(x for x in reagent.adds if x in db.systems)


def _with_reagent_slots(spec: StreamSpec, slots: tuple[str, ...]) -> StreamSpec:
    """``spec`` with a zero entry for each of ``slots`` it does not list."""
    if not slots:
        return spec
    names = {e.name for e in spec.composition}
    extra = tuple(Entry(x, 0.0, "mol/L") for x in slots if x not in names)
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
        if name not in db.systems:
            continue  # only a system total has slots to add to
        for i, slots in enumerate(asm.slots):
            for k, s in enumerate(slots):
                if s.name == name and not asm.problem.is_open[i, k]:
                    d_total[i, k] += coef / rho[i]
    return d_charge, d_ionic, d_total


def _shift(p: BalanceProblem, d: NDArray, dc: NDArray, di: NDArray, dt: NDArray) -> BalanceProblem:
    """The problem after a dose ``d`` [mol/L] along the reagent's direction."""
    return replace(
        p,
        strong_charge=p.strong_charge + d * dc,
        strong_ionic=p.strong_ionic + d * di,
        total=p.total + d[:, None] * dt,
    )


def dose_at_ph(
    p: BalanceProblem, ph: NDArray, dc: NDArray, di: NDArray, dt: NDArray, ionic0: NDArray
) -> tuple[NDArray, NDArray, NDArray]:
    """Dose [mol/L] that puts each stream exactly at ``ph``; NaN where the reagent
    cannot move the balance that way (ΔF = 0). Returns (dose, converged, ionic strength
    of the dosed stream [mol/kg]).

    At fixed γ: F(pH; d) = F(pH; 0) + d·(Δstrong + Σ_k Δtotal_k·z̄_k(pH)); the ionic
    strength of the dosed stream, I(0) + d·(Δ(Σmz²)/2 + Σ_k Δtotal_k·<z²>_k/2), is
    iterated to self-consistency.
    """
    kern = BalanceKernel(p)
    ionic = ionic0.copy()
    d = np.zeros_like(ph)
    conv = np.zeros(ph.shape, dtype=bool)
    ideal = p.activity_code == IDEAL
    for _ in range(MAX_OUTER):
        lg, lh, loh = kern.log_gammas(ionic)
        _, _, i0, pos, neg, zbar, z2bar = kern.evaluate(ph, lg, lh, loh, slot_means=True)
        df = dc + (dt * zbar).sum(axis=1)
        with np.errstate(divide="ignore", invalid="ignore"):
            d_now = np.where(df != 0, -(pos - neg) / df, np.nan)
        d = np.where(conv, d, d_now)  # converged rows keep their answer (batch-independent)
        dd = np.nan_to_num(d)
        new = np.maximum(i0 + 0.5 * dd * (di + (dt * z2bar).sum(axis=1)), 0.0)
        now = ideal | (np.abs(new - ionic) <= I_ATOL + I_RTOL * new)
        ionic = np.where(conv, ionic, new)
        conv |= now
        if conv.all():
            break
    return d, conv, ionic


def _forward(
    p: BalanceProblem, d: NDArray, dc, di, dt, guess: NDArray | None = None,
    ionic: NDArray | None = None,
) -> tuple[NDArray, NDArray, NDArray]:
    """pH, ionic strength and status of the streams after dose ``d`` [mol/L]; ``guess``
    [pH] and ``ionic`` [mol/kg] warm-start the solve (it stays bracketed on the model range)."""
    st = solve_balance(_shift(p, d, dc, di, dt), ph_guess=guess, ionic_guess=ionic)
    return st.ph, st.ionic_strength, st.status


def _hydroxide_cation(reagent: Reagent, db: ThermoDatabase) -> str | None:
    """The metal ion of a sparingly soluble hydroxide slurry (lime, Mg(OH)2), else None."""
    if reagent.kind != "base" or not reagent.solubility_table:
        return None
    ions = [x for x in reagent.adds if x in db.strong_ions]
    if len(ions) == 1 and len(reagent.adds) == 1 and db.strong_ions[ions[0]].charge == 2:
        return ions[0]
    return None


@lru_cache(maxsize=256)
def _log_ksp_hydroxide(reagent_name: str, cation: str, temperature_c: float, solubility_mol_kg: float) -> float:
    """log10 Ksp of M(OH)2 [-] implied by its solubility in pure water [mol/kg], through
    this model's own Davies activities: Ksp = a(M²⁺)·a(OH⁻)² of the saturated solution.
    Consistent with the model by construction (the pure-water ceiling is reproduced)."""
    from models.equilibrium import solve

    res = solve(
        StreamSpec((Entry(cation, solubility_mol_kg, "mol/kg"),), temperature_c=temperature_c),
    )
    act = {sp.name: sp.activity for sp in res.species}
    return float(np.log10(act[cation]) + 2 * np.log10(act["OH-"]))


def _saturation_ph(
    p: BalanceProblem, ph0: NDArray, dc, di, dt, ionic0: NDArray, m0: NDArray, coef: float,
    log_ksp: NDArray, size: float,
) -> tuple[NDArray, NDArray]:
    """pH [-] and dose [mol/L] at which the dosed stream saturates with M(OH)2, by
    bisection on pH (the ion product a(M)·a(OH)² rises monotonically along the dose).

    ``m0`` [mol/kg] is the metal already in the stream, ``coef`` mol of metal per mol of
    dose. Where even the stream as it is exceeds Ksp the dose limit is 0."""
    from models.activity import log_gamma

    def excess(ph: NDArray) -> tuple[NDArray, NDArray]:
        d, _, ionic = dose_at_ph(p, ph, dc, di, dt, ionic0)
        lg_m = log_gamma(np.full_like(ph, 2.0), np.full_like(ph, size), ionic, p.a_dh, p.b_dh, p.activity_code)
        metal = np.maximum(m0 + coef * np.nan_to_num(d) * dc_to_molal, 1e-300)
        log_iap = np.log10(metal) + lg_m + 2 * (ph - p.pkw)  # a(OH-) = Kw / a(H+)
        return log_iap - log_ksp, d

    dc_to_molal = dc / (2.0 * coef)  # dc = 2·coef/ρ per unit dose for an M²⁺ reagent
    lo = ph0.copy()
    hi = np.full_like(ph0, PH_MAX - 0.5)
    ex_lo, _ = excess(lo)
    for _ in range(45):
        mid = 0.5 * (lo + hi)
        ex, _ = excess(mid)
        above = ex > 0
        hi = np.where(above, mid, hi)
        lo = np.where(above, lo, mid)
    ph_sat = np.where(ex_lo > 0, ph0, lo)
    _, d_sat = excess(ph_sat)
    return ph_sat, np.where(ex_lo > 0, 0.0, np.nan_to_num(d_sat))


def _ceiling(
    reagent: Reagent, db: ThermoDatabase, parsed: list[ParsedStream]
) -> tuple[NDArray, list[InputError | None]]:
    """Largest dose [mol/L] per stream: what a slurry can dissolve (solubility table of
    the reagent), CO2 saturation at 1 atm (Henry constant), else MAX_DOSE_MOL_L; and per
    stream the InputError of a temperature outside the reagent's solubility table."""
    cap = np.full(len(parsed), MAX_DOSE_MOL_L)
    errors: list[InputError | None] = [None] * len(parsed)
    gas = reagent.form == "gas" and reagent.formula == "CO2"
    if not gas and not reagent.solubility_table:
        return cap, errors  # no solubility limit: MAX_DOSE_MOL_L for every stream
    slurry = _hydroxide_cation(reagent, db) is not None
    by_t: dict[float, float | None | InputError] = {}  # limit [mol/kg] per temperature
    for i, ps in enumerate(parsed):
        t = ps.temperature_c
        limit_mol_kg = by_t.get(t, by_t)
        if limit_mol_kg is by_t:
            if gas:
                limit_mol_kg = float(10.0 ** db.log_kh_co2(t))  # at 1 atm
            else:
                try:
                    sol = reagent.solubility_g_per_100g_h2o(t)
                    limit_mol_kg = sol * 10.0 / reagent.molar_mass_g_mol if sol is not None and not slurry else None
                except InputError as exc:
                    limit_mol_kg = exc
            by_t[t] = limit_mol_kg
        if isinstance(limit_mol_kg, InputError):
            errors[i] = InputError(limit_mol_kg.message, "/temperature_c")
        elif limit_mol_kg is not None:
            cap[i] = min(cap[i], limit_mol_kg * ps.density_kg_l)
    return cap, errors


REACH_SAMPLES = 33


def _resolve_along_path(
    p, idx, sp, cap, ph0, dc, di, dt, dose, ok_dose, conv, lo, hi, known_cap=None, ionic0=None
) -> None:
    """For streams the setpoint inversion could not settle: walk the dose path.

    pH need not be monotone in the dose of a weak reagent at high ionic strength
    (NaHCO3 first raises an acid stream toward ½(pK1 + pK2), then activity effects pull
    it down again), so the reachable range is taken from forward solves at log-spaced
    doses up to the limit; a setpoint inside it is then found by bisection on the dose
    between the first two samples that bracket it. Updates the arrays in place.

    The ends of the path are not solved again: at dose 0 the stream is the one already
    solved (``ph0``, status OK for every stream here), and ``known_cap`` = (dose, pH,
    status) of the forward solves at the limit dose gives the last sample wherever that
    dose is still the limit. Solves start from the stream's own state (``ionic0``, the
    ionic strength at ``ph0``), each bisection step from the previous midpoint's."""
    n = idx.size
    frac = np.concatenate([[0.0], np.logspace(-6, 0, REACH_SAMPLES - 1)])
    doses = cap[idx][:, None] * frac[None, :]
    ph_s = np.empty((n, REACH_SAMPLES))
    ph_s[:, 0] = ph0[idx]
    todo = np.ones((n, REACH_SAMPLES), dtype=bool)
    todo[:, 0] = False
    if known_cap is not None:
        d_known, ph_known, st_known = known_cap
        same = d_known[idx] == doses[:, -1]
        ph_s[same, -1] = np.where(st_known[idx[same]] == OK, ph_known[idx[same]], np.nan)
        todo[same, -1] = False
    r_i, c_i = np.nonzero(todo)
    rows = idx[r_i]
    i_start = None if ionic0 is None else ionic0[rows]
    ph_t, _, st_t = _forward(
        p.take(rows), doses[r_i, c_i], dc[rows], di[rows], dt[rows], guess=ph0[rows], ionic=i_start
    )
    ph_s[r_i, c_i] = np.where(st_t == OK, ph_t, np.nan)
    lo[idx] = np.fmin(lo[idx], np.nanmin(ph_s, axis=1))
    hi[idx] = np.fmax(hi[idx], np.nanmax(ph_s, axis=1))
    target = sp[idx]
    rel = ph_s - target[:, None]
    cross = (rel[:, :-1] * rel[:, 1:] <= 0) & np.isfinite(rel[:, :-1] + rel[:, 1:])
    has = cross.any(axis=1)
    if not has.any():
        return
    first = np.argmax(cross, axis=1)
    sub = np.nonzero(has)[0]
    a = doses[sub, first[sub]]
    b = doses[sub, first[sub] + 1]
    sign_a = np.sign(rel[sub, first[sub]])
    rows2 = idx[sub]
    psub = p.take(rows2)
    g_ph, g_i = ph0[rows2], None if ionic0 is None else ionic0[rows2]
    for _ in range(60):
        mid = 0.5 * (a + b)
        ph_m, i_m, st_m = _forward(psub, mid, dc[rows2], di[rows2], dt[rows2], guess=g_ph, ionic=g_i)
        usable = (st_m == OK) & np.isfinite(ph_m) & np.isfinite(i_m)
        g_ph = np.where(usable, ph_m, ph0[rows2])
        if g_i is not None:
            g_i = np.where(usable, i_m, ionic0[rows2])
        same = np.sign(ph_m - target[sub]) == sign_a
        a = np.where(same, mid, a)
        b = np.where(same, b, mid)
    dose[rows2] = 0.5 * (a + b)
    ok_dose[rows2] = True
    conv[rows2] = True


def _slurry_cap(reagent, cation, parsed, asm, p, ph0, dc, di, dt, sv, cap, ph_cap, db):
    """Dose limit of a hydroxide slurry: saturation of M(OH)2 in the dosed stream itself
    (an acid stream dissolves far more lime than pure water does)."""
    temps = [ps.temperature_c for ps in parsed]
    log_ksp = np.empty(len(parsed))
    for i, t in enumerate(temps):
        try:
            sol = reagent.solubility_g_per_100g_h2o(t)
        except InputError:
            log_ksp[i] = np.inf  # temperature outside the table: reported by _ceiling
            continue
        log_ksp[i] = _log_ksp_hydroxide(reagent.name, cation, round(t, 6), sol * 10.0 / reagent.molar_mass_g_mol)
    col = asm.strong_names.index(cation)
    m0 = asm.strong_molal[:, col]
    ph_sat, d_sat = _saturation_ph(
        p, ph0, dc, di, dt, sv.state.ionic_strength, m0, reagent.adds[cation],
        log_ksp, db.strong_ions[cation].ion_size_angstrom,
    )
    finite = np.isfinite(log_ksp)
    cap = np.where(finite, np.minimum(cap, d_sat), cap)
    ph_cap = np.where(finite & (d_sat < MAX_DOSE_MOL_L), ph_sat, ph_cap)
    return cap, ph_cap


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
    slots = _reagent_slots(reagent, db)
    for i, spec in enumerate(specs):
        try:
            if spec.balance_on is not None or any(e.name == "alkalinity" for e in spec.composition):
                raise InputError(
                    "dose a calibrated analysis: calibrate with POST /v1/equilibrium first and "
                    "post the closed composition", "/stream/balance_on",
                )
            parsed.append(parse_stream(_with_reagent_slots(spec, slots), db))
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
        rows = np.nonzero(bad)[0]  # only these change: the others keep their solve
        ph_cap[rows], _, status_cap[rows] = _forward(p.take(rows), cap[rows], dc[rows], di[rows], dt[rows])
    known_cap = (cap.copy(), ph_cap.copy(), status_cap.copy())
    cation = _hydroxide_cation(reagent, db)
    if cation is not None:
        cap, ph_cap = _slurry_cap(reagent, cation, parsed, asm, p, ph0, dc, di, dt, sv, cap, ph_cap, db)
    dose, conv, dosed_i = dose_at_ph(p, sp, dc, di, dt, sv.state.ionic_strength)
    # The reagent moves the pH from the stream's own pH toward the pH at the limit dose:
    # usually up for a base, but a weak one (NaHCO3) lowers an alkaline stream.
    lo, hi = np.minimum(ph0, ph_cap), np.maximum(ph0, ph_cap)
    met = np.abs(ph0 - sp) <= SETPOINT_TOLERANCE_PH
    dose = np.where(met, 0.0, dose)
    ok_dose = np.isfinite(dose) & (dose >= 0) & (dose <= cap * (1 + 1e-9))
    hard = np.nonzero(~met & ~(ok_dose & conv) & (status0 == OK))[0]
    if hard.size:
        _resolve_along_path(
            p, hard, sp, cap, ph0, dc, di, dt, dose, ok_dose, conv, lo, hi, known_cap, sv.state.ionic_strength
        )
    final_ph, final_i, status_f = _forward(
        p, np.where(ok_dose, dose, 0.0), dc, di, dt, guess=np.where(ok_dose & ~met, sp, ph0),
        ionic=np.where(ok_dose & ~met, dosed_i, sv.state.ionic_strength),
    )
    # A weak reagent's path can pass beyond both ends (not monotone): what it reached is
    # reachable.
    reached = ok_dose & (status_f == OK)
    lo = np.where(reached, np.minimum(lo, final_ph), lo)
    hi = np.where(reached, np.maximum(hi, final_ph), hi)
    # The dosed stream's ionic strength at the setpoint starts the ±GAIN_STEP_PH inversions.
    gain = _gain(p, sp, dc, di, dt, np.where(conv, dosed_i, sv.state.ionic_strength))
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
        # Start from the dosed stream's state where its check solve settled.
        i_near = np.where(status_f[near] == OK, final_i[near], 0.5 * sub.strong_ionic)
        for f in (1.0 - HIGH_GAIN_RULE[0], 1.0 + HIGH_GAIN_RULE[0]):
            moved = _forward(
                sub, d_ok[near] * f, dc[near], di[near], dt[near], guess=final_ph[near], ionic=i_near
            )[0]
            swing[near] = np.maximum(swing[near], np.abs(moved - final_ph[near]))
    high = (d_ok > 0) & (swing > HIGH_GAIN_RULE[1])
    # Per-stream answers from plain Python lists (one conversion per array, not per item).
    (status0_l, lo_l, hi_l, met_l, ok_l, conv_l, ph_cap_l, ph0_l, sp_l, cap_l, status_f_l,
     final_l, dose_l, gain_l, high_l, swing_l) = (
        a.tolist() for a in (status0, lo, hi, met, ok_dose, conv, ph_cap, ph0, sp, cap, status_f,
                             final_ph, dose, gain, high, swing)
    )
    for j, i in enumerate(where):
        if cap_errors[j] is not None:
            out[i] = cap_errors[j]
            continue
        if status0_l[j] != OK:
            from models.equilibrium import STATUS_MESSAGES, failure_message  # reason, not a code

            code = int(status0_l[j])
            out[i] = SolveError("the stream itself does not solve: " + failure_message(code), STATUS_MESSAGES[code])
            continue
        reach = (lo_l[j], hi_l[j])
        met_j = met_l[j]
        if not met_j and not (ok_l[j] and conv_l[j]):
            ph0_j, sp_j, ph_cap_j = ph0_l[j], sp_l[j], ph_cap_l[j]
            raises = ph_cap_j > ph0_j if ph_cap_j != ph0_j else base
            what = "raises" if raises else "lowers"
            wrong = (sp_j < ph0_j) if raises else (sp_j > ph0_j)
            own, target = _distinct_ph(ph0_j, sp_j)
            why = (
                f"{reagent.name} {what} pH: it cannot take this stream from pH {own} to {target}"
                if wrong
                else f"setpoint {sp_j:.2f} is beyond what {reagent.name} can reach"
            )
            out[i] = UnreachableSetpoint(
                f"{why}; reachable with {reagent.name}: pH {_ph_text(reach[0])} to "
                f"{_ph_text(reach[1])} (between the stream's own pH {own} and pH "
                f"{_ph_text(ph_cap_j)} at the limit "
                f"dose of {cap_l[j] * 1e3:.4g} mmol/L)",
                reach[0], reach[1],
            )
            continue
        final_j = final_l[j]
        if status_f_l[j] != OK or (not met_j and abs(final_j - sp_l[j]) > SETPOINT_TOLERANCE_PH):
            out[i] = SolveError("the dosed stream did not settle at the setpoint", "dose_not_converged")
            continue
        warnings: list[str] = []
        if high_l[j]:
            warnings.append(
                f"process gain is high: a 1 % error in reagent flow moves the pH by "
                f"{swing_l[j]:.2f} at the setpoint (rule of thumb of the trade: above "
                f"{HIGH_GAIN_RULE[1]} pH, single-stage control is impractical; use two stages "
                "or equalise the stream first)"
            )
        out[i] = DosePlan(
            dose_mol_l=dose_l[j],
            initial_ph=ph0_l[j],
            final_ph=final_j,
            gain_ph_per_mol_l=gain_l[j],
            reachable_ph=reach,
            already_met=met_j,
            stream=specs[j],
            reagent=reagent,
            warnings=warnings,
        )


def _gain(p, sp, dc, di, dt, ionic) -> NDArray:
    """dpH/d(dose) [pH per mol/L] at the setpoint: 1 / (d dose / d pH) by central difference."""
    up, _, _ = dose_at_ph(p, sp + GAIN_STEP_PH, dc, di, dt, ionic)
    down, _, _ = dose_at_ph(p, sp - GAIN_STEP_PH, dc, di, dt, ionic)
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
    ps = parse_stream(_with_reagent_slots(spec, _reagent_slots(reagent, db)), db)
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
            f"at {doses[k] * 1e3:.4g} mmol/L of {reagent.name}: {failure_message(int(st.status[k]))}",
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
    step = np.diff(d)
    if np.any(step <= 0):
        return (), ()
    slope = np.abs(np.diff(ph) / step)
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
