"""Properties of liquid water at 0.101325 MPa, vectorized over temperature.

All functions take ``temperature_c`` [°C] as a float or array and return an ndarray of the
same shape. Coefficients live in ``models/data/thermo.toml`` (sections ``[water.*]``):

* density: Kell (1975) J. Chem. Eng. Data 20, 97, 0–150 °C at 1 atm;
* dielectric constant: Malmberg & Maryott (1956) J. Res. NBS 56, 1, 0–100 °C;
* ionization constant: IAPWS R11-07 (Bandura & Lvov 2006, J. Phys. Chem. Ref. Data 35, 15);
* Debye–Hückel A and B (molal) from ε and ρ.
"""

from __future__ import annotations

from functools import cache
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

__all__ = [
    "KELVIN",
    "density_kg_l",
    "dielectric_constant",
    "pkw_r11_07",
    "pkw_molal",
    "debye_huckel_a",
    "debye_huckel_b",
]

#: 0 °C in kelvin [K].
KELVIN = 273.15


@cache
def _water() -> dict[str, Any]:
    """The ``[water]`` table of thermo.toml (lazy import: thermo imports this module)."""
    from models.thermo import read_database_file

    return read_database_file()["water"]


def _t(temperature_c: ArrayLike) -> NDArray[np.float64]:
    return np.asarray(temperature_c, dtype=np.float64)


def density_kg_l(temperature_c: ArrayLike) -> NDArray[np.float64]:
    """Density of liquid water at 1 atm [kg/L]; Kell (1975), 0–150 °C."""
    c = _water()["density"]
    t = _t(temperature_c)
    num = c["c0"] + t * (c["c1"] + t * (c["c2"] + t * (c["c3"] + t * (c["c4"] + t * c["c5"]))))
    return num / (1.0 + c["d1"] * t) / 1000.0


def dielectric_constant(temperature_c: ArrayLike) -> NDArray[np.float64]:
    """Relative permittivity of water [-]; Malmberg & Maryott (1956), 0–100 °C."""
    c = _water()["dielectric"]
    t = _t(temperature_c)
    return c["e0"] + t * (c["e1"] + t * (c["e2"] + t * c["e3"]))


def pkw_r11_07(temperature_k: ArrayLike, density_kg_m3: ArrayLike) -> NDArray[np.float64]:
    """pKw on the molal scale [-] from IAPWS R11-07 at temperature [K] and density [kg/m³]."""
    c = _water()["kw"]
    t = np.asarray(temperature_k, dtype=np.float64)
    rho = np.asarray(density_kg_m3, dtype=np.float64) / 1000.0  # g/cm³
    q = rho * np.exp(c["alpha0"] + c["alpha1"] / t + c["alpha2"] / t**2 * rho ** (2.0 / 3.0))
    pkw_g = c["gamma0"] + c["gamma1"] / t + c["gamma2"] / t**2 + c["gamma3"] / t**3
    bracket = np.log10(1.0 + q) - q / (q + 1.0) * rho * (
        c["beta0"] + c["beta1"] / t + c["beta2"] * rho
    )
    return -2.0 * c["n"] * bracket + pkw_g + 2.0 * np.log10(c["molar_mass_g_mol"] / 1000.0)


def pkw_molal(temperature_c: ArrayLike) -> NDArray[np.float64]:
    """pKw (molal) at 0.101325 MPa [-]: R11-07 with the Kell (1975) density."""
    t = _t(temperature_c)
    return pkw_r11_07(t + KELVIN, density_kg_l(t) * 1000.0)


def debye_huckel_a(temperature_c: ArrayLike) -> NDArray[np.float64]:
    """Debye–Hückel A, molal [(kg/mol)^0.5]: A = 1.82483e6 √ρ (εT)^-1.5, ρ in g/cm³."""
    t = _t(temperature_c)
    k = _water()["debye_huckel"]["a_const"]
    return k * np.sqrt(density_kg_l(t)) * (dielectric_constant(t) * (t + KELVIN)) ** -1.5


def debye_huckel_b(temperature_c: ArrayLike) -> NDArray[np.float64]:
    """Debye–Hückel B, molal [Å^-1 (kg/mol)^0.5]: B = 50.2916 √ρ (εT)^-0.5, ρ in g/cm³."""
    t = _t(temperature_c)
    k = _water()["debye_huckel"]["b_const"]
    return k * np.sqrt(density_kg_l(t)) * (dielectric_constant(t) * (t + KELVIN)) ** -0.5
