"""Fractional composition (alpha) of n-protic acid–base systems, in log space.

Species j of a system has lost j protons from its most protonated form. At activity
pH = −log10 a(H+) its amount relative to species 0 is

    m_j / m_0 = (γ_0 / γ_j) · 10^(j·pH − Σ_{i<j} pK_i)

so ``log_weight_j = j·pH − cum_pk_j − log γ_j`` (Henderson–Hasselbalch applied step by
step). Weights are shifted by their maximum before exponentiation: no overflow at any
pH or pK (a pK of 17 or 25 is fine), no 0/0, and the fractions sum to 1 to round-off.
Padded species (systems with fewer steps than the array) carry ``cum_pk = +inf`` and
get fraction exactly 0.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

__all__ = ["cumulative_pk", "log_weights", "fractions", "fractions_from_pka"]

LN10 = float(np.log(10.0))


def cumulative_pk(pk: ArrayLike) -> NDArray[np.float64]:
    """Cumulative pK sums [-], shape ``pk.shape[:-1] + (n + 1,)``, first entry 0.

    ``pk`` [-] is (…, n) with most acidic step first; NaN or +inf marks a padded step.
    """
    pk = np.asarray(pk, dtype=float)
    pk = np.where(np.isnan(pk), np.inf, pk)
    zero = np.zeros(pk.shape[:-1] + (1,))
    return np.concatenate([zero, np.cumsum(pk, axis=-1)], axis=-1)


def log_weights(
    ph: ArrayLike, cum_pk: ArrayLike, log_gamma: ArrayLike | float = 0.0
) -> NDArray[np.float64]:
    """log10 of each species' amount relative to the most protonated form [-].

    ``ph`` broadcasts against ``cum_pk[..., 0]``; ``log_gamma`` [-] is per species.
    """
    cum_pk = np.asarray(cum_pk, dtype=float)
    steps = np.arange(cum_pk.shape[-1], dtype=float)
    return np.asarray(ph, dtype=float)[..., None] * steps - cum_pk - log_gamma


def fractions(log_w: ArrayLike) -> NDArray[np.float64]:
    """Normalised fractions from log10 weights along the last axis [-]."""
    log_w = np.asarray(log_w, dtype=float)
    top = np.max(log_w, axis=-1, keepdims=True)
    w = np.exp(LN10 * (log_w - top))
    return w / np.sum(w, axis=-1, keepdims=True)


def fractions_from_pka(ph: ArrayLike, pka: ArrayLike) -> NDArray[np.float64]:
    """Ideal-solution fractions of an n-protic system at ``ph`` [-] for ``pka`` [-]."""
    return fractions(log_weights(ph, cumulative_pk(pka)))
