"""Vectorized charge-balance solver for a batch of streams (molal scale).

For each stream the unknown is pH = −log10 a(H+). The charge balance

    F(pH) = S + m(H+) − m(OH−) + Σ_k T_k · z̄_k(pH) = 0

(S: net strong-ion charge [eq/kg]; T_k: total of system k [mol/kg]; z̄_k: its mean
charge) decreases strictly with pH at fixed activity coefficients, so a bracketed,
safeguarded Newton iteration on [PH_MIN, PH_MAX] always converges. The ionic strength
is updated in the same loop (carried to each new pH by dI/dpH), the bracket widened by
the root's possible shift with γ; a stream not settled after JOINT_STEPS falls back to
nested iteration (ionic strength held until its pH has converged). A system open to a gas phase (carbonate with a CO2 partial
pressure) has a fixed amount of its neutral form instead of a fixed total.

Arrays: N streams, K system slots per stream, P = max steps + 1 species per slot.
Failure of one stream is data (``status``), not an exception.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from models.activity import (
    DAVIES,
    DAVIES_LINEAR_TERM,
    EXTENDED_DH,
    HARD_LIMIT_MOL_KG,
    IDEAL,
    log_gamma,
)

__all__ = [
    "PH_MAX",
    "PH_MIN",
    "STATUS_MESSAGES",
    "BalanceKernel",
    "BalanceProblem",
    "BalanceState",
    "balance",
    "gammas",
    "ionic_strength_of",
    "solve_balance",
    "species_state",
]

LN10 = float(np.log(10.0))
#: The model's pH range: a root outside it is reported, never clipped.
PH_MIN, PH_MAX = -1.0, 15.0
PH_TOL = 1e-10
I_RTOL, I_ATOL = 1e-11, 1e-14
MAX_NEWTON, MAX_OUTER = 200, 60
#: Joint pH/ionic-strength Newton steps before a stream falls back to nested iteration.
JOINT_STEPS = 16
#: The solver evaluates activity coefficients at min(I, this) [mol/kg]: far beyond every
#: model (a result above HARD_LIMIT_MOL_KG is refused anyway), low enough that no
#: species weight overflows when an early iterate of I is absurd (an overshoot to pH 12
#: with CO2 held by its partial pressure implies thousands of mol/kg of carbonate).
GAMMA_IONIC_MAX = 10.0 * HARD_LIMIT_MOL_KG

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

    def take(self, idx: NDArray[np.int_] | slice) -> BalanceProblem:
        """The sub-problem of the streams at ``idx`` (a slice gives views, no copies)."""
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


def _single_code(codes: NDArray[np.int_]) -> int | None:
    """The activity model code shared by every stream, or None (mixed, or no stream)."""
    if codes.size and (codes == codes[0]).all():
        return int(codes[0])
    return None


def _davies(a_dh: NDArray, ionic: NDArray) -> NDArray:
    """log10 γ of a singly charged ion under Davies (× z² for charge z), per stream."""
    sqrt_i = np.sqrt(ionic)
    return -a_dh * (sqrt_i / (1.0 + sqrt_i) - DAVIES_LINEAR_TERM * ionic)


def gammas(p: BalanceProblem, ionic: NDArray) -> tuple[NDArray, NDArray, NDArray]:
    lg = log_gamma(p.charge, p.ion_size, ionic, p.a_dh, p.b_dh, p.activity_code)
    one = np.ones_like(ionic)
    lh = log_gamma(one, p.size_h, ionic, p.a_dh, p.b_dh, p.activity_code)
    loh = log_gamma(-one, p.size_oh, ionic, p.a_dh, p.b_dh, p.activity_code)
    return lg, lh, loh


def species_state(
    p: BalanceProblem, ph: NDArray, lg: NDArray, lh: NDArray, loh: NDArray
) -> tuple[NDArray, NDArray, NDArray]:
    """Molalities of system species (N, K, P), H+ and OH− [mol/kg] at ``ph``; ``ph`` may
    carry leading axes, e.g. (L, N) for L evaluations of the same streams in one pass."""
    logw = np.multiply(ph[..., None, None], np.arange(p.cum_pk.shape[-1]) * LN10) - p.cum_pk * LN10
    logw -= lg * LN10
    if np.any(p.is_open):
        rel = np.exp(logw - logw[..., :1])
        opened = p.open_neutral[..., None] * rel
    logw -= _max_last(logw)[..., None]
    w = np.exp(logw, out=logw)
    out = w * (p.total / np.einsum("...kp->...k", w))[..., None]
    if np.any(p.is_open):
        out = np.where(p.is_open[..., None], opened, out)
    m_h = np.exp(-LN10 * (ph + lh))
    m_oh = np.exp(LN10 * (ph - p.pkw - loh))
    return out, m_h, m_oh


def _max_last(a: NDArray) -> NDArray:
    """Maximum over a short last axis (elementwise, faster than a reduction here)."""
    top = a[..., 0].copy()
    for j in range(1, a.shape[-1]):
        np.maximum(top, a[..., j], out=top)
    return top


def balance(p: BalanceProblem, ph: NDArray, lg: NDArray, lh: NDArray, loh: NDArray):
    """F [eq/kg], dF/dpH [eq/kg], and Σ|terms| for scaling, at fixed γ."""
    m, m_h, m_oh = species_state(p, ph, lg, lh, loh)
    zm = p.charge * m
    f = p.strong_charge + m_h - m_oh + np.einsum("nkp->n", zm)
    # d m_j/dpH = ln10 m_j (j − mean j) for closed systems, ln10 m_j j for open ones.
    steps = np.arange(p.cum_pk.shape[-1], dtype=float)
    tot = np.maximum(np.einsum("nkp->nk", m), 1e-300)
    mean_j = np.where(p.is_open, 0.0, np.einsum("nkp,p->nk", m, steps) / tot)
    dsys = np.einsum("nkp,p->n", zm, steps) - np.einsum("nk,nk->n", np.einsum("nkp->nk", zm), mean_j)
    df = -LN10 * (m_h + m_oh) + LN10 * dsys
    scale = np.abs(p.strong_charge) + m_h + m_oh + np.einsum("nkp->n", np.abs(zm))
    return f, df, scale, m, m_h, m_oh


def ionic_strength_of(p: BalanceProblem, m: NDArray, m_h: NDArray, m_oh: NDArray) -> NDArray:
    return 0.5 * (p.strong_ionic + m_h + m_oh + np.einsum("nkp,nkp,nkp->n", p.charge, p.charge, m))


class BalanceKernel:
    """The charge balance of a (sub)batch, set up for repeated evaluation.

    Evaluates G = ln P − ln N, where P and N are the positive and negative charge
    (strong ions, H+/OH−, system species): G has the root of F = P − N but is close to
    linear in pH over wide ranges, so Newton's method on G needs few steps from a
    neutral start. Per-slot sums use moments of the proton count j (Σw, Σw·j, Σw·j²)
    with the charge z = top − j, so each evaluation costs one exp and a few reductions
    over the (N, K, P) arrays.
    """

    def __init__(self, p: BalanceProblem) -> None:
        self.p = p
        steps = np.arange(p.cum_pk.shape[-1], dtype=float)
        self.steps, self.steps_sq, self.steps_ln10 = steps, steps * steps, steps * LN10
        self.cum_ln10 = p.cum_pk * LN10
        self.top = p.charge[..., 0]
        self.z2 = p.charge * p.charge
        self.zpos = np.maximum(p.charge, 0.0)
        self.zposj = self.zpos * steps
        self.any_pos = bool(self.zpos.any())
        self.top_max = float(self.top.max()) if self.top.size else 0.0
        self.any_open = bool(p.is_open.any())
        self.strong_pos = np.maximum(p.strong_charge, 0.0)
        self.strong_neg = np.maximum(-p.strong_charge, 0.0)
        self.code = _single_code(p.activity_code)

    def log_gammas(self, ionic: NDArray) -> tuple[NDArray | None, NDArray, NDArray]:
        """log10 γ of system species (None when ideal), of H+ and of OH−."""
        if self.code == IDEAL:
            zero = np.zeros_like(ionic)
            return None, zero, zero
        if self.code == DAVIES:
            g = _davies(self.p.a_dh, ionic)
            return self.z2 * g[:, None, None], g, g
        return gammas(self.p, ionic)

    def evaluate(
        self, ph: NDArray, lg: NDArray | None, lh: NDArray, loh: NDArray, *, slot_means: bool = False
    ):
        """G, dG/dpH, the ionic strength [mol/kg] implied at ``ph``, and P, N [eq/kg];
        with ``slot_means`` also each slot's mean charge z̄ and mean z² (N, K).

        ``ph``, ``lh``, ``loh`` may carry leading axes before the stream axis, e.g. (L, N)
        with ``lg`` (L, N, K, P): L evaluations of the same streams in one pass (each row
        computed exactly as alone)."""
        p = self.p
        logw = np.subtract(np.multiply(ph[..., None, None], self.steps_ln10), self.cum_ln10)
        if lg is not None:
            logw -= lg * LN10
        # Exponents stay within about ±150 for pH −1…15 and pK −5…25 (custom-system
        # limits), so no max-shift is needed here; models.fractions keeps it.
        w = np.exp(logw, out=logw)
        m0 = np.einsum("...kp->...k", w)
        m1 = np.einsum("...kp,p->...k", w, self.steps)
        m2 = np.einsum("...kp,p->...k", w, self.steps_sq)
        t = self.top
        if self.any_open:
            s = np.where(p.is_open, p.open_neutral / w[..., 0], p.total / m0)
            jbar = np.where(p.is_open, 0.0, m1 / m0)
        else:
            s = p.total / m0
            jbar = m1 / m0
        sz = t * m0 - m1
        szj = t * m1 - m2
        sz2 = t * sz - szj
        if self.any_pos and self.top_max <= 1:
            # Top charge +1 at most (ammonium-like): only species 0 is positive.
            szp = w[..., 0] * np.maximum(t, 0.0)
            szpj = np.zeros_like(sz)
        elif self.any_pos:
            szp = np.einsum("...kp,...kp->...k", w, self.zpos)
            szpj = np.einsum("...kp,...kp->...k", w, self.zposj)
        else:
            szp = szpj = np.zeros_like(sz)
        szn, sznj = szp - sz, szpj - szj
        m_h = np.exp(-LN10 * (ph + lh))
        m_oh = np.exp(LN10 * (ph - p.pkw - loh))
        pos = self.strong_pos + m_h + (s * szp).sum(axis=-1)
        neg = self.strong_neg + m_oh + (s * szn).sum(axis=-1)
        dpos = LN10 * (-m_h + (s * (szpj - szp * jbar)).sum(axis=-1))
        dneg = LN10 * (m_oh + (s * (sznj - szn * jbar)).sum(axis=-1))
        with np.errstate(divide="ignore", invalid="ignore"):
            # P or N can underflow only for activity coefficients far outside any model
            # (ionic strength ≫ 3 mol/kg); such a stream ends as a failure, not a result.
            g = np.log(pos) - np.log(neg)
            dg = dpos / pos - dneg / neg
        ionic = 0.5 * (p.strong_ionic + m_h + m_oh + (s * sz2).sum(axis=-1))
        if slot_means:
            return g, dg, ionic, pos, neg, sz / m0, sz2 / m0
        return g, dg, ionic, pos, neg


def _sum_slots(a: NDArray) -> NDArray:
    """Σ over axis 0 (slots of a (K, N) array), one row after the other: numpy's own sum
    over axis 0 is pairwise from 8 slots on for a single stream (a contiguous column) but
    sequential for many, which would make a stream's rounding depend on its batch."""
    if a.shape[0] == 1:
        return a[0].copy()
    out = a[0] + a[1]
    for k in range(2, a.shape[0]):
        out += a[k]
    return out


class _LoopKernel:
    """The charge balance of a (sub)batch as the solver's loop evaluates it.

    Same quantities as ``BalanceKernel.evaluate`` plus dI/dpH, computed species-major:
    arrays are (K, N) per slot and (P − 1, K, N) per species, so every operation runs
    over a long contiguous stream axis. Each slot's weights are taken relative to its
    species 0, w_j = Kc_j · c_j with Kc_j = 10^−cum_pk_j (set once, exactly 0 for padded
    species) and c_j the activity-dependent factor, so an evaluation needs exponentials
    per stream (and per slot with a charged species 0 under Davies, per species under
    extended Debye–Hückel) instead of one per species, and m0 = Σ w ≥ 1.

    With s = T/m0 (closed) the slot sums reduce to the moments m_i = Σ_j j^i w_j,
    i = 0…3, and the top charge t (z_j = t − j): Σ z m = T (t − j̄), Σ z² m = T t² −
    2 t s m1 + s m2, d(Σ z m)/dpH = −ln10 · s (m2 − m1 j̄) (the buffer term), and
    d(Σ z² m)/dpH = ln10 · [s (m3 − m2 j̄) − 2 t s (m2 − m1 j̄)]. An open slot (fixed
    species 0, s = its molality) has j̄ = 0 and its own total s·m0. Terms in t and in
    positive species are summed over the slots where some stream has them only (the
    others add exact zeros), and every sum over slots runs slot by slot.
    """

    def __init__(self, p: BalanceProblem, code: int | None) -> None:
        self.p, self.code = p, code
        self.n_sp = p.charge.shape[2]
        self.jj = np.arange(1, self.n_sp, dtype=float)  # j ≥ 1
        self.jj2 = self.jj * self.jj
        self.jj3 = self.jj[:, None, None]
        # (P-1, K, N): 10^-cum_pk, exactly 0 for padded species (cum_pk = +inf; exp(-inf)
        # is numpy's slow path, so pads are masked instead).
        cum = np.ascontiguousarray(p.cum_pk[..., 1:].transpose(2, 1, 0))
        pad = np.isinf(cum)
        self.kc = np.exp(np.where(pad, 0.0, -LN10 * cum))
        self.kc[pad] = 0.0
        self.top = np.ascontiguousarray(p.charge[..., 0].T)
        self.two_top = 2.0 * self.top
        self.top_rows = np.flatnonzero(self.top.any(axis=1)).tolist()
        self.top_pos = np.maximum(self.top, 0.0)
        # Positive species beyond species 0 (a custom system with top charge ≥ +2).
        rest = p.charge[..., 1:]
        self.zpos_rest = (
            np.ascontiguousarray(np.maximum(rest, 0.0).transpose(2, 1, 0)) if (rest > 0).any() else None
        )
        self.pos_rows = np.flatnonzero(self.top_pos.any(axis=1)).tolist()
        self.any_open = bool(p.is_open.any())
        self.is_open = np.ascontiguousarray(p.is_open.T)
        if self.any_open:
            self.total = np.where(self.is_open, 0.0, np.ascontiguousarray(p.total.T))
            self.open_neutral = np.ascontiguousarray(p.open_neutral.T)
        else:
            self.total = np.ascontiguousarray(p.total.T)
            self.open_neutral = None
        self.sum_tt = _sum_slots(self.total * self.top)
        self.sum_tt2 = _sum_slots(self.total * self.top * self.top)
        self.strong_pos = np.maximum(p.strong_charge, 0.0)
        self.strong_neg = np.maximum(-p.strong_charge, 0.0)
        self.half_strong_ionic = 0.5 * p.strong_ionic
        self.pkw, self.a_dh, self.b_dh = p.pkw, p.a_dh, p.b_dh
        self.b_size_h, self.b_size_oh = p.b_dh * p.size_h, p.b_dh * p.size_oh
        if code == EXTENDED_DH:
            z2 = np.ascontiguousarray((p.charge * p.charge).transpose(2, 1, 0))
            self.neg_a_z2 = -p.a_dh * z2
            self.b_size = p.b_dh * np.ascontiguousarray(p.ion_size.transpose(2, 1, 0))

    _ARRAYS = ("kc", "top", "two_top", "top_pos", "zpos_rest", "is_open", "total", "open_neutral")
    _STREAM = ("sum_tt", "sum_tt2", "strong_pos", "strong_neg", "half_strong_ionic", "pkw",
               "a_dh", "b_dh", "b_size_h", "b_size_oh")

    def take(self, idx: NDArray[np.int_]) -> _LoopKernel:
        """The kernel of the streams at ``idx`` (the problem itself is taken only where
        the mixed-model activity coefficients need it)."""
        k = object.__new__(_LoopKernel)
        k.p = self.p.take(idx) if self.code not in (IDEAL, DAVIES, EXTENDED_DH) else None
        k.code, k.n_sp, k.any_open = self.code, self.n_sp, self.any_open
        k.jj, k.jj2, k.jj3 = self.jj, self.jj2, self.jj3
        for name in self._ARRAYS:
            a = getattr(self, name)
            setattr(k, name, None if a is None else a[..., idx])
        for name in self._STREAM:
            setattr(k, name, getattr(self, name)[idx])
        if self.code == EXTENDED_DH:
            k.neg_a_z2, k.b_size = self.neg_a_z2[..., idx], self.b_size[..., idx]
        k.top_rows = [r for r in self.top_rows if k.top[r].any()]
        k.pos_rows = [r for r in self.pos_rows if k.top_pos[r].any()]
        return k

    def log_gamma_ions(self, ionic: NDArray) -> tuple[NDArray, NDArray]:
        """log10 γ of H+ and OH− (the values ``BalanceKernel.log_gammas`` gives)."""
        if self.code == IDEAL:
            zero = np.zeros_like(ionic)
            return zero, zero
        if self.code == DAVIES:
            g = _davies(self.a_dh, ionic)
            return g, g
        if self.code == EXTENDED_DH:
            sqrt_i = np.sqrt(ionic)
            lh = -self.a_dh * (sqrt_i / (1.0 + self.b_size_h * sqrt_i))
            loh = -self.a_dh * (sqrt_i / (1.0 + self.b_size_oh * sqrt_i))
            return lh, loh
        _, lh, loh = gammas(self.p, ionic)
        return lh, loh

    def _weights(self, ph: NDArray, ionic: NDArray):
        """(w, lh, loh): w yields each species j ≥ 1's weights relative to species 0, (K, N)."""
        u = LN10 * ph
        ionic = np.minimum(ionic, GAMMA_IONIC_MAX)
        if self.code == IDEAL or self.code == DAVIES:
            lh, loh = self.log_gamma_ions(ionic)
            return self._weights_davies(u, LN10 * lh), lh, loh
        if self.code == EXTENDED_DH:
            sqrt_i = np.sqrt(ionic)
            lg = self.neg_a_z2 * (sqrt_i / (1.0 + self.b_size * sqrt_i))
            lh, loh = self.log_gamma_ions(ionic)
        else:
            lg_n, lh, loh = gammas(self.p, ionic)
            lg = np.ascontiguousarray(lg_n.transpose(2, 1, 0))
        d = lg[1:] - lg[0]
        d *= -LN10
        d += np.multiply.outer(np.arange(1, self.n_sp, dtype=float), u)[:, None, :]
        np.exp(d, out=d)
        d *= self.kc
        return d, lh, loh

    def _weights_davies(self, u: NDArray, gl: NDArray):
        # Davies: log γ_j − log γ_0 = g (z_j² − t²) = g (j² − 2 t j), the same g for all:
        # a per-stream factor 10^(j pH − j² g), times 10^(2 t j g) on slots where t ≠ 0
        # (one exponent there: the two factors alone can be 0 and inf).
        for j in range(1, self.n_sp):
            e = j * u - (j * j) * gl
            kc = self.kc[j - 1]
            w = kc * np.exp(e)
            for r in self.top_rows:
                w[r] = kc[r] * np.exp(e + (j * gl) * self.two_top[r])
            yield w

    def evaluate(self, ph: NDArray, ionic: NDArray, *, slope: bool = True):
        """G = ln P − ln N, dG/dpH, the ionic strength implied at ``ph`` with γ(``ionic``),
        its derivative dI/dpH at fixed γ (None unless ``slope``), P, N [eq/kg] and the
        log10 γ of H+ and OH−."""
        if ph.shape[0] <= STACKED_STREAMS and self.n_sp >= 4 and not self.any_open and self.zpos_rest is None:
            return self._evaluate_stacked(ph, ionic, slope)
        weights, lh, loh = self._weights(ph, ionic)
        m0 = m1 = m2 = m3 = szp = szpj = None
        for j, w in enumerate(weights, start=1):
            if j == 1:
                m0 = w + 1.0
                m1 = m2 = m3 = w
            else:
                m0 += w
                jw = w * float(j)
                m1 = m1 + jw if j == 2 else np.add(m1, jw, out=m1)
                jw *= j
                m2 = m2 + jw if j == 2 else np.add(m2, jw, out=m2)
                if slope:
                    jw *= j
                    m3 = m3 + jw if j == 2 else np.add(m3, jw, out=m3)
            if self.zpos_rest is not None:
                wz = w * self.zpos_rest[j - 1]
                szp = wz if szp is None else szp + wz
                wz = wz * j
                szpj = wz if szpj is None else szpj + wz
        if m0 is None:  # no system has a second species
            m0 = np.ones(self.top.shape)
            m1 = m2 = m3 = np.zeros_like(m0)
        inv = 1.0 / m0
        jbar = m1 * inv
        if self.any_open:
            s = np.where(self.is_open, self.open_neutral, self.total * inv)
            jbar = np.where(self.is_open, 0.0, jbar)
        else:
            s = self.total * inv
        x1, x2 = s * m1, s * m2
        d2 = x1 * jbar
        np.subtract(x2, d2, out=d2)  # T·var(j) for a closed slot
        sum_x1 = _sum_slots(x1)
        e_sys = _sum_slots(x2)
        d_sys = _sum_slots(d2)
        if slope:
            d3 = x2 * jbar
            np.subtract(s * m3, d3, out=d3)
            f_i = _sum_slots(d3)
        t = self.top
        if self.any_open:
            t_total = np.where(self.is_open, s * m0, self.total)
            q = np.where(self.is_open, x1, 0.0)
            sum_tt, sum_tt2 = _sum_slots(t * t_total), _sum_slots(t * t * t_total)
            d_sys -= _sum_slots(t * q)
            if slope:
                f_i += _sum_slots(t * t * q)
        else:
            sum_tt, sum_tt2 = self.sum_tt, self.sum_tt2
        e_sys += sum_tt2
        for r in self.top_rows:
            e_sys -= self.two_top[r] * x1[r]
            if slope:
                f_i -= self.two_top[r] * d2[r]
        b_sys = sum_tt - sum_x1
        a_sys = c_sys = 0.0
        if szp is None:
            for r in self.pos_rows:
                sp = s[r] * self.top_pos[r]
                a_sys = a_sys + sp
                c_sys = c_sys - sp * jbar[r]
        else:
            szp += self.top_pos
            sp = s * szp
            a_sys = _sum_slots(sp)
            c_sys = _sum_slots(s * szpj - sp * jbar)
        return self._close(ph, lh, loh, a_sys, b_sys, c_sys, d_sys, e_sys, f_i if slope else None)

    def _evaluate_stacked(self, ph: NDArray, ionic: NDArray, slope: bool):
        """``evaluate`` for a few streams without open systems or positive species beyond
        species 0, with the per-species and per-slot quantities stacked so that one numpy
        call does the work of several (the fixed cost per call dominates at small N).
        Every element is the same IEEE operation sequence as in ``evaluate``: the moments
        are (((w·j)·j)·j) summed j = 1, 2, … with m0 = (w_1 + 1) + w_2 + …, and every sum
        over slots runs slot by slot."""
        if self.code == IDEAL or self.code == DAVIES:
            u = LN10 * ph
            lh, loh = self.log_gamma_ions(np.minimum(ionic, GAMMA_IONIC_MAX))
            gl = LN10 * lh
            e = np.multiply.outer(self.jj, u)
            e -= np.multiply.outer(self.jj2, gl)
            w = self.kc * np.exp(e)[:, None, :]
            if self.top_rows:
                jg = np.multiply.outer(self.jj, gl)
                for r in self.top_rows:
                    w[:, r] = self.kc[:, r] * np.exp(e + jg * self.two_top[r])
        else:
            w, lh, loh = self._weights(ph, ionic)
        # a[i, j-1] = w_j · j^i, i = 0…3 (a[0, 0] carries the + 1 of species 0).
        a = np.empty((4,) + w.shape)
        np.add(w[0], 1.0, out=a[0, 0])
        a[0, 1:] = w[1:]
        np.multiply(w, self.jj3, out=a[1])
        np.multiply(a[1], self.jj3, out=a[2])
        np.multiply(a[2], self.jj3, out=a[3])
        mom = _sum_slots(a.swapaxes(0, 1))  # over species j, one after the other
        inv = 1.0 / mom[0]
        jbar = mom[1] * inv
        s = self.total * inv
        # b: x1 = s m1, x2 = s m2, s m3, d2 = x2 − x1 j̄, d3 = s m3 − x2 j̄; (5, K, N).
        b = np.empty((5,) + s.shape)
        np.multiply(s, mom[1:], out=b[:3])
        np.multiply(b[:2], jbar, out=b[3:])
        np.subtract(b[1:3], b[3:], out=b[3:])
        sums = _sum_slots(b.swapaxes(0, 1))
        sums[1] += self.sum_tt2
        for r in self.top_rows:
            # e_sys −= 2t·x1 and f_i −= 2t·d2 on this slot.
            sums[1::3] -= self.two_top[r] * b[0::3, r]
        e_sys, d_sys, f_i = sums[1], sums[3], sums[4]
        b_sys = self.sum_tt - sums[0]
        a_sys = c_sys = 0.0
        for r in self.pos_rows:
            sp = s[r] * self.top_pos[r]
            a_sys = a_sys + sp
            c_sys = c_sys - sp * jbar[r]
        return self._close(ph, lh, loh, a_sys, b_sys, c_sys, d_sys, e_sys, f_i if slope else None)

    def _close(self, ph, lh, loh, a_sys, b_sys, c_sys, d_sys, e_sys, f_i):
        """G, dG/dpH, the implied ionic strength and its slope from the slot sums (both
        evaluation paths end here, so they round alike); ``f_i`` None: no slope."""
        m_h = np.exp(-LN10 * (ph + lh))
        m_oh = np.exp(LN10 * (ph - self.pkw - loh))
        pos = self.strong_pos + m_h + a_sys
        neg = self.strong_neg + m_oh + (a_sys - b_sys)
        dpos = LN10 * (c_sys - m_h)
        dneg = LN10 * (m_oh + c_sys + d_sys)
        with np.errstate(divide="ignore", invalid="ignore"):
            g = np.log(pos) - np.log(neg)
            dg = dpos / pos - dneg / neg
        new_i = self.half_strong_ionic + 0.5 * (m_h + m_oh + e_sys)
        di = None if f_i is None else (0.5 * LN10) * (m_oh - m_h + f_i)
        return g, dg, new_i, di, pos, neg, lh, loh


#: Streams solved together at most: larger batches are solved in slices of this size,
#: which keeps the working arrays in cache (the time per stream stays flat) and changes no
#: result (every stream's iteration is its own). 8 192 streams: a (K, N) array of six
#: slots is 384 KiB; 5 % faster than 16 384 on the benchmark (both models).
SLICE_STREAMS = 8_192
#: Up to this many streams, ``_LoopKernel`` evaluates with stacked arrays (fewer numpy
#: calls, the same results) when some system has three or more steps (P ≥ 4: with two
#: steps the per-species loop is as short); larger batches keep the per-species loop
#: (no gain measured at 100 streams).
STACKED_STREAMS = 256
#: The working set is compacted when fewer than this fraction of it is still iterating.
COMPACT_BELOW = 0.6


def solve_balance(
    p: BalanceProblem, ph_guess: NDArray | None = None, ionic_guess: NDArray | None = None
) -> BalanceState:
    """Solve every stream's charge balance with self-consistent ionic strength; see
    ``_solve_slice``. Batches above SLICE_STREAMS are solved slice by slice."""
    n = p.n_streams
    if n <= SLICE_STREAMS:
        return _solve_slice(p, ph_guess, ionic_guess)
    out: dict[str, NDArray] = {}
    for start in range(0, n, SLICE_STREAMS):
        idx = slice(start, min(n, start + SLICE_STREAMS))
        part = _solve_slice(
            p.take(idx),
            None if ph_guess is None else ph_guess[idx],
            None if ionic_guess is None else ionic_guess[idx],
        )
        for f in BalanceState.__dataclass_fields__:
            a = getattr(part, f)
            if f not in out:
                out[f] = np.empty((n,) + a.shape[1:], dtype=a.dtype)
            out[f][idx] = a
    return BalanceState(**out)


def _solve_slice(
    p: BalanceProblem, ph_guess: NDArray | None = None, ionic_guess: NDArray | None = None
) -> BalanceState:
    """Solve every stream's charge balance with self-consistent ionic strength.

    One loop does both: a bracketed Newton step on G(pH) with the activity coefficients
    of the current ionic strength, then the ionic strength of the new state; the bracket
    is widened by the root's possible shift when γ changes. The new ionic strength is
    the one implied at the current pH carried to the new pH to first order (dI/dpH at
    fixed γ): the pair then converges about as fast as the ionic strength would with the
    pH solved exactly at each step (3 fewer steps on average than taking the value at
    the current pH). A stream not converged after JOINT_STEPS falls back to nested
    iteration — ionic strength held until its pH has converged, then updated to the
    value implied at that pH — which cannot cycle. A stream's result is stored when it
    converges; the working arrays (all streams started together, so the step count is
    the loop's) drop converged streams once they are a sizeable part of them.
    """
    n = p.n_streams
    code = _single_code(p.activity_code)
    full = _LoopKernel(p, code)
    ph = np.full(n, 7.0) if ph_guess is None else np.clip(ph_guess, PH_MIN + 0.01, PH_MAX - 0.01)
    ideal = p.activity_code == IDEAL
    ionic = np.where(ideal, 0.0, 0.5 * p.strong_ionic if ionic_guess is None else ionic_guess)
    iters = np.full(n, MAX_NEWTON)
    done = np.zeros(n, dtype=bool)
    # Working set: rows of the batch, their pH, ionic strength, bracket, and kernel.
    rows, k, is_ideal = np.arange(n), full, ideal
    x, cur = ph.copy(), ionic.copy()
    lo, hi = np.full(n, PH_MIN), np.full(n, PH_MAX)
    live = np.ones(n, dtype=bool)
    n_live = n
    last = np.full(n, np.inf)
    # One floating-point error state for the loop (entering one costs as much as a few
    # small array operations): a division by dG = 0 or a NaN/inf step is handled as data.
    with np.errstate(divide="ignore", invalid="ignore"):
        for it in range(MAX_NEWTON):
            if n_live < COMPACT_BELOW * rows.size:
                keep = np.flatnonzero(live)
                rows, k, is_ideal = rows[keep], k.take(keep), is_ideal[keep]
                x, cur, lo, hi, last = x[keep], cur[keep], lo[keep], hi[keep], last[keep]
                live = np.ones(keep.size, dtype=bool)
            g, dg, new_i, di_dph, _, _, _, _ = k.evaluate(x, cur)
            above = g > 0
            lo = np.where(above, x, lo)
            hi = np.where(above, hi, x)
            step = -g / dg
            newton = x + step
            # Strict: a Newton step of ~0 from a bracket end is converged, not a reason to bisect.
            bad = ~np.isfinite(newton) | (newton < lo) | (newton > hi)
            # Also bisect a Newton step that turns back by more than half the step before: on
            # an S-shaped G, Newton can cycle between two points inside a bracket that the
            # ionic-strength updates keep from shrinking. Near the root steps shrink fast.
            # (0 × inf on the first step is no turn.)
            bad |= (step * last < 0) & (np.abs(step) > np.maximum(0.5 * np.abs(last), 1e-6))
            nxt = np.where(bad, 0.5 * (lo + hi), newton)
            last = nxt - x
            i_ok = is_ideal | (np.abs(new_i - cur) <= I_ATOL + I_RTOL * new_i)
            small = np.abs(step) < PH_TOL  # False for NaN and ±inf
            width = hi - lo
            conv = live & i_ok & (small | (width < PH_TOL))
            if conv.any():
                c = np.flatnonzero(conv)
                r = rows[c]
                ph[r] = np.where(small[c] & ~bad[c], newton[c], x[c])
                # A converged stream keeps the ionic strength its pH was solved with, so the
                # reported residual is that of the pH returned.
                ionic[r] = cur[c]
                iters[r] = it + 1
                done[r] = True
                live[c] = False
                n_live -= c.size
                if n_live == 0:
                    break
            if it < JOINT_STEPS:
                # The ionic strength at the next pH, to first order, kept within a factor 2
                # of the value at this pH (the pH step can be several units early on).
                update_i = ~i_ok
                i_next = np.minimum(np.maximum(new_i + di_dph * (nxt - x), 0.5 * new_i), 2.0 * new_i)
                i_next = np.where(np.isfinite(i_next), i_next, new_i)
            else:
                # Nested mode: hold I until the pH has settled for it.
                update_i = ~i_ok & ((np.abs(step) < 1e-7) | (width < 1e-7))
                i_next = new_i
            # The root moves with γ by about |Δlog γ| ≤ z²·A·|Δ√I| (z² ≤ 9 here, A < 0.61):
            # widen the bracket by a safe multiple of that, not more, so it still shrinks.
            shift = 10.0 * k.a_dh * np.abs(np.sqrt(i_next) - np.sqrt(cur)) + 1e-9
            if it >= JOINT_STEPS:
                shift += 1e-6
            margin = np.where(update_i, shift, 0.0)
            lo = np.maximum(PH_MIN, np.minimum(lo, nxt) - margin)
            hi = np.minimum(PH_MAX, np.maximum(hi, nxt) + margin)
            x = nxt
            cur = np.where(update_i, i_next, cur)
        else:
            ph[rows[live]] = x[live]
            ionic[rows[live]] = cur[live]
    _, _, ionic_actual, _, pos, neg, lh, loh = full.evaluate(ph, ionic, slope=False)
    f, scale = pos - neg, pos + neg
    lg = _log_gamma_species(p, code, ionic)
    status = np.full(n, OK)
    status[~done] = NOT_CONVERGED
    status[(ph <= PH_MIN + 1e-6) & (f < 0)] = BELOW_RANGE
    status[(ph >= PH_MAX - 1e-6) & (f > 0)] = ABOVE_RANGE
    status[(status == OK) & (ph <= PH_MIN + 1e-6)] = BELOW_RANGE
    status[(status == OK) & (ph >= PH_MAX - 1e-6)] = ABOVE_RANGE
    status[(status == OK) & (ionic_actual > HARD_LIMIT_MOL_KG)] = IONIC_STRENGTH
    status[(status == OK) & ~(np.isfinite(ph) & np.isfinite(ionic_actual) & np.isfinite(f))] = NOT_CONVERGED
    return BalanceState(
        ph=ph,
        ionic_strength=ionic_actual,
        log_gamma_species=lg,
        log_gamma_h=lh,
        log_gamma_oh=loh,
        residual=f,
        scale=scale,
        iterations=iters,
        status=status,
    )


def _log_gamma_species(p: BalanceProblem, code: int | None, ionic: NDArray) -> NDArray:
    """log10 γ of the system species (N, K, P), as ``BalanceKernel.log_gammas`` gives it
    (at most at GAMMA_IONIC_MAX, as in the loop)."""
    ionic = np.minimum(ionic, GAMMA_IONIC_MAX)
    if code == IDEAL:
        return np.zeros(p.charge.shape)
    if code == DAVIES:
        g = _davies(p.a_dh, ionic)
        return p.charge * p.charge * g[:, None, None]
    return gammas(p, ionic)[0]
