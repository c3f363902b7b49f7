"""Request and response schemas of the equilibrium routes (pydantic v2).

Requests are strict (``strict=True``: no ``"1"`` for 1, no ``false`` for 0.0), reject
unknown fields and non-finite numbers, and carry every physical limit so the OpenAPI
document states exactly what is accepted. Units are part of each field's name or
description. Examples come from an invented site, the *Tamsworth Vale creamery*
(effluent equalisation tank) and the *Glenmarrow kraft mill* (bleach-plant filtrate).
"""

from __future__ import annotations

from typing import Annotated, Literal

from pydantic import BaseModel, ConfigDict, Field

from models.stream import ACTIVITY_MODELS, BALANCE_IONS
from models.thermo import CUSTOM_PKA_RANGE
from models.units import UNITS

from service.problems import Problem

__all__ = [
    "LIMITS",
    "ActivityModel",
    "Unit",
    "CompositionEntry",
    "CustomSystem",
    "Gas",
    "Stream",
    "BatchRequest",
    "Alkalinity",
    "Species",
    "SystemFractions",
    "Calibration",
    "ModelInfo",
    "EquilibriumResponse",
    "BatchItemOk",
    "BatchItemError",
    "BatchResponse",
]

#: Limits stated in the schema (and the README).
LIMITS: dict[str, float] = {
    "temperature_c_min": 0.0,
    "temperature_c_max": 100.0,
    "value_max": 1.0e6,
    "composition_max": 40,
    "custom_systems_max": 8,
    "pka_min": CUSTOM_PKA_RANGE[0],
    "pka_max": CUSTOM_PKA_RANGE[1],
    "pka_steps_max": 6,
    "top_charge_min": -6,
    "top_charge_max": 6,
    "delta_h_abs_max_kj_mol": 200.0,
    "co2_partial_pressure_atm_max": 10.0,
    "measured_ph_min": 0.0,
    "measured_ph_max": 14.0,
}

ActivityModel = Literal[ACTIVITY_MODELS]  # type: ignore[valid-type]
Unit = Literal[UNITS]  # type: ignore[valid-type]
BalanceIon = Literal[BALANCE_IONS]  # type: ignore[valid-type]

_STRICT = ConfigDict(strict=True, extra="forbid", allow_inf_nan=False)
NAME_PATTERN = r"^[A-Za-z][A-Za-z0-9_]{0,31}[+-]?$"
CUSTOM_NAME_PATTERN = r"^[A-Za-z][A-Za-z0-9_]{0,31}$"

_CREAMERY_EXAMPLE: dict[str, object] = {
    "temperature_c": 31.5,
    "activity_model": "davies",
    "composition": [
        {"name": "Na+", "value": 410.0, "unit": "mg/L"},
        {"name": "K+", "value": 96.0, "unit": "mg/L"},
        {"name": "Ca2+", "value": 58.0, "unit": "mg/L"},
        {"name": "Cl-", "value": 520.0, "unit": "mg/L"},
        {"name": "carbonate", "value": 6.4, "unit": "mmol/L"},
        {"name": "phosphate", "value": 18.0, "unit": "mg/L as P"},
        {"name": "ammonia", "value": 22.0, "unit": "mg/L as N"},
        {"name": "lactate", "value": 3.1, "unit": "mmol/L"},
        {"name": "whey_acid", "value": 0.4, "unit": "mmol/L"},
    ],
    "custom_systems": [
        {"name": "whey_acid", "pka": [4.2, 5.6], "top_charge": 0, "delta_h_kj_mol": [0.0, 0.0]}
    ],
    "gas": None,
    "measured_ph": None,
    "balance_on": None,
}
_FILTRATE_EXAMPLE: dict[str, object] = {
    "temperature_c": 62.0,
    "activity_model": "extended_debye_huckel",
    "composition": [
        {"name": "Na+", "value": 14.2, "unit": "mmol/L"},
        {"name": "Cl-", "value": 9.8, "unit": "mmol/L"},
        {"name": "sulfate", "value": 310.0, "unit": "mg/L"},
        {"name": "carbonate", "value": 1.1, "unit": "mmol/L"},
        {"name": "oxalate", "value": 0.35, "unit": "mmol/L"},
    ],
    "custom_systems": [],
    "gas": {"co2_partial_pressure_atm": 0.00042},
    "measured_ph": 3.4,
    "balance_on": "Na+",
}


class CompositionEntry(BaseModel):
    """One line of the analysis: a strong ion, an acid–base system total, or alkalinity."""

    model_config = _STRICT

    name: str = Field(
        pattern=NAME_PATTERN,
        max_length=33,
        description=(
            "A strong ion as formula plus charge (`Na+`, `K+`, `Ca2+`, `Mg2+`, `Cl-`, `NO3-`, "
            "`Br-`); a built-in acid–base system (`carbonate`, `phosphate`, `ammonia`, … — "
            "GET /v1/systems lists them), whose value is the total over all protonation "
            "states; `alkalinity` (total, to the carbonic-acid end point); or the name of a "
            "system declared in `custom_systems`. Each name at most once per stream."
        ),
        examples=["Na+", "carbonate", "ammonia"],
    )
    value: float = Field(
        ge=0.0,
        le=LIMITS["value_max"],
        description=(
            "Amount in `unit` [unit]; 0 to 1e6. Physically impossible totals (beyond any "
            "activity model) are refused by the solver with a 422."
        ),
        examples=[46.0],
    )
    unit: Unit = Field(  # type: ignore[valid-type]
        description=(
            "Unit of `value`. `mg/L` of a system is mg/L of its mass-basis formula "
            "(GET /v1/systems: `mass_formula`); `mg/L as N|P|C|S` counts that element; "
            "`mg/L as CaCO3` is the equivalent basis (1 meq/L = 50.04 mg/L as CaCO3)."
        ),
        examples=["mg/L"],
    )


class CustomSystem(BaseModel):
    """A user-declared n-protic acid–base system."""

    model_config = _STRICT

    name: str = Field(
        pattern=CUSTOM_NAME_PATTERN,
        max_length=32,
        description="Name used in `composition`; letters, digits, `_`; not a built-in name.",
        examples=["whey_acid"],
    )
    pka: list[Annotated[float, Field(ge=LIMITS["pka_min"], le=LIMITS["pka_max"])]] = Field(
        min_length=1,
        max_length=int(LIMITS["pka_steps_max"]),
        description=(
            "pKa at 25 °C and I = 0 [-], most acidic first (strictly increasing), each in "
            f"[{LIMITS['pka_min']:g}, {LIMITS['pka_max']:g}], 1 to 6 steps."
        ),
        examples=[[4.2, 5.6]],
    )
    top_charge: int = Field(
        default=0,
        ge=int(LIMITS["top_charge_min"]),
        le=int(LIMITS["top_charge_max"]),
        description="Charge of the most protonated species [-]: 0 for an uncharged acid, +1 for an ammonium-like base.",
    )
    delta_h_kj_mol: list[
        Annotated[
            float,
            Field(ge=-LIMITS["delta_h_abs_max_kj_mol"], le=LIMITS["delta_h_abs_max_kj_mol"]),
        ]
    ] | None = Field(
        default=None,
        max_length=int(LIMITS["pka_steps_max"]),
        description=(
            "Standard reaction enthalpy of each step [kJ/mol] for van 't Hoff temperature "
            "correction, same length as `pka`; absent = 0 (no temperature dependence)."
        ),
    )


class Gas(BaseModel):
    """The gas phase the stream is open to."""

    model_config = _STRICT

    co2_partial_pressure_atm: float = Field(
        ge=0.0,
        le=LIMITS["co2_partial_pressure_atm_max"],
        description="CO2 partial pressure [atm], 0 to 10; ambient air is about 0.00042 atm. The carbonate total then follows from it.",
        examples=[0.00042],
    )


class Stream(BaseModel):
    """A process stream's analysis, as sampled."""

    model_config = ConfigDict(
        strict=True,
        extra="forbid",
        allow_inf_nan=False,
        json_schema_extra={"examples": [_CREAMERY_EXAMPLE, _FILTRATE_EXAMPLE]},
    )

    temperature_c: float = Field(
        default=25.0,
        ge=LIMITS["temperature_c_min"],
        le=LIMITS["temperature_c_max"],
        description="Stream temperature [°C], 0 to 100.",
    )
    activity_model: ActivityModel = Field(  # type: ignore[valid-type]
        default="davies",
        description="Activity-coefficient model: `ideal`, `davies` (default) or `extended_debye_huckel`.",
    )
    composition: list[CompositionEntry] = Field(
        min_length=1,
        max_length=int(LIMITS["composition_max"]),
        description="The analysis, 1 to 40 entries, each name at most once.",
    )
    custom_systems: list[CustomSystem] = Field(
        default_factory=list,
        max_length=int(LIMITS["custom_systems_max"]),
        description="User-declared acid–base systems (at most 8), referenced by name in `composition`.",
    )
    gas: Gas | None = Field(
        default=None,
        description="Present = the stream is open to a gas phase at this CO2 partial pressure.",
    )
    measured_ph: float | None = Field(
        default=None,
        ge=LIMITS["measured_ph_min"],
        le=LIMITS["measured_ph_max"],
        description=(
            "Measured pH [-], 0 to 14: with `balance_on` the analysis is calibrated to it; "
            "with an `alkalinity` entry it fixes the carbonate total."
        ),
    )
    balance_on: BalanceIon | None = Field(  # type: ignore[valid-type]
        default=None,
        description="Strong ion (`Na+` or `Cl-`) added until the charge balance closes at `measured_ph`; needs `measured_ph`.",
    )


class BatchRequest(BaseModel):
    """Many streams solved in one call."""

    model_config = ConfigDict(strict=True, extra="forbid")

    items: list[Stream] = Field(
        min_length=1,
        description=(
            "The streams, at least one and at most the server's cap (default 10 000, "
            "`PROTOLYTE_BATCH_MAX_ITEMS`; more is a 422 naming `/items`). A schema-invalid item rejects "
            "the request with a 422 naming `/items/<i>/…`; an item the solver cannot "
            "compute fails alone, in place."
        ),
    )


# --------------------------------------------------------------------------- responses


class Alkalinity(BaseModel):
    """Alkalinity by titration with strong acid to fixed end points (Standard Methods 2320 B)."""

    total_meq_l: float = Field(description="Total alkalinity [meq/L].")
    total_mg_l_as_caco3: float = Field(description="Total alkalinity [mg/L as CaCO3].")
    total_endpoint_ph: float = Field(description="End-point pH of the total alkalinity [-].")
    phenolphthalein_meq_l: float = Field(description="Phenolphthalein alkalinity [meq/L].")
    phenolphthalein_mg_l_as_caco3: float = Field(description="Phenolphthalein alkalinity [mg/L as CaCO3].")
    phenolphthalein_endpoint_ph: float = Field(description="End-point pH of the phenolphthalein alkalinity [-].")


class Species(BaseModel):
    """One dissolved species at equilibrium."""

    name: str = Field(description="Species name, e.g. `HCO3-`, `CO3-2`, `NH4+`.")
    charge: int = Field(description="Charge [-].")
    mol_l: float = Field(description="Concentration [mol/L].")
    activity: float = Field(description="Activity [-] (molal standard state).")
    activity_coefficient: float = Field(description="Activity coefficient [-].")


class SystemFractions(BaseModel):
    """An acid–base system's total and the fraction in each protonation state."""

    name: str = Field(description="System name.")
    total_mol_l: float = Field(description="Total over all protonation states [mol/L].")
    fractions: dict[str, float] = Field(description="Fraction of the total in each species [-]; they sum to 1.")
    open_to_gas: bool = Field(description="True when the total followed a gas partial pressure.")


class Calibration(BaseModel):
    """What calibration to a measured pH (or alkalinity) decided."""

    balance_on: str | None = Field(description="Strong ion added to close the balance, or null.")
    added_mol_l: float = Field(description="Amount of `balance_on` added [mol/L].")
    carbonate_from_alkalinity_mol_l: float | None = Field(
        description="Carbonate total fixed by alkalinity and measured pH [mol/L], or null."
    )


class ModelInfo(BaseModel):
    """Which data and model produced the numbers."""

    database_version: str = Field(description="Version of the thermodynamic database.")
    activity_model: str = Field(description="Activity model used.")
    solver_iterations: int = Field(description="Iterations the pH solve took [-].")
    service_version: str = Field(description="Version of the Protolyte service.")


class EquilibriumResponse(BaseModel):
    """Equilibrium state of one stream."""

    ph: float = Field(description="pH on the activity scale, −log10 a(H+) [-].", examples=[8.21])
    temperature_c: float = Field(description="Temperature of the result [°C].")
    ionic_strength_mol_l: float = Field(description="Ionic strength [mol/L].")
    buffer_capacity_mmol_l_per_ph: float = Field(description="Buffer capacity β = dC_base/dpH [mmol/L per pH unit].")
    alkalinity: Alkalinity
    species: list[Species] = Field(description="Every dissolved species.")
    systems: list[SystemFractions] = Field(description="Every acid–base system in the stream.")
    charge_balance_residual_mol_l: float = Field(description="Remaining charge imbalance [mol/L] (≈ 0).")
    calcite_saturation_index: float | None = Field(
        default=None, description="Calcite saturation index log10(IAP/Ksp) [-], when Ca2+ and carbonate are present."
    )
    langelier_index: float | None = Field(
        default=None, description="Langelier saturation index [pH units] (Standard Methods 2330), when defined."
    )
    conductivity_estimate_us_cm: float | None = Field(
        default=None, description="Estimated conductivity at 25 °C [µS/cm] (an estimate)."
    )
    calibration: Calibration | None = Field(default=None, description="Calibration to a measured pH, if asked.")
    warnings: list[str] = Field(description="Cautions about this result (model validity, extrapolation, …).")
    model: ModelInfo


class BatchItemOk(BaseModel):
    """A batch item that was solved."""

    ok: Literal[True] = Field(description="Always true for a solved item.")
    result: EquilibriumResponse


class BatchItemError(BaseModel):
    """A batch item that could not be computed; the others are unaffected."""

    ok: Literal[False] = Field(description="Always false for a failed item.")
    error: Problem


class BatchResponse(BaseModel):
    """Per-item results, in request order."""

    results: list[BatchItemOk | BatchItemError] = Field(description="One entry per request item, same order.")
    succeeded: int = Field(description="Number of items solved.")
    failed: int = Field(description="Number of items that failed.")
