"""Request and response bodies for alert rules, alerts, notifications and tank advice."""

from __future__ import annotations

import datetime as dt
from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, EmailStr, Field, model_validator

Metric = Literal[
    "tank_omega_aragonite",
    "omega_aragonite",
    "ph_total",
    "pco2_uatm",
    "temperature_c",
    "salinity",
    "no_data",
    "qc_failed",
]
Direction = Literal["below", "above"]

# Metrics that carry a standard uncertainty, so a probability test makes sense.
PROBABILISTIC_METRICS = ("tank_omega_aragonite", "omega_aragonite")
# Allowed level ranges per metric (unit in the name); outside these a rule is a typo.
LEVEL_RANGES: dict[str, tuple[float, float, str]] = {
    "tank_omega_aragonite": (0.0, 10.0, "omega aragonite, dimensionless"),
    "omega_aragonite": (0.0, 10.0, "omega aragonite, dimensionless"),
    "ph_total": (6.0, 9.0, "pH, total scale"),
    "pco2_uatm": (0.0, 10000.0, "uatm"),
    "temperature_c": (-2.0, 45.0, "deg C"),
    "salinity": (0.0, 45.0, "practical salinity"),
    "no_data": (1.0, 10080.0, "minutes without a reading"),
    "qc_failed": (1.0, 9.0, "QARTOD flag; the alert holds while the flag is above the level"),
}
# For these metrics the rule has a natural direction and level when none is given.
DEFAULT_DIRECTION: dict[str, Direction] = {
    "tank_omega_aragonite": "below",
    "omega_aragonite": "below",
    "ph_total": "below",
    "pco2_uatm": "above",
    "no_data": "above",
    "qc_failed": "above",
}
# no_data: 30 minutes of silence (the default); qc_failed: flag above 3 (suspect),
# i.e. fail (4) or missing (9). Both clear at the same level: a fresh reading or a passing
# flag is a discrete event, so no hysteresis band is needed.
DEFAULT_LEVEL = {"no_data": 30.0, "qc_failed": 3.0}


class AlertRuleCreate(BaseModel):
    model_config = ConfigDict(extra="forbid")

    tank_id: str | None = Field(
        default=None,
        description="Watch this tank (for station metrics: the tank's source station).",
    )
    station_id: str | None = Field(default=None, description="Watch this station.")
    metric: Metric
    direction: Direction | None = Field(
        default=None, description="Alert when the value goes below or above the level."
    )
    level: float | None = Field(default=None, allow_inf_nan=False)
    clear_level: float | None = Field(
        default=None,
        allow_inf_nan=False,
        description="The alert clears only once the value is back past this level, on the "
        "safe side of `level` (hysteresis).",
    )
    hold_minutes: float = Field(default=0.0, ge=0.0, le=1440.0, allow_inf_nan=False)
    min_probability: float | None = Field(
        default=None,
        gt=0.0,
        le=1.0,
        description="Omega metrics only: raise only when the probability of being past "
        "the level reaches this.",
    )
    recipients: list[EmailStr] = Field(default_factory=list, max_length=50)
    repeat_minutes: float = Field(default=0.0, ge=0.0, le=10080.0, allow_inf_nan=False)
    enabled: bool = True

    @model_validator(mode="after")
    def _target(self) -> AlertRuleCreate:
        if (self.tank_id is None) == (self.station_id is None):
            raise ValueError("give exactly one of tank_id or station_id")
        if self.metric == "tank_omega_aragonite" and self.tank_id is None:
            raise ValueError("metric 'tank_omega_aragonite' needs a tank_id")
        return self


class AlertRuleUpdate(BaseModel):
    model_config = ConfigDict(extra="forbid")

    direction: Direction | None = None
    level: float | None = Field(default=None, allow_inf_nan=False)
    clear_level: float | None = Field(default=None, allow_inf_nan=False)
    hold_minutes: float | None = Field(default=None, ge=0.0, le=1440.0, allow_inf_nan=False)
    min_probability: float | None = Field(default=None, gt=0.0, le=1.0)
    recipients: list[EmailStr] | None = Field(default=None, max_length=50)
    repeat_minutes: float | None = Field(default=None, ge=0.0, le=10080.0, allow_inf_nan=False)
    enabled: bool | None = None


class AlertRulePublic(BaseModel):
    id: int
    site_id: str
    tank_id: str | None
    station_id: str
    metric: str
    direction: str
    level: float
    clear_level: float
    hold_minutes: float
    min_probability: float | None
    recipients: list[str]
    repeat_minutes: float
    enabled: bool
    origin: str
    state: str = Field(description="watching, pending, active or acknowledged")
    created_at: dt.datetime
    updated_at: dt.datetime


class AlertPublic(BaseModel):
    id: int
    rule_id: int
    site_id: str
    tank_id: str | None
    station_id: str
    metric: str
    direction: str
    level: float
    clear_level: float
    state: str = Field(description="pending, active, acknowledged, cleared or lapsed")
    since: dt.datetime
    raised_at: dt.datetime | None
    acknowledged_at: dt.datetime | None
    acknowledged_by: str | None
    closed_at: dt.datetime | None
    closed_reason: str | None
    first_value: float | None
    worst_value: float | None
    last_value: float | None
    last_value_uncertainty: float | None
    last_probability: float | None
    last_value_at: dt.datetime | None
    caution: str


class NotificationPublic(BaseModel):
    model_config = ConfigDict(from_attributes=True)

    id: int
    alert_id: int | None
    kind: str
    recipients: list[str]
    subject: str
    body_text: str
    message_id: str
    status: str
    attempts: int
    next_attempt_at: dt.datetime
    sent_at: dt.datetime | None
    last_error: str | None
    created_at: dt.datetime


class TankAdvicePublic(BaseModel):
    """Advice for one tank; see app.alerts.advice.tank_advice for the parts."""

    site_id: str
    tank_id: str
    station_id: str
    volume_l: float
    culture_temperature_c: float
    omega_floor: float
    omega_target: float
    source: str = Field(description="The source station's name, id and role.")
    reading: dict[str, Any] = Field(
        description="The reading used, with its age_minutes and stale (older than "
        "stale_after_minutes, the station's no-data window)."
    )
    in_tank: dict[str, Any] = Field(
        description="The water the larvae get: after the current treatment, or untreated when "
        "the tank has none or it is outside safe limits (see in_tank_basis)."
    )
    in_tank_basis: Literal[
        "after_current_treatment", "untreated_no_treatment", "untreated_treatment_outside_limits"
    ]
    untreated: dict[str, Any] = Field(description="The water before any treatment.")
    treatment: dict[str, Any] | None
    treatment_within_limits: bool | None
    after_treatment: dict[str, Any] | None
    dose: dict[str, Any] = Field(
        description="total_*: the dose from untreated water, which replaces the current "
        "treatment; additional_*: the dose on top of the current treatment (same chemical "
        "only, else additional_refused says why); text: the wording shown everywhere."
    )
    aeration: dict[str, Any]
    warnings: list[str]
    chemistry_version: str
    caution: str
