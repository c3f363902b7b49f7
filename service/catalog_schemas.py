"""Response schemas of the catalogue routes: GET /v1/systems and GET /v1/reagents.

They mirror the core's ``as_public_dict()`` output; every constant carries its source.
"""

from __future__ import annotations

from pydantic import BaseModel, Field

__all__ = [
    "TemperatureFit",
    "Step",
    "SystemInfo",
    "StrongIonInfo",
    "Provenance",
    "HenryInfo",
    "CalciteInfo",
    "SystemsResponse",
    "DensityPoint",
    "SolubilityPoint",
    "ReagentInfo",
    "ReagentsResponse",
]


class TemperatureFit(BaseModel):
    """A published temperature function of a constant."""

    form: str = Field(description="`pk_abc`: pK = a/T + b + c·T; `logk_poly`: log10 K = a + b·T + c/T + d·log10 T + e/T² + f·T² + g·ln T (T in K).")
    coefficients: dict[str, float] = Field(description="Coefficients of the form, by letter.")
    tmin_c: float = Field(description="Lower end of the fit's stated range [°C].")
    tmax_c: float = Field(description="Upper end of the fit's stated range [°C].")
    source: str = Field(description="Where the fit is published.")


class Step(BaseModel):
    """One dissociation step of a system."""

    pka_25c: float = Field(description="pKa at 25 °C, I = 0, molal [-].")
    delta_h_kj_mol: float = Field(description="Standard reaction enthalpy [kJ/mol].")
    source: str = Field(description="Source of the constants.")
    provenance: str = Field(description="How the value was checked (READ, MEMORY, DERIVED …).")
    fit: TemperatureFit | None = Field(description="Temperature function, or null = van 't Hoff from ΔH.")


class SystemInfo(BaseModel):
    """A built-in acid–base system."""

    name: str = Field(description="Name used in a stream's composition.")
    species: list[str] = Field(description="Species, most protonated first.")
    charges: list[int] = Field(description="Charge of each species [-].")
    top_charge: int = Field(description="Charge of the most protonated species [-].")
    mass_formula: str = Field(description="Formula whose mass `mg/L` of this system refers to.")
    mass_basis_note: str = Field(description="The mass-basis convention in words.")
    as_atoms: dict[str, int] = Field(description="Atoms per formula unit usable with `mg/L as X`.")
    ion_size_angstrom: list[float] = Field(description="Ion-size parameter of each species [Å].")
    limiting_conductivity_s_cm2_mol: dict[str, float] = Field(description="λ° at 25 °C per unit charge [S cm²/mol].")
    notes: str = Field(description="Remarks.")
    steps: list[Step] = Field(description="Dissociation steps, most acidic first.")


class StrongIonInfo(BaseModel):
    """A strong (non-protolysing) ion."""

    name: str = Field(description="Name used in a stream's composition, e.g. `Na+`.")
    formula: str = Field(description="Chemical formula.")
    charge: int = Field(description="Charge [-].")
    ion_size_angstrom: float = Field(description="Ion-size parameter [Å].")
    limiting_conductivity_s_cm2_mol: float = Field(description="λ° at 25 °C per unit charge [S cm²/mol].")
    source: str = Field(description="Source of the values.")


class Provenance(BaseModel):
    """Source of a property of water."""

    source: str
    provenance: str


class HenryInfo(BaseModel):
    """A Henry's-law constant."""

    gas: str = Field(description="Gas, e.g. `CO2`.")
    kh_25c_mol_kg_atm: float = Field(description="KH at 25 °C [mol/(kg·atm)].")
    temperature_coefficient_k: float = Field(description="d ln KH / d(1/T) [K].")
    source: str
    provenance: str
    fit: TemperatureFit | None


class CalciteInfo(BaseModel):
    """Calcite solubility product."""

    pksp_25c: float = Field(description="pKsp of calcite at 25 °C [-].")
    fit: TemperatureFit | None


class SystemsResponse(BaseModel):
    """The thermodynamic database, with a source for each constant."""

    database_version: str
    standard_state: str = Field(description="Standard state and conventions of the constants.")
    systems: list[SystemInfo]
    strong_ions: list[StrongIonInfo]
    water: dict[str, Provenance] = Field(description="Sources of the properties of water (Kw, density, …).")
    henry: list[HenryInfo]
    calcite: CalciteInfo


class DensityPoint(BaseModel):
    """A density of a commercial product at a strength."""

    strength_pct_w: float = Field(description="Strength [% w/w].")
    density_kg_l: float = Field(description="Density [kg/L].")


class SolubilityPoint(BaseModel):
    """Solubility of a reagent at a temperature."""

    temperature_c: float = Field(description="Temperature [°C].")
    solubility: float = Field(description="Solubility [g per 100 g H2O].")


class ReagentInfo(BaseModel):
    """A built-in dosing reagent."""

    name: str = Field(description="Name used in dosing requests, e.g. `NaOH`.")
    display_name: str
    active_substance: str = Field(description="Formula of the active substance.")
    kind: str = Field(description="`base` or `acid`.")
    form: str = Field(description="`solution`, `slurry`, `solid` or `gas`.")
    adds_per_mol: dict[str, float] = Field(description="Strong ions or systems added per mol of active substance [mol/mol].")
    molar_mass_g_mol: float = Field(description="Formula mass of the active substance [g/mol].")
    atomic_weights: str = Field(description="Source of the atomic weights.")
    default_strength_pct_w: float = Field(description="Default commercial strength [% w/w].")
    strength_range_pct_w: list[float] = Field(description="Accepted strength range [% w/w].")
    strength_meaning: str
    purity_pct_w: float = Field(description="Purity of the dry product [% w/w].")
    default_density_kg_l: float | None = Field(description="Density at the default strength [kg/L].")
    default_molarity_mol_l: float | None = Field(description="Active substance per litre of product at the default strength [mol/L].")
    density_temperature_c: float | None = Field(description="Temperature of the density table [°C].")
    density_table: list[DensityPoint]
    solubility_g_per_100g_h2o: list[SolubilityPoint]
    hazards: list[str] = Field(description="Handling hazards of the product.")
    notes: list[str]
    sources: list[str] = Field(description="Sources of the numbers.")
    provenance: dict[str, str]
    custom: bool


class ReagentsResponse(BaseModel):
    """The reagent catalogue."""

    catalogue_version: str | None = Field(description="Version of the reagent catalogue.")
    reagents: list[ReagentInfo]
