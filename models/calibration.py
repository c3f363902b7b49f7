"""Closing an incomplete analysis at a measured pH.

Two unknowns can be fixed by a measured pH, together or alone:

- ``balance_on`` (Na+ or Cl-): the amount of that strong ion that closes the charge
  balance at the measured pH;
- ``alkalinity``: the carbonate total that gives the measured total alkalinity at the
  measured pH (titration with strong acid to a fixed end point, Standard Methods 2320 B;
  activity coefficients of the sample held through the titration).

Ionic strength is iterated to self-consistency with both unknowns.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
from numpy.typing import NDArray

from models.activity import IDEAL
from models.solver import (
    I_ATOL,
    I_RTOL,
    MAX_OUTER,
    BalanceProblem,
    balance,
    gammas,
    ionic_strength_of,
    species_state,
)

__all__ = ["close_at_ph"]


def close_at_ph(
    p: BalanceProblem,
    ph: NDArray[np.float64],
    *,
    balance_charge: NDArray[np.float64],
    alkalinity_eq_kg: NDArray[np.float64],
    carbonate_slot: NDArray[np.int_],
    endpoint_ph: float,
) -> tuple[BalanceProblem, NDArray, NDArray, NDArray, NDArray]:
    """Fix the unknowns of each stream at its measured ``ph``.

    ``balance_charge`` is +1 (Na+), −1 (Cl-) or 0 (no balancing ion) per stream;
    ``carbonate_slot`` is the slot whose total alkalinity decides, or −1.
    Returns (problem with the carbonate totals filled in and the balancing charge added
    to ``strong_charge``, added ion [mol/kg], carbonate total [mol/kg], ionic strength
    [mol/kg], converged).
    """
    n = ph.shape[0]
    rows = np.arange(n)
    has_alk = carbonate_slot >= 0
    slot = np.where(has_alk, carbonate_slot, 0)
    ionic = np.full(n, 0.0)
    added = np.zeros(n)
    carb = np.zeros(n)
    converged = np.zeros(n, dtype=bool)
    base = p
    work = p
    for _ in range(MAX_OUTER):
        lg, lh, loh = gammas(base, ionic)
        total = base.total.copy()
        if has_alk.any():
            # Alkalinity is linear in the carbonate total at fixed γ: A = A0 + C_T · dA.
            total[rows[has_alk], slot[has_alk]] = 0.0
            p0 = replace(base, total=total)
            f_s0, *_ = balance(p0, ph, lg, lh, loh)
            f_e0, *_ = balance(p0, np.full(n, endpoint_ph), lg, lh, loh)
            unit = np.zeros_like(total)
            unit[rows, slot] = 1.0
            p1 = replace(base, total=unit)
            m_s1 = species_state(p1, ph, lg, lh, loh)[0]
            m_e1 = species_state(p1, np.full(n, endpoint_ph), lg, lh, loh)[0]
            d_unit = ((m_e1 - m_s1) * base.charge).sum(axis=(1, 2))
            with np.errstate(divide="ignore", invalid="ignore"):
                c_t = (alkalinity_eq_kg - (f_e0 - f_s0)) / d_unit
            carb = np.where(converged, carb, np.where(has_alk, c_t, 0.0))
            total[rows[has_alk], slot[has_alk]] = np.maximum(carb[has_alk], 0.0)
        work = replace(base, total=total)
        f, _, _, m, m_h, m_oh = balance(work, ph, lg, lh, loh)
        with np.errstate(divide="ignore", invalid="ignore"):
            added_now = np.where(balance_charge != 0, -f / np.where(balance_charge == 0, 1.0, balance_charge), 0.0)
        # Converged rows keep their values: a stream's answer must not depend on its batch.
        added = np.where(converged, added, added_now)
        ionic_new = ionic_strength_of(work, m, m_h, m_oh) + 0.5 * np.abs(added) * balance_charge**2
        small = np.abs(ionic_new - ionic) <= I_ATOL + I_RTOL * ionic_new
        ionic = np.where(converged, ionic, ionic_new)
        converged = converged | small | (base.activity_code == IDEAL)
        if converged.all():
            break
    final = replace(
        work,
        strong_charge=work.strong_charge + balance_charge * added,
        strong_ionic=work.strong_ionic + balance_charge**2 * added,
    )
    return final, added, carb, ionic, converged
