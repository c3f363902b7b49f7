"""Vectorized charge-balance solver for a batch of streams (molal scale).

For each stream the unknown is pH = −log10 a(H+). The charge balance

    F(pH) = S + m(H+) − m(OH−) + Σ_k T_k · z̄_k(pH) = 0

(S: net strong-ion charge [eq/kg]; T_k: total of system k [mol/kg]; z̄_k: its mean
charge) decreases strictly with pH at fixed activity coefficients, so a bracketed,
safeguarded Newton iteration on [PH_MIN, PH_MAX] always converges. Ionic strength is
made self-consistent by an outer fixed-point iteration; activity coefficients are held
during each inner solve. A system open to a gas phase (carbonate with a CO2 partial
pressure) has a fixed amount of its neutral form instead of a fixed total.

Arrays: N streams, K system slots per stream, P = max steps + 1 species per slot.
Failure of one stream is data (``status``), not an exception.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from models.activity import HARD_LIMIT_MOL_KG, IDEAL, log_gamma

__all__ = [
    "PH_MIN",
    "PH_MAX",
    "STATUS_MESSAGES",
    "BalanceProblem",
    "BalanceState",
    "solve_balance",
    "balance_at_ph",
    "species_state",
    "gammas",
    "balance",
    "ionic_strength_of",
]

LN10 = float(np.log(10.0))
#: The model's pH range: a root outside it is reported, never clipped.
PH_MIN, PH_MAX = -1.0, 15.0
PH_TOL = 1e-10
I_RTOL, I_ATOL = 1e-11, 1e-14
MAX_NEWTON, MAX_OUTER = 100, 60

OK, BELOW_RANGE, ABOVE_RANGE, NOT_CONVERGED, IONIC_STRENGTH = 0, 1, 2, 3, 4
#: Stable reason code per status.
STATUS_MESSAGES: dict[int, str] = {
    OK: "ok",
    BELOW_RANGE: "ph_below_model_range",
    ABOVE_RANGE: "ph_above_model_range",
    NOT_CONVERGED: "not_converged",
    IONIC_STRENGTH: "ionic_strength_out_of_range",
}


@dataclass(frozen=True)
class BalanceProblem:
    """Everything the charge balance needs, already at each stream's temperature.

    Per stream (N,): ``strong_charge`` [eq/kg], ``strong_ionic`` Σ m z² of strong ions
    [mol/kg], ``pkw`` [-], ``a_dh``, ``b_dh``, ``activity_code``, ``size_h``, ``size_oh`` [Å].
    Per slot (N, K): ``total`` [mol/kg] (closed systems), ``open_neutral`` [mol/kg] fixed
    amount of species 0 where ``is_open``. Per species (N, K, P): ``cum_pk`` [-] (+inf
    pads), ``charge`` [-], ``ion_size`` [Å].
    """

    strong_charge: NDArray[np.float64]
    strong_ionic: NDArray[np.float64]
    pkw: NDArray[np.float64]
    a_dh: NDArray[np.float64]
    b_dh: NDArray[np.float64]
    activity_code: NDArray[np.int_]
    size_h: NDArray[np.float64]
    size_oh: NDArray[np.float64]
    total: NDArray[np.float64]
    is_open: NDArray[np.bool_]
    open_neutral: NDArray[np.float64]
    cum_pk: NDArray[np.float64]
    charge: NDArray[np.float64]
    ion_size: NDArray[np.float64]

    @property
    def n_streams(self) -> int:
        return int(self.strong_charge.shape[0])

    def take(self, idx: NDArray[np.int_]) -> BalanceProblem:
        """The sub-problem of the streams at ``idx``."""
        return BalanceProblem(**{k: getattr(self, k)[idx] for k in self.__dataclass_fields__})


@dataclass(frozen=True)
class BalanceState:
    """Solved state per stream: pH, ionic strength, activity coefficients, status."""

    ph: NDArray[np.float64]
    ionic_strength: NDArray[np.float64]
    log_gamma_species: NDArray[np.float64]
    log_gamma_h: NDArray[np.float64]
    log_gamma_oh: NDArray[np.float64]
    residual: NDArray[np.float64]
    scale: NDArray[np.float64]
    iterations: NDArray[np.int_]
    status: NDArray[np.int_]


def gammas(p: BalanceProblem, ionic: NDArray) -> tuple[NDArray, NDArray, NDArray]:
    lg = log_gamma(p.charge, p.ion_size, ionic, p.a_dh, p.b_dh, p.activity_code)
    one = np.ones_like(ionic)
    lh = log_gamma(one, p.size_h, ionic, p.a_dh, p.b_dh, p.activity_code)
    loh = log_gamma(-one, p.size_oh, ionic, p.a_dh, p.b_dh, p.activity_code)
    return lg, lh, loh


def species_state(
    p: BalanceProblem, ph: NDArray, lg: NDArray, lh: NDArray, loh: NDArray
) -> tuple[NDArray, NDArray, NDArray]:
    """Molalities of system species (N, K, P), H+ and OH− [mol/kg] at ``ph``."""
    logw = ph[:, None, None] * np.arange(p.cum_pk.shape[-1]) - p.cum_pk - lg
    top = np.max(logw, axis=-1, keepdims=True)
    w = np.exp(LN10 * (logw - top))
    closed = p.total[..., None] * w / np.sum(w, axis=-1, keepdims=True)
    if np.any(p.is_open):
        rel = np.exp(LN10 * (logw - logw[..., :1]))
        opened = p.open_neutral[..., None] * rel
        closed = np.where(p.is_open[..., None], opened, closed)
    m_h = 10.0 ** (-ph - lh)
    m_oh = 10.0 ** (ph - p.pkw - loh)
    return closed, m_h, m_oh


def balance(p: BalanceProblem, ph: NDArray, lg: NDArray, lh: NDArray, loh: NDArray):
    """F [eq/kg], dF/dpH [eq/kg], and Σ|terms| for scaling, at fixed γ."""
    m, m_h, m_oh = species_state(p, ph, lg, lh, loh)
    zm = p.charge * m
    f = p.strong_charge + m_h - m_oh + zm.sum(axis=(1, 2))
    # d m_j/dpH = ln10 m_j (j − mean j) for closed systems, ln10 m_j j for open ones.
    steps = np.arange(p.cum_pk.shape[-1], dtype=float)
    tot = np.maximum(m.sum(axis=-1, keepdims=True), 1e-300)
    mean_j = np.where(p.is_open[..., None], 0.0, (m * steps).sum(axis=-1, keepdims=True) / tot)
    dsys = (zm * (steps - mean_j)).sum(axis=(1, 2))
    df = -LN10 * (m_h + m_oh) + LN10 * dsys
    scale = np.abs(p.strong_charge) + m_h + m_oh + np.abs(zm).sum(axis=(1, 2))
    return f, df, scale, m, m_h, m_oh


def ionic_strength_of(p: BalanceProblem, m: NDArray, m_h: NDArray, m_oh: NDArray) -> NDArray:
    return 0.5 * (p.strong_ionic + m_h + m_oh + (p.charge * p.charge * m).sum(axis=(1, 2)))


def _newton(p: BalanceProblem, ph0: NDArray, lg, lh, loh) -> tuple[NDArray, NDArray, NDArray]:
    """Safeguarded Newton on [PH_MIN, PH_MAX] at fixed γ; only unconverged streams iterate."""
    n = ph0.shape[0]
    ph = ph0.copy()
    lo = np.full(n, PH_MIN)
    hi = np.full(n, PH_MAX)
    iters = np.zeros(n, dtype=int)
    done = np.zeros(n, dtype=bool)
    idx = np.arange(n)
    for _ in range(MAX_NEWTON):
        sub = p if idx.size == n else p.take(idx)
        x = ph[idx]
        f, df, *_ = balance(sub, x, lg[idx], lh[idx], loh[idx])
        pos = f > 0
        lo[idx] = np.where(pos, x, lo[idx])
        hi[idx] = np.where(pos, hi[idx], x)
        with np.errstate(divide="ignore", invalid="ignore"):
            step = -f / df
        new = x + step
        # Strict: a Newton step of ~0 from a bracket end lands on that end and is converged,
        # not a reason to bisect away from the root.
        bad = ~np.isfinite(new) | (new < lo[idx]) | (new > hi[idx])
        new = np.where(bad, 0.5 * (lo[idx] + hi[idx]), new)
        iters[idx] += 1
        conv = (np.abs(new - x) < PH_TOL) | (hi[idx] - lo[idx] < PH_TOL) | (f == 0)
        ph[idx] = np.where(f == 0, x, new)
        done[idx[conv]] = True
        idx = idx[~conv]
        if idx.size == 0:
            break
    return ph, iters, done


def solve_balance(p: BalanceProblem, ph_guess: NDArray | None = None) -> BalanceState:
    """Solve every stream's charge balance with self-consistent ionic strength."""
    n = p.n_streams
    ph = np.full(n, 7.0) if ph_guess is None else np.clip(ph_guess, PH_MIN + 0.01, PH_MAX - 0.01)
    ionic = 0.5 * p.strong_ionic + 0.5 * (np.abs(p.charge) ** 2 * p.total[..., None]).max(axis=-1).sum(axis=1)
    ionic = np.where(p.activity_code == IDEAL, 0.0, ionic)
    total_iters = np.zeros(n, dtype=int)
    converged_i = np.zeros(n, dtype=bool)
    newton_ok = np.ones(n, dtype=bool)
    for _ in range(MAX_OUTER):
        lg, lh, loh = gammas(p, ionic)
        ph_new, iters, ok = _newton(p, ph, lg, lh, loh)
        total_iters += np.where(converged_i, 0, iters)
        newton_ok &= ok | converged_i
        ph = np.where(converged_i, ph, ph_new)
        m, m_h, m_oh = species_state(p, ph, lg, lh, loh)
        ionic_new = ionic_strength_of(p, m, m_h, m_oh)
        ideal = p.activity_code == IDEAL
        step_small = np.abs(ionic_new - ionic) <= I_ATOL + I_RTOL * ionic_new
        converged_i |= ideal | step_small | (ionic_new > 10 * HARD_LIMIT_MOL_KG)
        # A converged stream keeps the ionic strength its pH was solved with, so the final
        # residual is that of the pH actually returned (and later passes cannot move it).
        ionic = np.where(ideal | converged_i, ionic, ionic_new)
        if converged_i.all():
            break
    lg, lh, loh = gammas(p, ionic)
    f, _, scale, m, m_h, m_oh = balance(p, ph, lg, lh, loh)
    ionic_actual = ionic_strength_of(p, m, m_h, m_oh)
    status = np.full(n, OK)
    status[~(newton_ok & converged_i)] = NOT_CONVERGED
    status[(ph <= PH_MIN + 1e-6) & (f < 0)] = BELOW_RANGE
    status[(ph >= PH_MAX - 1e-6) & (f > 0)] = ABOVE_RANGE
    status[(status == OK) & (ph <= PH_MIN + 1e-6)] = BELOW_RANGE
    status[(status == OK) & (ph >= PH_MAX - 1e-6)] = ABOVE_RANGE
    status[(status == OK) & (ionic_actual > HARD_LIMIT_MOL_KG)] = IONIC_STRENGTH
    return BalanceState(
        ph=ph,
        ionic_strength=ionic_actual,
        log_gamma_species=lg,
        log_gamma_h=lh,
        log_gamma_oh=loh,
        residual=f,
        scale=scale,
        iterations=total_iters,
        status=status,
    )


def balance_at_ph(
    p: BalanceProblem,
    ph: NDArray,
    added_charge: float,
    *,
    ionic_guess: NDArray | None = None,
) -> tuple[NDArray, NDArray, NDArray]:
    """Amount x [mol/kg] of a strong ion of charge ``added_charge`` that closes the
    balance at the given pH, with ionic strength self-consistent including x.

    Returns (x, ionic strength [mol/kg], converged). Used for calibration to a measured
    pH and for the buffer capacity with activity corrections (x(pH) is the strong-base
    titration curve read backwards).
    """
    z = float(added_charge)
    ionic = np.zeros_like(ph) if ionic_guess is None else ionic_guess.copy()
    x = np.zeros_like(ph)
    converged = p.activity_code == IDEAL
    for _ in range(MAX_OUTER):
        lg, lh, loh = gammas(p, ionic)
        f, _, _, m, m_h, m_oh = balance(p, ph, lg, lh, loh)
        x = -f / z
        ionic_new = ionic_strength_of(p, m, m_h, m_oh) + 0.5 * z * z * x
        ionic_new = np.maximum(ionic_new, 0.0)
        small = np.abs(ionic_new - ionic) <= I_ATOL + I_RTOL * ionic_new
        ideal = p.activity_code == IDEAL
        ionic = np.where(ideal, ionic_strength_of(p, m, m_h, m_oh) + 0.5 * z * z * np.abs(x), ionic_new)
        converged = converged | small
        if np.all(converged | ideal):
            break
    return x, ionic, converged
