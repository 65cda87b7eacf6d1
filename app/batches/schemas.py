"""Request and response bodies for larval batches and their exposure."""

from __future__ import annotations

from pydantic import AwareDatetime, BaseModel, ConfigDict, Field, model_validator

from app.sites.schemas import Name, Slug
from app.timefmt import UtcDatetime

MAX_LARVAE = 10**12  # a count above this is a typing slip (design default)


class BatchCreate(BaseModel):
    model_config = ConfigDict(extra="forbid", allow_inf_nan=False)

    id: Slug = Field(description="Slug used in URLs, unique within the site.")
    species: Name
    tank_id: str = Field(min_length=1, max_length=64)
    started_at: AwareDatetime = Field(description="Spawning or stocking, with a UTC offset.")
    ended_at: AwareDatetime | None = None
    count_start: int | None = Field(default=None, ge=0, le=MAX_LARVAE)
    count_end: int | None = Field(default=None, ge=0, le=MAX_LARVAE)
    notes: str | None = Field(default=None, max_length=4000)

    @model_validator(mode="after")
    def _check_times(self) -> BatchCreate:
        if self.ended_at is not None and self.ended_at <= self.started_at:
            raise ValueError(
                f"ended_at ({self.ended_at.isoformat()}) must be after started_at "
                f"({self.started_at.isoformat()})"
            )
        return self


class BatchPublic(BaseModel):
    id: str
    site_id: str
    species: str
    tank_id: str
    started_at: UtcDatetime
    ended_at: UtcDatetime | None
    count_start: int | None
    count_end: int | None
    notes: str | None
    created_at: UtcDatetime


class ExposureWindow(BaseModel):
    hours: float = Field(description="Length of the window.")
    hours_with_data: float
    hours_below_floor: float
    hours_below_1: float
    deficit_omega_hours: float = Field(
        description="Integral over time of (floor - omega) where omega is below the floor."
    )


class BatchExposure(BaseModel):
    batch_id: str
    tank_id: str
    species: str
    started_at: UtcDatetime
    ended_at: UtcDatetime = Field(description="The batch's end, or now while it runs.")
    running: bool
    omega_floor: float
    culture_temperature_c: float
    treatment_applied: bool = Field(
        description="Whether the tank's current treatment is applied to the predictions."
    )
    first_48h: ExposureWindow
    run: ExposureWindow
    minimum_omega: float | None
    method: str
    reference: str
    notes: list[str]
