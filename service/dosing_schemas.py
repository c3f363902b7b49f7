"""Request and response schemas of POST /v1/dose, /v1/titration-curve and /v1/blend."""

from __future__ import annotations

from typing import Literal

from pydantic import BaseModel, ConfigDict, Field

from service.schemas import EquilibriumResponse, Stream

__all__ = [
    "CustomReagent",
    "ReagentRef",
    "DoseRequest",
    "Hazard",
    "DoseResponse",
    "TitrationRequest",
    "TitrationPoint",
    "EquivalencePoint",
    "TitrationResponse",
    "BlendPart",
    "BlendRequest",
    "BlendResponse",
]

_STRICT = ConfigDict(strict=True, extra="forbid", allow_inf_nan=False)
REAGENT_NAME_PATTERN = r"^[A-Za-z0-9][A-Za-z0-9()_+\-. ]{0,63}$"


class CustomReagent(BaseModel):
    """A reagent that is not in the catalogue, given by what it adds per mol."""

    model_config = _STRICT

    adds: dict[str, float] = Field(
        min_length=1,
        max_length=8,
        description="Strong ions or systems added per mol of active substance [mol/mol], e.g. {\"Na+\": 2, \"carbonate\": 1}.",
    )
    kind: Literal["acid", "base"] = Field(description="Whether the reagent lowers (`acid`) or raises (`base`) the pH.")
    formula: str | None = Field(default=None, max_length=64, description="Formula of the active substance (or give molar_mass_g_mol).")
    molar_mass_g_mol: float | None = Field(default=None, gt=0.0, le=5000.0, description="Formula mass [g/mol] (or give formula).")
    density_kg_l: float | None = Field(
        default=None, gt=0.5, le=3.0, description="Product density [kg/L]; given = a solution dosed by volume."
    )


class ReagentRef(BaseModel):
    """The reagent product: a catalogue name (GET /v1/reagents) or a custom definition."""

    model_config = _STRICT

    name: str = Field(pattern=REAGENT_NAME_PATTERN, description="Catalogue name, e.g. `NaOH`, or the name of the custom reagent.", examples=["NaOH"])
    strength_pct_w: float | None = Field(
        default=None, gt=0.0, le=100.0, description="Product strength [% w/w]; absent = the catalogue default."
    )
    purity_pct_w: float | None = Field(default=None, gt=0.0, le=100.0, description="Purity of a dry product in a slurry [% w/w].")
    custom: CustomReagent | None = Field(default=None, description="Definition of a reagent not in the catalogue.")


class DoseRequest(BaseModel):
    """How much of a reagent brings a stream to a pH setpoint."""

    model_config = ConfigDict(
        strict=True,
        extra="forbid",
        allow_inf_nan=False,
        json_schema_extra={
            "examples": [
                {
                    "stream": {
                        "temperature_c": 18.0,
                        "composition": [
                            {"name": "Na+", "value": 2.0, "unit": "mmol/L"},
                            {"name": "Cl-", "value": 3.0, "unit": "mmol/L"},
                            {"name": "carbonate", "value": 2.0, "unit": "mmol/L"},
                        ],
                    },
                    "reagent": {"name": "NaOH", "strength_pct_w": 25.0},
                    "setpoint_ph": 7.5,
                    "flow_m3_h": 120.0,
                }
            ]
        },
    )

    stream: Stream
    reagent: ReagentRef
    setpoint_ph: float = Field(ge=0.0, le=14.0, description="Target pH [-], 0 to 14.")
    flow_m3_h: float | None = Field(default=None, ge=0.0, le=1.0e6, description="Stream flow [m³/h]; gives L/h and kg/h of product.")


class Hazard(BaseModel):
    """A hazard flag computed from the chemistry at the final state."""

    code: str = Field(description="Stable code, e.g. `h2s_release`.")
    severity: Literal["info", "warning", "danger"]
    message: str
    value: float | None = Field(description="The computed value that triggered the flag [in `unit`].")
    threshold: float | None = Field(description="The threshold it is compared with [in `unit`].")
    unit: str
    source: str = Field(description="Source of the threshold, or `common practice`.")


class DoseResponse(BaseModel):
    """The dose to the setpoint, in product quantities, with gain and hazards."""

    reagent: str
    setpoint_ph: float = Field(description="Requested pH [-].")
    initial_ph: float = Field(description="pH of the stream before dosing [-].")
    final_ph: float = Field(description="pH of the dosed stream [-].")
    dose_mmol_l: float = Field(description="Dose of active substance [mmol/L of stream].")
    dose_mg_l: float = Field(description="Dose of pure active substance [mg/L of stream].")
    strength_pct_w: float = Field(description="Product strength used [% w/w].")
    purity_pct_w: float = Field(description="Purity used [% w/w].")
    density_kg_l: float | None = Field(description="Product density [kg/L] (null for solids and gases).")
    product_mg_l: float = Field(description="Product dose [mg/L of stream].")
    product_l_per_m3: float | None = Field(description="Product volume per stream volume [L/m³].")
    product_l_h: float | None = Field(description="Product flow [L/h] at `flow_m3_h`.")
    product_kg_h: float | None = Field(description="Product mass flow [kg/h] at `flow_m3_h`.")
    process_gain_ph_per_mmol_l: float = Field(description="dpH/d(dose) at the setpoint [pH per mmol/L].")
    process_gain_ph_per_l_h: float | None = Field(description="dpH/d(product flow) at the setpoint [pH per L/h].")
    reachable_min_ph: float = Field(description="Lowest pH this reagent can reach for this stream [-].")
    reachable_max_ph: float = Field(description="Highest pH this reagent can reach for this stream [-].")
    already_met: bool = Field(description="True when the stream is already on the setpoint side (zero dose).")
    final: EquilibriumResponse = Field(description="Equilibrium of the dosed stream.")
    hazards: list[Hazard]
    warnings: list[str]
    safety_note: str = Field(description="Always present: the result is advisory.")


class TitrationRequest(BaseModel):
    """pH and buffer capacity along increasing doses of a reagent."""

    model_config = _STRICT

    stream: Stream
    reagent: ReagentRef
    max_dose_mmol_l: float = Field(gt=0.0, le=1000.0, description="Largest dose [mmol/L], up to 1000.")
    points: int = Field(default=101, ge=2, le=1001, description="Number of equally spaced doses from 0, 2 to 1001.")


class TitrationPoint(BaseModel):
    """One point of the titration curve."""

    dose_mmol_l: float = Field(description="Dose of active substance [mmol/L].")
    ph: float = Field(description="pH at this dose [-].")
    buffer_capacity_mmol_l_per_ph: float = Field(description="Buffer capacity β [mmol/L per pH unit].")


class EquivalencePoint(BaseModel):
    """An equivalence point found on the curve."""

    dose_mmol_l: float = Field(description="Dose at the equivalence point [mmol/L].")
    ph: float = Field(description="pH at the equivalence point [-].")


class TitrationResponse(BaseModel):
    """The titration curve."""

    reagent: str
    points: list[TitrationPoint]
    equivalence_points: list[EquivalencePoint]
    hazards: list[Hazard] = Field(description="Hazards at the largest dose.")
    safety_note: str


class BlendPart(BaseModel):
    """One stream of a blend and its flow."""

    model_config = _STRICT

    flow_m3_h: float = Field(gt=0.0, le=1.0e6, description="Flow of this stream [m³/h].")
    stream: Stream


class BlendRequest(BaseModel):
    """Streams mixed by flow."""

    model_config = _STRICT

    streams: list[BlendPart] = Field(min_length=1, max_length=20, description="1 to 20 streams with their flows.")


class BlendResponse(BaseModel):
    """The mixture's composition and its equilibrium."""

    total_flow_m3_h: float = Field(description="Sum of the flows [m³/h].")
    composition: Stream = Field(description="The mixed stream as an analysis (amounts in mol/L); valid as a request stream.")
    result: EquilibriumResponse
    hazards: list[Hazard]
    warnings: list[str]
    safety_note: str
