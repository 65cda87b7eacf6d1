"""The stateless carbonate-system calculation behind ``POST /chemistry/solve``.

An operator's bottle sample (or any water) in, the CO2 system out, in situ and
optionally carried to a tank temperature in a closed system, each value with its
standard uncertainty. The engine is ``chemistry.solve``; nothing is stored.
"""

from __future__ import annotations

import math
from typing import Literal

from pydantic import BaseModel, ConfigDict, Field, model_validator

from app.readings.schemas import READING_RANGES, PhScale

CALCULATION_CAUTION = (
    "Calculated values support, and do not replace, the operator's judgement, local "
    "regulations and licensed practice; a pH measured with a glass electrode on the NBS "
    "scale is uncertain by several hundredths in seawater, which dominates the uncertainty "
    "of the saturation state."
)

PAIR_FIELDS = ("ph", "alkalinity", "dic", "pco2")

#: Standard uncertainty of a glass electrode's NBS-scale pH in seawater when the caller
#: gives none: 0.05 (common practice; the same as a station's default ``ph_uncertainty``).
NBS_GLASS_ELECTRODE_U_PH = 0.05


class ChemistrySolveIn(BaseModel):
    """Temperature, salinity and exactly two of pH, alkalinity, DIC and pCO2."""

    model_config = ConfigDict(
        extra="forbid",
        json_schema_extra={
            "examples": [
                {
                    "temperature": 12.0,
                    "salinity": 31.0,
                    "ph": 7.78,
                    "ph_scale": "nbs",
                    "alkalinity": 2150,
                    "tank_temperature": 25.0,
                    "u_ph": 0.05,
                    "u_alkalinity": 10,
                }
            ]
        },
    )

    temperature: float = Field(ge=-2.0, le=45.0, allow_inf_nan=False, description="degC")
    salinity: float = Field(ge=0.0, le=50.0, allow_inf_nan=False, description="practical")
    ph: float | None = Field(default=None, ge=0.0, le=14.0, allow_inf_nan=False)
    ph_scale: PhScale = "total"
    alkalinity: float | None = Field(
        default=None, gt=0.0, le=10000.0, allow_inf_nan=False, description="umol/kg"
    )
    alkalinity_mg_l_caco3: float | None = Field(
        default=None,
        ge=READING_RANGES["alkalinity_mg_l_caco3"][0],
        le=READING_RANGES["alkalinity_mg_l_caco3"][1],
        allow_inf_nan=False,
        description="Alkalinity in mg/L as CaCO3, instead of alkalinity.",
    )
    dic: float | None = Field(
        default=None, gt=0.0, le=10000.0, allow_inf_nan=False, description="umol/kg"
    )
    pco2: float | None = Field(
        default=None, gt=0.0, le=100000.0, allow_inf_nan=False, description="uatm"
    )
    pressure: float = Field(
        default=0.0, ge=0.0, le=10000.0, allow_inf_nan=False, description="dbar"
    )
    phosphate: float = Field(
        default=0.0, ge=0.0, le=100.0, allow_inf_nan=False, description="umol/kg"
    )
    silicate: float = Field(
        default=0.0, ge=0.0, le=500.0, allow_inf_nan=False, description="umol/kg"
    )
    carbonic: Literal["lueker2000", "millero2010"] = "lueker2000"
    boron: Literal["lee2010", "uppstrom1974"] = "lee2010"
    tank_temperature: float | None = Field(
        default=None,
        ge=-2.0,
        le=45.0,
        allow_inf_nan=False,
        description="Also give the water carried to this temperature (closed system), degC.",
    )
    u_temperature: float = Field(default=0.0, ge=0.0, le=10.0, allow_inf_nan=False)
    u_salinity: float = Field(default=0.0, ge=0.0, le=10.0, allow_inf_nan=False)
    u_ph: float | None = Field(
        default=None,
        ge=0.0,
        le=1.0,
        allow_inf_nan=False,
        description=(
            "Standard uncertainty of pH. Not given: 0.05 on the NBS scale (a glass "
            "electrode, common practice), none on the other scales; the answer's "
            "uncertainty_basis says which was used."
        ),
    )
    u_alkalinity: float = Field(default=0.0, ge=0.0, le=1000.0, allow_inf_nan=False)
    u_dic: float = Field(default=0.0, ge=0.0, le=1000.0, allow_inf_nan=False)
    u_pco2: float = Field(default=0.0, ge=0.0, le=10000.0, allow_inf_nan=False)
    include_constant_uncertainty: bool = Field(
        default=True,
        description="Add the uncertainty of the equilibrium constants (Orr et al. 2018).",
    )

    @model_validator(mode="after")
    def _exactly_two(self) -> ChemistrySolveIn:
        if self.alkalinity is not None and self.alkalinity_mg_l_caco3 is not None:
            raise ValueError("give alkalinity or alkalinity_mg_l_caco3, not both")
        given = [
            name
            for name in PAIR_FIELDS
            if getattr(self, name) is not None
            or (name == "alkalinity" and self.alkalinity_mg_l_caco3 is not None)
        ]
        if len(given) != 2:
            raise ValueError(
                "give exactly two of ph, alkalinity (or alkalinity_mg_l_caco3), dic and pco2; "
                f"got {len(given)}: {', '.join(given) or 'none'}"
            )
        return self


class WaterState(BaseModel):
    """The CO2 system of the water at one temperature; ``uncertainty`` has the same keys."""

    temperature: float
    values: dict[str, float | None]
    uncertainty: dict[str, float | None]


class ChemistrySolveOut(BaseModel):
    in_situ: WaterState
    at_tank_temperature: WaterState | None
    alkalinity_umol_kg: float = Field(description="The alkalinity used, umol/kg.")
    warnings: list[str]
    uncertainty_basis: list[str] = Field(
        description="Which input uncertainties the uncertainties include, and which were assumed."
    )
    chemistry_version: str
    caution: str = CALCULATION_CAUTION


def _floats(mapping: dict[str, object]) -> dict[str, float | None]:
    out: dict[str, float | None] = {}
    for name, value in mapping.items():
        number = float(value)  # type: ignore[arg-type]
        out[name] = number if math.isfinite(number) else None
    return out


def ph_uncertainty_used(sample: ChemistrySolveIn) -> tuple[float, str | None]:
    """The pH uncertainty to propagate and a sentence saying how it was chosen."""
    if sample.ph is None:
        return 0.0, None
    if sample.u_ph is not None:
        return sample.u_ph, f"pH uncertainty {sample.u_ph:g} as given (u_ph)."
    if sample.ph_scale == "nbs":
        return NBS_GLASS_ELECTRODE_U_PH, (
            f"pH uncertainty {NBS_GLASS_ELECTRODE_U_PH:g} assumed: u_ph was not given and "
            "the pH is on the NBS scale (a glass electrode, common practice); send u_ph to "
            "use your own."
        )
    return 0.0, (
        f"No pH uncertainty included: u_ph was not given for pH on the {sample.ph_scale} "
        "scale; send u_ph to include it."
    )


def _uncertainty_basis(
    sample: ChemistrySolveIn, ph_sentence: str | None, alkalinity_given: bool
) -> list[str]:
    basis = [ph_sentence] if ph_sentence else []
    given = [
        f"{name} {value:g}"
        for name, value, applies in (
            ("u_temperature", sample.u_temperature, True),
            ("u_salinity", sample.u_salinity, True),
            ("u_alkalinity", sample.u_alkalinity, alkalinity_given),
            ("u_dic", sample.u_dic, sample.dic is not None),
            ("u_pco2", sample.u_pco2, sample.pco2 is not None),
        )
        if applies and value > 0
    ]
    basis.append(
        "Other input uncertainties as given: " + ", ".join(given) + "."
        if given
        else "No other input uncertainty was given; each counts as zero."
    )
    basis.append(
        "Uncertainty of the equilibrium constants included (Orr et al. 2018)."
        if sample.include_constant_uncertainty
        else "Uncertainty of the equilibrium constants left out (include_constant_uncertainty "
        "is false)."
    )
    return basis


def solve_sample(sample: ChemistrySolveIn) -> ChemistrySolveOut:
    """Solve the sample; raises ``chemistry.ChemistryInputError`` for inputs it refuses."""
    from chemistry import (
        CHEMISTRY_VERSION,
        ORR2018_CONSTANT_UNCERTAINTIES,
        alkalinity_from_mg_per_l_caco3,
        at_temperature,
        solve,
        standard_uncertainty,
    )

    alkalinity = sample.alkalinity
    if sample.alkalinity_mg_l_caco3 is not None:
        alkalinity = float(
            alkalinity_from_mg_per_l_caco3(
                sample.alkalinity_mg_l_caco3, sample.temperature, sample.salinity
            )
        )
    inputs = dict(
        temperature=sample.temperature,
        salinity=sample.salinity,
        ph=sample.ph,
        alkalinity=alkalinity,
        dic=sample.dic,
        pco2=sample.pco2,
        ph_scale=sample.ph_scale,
        pressure=sample.pressure,
        phosphate=sample.phosphate,
        silicate=sample.silicate,
        carbonic=sample.carbonic,
        boron=sample.boron,
    )
    u_ph, ph_sentence = ph_uncertainty_used(sample)
    uncertainties = dict(
        u_temperature=sample.u_temperature,
        u_salinity=sample.u_salinity,
        u_ph=u_ph,
        u_alkalinity=sample.u_alkalinity if alkalinity is not None else 0.0,
        u_dic=sample.u_dic if sample.dic is not None else 0.0,
        u_pco2=sample.u_pco2 if sample.pco2 is not None else 0.0,
        constant_uncertainties=(
            ORR2018_CONSTANT_UNCERTAINTIES if sample.include_constant_uncertainty else None
        ),
    )
    state = solve(**inputs)
    in_situ = WaterState(
        temperature=sample.temperature,
        values=_floats(state.as_dict()),
        uncertainty=_floats(standard_uncertainty(**inputs, **uncertainties)),
    )
    warnings = list(state.warnings)
    tank = None
    if sample.tank_temperature is not None:
        carried = at_temperature(state, sample.tank_temperature)
        tank = WaterState(
            temperature=sample.tank_temperature,
            values=_floats(carried.as_dict()),
            uncertainty=_floats(
                standard_uncertainty(
                    **inputs, **uncertainties, at_temperature=sample.tank_temperature
                )
            ),
        )
        warnings += [w for w in carried.warnings if w not in warnings]
    return ChemistrySolveOut(
        in_situ=in_situ,
        at_tank_temperature=tank,
        alkalinity_umol_kg=float(state.alkalinity),
        warnings=warnings,
        uncertainty_basis=_uncertainty_basis(sample, ph_sentence, alkalinity is not None),
        chemistry_version=CHEMISTRY_VERSION,
    )
