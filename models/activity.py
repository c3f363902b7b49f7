"""Single-ion activity coefficients on the molal scale.

Models (names listed once in ``models.stream.ACTIVITY_MODELS``):

- ``ideal``: log γ = 0.
- ``davies``: log γ = −A z² (√I / (1 + √I) − 0.3 I), Davies (1962) "Ion Association",
  with the 0.3 constant (the 1938 paper used 0.2).
- ``extended_debye_huckel``: log γ = −A z² √I / (1 + B å √I), ion-size parameters å
  from Kielland (1937) J. Am. Chem. Soc. 59, 1675 (in the thermodynamic data file).

A [(kg/mol)^½] and B [Å⁻¹ (kg/mol)^½] follow temperature through the dielectric
constant and density of water (``models.water``). Neutral species get γ = 1.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

from models.stream import ACTIVITY_MODELS

__all__ = ["MODEL_CODES", "VALIDITY_LIMIT_MOL_KG", "HARD_LIMIT_MOL_KG", "model_code", "log_gamma"]

#: Integer code per activity model, for per-stream arrays in a batch.
MODEL_CODES: dict[str, int] = {name: code for code, name in enumerate(ACTIVITY_MODELS)}
IDEAL, DAVIES, EXTENDED_DH = (MODEL_CODES[m] for m in ACTIVITY_MODELS)

#: Ionic strength [mol/kg] above which a model's results get a warning. Common practice,
#: no single source: Davies to about 0.5, extended Debye–Hückel to about 0.1; an ideal
#: solution is off by more than 3 % in γ(z = 1) above about 0.001–0.005.
VALIDITY_LIMIT_MOL_KG: dict[str, float] = {
    "ideal": 0.005,
    "davies": 0.5,
    "extended_debye_huckel": 0.1,
}
#: Above this ionic strength [mol/kg] no model here is meaningful: the solve is refused.
HARD_LIMIT_MOL_KG = 3.0

DAVIES_LINEAR_TERM = 0.3


def model_code(name: str) -> int:
    """Integer code of an activity model name; ValueError for an unknown name."""
    try:
        return MODEL_CODES[name]
    except KeyError:
        raise ValueError(
            f"unknown activity model {name!r}; use one of {', '.join(ACTIVITY_MODELS)}"
        ) from None


def log_gamma(
    charge: NDArray[np.float64],
    ion_size_angstrom: NDArray[np.float64],
    ionic_strength: NDArray[np.float64],
    a_dh: NDArray[np.float64],
    b_dh: NDArray[np.float64],
    code: NDArray[np.int_],
) -> NDArray[np.float64]:
    """log10 γ [-] of species with ``charge`` [-] and size [Å] in streams of ionic
    strength [mol/kg]; per-stream arrays (N,) broadcast over trailing species axes."""
    extra = charge.ndim - ionic_strength.ndim

    def per_stream(x: NDArray) -> NDArray:
        return x.reshape(x.shape + (1,) * extra)

    sqrt_i = per_stream(np.sqrt(ionic_strength))
    a = per_stream(a_dh)
    c = per_stream(code)
    z2 = charge * charge
    out = np.zeros(np.broadcast_shapes(charge.shape, sqrt_i.shape))
    if np.any(code == DAVIES):
        davies = sqrt_i / (1.0 + sqrt_i) - DAVIES_LINEAR_TERM * sqrt_i * sqrt_i
        out = np.where(c == DAVIES, -a * z2 * davies, out)
    if np.any(code == EXTENDED_DH):
        edh = sqrt_i / (1.0 + per_stream(b_dh) * ion_size_angstrom * sqrt_i)
        out = np.where(c == EXTENDED_DH, -a * z2 * edh, out)
    return out
