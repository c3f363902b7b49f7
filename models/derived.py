"""Quantities derived from a solved state: buffer capacity, alkalinity, calcite
saturation, Langelier index and a conductivity estimate. All vectorized per batch."""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from typing import TYPE_CHECKING

import numpy as np
from numpy.typing import NDArray

from models.activity import IDEAL, log_gamma
from models.masses import formula_mass_g_mol
from models.prepare import CARBONATE
from models.results import Alkalinity
from models.solver import BalanceKernel, BalanceProblem, balance, species_state

if TYPE_CHECKING:
    from models.equilibrium import Solved
    from models.thermo import ThermoDatabase

__all__ = [
    "PHENOLPHTHALEIN_ENDPOINT_PH",
    "TOTAL_ENDPOINT_PH",
    "Derived",
    "alkalinities_eq_kg",
    "alkalinity_eq_kg",
    "buffer_capacity",
    "compute",
    "langelier_ph_s",
]

#: Total alkalinity end point [pH], Standard Methods 2320 B (routine, industrial and
#: complex samples, or where silicates/phosphates are present).
TOTAL_ENDPOINT_PH = 4.5
#: Phenolphthalein end point [pH], Standard Methods 2320 B.
PHENOLPHTHALEIN_ENDPOINT_PH = 8.3

#: pH step [-] of the central difference for β with activity corrections. Truncation
#: error ~ δ²·β''/6β, below 1e-7 relative for δ = 1e-4.
BETA_STEP_PH = 1e-4


@dataclass(frozen=True)
class Derived:
    beta_mol_kg: NDArray[np.float64]
    alkalinity: list[Alkalinity]
    calcite_si: list[float | None]
    langelier: list[float | None]
    conductivity_us_cm: list[float | None]
    strong_log_gamma: NDArray[np.float64]
    warnings: list[list[str]]
    #: Molalities of system species (N, K, P), H+ and OH− at the solved state, as
    #: ``models.solver.species_state`` gives them (shared with the result tables).
    species: tuple[NDArray, NDArray, NDArray]


#: Batches up to this many streams evaluate several states in one stacked numpy pass;
#: larger ones evaluate them one by one, which keeps the working arrays in cache.
STACK_MAX_STREAMS = 2048


def buffer_capacity(p: BalanceProblem, ph: NDArray, ionic: NDArray) -> NDArray[np.float64]:
    """β = dC_base/dpH [mol/kg per pH].

    Ideal solutions: the analytic sum ln10·([H+] + [OH−] + Σ T·Var(z)) (Van Slyke form;
    open systems add their gas uptake). With activity corrections: the derivative of the
    strong-base (Na+ / OH−) titration curve including its effect on ionic strength, by
    implicit differentiation of the activity-corrected balance (``_beta_with_activity``).
    """
    beta = np.empty_like(ph)
    ideal = p.activity_code == IDEAL
    if ideal.any():
        idx = np.nonzero(ideal)[0]
        sub = p.take(idx)
        zero = np.zeros(idx.size)
        lg = np.zeros(sub.charge.shape)
        _, df, *_ = balance(sub, ph[idx], lg, zero, zero)
        beta[idx] = -df
    if (~ideal).all():  # every stream: no sub-problem to copy
        beta[:] = _beta_with_activity(p, ph, ionic)
    elif (~ideal).any():
        idx = np.nonzero(~ideal)[0]
        beta[idx] = _beta_with_activity(p.take(idx), ph[idx], ionic[idx])
    return beta


def _beta_with_activity(p: BalanceProblem, ph: NDArray, ionic: NDArray) -> NDArray:
    """dC_base/dpH along the Na+/OH− titration with ionic strength following the dose.

    With X(pH, I) the base needed at fixed γ(I) and Ψ(pH, I) the ionic strength of the
    sample's own species, adding base x obeys x = X and I = Ψ + x/2; implicit
    differentiation gives dI/dpH = (Ψ_p + X_p/2)/(1 − Ψ_I − X_I/2) and
    β = X_p + X_I·dI/dpH. The four partial derivatives are central differences from four
    kernel evaluations (no iteration).
    """
    d_i = np.maximum(1e-6 * ionic, 1e-12)
    lo_i = np.maximum(ionic - d_i, 0.0)
    kern = BalanceKernel(p)
    # Four evaluations; the two pH steps share the sample's γ. Small batches stack them
    # into one pass (fewer numpy calls); large ones evaluate them one by one (a stacked
    # pass of 4 × N rows falls out of cache). Each row is computed alike either way.
    lg0, lh0, loh0 = kern.log_gammas(ionic)
    lg_up, lh_up, loh_up = kern.log_gammas(ionic + d_i)
    lg_dn, lh_dn, loh_dn = kern.log_gammas(lo_i)
    at = (ph + BETA_STEP_PH, ph - BETA_STEP_PH, ph, ph)
    lgs, lhs, lohs = (lg0, lg0, lg_up, lg_dn), (lh0, lh0, lh_up, lh_dn), (loh0, loh0, loh_up, loh_dn)
    if ph.shape[0] <= STACK_MAX_STREAMS:
        _, _, psi, pos, neg = kern.evaluate(np.stack(at), np.stack(lgs), np.stack(lhs), np.stack(lohs))
        x = neg - pos
    else:
        x, psi = np.empty((4,) + ph.shape), np.empty((4,) + ph.shape)
        for r in range(4):
            _, _, psi[r], pos, neg = kern.evaluate(at[r], lgs[r], lhs[r], lohs[r])
            x[r] = neg - pos
    span_i = ionic + d_i - lo_i
    x_p = (x[0] - x[1]) / (2 * BETA_STEP_PH)
    psi_p = (psi[0] - psi[1]) / (2 * BETA_STEP_PH)
    x_i = (x[2] - x[3]) / span_i
    psi_i = (psi[2] - psi[3]) / span_i
    di_dph = (psi_p + 0.5 * x_p) / (1.0 - psi_i - 0.5 * x_i)
    return x_p + x_i * di_dph


def alkalinity_eq_kg(
    p: BalanceProblem, ph: NDArray, lg: NDArray, lh: NDArray, loh: NDArray, endpoint_ph: float
) -> NDArray[np.float64]:
    """Strong acid [eq/kg] that takes the sample (closed, as in a titration vessel) from
    ``ph`` to ``endpoint_ph``, activity coefficients held at the sample's values."""
    m, _, _ = species_state(p, ph, lg, lh, loh)
    closed = replace(p, total=m.sum(axis=-1), is_open=np.zeros_like(p.is_open))
    f_s, *_ = balance(closed, ph, lg, lh, loh)
    f_e, *_ = balance(closed, np.full_like(ph, endpoint_ph), lg, lh, loh)
    return f_e - f_s


def _charge_balance(p: BalanceProblem, ph: NDArray, lg: NDArray, lh: NDArray, loh: NDArray) -> NDArray[np.float64]:
    """F [eq/kg] at fixed γ: the first value of ``models.solver.balance``, computed alike."""
    m, m_h, m_oh = species_state(p, ph, lg, lh, loh)
    zm = p.charge * m
    return p.strong_charge + m_h - m_oh + np.einsum("...kp->...", zm)


def alkalinities_eq_kg(
    p: BalanceProblem, ph: NDArray, lg: NDArray, lh: NDArray, loh: NDArray, m: NDArray | None = None
) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Total and phenolphthalein alkalinity [eq/kg]: ``alkalinity_eq_kg`` at the two end
    points, the closed sample and its balance at ``ph`` set up once; the phenolphthalein
    value is 0 where ``ph`` is not above its end point (only the other streams are titrated).
    ``m``: the species molalities at ``ph`` if already known. The balances at the sample's
    pH and at the end points are one stacked evaluation (each row as alone)."""
    if m is None:
        m, _, _ = species_state(p, ph, lg, lh, loh)
    closed = replace(p, total=m.sum(axis=-1), is_open=np.zeros_like(p.is_open))
    above = ph > PHENOLPHTHALEIN_ENDPOINT_PH
    any_above = bool(above.any())
    at = np.empty((3 if any_above else 2,) + ph.shape)
    at[0] = ph
    at[1] = TOTAL_ENDPOINT_PH
    if any_above:
        at[2] = PHENOLPHTHALEIN_ENDPOINT_PH
    if ph.shape[0] <= STACK_MAX_STREAMS:
        f = _charge_balance(closed, at, lg, lh, loh)
    else:  # one end point at a time (see STACK_MAX_STREAMS)
        f = np.empty_like(at)
        for r in range(at.shape[0]):
            f[r] = _charge_balance(closed, at[r], lg, lh, loh)
    f_s = f[0]
    total = f[1] - f_s
    phen = np.zeros_like(ph)
    if any_above:
        if above.all():
            phen[:] = f[2] - f_s
        else:
            idx = np.nonzero(above)[0]
            phen[idx] = f[2][idx] - f_s[idx]
    return total, phen


def langelier_ph_s(
    pk2: NDArray, pks: NDArray, ca_mol_l: NDArray, hco3_mol_l: NDArray, ionic: NDArray, a_dh: NDArray
) -> NDArray[np.float64]:
    """pHs of Standard Methods 2330 B: pK2 − pKs + p[Ca²⁺] + p[HCO3⁻] + 5·pfm, with pfm the
    Davies (0.3) monovalent activity term."""
    sqrt_i = np.sqrt(ionic)
    pfm = a_dh * (sqrt_i / (1 + sqrt_i) - 0.3 * ionic)
    return pk2 - pks - np.log10(ca_mol_l) - np.log10(hco3_mol_l) + 5 * pfm


def compute(sv: Solved, db: ThermoDatabase) -> Derived:
    """All derived quantities of a solved batch."""
    p, st, asm = sv.problem, sv.state, sv.assembled
    n = st.ph.shape[0]
    ok = np.isfinite(st.ph)
    ph = np.where(ok, st.ph, 7.0)
    beta = buffer_capacity(p, ph, st.ionic_strength)
    species = species_state(p, st.ph, st.log_gamma_species, st.log_gamma_h, st.log_gamma_oh)
    total, phen = alkalinities_eq_kg(
        p, ph, st.log_gamma_species, st.log_gamma_h, st.log_gamma_oh, species[0] if ok.all() else None
    )
    rho = asm.density_kg_l
    eq_caco3 = formula_mass_g_mol("CaCO3") / 2.0
    warnings: list[list[str]] = [[] for _ in range(n)]
    alk: list[Alkalinity] = []
    total_l, phen_l, rho_l = total.tolist(), phen.tolist(), rho.tolist()
    for j in range(n):
        t_meq = max(total_l[j], 0.0) * rho_l[j] * 1e3
        p_meq = max(phen_l[j], 0.0) * rho_l[j] * 1e3
        if total_l[j] < 0:
            warnings[j].append(
                f"pH is below the {TOTAL_ENDPOINT_PH} end point: total alkalinity is 0 and the "
                f"stream carries {-total[j] * rho[j] * 1e3:.4g} meq/L of mineral acidity"
            )
        alk.append(
            Alkalinity(t_meq, t_meq * eq_caco3, TOTAL_ENDPOINT_PH, p_meq, p_meq * eq_caco3, PHENOLPHTHALEIN_ENDPOINT_PH)
        )
    names = asm.strong_names
    z = np.array([db.strong_ions[s].charge for s in names], dtype=float)
    size = np.array([db.strong_ions[s].ion_size_angstrom for s in names], dtype=float)
    strong_lg = log_gamma(
        np.broadcast_to(z, (n, z.size)), np.broadcast_to(size, (n, z.size)),
        st.ionic_strength, p.a_dh, p.b_dh, p.activity_code,
    )
    si, lsi = _calcite(sv, db, strong_lg, species[0])
    return Derived(beta, alk, si, lsi, _conductivity(sv, db, species), strong_lg, warnings, species)


def _carbonate_slots(sv: Solved) -> NDArray[np.int_]:
    """Per stream, the slot of its carbonate system or −1 (looked up once per layout)."""
    seen: dict[tuple[int, ...], int] = {}
    out = []
    for slots in sv.assembled.slots:
        key = tuple(map(id, slots))
        k = seen.get(key)
        if k is None:
            k = seen[key] = next((k for k, s in enumerate(slots) if s.name == CARBONATE), -1)
        out.append(k)
    return np.array(out)


def _calcite(sv: Solved, db: ThermoDatabase, strong_lg: NDArray, m_all: NDArray) -> tuple[list, list]:
    asm, p, st = sv.assembled, sv.problem, sv.state
    n = st.ph.shape[0]
    none: list[float | None] = [None] * n
    if "Ca2+" not in asm.strong_names:
        return none, list(none)
    ca_col = asm.strong_names.index("Ca2+")
    ca = asm.strong_molal[:, ca_col]
    slot = _carbonate_slots(sv)
    has = (ca > 0) & (slot >= 0)
    if not has.any():
        return none, list(none)
    idx = np.nonzero(has)[0]
    k = slot[idx]
    m_hco3, m_co3 = m_all[idx, k, 1], m_all[idx, k, 2]
    lg_co3 = st.log_gamma_species[idx, k, 2]
    t = asm.temperature_c[idx]
    pks = np.asarray(db.pksp_calcite(t), dtype=float)
    with np.errstate(divide="ignore"):
        si_v = np.log10(ca[idx]) + strong_lg[idx, ca_col] + np.log10(m_co3) + lg_co3 + pks
        pk2 = p.cum_pk[idx, k, 2] - p.cum_pk[idx, k, 1]
        rho = asm.density_kg_l[idx]
        phs = langelier_ph_s(pk2, pks, ca[idx] * rho, m_hco3 * rho, st.ionic_strength[idx], p.a_dh[idx])
    lsi_v = st.ph[idx] - phs
    si, lsi = list(none), list(none)
    for j, a, b in zip(idx.tolist(), si_v.tolist(), lsi_v.tolist()):
        si[j] = a if math.isfinite(a) else None
        lsi[j] = b if math.isfinite(b) else None
    return si, lsi


def _conductivity(sv: Solved, db: ThermoDatabase, species: tuple[NDArray, NDArray, NDArray]) -> list[float | None]:
    """κ(25 °C) estimate [µS/cm] = 1000 Σ λ_i |z_i| c_i with an Onsager-type correction
    λ_i = λ°_i − (B2/2·|z_i| + B1·|z_i|·λ°_i)·√I/(1 + √I) (coefficients of the Onsager
    limiting law for water at 25 °C, in the data file). Ions without a λ° are skipped."""
    b1, b2 = db.onsager_limiting_law_25c()
    asm, p, st = sv.assembled, sv.problem, sv.state
    sqrt_i = np.sqrt(np.maximum(st.ionic_strength, 0.0))
    corr = sqrt_i / (1.0 + sqrt_i)
    rho = asm.density_kg_l
    m, m_h, m_oh = species

    def term(lam0: float, z: float, c_mol_l: NDArray) -> NDArray:
        az = abs(z)
        lam = np.maximum(lam0 - (0.5 * b2 * az + b1 * az * lam0) * corr, 0.0)
        return lam * az * c_mol_l

    kappa = term(db.limiting_conductivity("H+") or 0.0, 1.0, m_h * rho) + term(
        db.limiting_conductivity("OH-") or 0.0, 1.0, m_oh * rho
    )
    for k, name in enumerate(asm.strong_names):
        lam0 = db.limiting_conductivity(name)
        if lam0:
            kappa = kappa + term(lam0, db.strong_ions[name].charge, asm.strong_molal[:, k] * rho)
    az = np.abs(p.charge)
    lam = np.maximum(asm.lambda0 - (0.5 * b2 * az + b1 * az * asm.lambda0) * corr[:, None, None], 0.0)
    kappa = kappa + np.einsum("nkp,nkp->n", lam * az, m) * rho
    return (kappa * 1e3).tolist()
