"""Request and response bodies for sites, stations, tanks and devices.

Create, update and public schemas are separate: create bodies carry defaults, update bodies
only what is sent (``exclude_unset``), public bodies what is stored. Update fields default to
None without allowing an explicit null (pydantic does not validate defaults), so ``null`` on a
required field is refused instead of erasing it.
"""

from __future__ import annotations

import datetime as dt
import functools
import re
import zoneinfo
from typing import Annotated, Any, Literal

from pydantic import AfterValidator, BaseModel, ConfigDict, Field, model_validator

from app.sites.models import SLUG_LENGTH

SLUG_RE = re.compile(r"[a-z0-9](?:[a-z0-9_-]*[a-z0-9])?")
CARBONIC_CONSTANTS = ("lueker2000", "millero2010")
STATION_ROLES = ("intake", "treated", "tank")
TANK_STAGES = ("broodstock", "larvae", "setting", "nursery")
# The chemicals the dose calculator knows (chemistry.CHEMICALS).
TREATMENT_CHEMICALS = ("sodium_carbonate", "sodium_bicarbonate", "sodium_hydroxide")

# Validation ranges. Each is wide enough for any hatchery water and narrow enough to catch
# a unit mistake (mg/L for umol/kg, Fahrenheit for Celsius, litres for cubic metres).
XCO2_RANGE_PPM = (100.0, 5000.0)  # pre-industrial air is 280 ppm; indoor air can exceed 2000
ALKALINITY_RANGE_UMOL_KG = (100.0, 5000.0)  # open-ocean seawater is about 2300 (common practice)
ALKALINITY_UNCERTAINTY_MAX = 500.0
LINE_SLOPE_RANGE = (0.0, 200.0)  # umol/kg per salinity unit; seawater's TA/S is about 66
LINE_INTERCEPT_RANGE = (-5000.0, 5000.0)  # umol/kg
PH_UNCERTAINTY_RANGE = (0.0, 0.5)  # a glass electrode is about 0.05 (common practice)
VOLUME_RANGE_L = (0.0, 1.0e7)  # exclusive lower bound
# Seawater freezes near -2 degC (common practice); no bivalve culture is run above 45 degC.
CULTURE_TEMPERATURE_RANGE_C = (-2.0, 45.0)
OMEGA_RANGE = (0.0, 10.0)  # exclusive lower bound
# Design maximum of this package for a tank's standing treatment: 100 mg/L of any of the three
# chemicals adds at least 1190 umol/kg of alkalinity (sodium bicarbonate) and up to 2500
# (sodium hydroxide), beyond the 1000 umol/kg one dose may add (chemistry.dosing); a value
# above it is a typing or unit mistake (500 for 5.00, g for mg), not a treatment.
MAX_TREATMENT_DOSE_MG_PER_L = 100.0


def _check_slug(value: str) -> str:
    if not (1 <= len(value) <= SLUG_LENGTH and SLUG_RE.fullmatch(value)):
        raise ValueError(
            f"must be 1 to {SLUG_LENGTH} characters of lowercase letters, digits, '-' or '_', "
            f"starting and ending with a letter or digit; got {value!r}"
        )
    return value


@functools.cache
def _known_timezones() -> frozenset[str]:
    return frozenset(zoneinfo.available_timezones())


def _check_timezone(value: str) -> str:
    if value not in _known_timezones():
        raise ValueError(
            f"must be an IANA time zone name such as 'America/Vancouver' or 'Europe/Lisbon'; "
            f"got {value!r}"
        )
    return value


Slug = Annotated[str, AfterValidator(_check_slug)]
TimeZoneName = Annotated[str, AfterValidator(_check_timezone)]
Name = Annotated[str, Field(min_length=1, max_length=200)]


class _Body(BaseModel):
    model_config = ConfigDict(extra="forbid", allow_inf_nan=False)


# --- sites -----------------------------------------------------------------------------


class SiteCreate(_Body):
    id: Slug = Field(description="Slug used in URLs, unique.")
    name: Name
    timezone: TimeZoneName = Field(
        description="IANA time zone of the site, e.g. 'Pacific/Auckland'."
    )
    carbonic_constants: Literal["lueker2000", "millero2010"] = Field(
        default="lueker2000",
        description="Carbonic acid constants: 'lueker2000' for seawater, 'millero2010' for "
        "estuarine water of low salinity.",
    )
    atmospheric_xco2_ppm: float = Field(
        default=420.0,
        ge=XCO2_RANGE_PPM[0],
        le=XCO2_RANGE_PPM[1],
        description="CO2 mole fraction of the air the water is aerated with, ppm.",
    )
    daily_summary_hour: int = Field(
        default=7, ge=0, le=23, description="Site-local hour of the daily summary mail."
    )


class SiteUpdate(_Body):
    name: Name = None  # type: ignore[assignment]
    timezone: TimeZoneName = None  # type: ignore[assignment]
    carbonic_constants: Literal["lueker2000", "millero2010"] = None  # type: ignore[assignment]
    atmospheric_xco2_ppm: float = Field(default=None, ge=XCO2_RANGE_PPM[0], le=XCO2_RANGE_PPM[1])
    daily_summary_hour: int = Field(default=None, ge=0, le=23)


class SitePublic(BaseModel):
    model_config = ConfigDict(from_attributes=True)

    id: str
    name: str
    timezone: str
    carbonic_constants: str
    atmospheric_xco2_ppm: float
    daily_summary_hour: int
    created_at: dt.datetime
    updated_at: dt.datetime


# --- stations --------------------------------------------------------------------------


class AlkalinityFromReading(_Body):
    """Alkalinity only from the reading itself; readings without it are not derived."""

    mode: Literal["reading"]


class AlkalinityFixed(_Body):
    """One alkalinity for every reading without its own (e.g. a weekly titration)."""

    mode: Literal["fixed"]
    value: float = Field(
        ge=ALKALINITY_RANGE_UMOL_KG[0], le=ALKALINITY_RANGE_UMOL_KG[1], description="umol/kg"
    )
    uncertainty: float | None = Field(
        default=None,
        ge=0.0,
        le=ALKALINITY_UNCERTAINTY_MAX,
        description="Standard uncertainty, umol/kg.",
    )


class AlkalinitySalinityLine(_Body):
    """Alkalinity = slope * salinity + intercept, a line fitted to the site's water."""

    mode: Literal["salinity_line"]
    slope: float = Field(
        ge=LINE_SLOPE_RANGE[0], le=LINE_SLOPE_RANGE[1], description="umol/kg per unit salinity"
    )
    intercept: float = Field(
        ge=LINE_INTERCEPT_RANGE[0], le=LINE_INTERCEPT_RANGE[1], description="umol/kg"
    )
    residual_sd: float | None = Field(
        default=None,
        ge=0.0,
        le=ALKALINITY_UNCERTAINTY_MAX,
        description="Residual SD of the fit, umol/kg.",
    )


AlkalinityMode = Annotated[
    AlkalinityFromReading | AlkalinityFixed | AlkalinitySalinityLine,
    Field(discriminator="mode"),
]

QC_LIMITS_DESCRIPTION = (
    "Per-variable QC thresholds that differ from the defaults, e.g. "
    '{"ph": {"user_min": 7.4}}. Variables: temperature, salinity, ph, alkalinity. '
    "On update the given values are merged into the station's; null resets to the defaults. "
    "Responses show the limits in force."
)


class StationCreate(_Body):
    id: Slug
    name: Name
    role: Literal["intake", "treated", "tank"]
    alkalinity: AlkalinityMode = Field(
        default_factory=lambda: AlkalinityFromReading(mode="reading"),
        description="How alkalinity is found when a reading has none.",
    )
    ph_uncertainty: float = Field(
        default=0.05,
        ge=PH_UNCERTAINTY_RANGE[0],
        le=PH_UNCERTAINTY_RANGE[1],
        description="Standard uncertainty of the pH sensor (0.05: a glass electrode).",
    )
    qc_limits: dict[str, dict[str, Any]] = Field(
        default_factory=dict, description=QC_LIMITS_DESCRIPTION
    )


class StationUpdate(_Body):
    name: Name = None  # type: ignore[assignment]
    role: Literal["intake", "treated", "tank"] = None  # type: ignore[assignment]
    alkalinity: AlkalinityMode = None  # type: ignore[assignment]
    ph_uncertainty: float = Field(
        default=None, ge=PH_UNCERTAINTY_RANGE[0], le=PH_UNCERTAINTY_RANGE[1]
    )
    qc_limits: dict[str, dict[str, Any]] | None = Field(
        default=None, description=QC_LIMITS_DESCRIPTION
    )


class StationPublic(BaseModel):
    id: str
    site_id: str
    name: str
    role: str
    alkalinity: dict[str, Any]
    ph_uncertainty: float
    qc_limits: dict[str, dict[str, Any]]
    created_at: dt.datetime
    updated_at: dt.datetime


# --- tanks -----------------------------------------------------------------------------


class Treatment(_Body):
    chemical: Literal["sodium_carbonate", "sodium_bicarbonate", "sodium_hydroxide"]
    dose_mg_per_l: float = Field(
        ge=0.0,
        le=MAX_TREATMENT_DOSE_MG_PER_L,
        description=(
            "The tank's current standing dose, mg of the solid per litre, from 0 to "
            f"{MAX_TREATMENT_DOSE_MG_PER_L:g} (design maximum). Advice and alerts use the "
            "untreated water when this dose would take omega aragonite above 5 or pH total "
            "above 8.5."
        )
    )


OMEGA_FLOOR_DESCRIPTION = (
    "Aragonite saturation below which larvae are at risk; 1.5 after Waldbusser et al. (2015) "
    "and Ekstrom et al. (2015)."
)
OMEGA_TARGET_DESCRIPTION = "Aragonite saturation to buffer to; 3.0 is common hatchery practice."


class TankCreate(_Body):
    id: Slug
    name: Name
    source_station_id: Slug = Field(
        description="Station of the same site measuring this tank's supply."
    )
    stage: Literal["broodstock", "larvae", "setting", "nursery"]
    volume_l: float = Field(gt=VOLUME_RANGE_L[0], le=VOLUME_RANGE_L[1])
    culture_temperature_c: float = Field(
        ge=CULTURE_TEMPERATURE_RANGE_C[0], le=CULTURE_TEMPERATURE_RANGE_C[1]
    )
    omega_floor: float = Field(
        default=1.5, gt=OMEGA_RANGE[0], le=OMEGA_RANGE[1], description=OMEGA_FLOOR_DESCRIPTION
    )
    omega_target: float = Field(
        default=3.0, gt=OMEGA_RANGE[0], le=OMEGA_RANGE[1], description=OMEGA_TARGET_DESCRIPTION
    )
    treatment: Treatment | None = None

    @model_validator(mode="after")
    def _floor_below_target(self) -> TankCreate:
        check_floor_below_target(self.omega_floor, self.omega_target)
        return self


class TankUpdate(_Body):
    name: Name = None  # type: ignore[assignment]
    source_station_id: Slug = None  # type: ignore[assignment]
    stage: Literal["broodstock", "larvae", "setting", "nursery"] = None  # type: ignore[assignment]
    volume_l: float = Field(default=None, gt=VOLUME_RANGE_L[0], le=VOLUME_RANGE_L[1])
    culture_temperature_c: float = Field(
        default=None, ge=CULTURE_TEMPERATURE_RANGE_C[0], le=CULTURE_TEMPERATURE_RANGE_C[1]
    )
    omega_floor: float = Field(default=None, gt=OMEGA_RANGE[0], le=OMEGA_RANGE[1])
    omega_target: float = Field(default=None, gt=OMEGA_RANGE[0], le=OMEGA_RANGE[1])
    treatment: Treatment | None = Field(default=None, description="null clears the treatment.")


class TankPublic(BaseModel):
    id: str
    site_id: str
    name: str
    source_station_id: str
    stage: str
    volume_l: float
    culture_temperature_c: float
    omega_floor: float
    omega_target: float
    treatment: dict[str, Any] | None
    created_at: dt.datetime
    updated_at: dt.datetime


def check_floor_below_target(omega_floor: float, omega_target: float) -> None:
    if not omega_floor < omega_target:
        raise ValueError(f"omega_floor ({omega_floor}) must be below omega_target ({omega_target})")


# --- devices ---------------------------------------------------------------------------


class DeviceCreate(_Body):
    label: str = Field(default="", max_length=200, description="e.g. the sensor's serial number")


class DeviceCreated(BaseModel):
    id: str
    key: str = Field(description="The device's API key. It is shown only this once.")
