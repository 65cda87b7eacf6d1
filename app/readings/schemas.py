"""Request and response bodies of the readings and chemistry endpoints.

Posted readings are validated one by one (``validate_reading``) so that one bad item is
reported by its index while the good ones are stored; every message is a sentence that
names the field and the allowed range.
"""

from __future__ import annotations

import datetime as dt
import math
import re
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any, Literal

import numpy as np
from pydantic import (
    BaseModel,
    ConfigDict,
    Field,
    TypeAdapter,
    ValidationError,
    ValidationInfo,
    field_validator,
    model_validator,
)

PhScale = Literal["total", "seawater", "free", "nbs"]
PH_SCALES: tuple[str, ...] = ("total", "seawater", "free", "nbs")

MAX_READINGS_PER_REQUEST = 5000
# Sensor clocks drift; a reading a few minutes "ahead" is a clock, not a forgery.
MAX_FUTURE = dt.timedelta(minutes=10)

# The range a posted value may take at all (anything outside is not a measurement of
# hatchery water and is refused). Temperature, salinity and pH are the chemistry
# engine's input domain, so every accepted reading can be derived; narrower, per-station
# plausibility is the job of QC, which keeps the reading and flags it.
READING_RANGES: dict[str, tuple[float, float, str]] = {
    "temperature_c": (-2.0, 45.0, " degC"),
    "salinity": (0.0, 50.0, ""),
    "ph": (0.0, 14.0, ""),
    # Design default: from fresh-water-diluted to heavily dosed water, with margin.
    "alkalinity_umol_kg": (100.0, 10000.0, " umol/kg"),
    # The same span in the laboratory unit (1 mg/L as CaCO3 is about 19.5 umol/kg).
    "alkalinity_mg_l_caco3": (5.0, 500.0, " mg/L as CaCO3"),
}


def _range_sentence(name: str) -> str:
    low, high, unit = READING_RANGES[name]
    return f"{name} must be a finite number from {low:g} to {high:g}{unit}"


class ReadingIn(BaseModel):
    """One sensor reading as a device or a logger file gives it."""

    model_config = ConfigDict(
        extra="forbid",
        json_schema_extra={
            "examples": [
                {
                    "reading_id": "probe-7-000123",
                    "observed_at": "2026-06-01T05:00:00-07:00",
                    "temperature_c": 11.8,
                    "salinity": 31.2,
                    "ph": 7.71,
                    "ph_scale": "nbs",
                    "alkalinity_umol_kg": 2150,
                }
            ]
        },
    )

    reading_id: str | None = Field(
        default=None,
        min_length=1,
        max_length=128,
        description="The sensor's own id for this reading; a retry with the same id is a "
        "duplicate.",
    )
    observed_at: dt.datetime = Field(
        description="ISO 8601 time with a UTC offset, at most 10 minutes in the future."
    )
    temperature_c: float | None = Field(default=None, description="degC, -2 to 45.")
    salinity: float | None = Field(default=None, description="Practical salinity, 0 to 50.")
    ph: float | None = Field(default=None, description="pH on ph_scale, 0 to 14.")
    ph_scale: PhScale | None = Field(
        default=None, description="Scale of ph: total, seawater, free or nbs (glass electrode)."
    )
    alkalinity_umol_kg: float | None = Field(
        default=None, description="Total alkalinity, umol/kg, 100 to 10000."
    )
    alkalinity_mg_l_caco3: float | None = Field(
        default=None, description="Total alkalinity, mg/L as CaCO3, 5 to 500."
    )

    @field_validator("observed_at", mode="before")
    @classmethod
    def _text_time(cls, value: Any) -> Any:
        if not isinstance(value, str | dt.datetime):
            raise ValueError(
                "observed_at must be an ISO 8601 time with a UTC offset, "
                "e.g. 2026-06-01T05:00:00-07:00"
            )
        return value

    @field_validator("observed_at")
    @classmethod
    def _aware_and_not_ahead(cls, value: dt.datetime, info: ValidationInfo) -> dt.datetime:
        if value.tzinfo is None or value.utcoffset() is None:
            raise ValueError(
                "observed_at has no UTC offset; send e.g. 2026-06-01T05:00:00-07:00 or "
                "2026-06-01T12:00:00Z"
            )
        now = (info.context or {}).get("now")
        if now is not None and value - now > MAX_FUTURE:
            raise ValueError(
                f"observed_at {value.isoformat()} is more than 10 minutes in the future "
                f"(server time {now.astimezone(dt.UTC).isoformat(timespec='seconds')}); "
                "check the sensor's clock"
            )
        return value.astimezone(dt.UTC)

    @field_validator(
        "temperature_c",
        "salinity",
        "ph",
        "alkalinity_umol_kg",
        "alkalinity_mg_l_caco3",
        mode="before",
    )
    @classmethod
    def _not_a_boolean(cls, value: Any, info: ValidationInfo) -> Any:
        # Lax float parsing would take true as 1.0: a sensor sending a flag where a
        # number belongs is a fault, not pH 1.
        if isinstance(value, bool):
            raise ValueError(f"{_range_sentence(info.field_name)}; got {str(value).lower()}")
        return value

    @field_validator(
        "temperature_c", "salinity", "ph", "alkalinity_umol_kg", "alkalinity_mg_l_caco3"
    )
    @classmethod
    def _finite_in_range(cls, value: float | None, info: ValidationInfo) -> float | None:
        if value is None:
            return None
        low, high, _unit = READING_RANGES[info.field_name]
        if not math.isfinite(value) or not low <= value <= high:
            raise ValueError(f"{_range_sentence(info.field_name)}; got {value}")
        return value

    @model_validator(mode="after")
    def _consistent(self) -> ReadingIn:
        if self.alkalinity_umol_kg is not None and self.alkalinity_mg_l_caco3 is not None:
            raise ValueError("give alkalinity_umol_kg or alkalinity_mg_l_caco3, not both")
        if self.ph is not None and self.ph_scale is None:
            raise ValueError(f"ph_scale is required with ph; one of {', '.join(PH_SCALES)}")
        if self.temperature_c is None and self.salinity is None and self.ph is None:
            raise ValueError("a reading needs at least one of temperature_c, salinity or ph")
        if self.alkalinity_mg_l_caco3 is not None and (
            self.temperature_c is None or self.salinity is None
        ):
            raise ValueError(
                "alkalinity_mg_l_caco3 needs temperature_c and salinity to convert to umol/kg"
            )
        return self


def _sentence(error: dict[str, Any]) -> str:
    location = ".".join(str(part) for part in error.get("loc", ()))
    message = str(error.get("msg", "invalid value"))
    if message.startswith("Value error, "):
        # Our own validators already name the field.
        return message.removeprefix("Value error, ")
    if error.get("type") == "extra_forbidden":
        return f"{location} is not a reading field"
    if error.get("type") == "missing":
        return f"{location} is required"
    if location in READING_RANGES:
        return f"{_range_sentence(location)}; {message[0].lower()}{message[1:]}"
    if location == "ph_scale":
        return f"ph_scale must be one of {', '.join(PH_SCALES)}"
    return f"{location}: {message}" if location else message


def validate_reading(item: Any, *, now: dt.datetime) -> ReadingIn | list[str]:
    """The validated reading, or the list of sentences saying what is wrong with it."""
    if not isinstance(item, dict):
        return ["each reading must be a JSON object"]
    try:
        return ReadingIn.model_validate(item, context={"now": now})
    except ValidationError as error:
        return [_sentence(e) for e in error.errors()]


_READING_LIST = TypeAdapter(list[ReadingIn])

_READING_FIELDS = frozenset(ReadingIn.model_fields)
_NUMBER_FIELDS = ("temperature_c", "salinity", "ph", "alkalinity_umol_kg", "alkalinity_mg_l_caco3")
# The usual shape of a device's time: ISO 8601 with seconds, up to microseconds and an
# offset (ASCII digits only: a regex \d would take other scripts' digits).
_PLAIN_TIME = re.compile(
    r"[0-9]{4}-[0-9]{2}-[0-9]{2}T[0-9]{2}:[0-9]{2}:[0-9]{2}(?:\.[0-9]{1,6})?"
    r"(?:Z|[+-][0-9]{2}:[0-9]{2})"
)


@dataclass(slots=True)
class CheckedReading:
    """A reading that passed every check of ``ReadingIn``, with the same values.

    Made by ``validate_readings`` for the usual item (a JSON object of numbers in range
    and a plain ISO time), about ten times cheaper than the model; the fields and their
    meaning are those of ``ReadingIn``.
    """

    reading_id: str | None
    observed_at: dt.datetime
    temperature_c: float | None
    salinity: float | None
    ph: float | None
    ph_scale: str | None
    alkalinity_umol_kg: float | None
    alkalinity_mg_l_caco3: float | None


_NUMBER_TYPES = frozenset({float, int, type(None)})


def _number_column(
    column: list[Any], low: float, high: float
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """A number field of every item: (values with NaN where absent, present, usable).

    Usable: absent, or a JSON number (int or float, not bool) that is finite and within
    [low, high]. Everything else (bool, text, NaN, a huge int) is left to the model.
    """
    present = np.array([v is not None for v in column], dtype=bool)
    values: np.ndarray | None = None
    if set(map(type, column)) <= _NUMBER_TYPES:
        try:
            values = np.array(column, dtype=float)  # None becomes NaN
        except OverflowError:  # an int too large for a double
            values = None
    if values is None:
        # A float as it is; an int only within the range; anything else NaN (unusable).
        values = np.array(
            [
                v if type(v) is float else v if type(v) is int and low <= v <= high else np.nan
                for v in column
            ],
            dtype=float,
        )
    in_range = (values >= low) & (values <= high)  # NaN and infinities fail both
    return values, present, in_range | ~present


def _plainly_valid(items: Sequence[Any], now: dt.datetime) -> list[CheckedReading | None]:
    """Each item as a ``CheckedReading`` when it plainly passes ``ReadingIn``, else None.

    Only the unambiguous cases pass here: a dict of known fields; numbers that are
    JSON numbers (int or float, not bool) and finite within ``READING_RANGES``; a
    reading_id of 1 to 128 characters; ph_scale one of ``PH_SCALES``; observed_at an
    aware datetime or a plain ISO 8601 text with an offset, at most ``MAX_FUTURE``
    ahead of ``now``; and the model's consistency rules. Anything else (including
    values pydantic would coerce, such as numbers in strings) is None and goes through
    the model, which says what is wrong in its own sentences. Checked a field at a time
    over all items: a Python statement per value and field costs more than the model.
    """
    usable = np.array(
        [type(item) is dict and item.keys() <= _READING_FIELDS for item in items], dtype=bool
    )
    rows = [item if ok else {} for item, ok in zip(items, usable.tolist(), strict=True)]
    numbers: dict[str, list[float | None]] = {}
    present: dict[str, np.ndarray] = {}
    for name in _NUMBER_FIELDS:
        low, high, _unit = READING_RANGES[name]
        values, present[name], ok = _number_column([row.get(name) for row in rows], low, high)
        usable &= ok
        numbers[name] = np.where(present[name], values, None).tolist()

    reading_ids = [row.get("reading_id") for row in rows]
    usable &= np.array(
        [v is None or (type(v) is str and 1 <= len(v) <= 128) for v in reading_ids], dtype=bool
    )
    scales = [row.get("ph_scale") for row in rows]
    usable &= np.array(
        [v is None or (type(v) is str and v in PH_SCALES) for v in scales], dtype=bool
    )
    has_scale = np.array([v is not None for v in scales], dtype=bool)
    # The model's consistency rules, as in ReadingIn._consistent.
    usable &= ~(present["alkalinity_umol_kg"] & present["alkalinity_mg_l_caco3"])
    usable &= ~(present["ph"] & ~has_scale)
    usable &= present["temperature_c"] | present["salinity"] | present["ph"]
    usable &= ~present["alkalinity_mg_l_caco3"] | (present["temperature_c"] & present["salinity"])

    horizon = now + MAX_FUTURE
    out: list[CheckedReading | None] = [None] * len(rows)
    for index in np.flatnonzero(usable).tolist():
        observed = rows[index].get("observed_at")
        try:
            if type(observed) is str and _PLAIN_TIME.fullmatch(observed):
                moment = dt.datetime.fromisoformat(observed)
            elif type(observed) is dt.datetime and observed.utcoffset() is not None:
                moment = observed
            else:
                continue
            if moment > horizon:
                continue
            moment = moment.astimezone(dt.UTC)
        except (ValueError, OverflowError):
            continue
        out[index] = CheckedReading(
            reading_ids[index],
            moment,
            numbers["temperature_c"][index],
            numbers["salinity"][index],
            numbers["ph"][index],
            scales[index],
            numbers["alkalinity_umol_kg"][index],
            numbers["alkalinity_mg_l_caco3"][index],
        )
    return out


def validate_readings(
    items: Sequence[Any], *, now: dt.datetime
) -> list[ReadingIn | CheckedReading | list[str]]:
    """``validate_reading`` of every item, in order.

    The usual item is checked column by column (``_plainly_valid``); the rest go
    through the model: as one list when they are all good (about half the cost of a
    validation per item), else item by item for each item's own sentences.
    """
    checked: list[ReadingIn | CheckedReading | list[str] | None] = list(_plainly_valid(items, now))
    rest = [index for index, reading in enumerate(checked) if reading is None]
    if rest:
        others = [items[index] for index in rest]
        try:
            validated: list[ReadingIn | list[str]] = list(
                _READING_LIST.validate_python(others, context={"now": now})
            )
        except ValidationError:
            validated = [validate_reading(item, now=now) for item in others]
        for index, reading in zip(rest, validated, strict=True):
            checked[index] = reading
    return checked  # type: ignore[return-value]


def readings_from_body(payload: Any) -> list[Any]:
    """The list of raw items in a posted body: ``{"readings": [...]}`` or one reading.

    Raises ``ValueError`` with a sentence when the body's shape is wrong as a whole.
    """
    if isinstance(payload, dict) and "readings" in payload:
        extra = sorted(set(payload) - {"readings"})
        if extra:
            raise ValueError(
                f"the body has fields {', '.join(extra)} beside readings; send "
                '{"readings": [...]} or one reading object'
            )
        items = payload["readings"]
        if not isinstance(items, list):
            raise ValueError("readings must be a list of reading objects")
    elif isinstance(payload, dict):
        items = [payload]
    else:
        raise ValueError('the body must be {"readings": [...]} or one reading object')
    if not 1 <= len(items) <= MAX_READINGS_PER_REQUEST:
        raise ValueError(
            f"readings must hold 1 to {MAX_READINGS_PER_REQUEST} items; got {len(items)}"
        )
    return items


class ReadingBatchIn(BaseModel):
    """The documented body of ``POST /readings`` (a single reading object is accepted too)."""

    readings: list[ReadingIn] = Field(min_length=1, max_length=MAX_READINGS_PER_REQUEST)


class RejectedItem(BaseModel):
    index: int = Field(description="Position of the item in the posted list, from 0.")
    errors: list[str]


class IngestSummary(BaseModel):
    accepted: int = Field(description="Readings stored by this request.")
    duplicates: int = Field(description="Readings already stored with the same values.")
    rejected: list[RejectedItem]


class IngestRefused(IngestSummary):
    """The 422 answer when no posted reading could be stored."""

    detail: str = Field(description="What is wrong, in sentences naming the fields.")


class ReadingPublic(BaseModel):
    """A stored reading: raw values, the chemistry derived from them and the QC flags."""

    model_config = ConfigDict(from_attributes=True)

    observed_at: dt.datetime
    received_at: dt.datetime
    source: str
    reading_id: str | None
    temperature_c: float | None
    salinity: float | None
    ph: float | None
    ph_scale: str | None
    alkalinity_input_umol_kg: float | None
    alkalinity_used_umol_kg: float | None
    alkalinity_source: str | None
    ph_total: float | None
    dic_umol_kg: float | None
    pco2_uatm: float | None
    carbonate_umol_kg: float | None
    omega_aragonite: float | None
    omega_calcite: float | None
    omega_aragonite_uncertainty: float | None
    qc_temperature: int
    qc_salinity: int
    qc_ph: int
    qc_alkalinity: int
    qc_derived: int
    qc_overall: int
    chemistry_version: str | None


def column_names(model: type[BaseModel]) -> Sequence[str]:
    return tuple(model.model_fields)
