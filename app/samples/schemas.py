"""Request and response bodies for bottle samples, the alkalinity line and the pH check."""

from __future__ import annotations

import datetime as dt
from typing import Any, Literal

from pydantic import AwareDatetime, BaseModel, ConfigDict, Field, model_validator

from app.timefmt import UtcDatetime

# Validation ranges: wide enough for any hatchery water, narrow enough to catch a unit slip.
SALINITY_RANGE = (0.0, 50.0)  # practical salinity; the alkalinity fit's validity range
TEMPERATURE_RANGE_C = (-2.0, 45.0)  # seawater freezes near -2 degC (common practice)
ALKALINITY_RANGE_UMOL_KG = (100.0, 5000.0)  # as for a station's fixed alkalinity
DIC_RANGE_UMOL_KG = (100.0, 5000.0)  # seawater DIC is about 2000 umol/kg (common practice)
PH_RANGE = (6.0, 9.5)  # any pH seen in seawater culture (design default)
MAX_FUTURE = dt.timedelta(minutes=10)  # clock skew allowed, as for readings


class _Body(BaseModel):
    model_config = ConfigDict(extra="forbid", allow_inf_nan=False)


class LabSampleCreate(_Body):
    collected_at: AwareDatetime = Field(
        description="When the bottle was filled, with a UTC offset."
    )
    salinity: float = Field(ge=SALINITY_RANGE[0], le=SALINITY_RANGE[1])
    temperature_c: float = Field(
        ge=TEMPERATURE_RANGE_C[0],
        le=TEMPERATURE_RANGE_C[1],
        description="degC at which the sample's pH was measured (the water's temperature at "
        "collection if no pH was measured).",
    )
    alkalinity_umol_kg: float | None = Field(
        default=None, ge=ALKALINITY_RANGE_UMOL_KG[0], le=ALKALINITY_RANGE_UMOL_KG[1]
    )
    dic_umol_kg: float | None = Field(
        default=None, ge=DIC_RANGE_UMOL_KG[0], le=DIC_RANGE_UMOL_KG[1]
    )
    ph: float | None = Field(default=None, ge=PH_RANGE[0], le=PH_RANGE[1])
    ph_scale: Literal["total", "seawater", "free", "nbs"] | None = Field(
        default=None, description="Scale of `ph`; total when `ph` is given without one."
    )
    method: str | None = Field(default=None, max_length=200)
    notes: str | None = Field(default=None, max_length=4000)

    @model_validator(mode="after")
    def _check(self) -> LabSampleCreate:
        if self.ph_scale is not None and self.ph is None:
            raise ValueError("ph_scale was given without ph; send ph too, or leave ph_scale out")
        if self.ph is not None and self.ph_scale is None:
            self.ph_scale = "total"
        if self.alkalinity_umol_kg is None and self.dic_umol_kg is None and self.ph is None:
            raise ValueError(
                "a sample needs at least one of alkalinity_umol_kg, dic_umol_kg or ph"
            )
        now = dt.datetime.now(dt.UTC)
        if self.collected_at > now + MAX_FUTURE:
            raise ValueError(
                f"collected_at {self.collected_at.isoformat()} is in the future; "
                f"it may be at most {int(MAX_FUTURE.total_seconds() // 60)} minutes ahead"
            )
        return self


class LabSamplePublic(BaseModel):
    id: int
    station_id: str
    collected_at: UtcDatetime
    salinity: float
    temperature_c: float
    alkalinity_umol_kg: float | None
    dic_umol_kg: float | None
    ph: float | None
    ph_scale: str | None
    method: str | None
    notes: str | None
    created_at: UtcDatetime


class AlkalinityLine(BaseModel):
    station_id: str
    slope: float = Field(description="umol/kg per unit of practical salinity")
    intercept: float = Field(description="umol/kg")
    residual_sd: float = Field(description="umol/kg")
    n: int
    salinity_min: float
    salinity_max: float
    current_alkalinity_mode: dict[str, Any]


class AlkalinityLineApplied(BaseModel):
    station_id: str
    alkalinity: dict[str, Any]
    line: AlkalinityLine


class PhOffset(BaseModel):
    sample_id: int
    collected_at: UtcDatetime
    parameters: list[str] = Field(description="The two carbonate parameters used.")
    sensor_temperature_c: float | None
    sample_ph_total: float | None = Field(
        description="The sample's pH (total scale) at the sensor's temperature."
    )
    sensor_ph_total: float | None = Field(description="Interpolated at collection time.")
    offset: float | None = Field(description="sample minus sensor, pH units")
    note: str | None = None


class PhCheck(BaseModel):
    station_id: str
    level: float
    offsets: list[PhOffset]
    trend_per_30_days: float | None = Field(
        description="Least-squares slope of the offsets against time, pH units per 30 days."
    )
    latest_offset: float | None
    drifting: bool
    alert_id: int | None
    caution: str
