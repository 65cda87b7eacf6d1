"""QARTOD-style real-time quality control of hatchery sensor readings.

Pure functions over numpy arrays: no database, no clock. Every test takes the
observation times (seconds since any fixed epoch, or ``datetime64``) and the values
of one variable, sorts nothing itself and returns one flag per value; ``run_qc``
puts a station's series into time order, runs every test per variable and combines
the results. Late (backfilled) readings are therefore tested against their
neighbours in time, not against the order in which they arrived.

The test definitions follow the U.S. IOOS QARTOD manuals, an open standard:

- [QARTOD-TS] U.S. Integrated Ocean Observing System, *Manual for Real-Time Quality
  Control of In-situ Temperature and Salinity Data* (version 2.1, 2020; edition
  from memory), tests 4 (gross range), 6 (spike), 7 (rate of change) and 8 (flat line).
- [QARTOD-pH] U.S. Integrated Ocean Observing System, *Manual for Real-Time Quality
  Control of pH Data Observations* (2019; edition from memory), the same four tests
  applied to pH.
- [IOC-FLAGS] UNESCO-IOC, *Ocean Data Standards Vol. 3: Recommendation for a Quality
  Flag Scheme for the Exchange of Oceanographic and Marine Meteorological Data*,
  IOC Manuals and Guides 54(3), 2013: the flag values 1, 2, 3, 4 and 9.

Where the service needs a rule the manuals leave to the operator (how flags of
several tests and variables combine, which neighbours a test may use, how far apart
two readings may be and still be compared) the choice is ours and is marked
"design default" beside it.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from enum import IntEnum
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray
from pydantic import BaseModel, ConfigDict, Field, ValidationError, model_validator

__all__ = [
    "DEFAULT_QC_LIMITS",
    "DEFAULT_QC_LIMIT_SOURCES",
    "FLAG_PRECEDENCE",
    "VARIABLES",
    "QcFlag",
    "QcLimits",
    "QcResult",
    "combine_flags",
    "flat_line_test",
    "gross_range_test",
    "limits_with_overrides",
    "rate_of_change_test",
    "run_qc",
    "spike_test",
    "variable_qc",
]


class QcFlag(IntEnum):
    """Primary flag values of [IOC-FLAGS], as used by both QARTOD manuals."""

    PASS = 1
    NOT_EVALUATED = 2
    SUSPECT = 3
    FAIL = 4
    MISSING = 9


# Design default: how flags combine when one answer is needed from several (tests of
# one variable, or variables feeding derived chemistry). A fail or suspect outranks
# everything, because it says something about the data that is present; a missing
# input outranks a pass (the combination lacks a value); "not evaluated" is the
# answer only when nothing was evaluated, so a reading whose spike test waits for its
# next neighbour still reports its gross-range pass.
FLAG_PRECEDENCE: tuple[QcFlag, ...] = (
    QcFlag.NOT_EVALUATED,
    QcFlag.PASS,
    QcFlag.MISSING,
    QcFlag.SUSPECT,
    QcFlag.FAIL,
)

VARIABLES: tuple[str, ...] = ("temperature", "salinity", "ph", "alkalinity")

FlagArray = NDArray[np.int8]


class QcLimits(BaseModel):
    """Thresholds of the four QARTOD tests for one variable, in the variable's units.

    Units: temperature degC (ITS-90), salinity on the practical salinity scale, pH on
    the scale the sensor reports, alkalinity umol/kg.
    """

    model_config = ConfigDict(extra="forbid", frozen=True)

    sensor_min: float = Field(description="Gross range: below this the sensor cannot read; fail.")
    sensor_max: float = Field(description="Gross range: above this the sensor cannot read; fail.")
    user_min: float = Field(description="Gross range: below this the value is suspect.")
    user_max: float = Field(description="Gross range: above this the value is suspect.")
    spike_suspect: float = Field(gt=0, description="Spike height above which a value is suspect.")
    spike_fail: float = Field(gt=0, description="Spike height above which a value fails.")
    rate_of_change_deviations: float = Field(
        default=3.0, gt=0, description="Rate of change: allowed step in standard deviations."
    )
    rate_of_change_window_hours: float = Field(
        default=25.0, gt=0, le=24 * 31, description="Rate of change: hours of history for the SD."
    )
    rate_of_change_min_points: int = Field(
        default=10, ge=2, description="Rate of change: readings needed in the window to test."
    )
    rate_of_change_min_step: float = Field(
        ge=0, description="Rate of change: a step this small is never suspect (sensor resolution)."
    )
    flat_line_suspect_count: int = Field(
        ge=2, le=1000, description="Flat line: repeats of the same value that make it suspect."
    )
    flat_line_fail_count: int = Field(
        ge=2, le=1000, description="Flat line: repeats of the same value that make it fail."
    )
    flat_line_tolerance: float = Field(
        gt=0, description="Flat line: values closer than this count as the same."
    )
    max_gap_minutes: float = Field(
        default=60.0,
        gt=0,
        le=24 * 60,
        description="Neighbours further apart than this are not compared (spike, rate of change).",
    )

    @model_validator(mode="after")
    def _ranges_are_ordered(self) -> QcLimits:
        if not self.sensor_min < self.sensor_max:
            raise ValueError(
                f"sensor_min ({self.sensor_min}) must be below sensor_max ({self.sensor_max})"
            )
        if not self.sensor_min <= self.user_min < self.user_max <= self.sensor_max:
            raise ValueError(
                f"user_min and user_max ({self.user_min}, {self.user_max}) must be ordered and lie "
                f"within the sensor range {self.sensor_min} to {self.sensor_max}"
            )
        if self.spike_suspect > self.spike_fail:
            raise ValueError(
                f"spike_suspect ({self.spike_suspect}) must not exceed "
                f"spike_fail ({self.spike_fail})"
            )
        if self.flat_line_suspect_count > self.flat_line_fail_count:
            raise ValueError(
                f"flat_line_suspect_count ({self.flat_line_suspect_count}) must not exceed "
                f"flat_line_fail_count ({self.flat_line_fail_count})"
            )
        return self


# Defaults for a temperate shellfish hatchery's intake and tank sensors logging every
# few minutes. The test definitions come from the manuals; the manuals leave the
# numbers to the operator, so each number says where it comes from.
DEFAULT_QC_LIMITS: Mapping[str, QcLimits] = {
    "temperature": QcLimits(
        sensor_min=-2.0,
        sensor_max=40.0,
        user_min=0.0,
        user_max=30.0,
        spike_suspect=1.0,
        spike_fail=3.0,
        rate_of_change_min_step=0.2,
        flat_line_suspect_count=12,
        flat_line_fail_count=36,
        flat_line_tolerance=0.0005,
    ),
    "salinity": QcLimits(
        sensor_min=0.0,
        sensor_max=42.0,
        user_min=15.0,
        user_max=37.0,
        spike_suspect=0.5,
        spike_fail=2.0,
        rate_of_change_min_step=0.1,
        flat_line_suspect_count=12,
        flat_line_fail_count=36,
        flat_line_tolerance=0.0005,
    ),
    "ph": QcLimits(
        sensor_min=6.0,
        sensor_max=9.5,
        user_min=7.2,
        user_max=8.6,
        spike_suspect=0.1,
        spike_fail=0.3,
        rate_of_change_min_step=0.02,
        flat_line_suspect_count=12,
        flat_line_fail_count=36,
        flat_line_tolerance=0.00005,
    ),
    "alkalinity": QcLimits(
        sensor_min=200.0,
        sensor_max=4000.0,
        user_min=1500.0,
        user_max=2800.0,
        spike_suspect=50.0,
        spike_fail=200.0,
        rate_of_change_min_step=20.0,
        flat_line_suspect_count=12,
        flat_line_fail_count=36,
        flat_line_tolerance=0.05,
        # Alkalinity analysers report every hour or so; a longer gap is still a neighbour.
        max_gap_minutes=6 * 60,
    ),
}

_RATE_SOURCE = (
    "[QARTOD-TS] test 7 and [QARTOD-pH] test 7: a step larger than N standard deviations of "
    "the previous 25 hours is suspect, N = 3 (the manuals' example; from memory)"
)
_FLAT_SOURCE = (
    "design default: 12 repeats (1 h at 5-minute logging) suspect, 36 (3 h) fail; the test "
    "itself is [QARTOD-TS] / [QARTOD-pH] test 8"
)
_GAP_SOURCE = "design default: neighbours more than an hour apart are not compared"

DEFAULT_QC_LIMIT_SOURCES: Mapping[str, Mapping[str, str]] = {
    "temperature": {
        "sensor_min": "design default: seawater freezes near -2 degC at oceanic salinity "
        "(common practice); typical hatchery thermistor span",
        "sensor_max": "design default: typical span of hatchery thermistors (common practice)",
        "user_min": "design default: temperate hatchery water stays above 0 degC",
        "user_max": "design default: above 30 degC temperate bivalve culture water is unusual",
        "spike_suspect": "design default: 1 degC away from the neighbours' mean",
        "spike_fail": "design default: 3 degC away from the neighbours' mean",
        "rate_of_change_deviations": _RATE_SOURCE,
        "rate_of_change_window_hours": _RATE_SOURCE,
        "rate_of_change_min_points": "design default: at least 10 readings for the SD",
        "rate_of_change_min_step": "design default: steps up to 0.2 degC are sensor noise",
        "flat_line_suspect_count": _FLAT_SOURCE,
        "flat_line_fail_count": _FLAT_SOURCE,
        "flat_line_tolerance": "design default: half of a 0.001 degC reporting resolution",
        "max_gap_minutes": _GAP_SOURCE,
    },
    "salinity": {
        "sensor_min": "design default: a conductivity cell reads 0 in fresh water",
        "sensor_max": "upper bound of the Practical Salinity Scale 1978 (UNESCO 1981)",
        "user_min": "design default: below 15 the intake is mostly fresh water",
        "user_max": "design default: coastal seawater rarely exceeds 37",
        "spike_suspect": "design default: 0.5 away from the neighbours' mean",
        "spike_fail": "design default: 2 away from the neighbours' mean",
        "rate_of_change_deviations": _RATE_SOURCE,
        "rate_of_change_window_hours": _RATE_SOURCE,
        "rate_of_change_min_points": "design default: at least 10 readings for the SD",
        "rate_of_change_min_step": "design default: steps up to 0.1 are sensor noise",
        "flat_line_suspect_count": _FLAT_SOURCE,
        "flat_line_fail_count": _FLAT_SOURCE,
        "flat_line_tolerance": "design default: half of a 0.001 reporting resolution",
        "max_gap_minutes": _GAP_SOURCE,
    },
    "ph": {
        "sensor_min": "design default: no seawater a hatchery draws reads below 6; a glass "
        "electrode reading there is out of the water or broken (common practice)",
        "sensor_max": "design default: seawater above pH 9.5 means a sensor fault or a "
        "dosing accident (common practice)",
        "user_min": "design default: upwelled coastal water reaches about 7.5; 7.2 leaves margin",
        "user_max": "design default: buffered tank water stays below about 8.4; 8.6 leaves margin",
        "spike_suspect": "design default: 0.1 pH away from the neighbours' mean",
        "spike_fail": "design default: 0.3 pH away from the neighbours' mean",
        "rate_of_change_deviations": _RATE_SOURCE,
        "rate_of_change_window_hours": _RATE_SOURCE,
        "rate_of_change_min_points": "design default: at least 10 readings for the SD",
        "rate_of_change_min_step": "design default: steps up to 0.02 pH are within a glass "
        "electrode's noise (common practice)",
        "flat_line_suspect_count": _FLAT_SOURCE,
        "flat_line_fail_count": _FLAT_SOURCE,
        "flat_line_tolerance": "design default: half of a 0.0001 pH reporting resolution",
        "max_gap_minutes": _GAP_SOURCE,
    },
    "alkalinity": {
        "sensor_min": "design default: below 200 umol/kg the sample is not seawater",
        "sensor_max": "design default: above 4000 umol/kg an analyser or dosing fault",
        "user_min": "design default: coastal water freshened by rain can fall to about 1500",
        "user_max": "design default: open-ocean water is near 2300; 2800 allows for dosing",
        "spike_suspect": "design default: 50 umol/kg away from the neighbours' mean",
        "spike_fail": "design default: 200 umol/kg away from the neighbours' mean",
        "rate_of_change_deviations": _RATE_SOURCE,
        "rate_of_change_window_hours": _RATE_SOURCE,
        "rate_of_change_min_points": "design default: at least 10 readings for the SD",
        "rate_of_change_min_step": "design default: steps up to 20 umol/kg are analyser noise",
        "flat_line_suspect_count": _FLAT_SOURCE,
        "flat_line_fail_count": _FLAT_SOURCE,
        "flat_line_tolerance": "design default: half of a 0.1 umol/kg reporting resolution",
        "max_gap_minutes": "design default: analysers report hourly; 6 h between neighbours",
    },
}


def limits_with_overrides(
    overrides: Mapping[str, Mapping[str, Any]] | None,
) -> dict[str, QcLimits]:
    """Merge a station's partial limits (``{"ph": {"user_min": 7.4}}``) onto the defaults.

    Raises ``ValueError`` naming the variable or field when an override is unknown or
    makes the limits inconsistent.
    """
    merged = dict(DEFAULT_QC_LIMITS)
    for variable, partial in (overrides or {}).items():
        if variable not in DEFAULT_QC_LIMITS:
            raise ValueError(
                f"qc_limits: unknown variable {variable!r}; allowed: {', '.join(VARIABLES)}"
            )
        if not isinstance(partial, Mapping):
            raise ValueError(f"qc_limits.{variable} must be an object of limit values")
        try:
            merged[variable] = QcLimits.model_validate(
                {**DEFAULT_QC_LIMITS[variable].model_dump(), **partial}
            )
        except ValidationError as error:
            details = "; ".join(
                f"{'.'.join(str(part) for part in e['loc']) or 'limits'}: {e['msg']}"
                for e in error.errors()
            )
            raise ValueError(f"qc_limits.{variable}: {details}") from None
    return merged


def _as_seconds(times: ArrayLike) -> NDArray[np.float64]:
    array = np.asarray(times)
    if np.issubdtype(array.dtype, np.datetime64):
        return (array - np.datetime64(0, "s")) / np.timedelta64(1, "s")
    return array.astype(np.float64)


def _previous_index(usable: NDArray[np.bool_]) -> NDArray[np.intp]:
    """Index of the nearest earlier usable element, -1 where there is none."""
    positions = np.where(usable, np.arange(usable.size), -1)
    last_up_to_here = np.maximum.accumulate(positions) if usable.size else positions
    previous = np.full(usable.size, -1, dtype=np.intp)
    previous[1:] = last_up_to_here[:-1]
    return previous


def _next_index(usable: NDArray[np.bool_]) -> NDArray[np.intp]:
    """Index of the nearest later usable element, ``size`` where there is none."""
    size = usable.size
    positions = np.where(usable, np.arange(size), size)
    first_from_here = np.minimum.accumulate(positions[::-1])[::-1] if size else positions
    following = np.full(size, size, dtype=np.intp)
    following[:-1] = first_from_here[1:]
    return following


def gross_range_test(
    values: ArrayLike,
    *,
    sensor_min: float,
    sensor_max: float,
    user_min: float | None = None,
    user_max: float | None = None,
) -> FlagArray:
    """Gross range test, [QARTOD-TS] and [QARTOD-pH] test 4.

    Fail when a value lies outside the sensor's span (``< sensor_min`` or
    ``> sensor_max``), suspect when it lies outside the operator's span, pass
    otherwise; the bounds themselves pass. Missing (NaN) values are flagged 9.
    """
    x = np.asarray(values, dtype=np.float64)
    flags = np.full(x.shape, QcFlag.PASS, dtype=np.int8)
    with np.errstate(invalid="ignore"):
        if user_min is not None:
            flags[x < user_min] = QcFlag.SUSPECT
        if user_max is not None:
            flags[x > user_max] = QcFlag.SUSPECT
        flags[(x < sensor_min) | (x > sensor_max)] = QcFlag.FAIL
    flags[~np.isfinite(x)] = QcFlag.MISSING
    return flags


def spike_test(
    times: ArrayLike,
    values: ArrayLike,
    *,
    suspect_threshold: float,
    fail_threshold: float,
    max_gap_s: float,
    usable: ArrayLike | None = None,
) -> FlagArray:
    """Spike test, [QARTOD-TS] and [QARTOD-pH] test 6.

    With the reference ``SPK_REF = (x[n-1] + x[n+1]) / 2`` the spike height is
    ``|x[n] - SPK_REF|``; above ``fail_threshold`` the value fails, above
    ``suspect_threshold`` it is suspect. The neighbours are the nearest earlier and
    later usable values (present and inside the sensor span; design default). A value
    without both neighbours within ``max_gap_s`` seconds is not evaluated (2): the
    newest reading waits for its successor, as the manuals note for real-time use.

    ``times`` must be in ascending order.
    """
    t = _as_seconds(times)
    x = np.asarray(values, dtype=np.float64)
    present = np.isfinite(x)
    usable_mask = present if usable is None else (np.asarray(usable, dtype=bool) & present)
    previous = _previous_index(usable_mask)
    following = _next_index(usable_mask)
    has_both = (previous >= 0) & (following < x.size)
    prev_safe = np.clip(previous, 0, max(x.size - 1, 0))
    next_safe = np.clip(following, 0, max(x.size - 1, 0))
    close = has_both & (t - t[prev_safe] <= max_gap_s) & (t[next_safe] - t <= max_gap_s)
    evaluated = close & usable_mask

    flags = np.full(x.shape, QcFlag.NOT_EVALUATED, dtype=np.int8)
    height = np.abs(x - (x[prev_safe] + x[next_safe]) / 2.0) if x.size else x
    flags[evaluated] = QcFlag.PASS
    flags[evaluated & (height > suspect_threshold)] = QcFlag.SUSPECT
    flags[evaluated & (height > fail_threshold)] = QcFlag.FAIL
    flags[~present] = QcFlag.MISSING
    return flags


def rate_of_change_test(
    times: ArrayLike,
    values: ArrayLike,
    *,
    deviations: float,
    window_s: float,
    min_points: int,
    min_step: float,
    max_gap_s: float,
    usable: ArrayLike | None = None,
) -> FlagArray:
    """Rate of change test, [QARTOD-TS] and [QARTOD-pH] test 7.

    A value is suspect when its step from the previous usable value exceeds
    ``deviations`` standard deviations of the usable values in the ``window_s``
    seconds before it; the test never fails a value. Design defaults: the step must
    also exceed ``min_step`` (so a very quiet series is not flagged for sensor noise),
    the window needs ``min_points`` values and the previous value must lie within
    ``max_gap_s``; otherwise the value is not evaluated (2).

    ``times`` must be in ascending order.
    """
    t = _as_seconds(times)
    x = np.asarray(values, dtype=np.float64)
    present = np.isfinite(x)
    usable_mask = present if usable is None else (np.asarray(usable, dtype=bool) & present)
    flags = np.full(x.shape, QcFlag.NOT_EVALUATED, dtype=np.int8)
    if x.size == 0:
        return flags

    usable_times = t[usable_mask]
    usable_values = x[usable_mask]
    # Centre before summing squares so the running variance keeps its precision.
    centred = usable_values - (usable_values.mean() if usable_values.size else 0.0)
    sums = np.concatenate(([0.0], np.cumsum(centred)))
    squares = np.concatenate(([0.0], np.cumsum(centred**2)))
    start = np.searchsorted(usable_times, t - window_s, side="left")
    stop = np.searchsorted(usable_times, t, side="left")
    count = stop - start
    total = sums[stop] - sums[start]
    total_sq = squares[stop] - squares[start]
    with np.errstate(invalid="ignore", divide="ignore"):
        variance = (total_sq - total**2 / count) / (count - 1)
    sd = np.sqrt(np.clip(np.nan_to_num(variance), 0.0, None))

    previous = _previous_index(usable_mask)
    prev_safe = np.clip(previous, 0, x.size - 1)
    evaluated = (
        usable_mask & (previous >= 0) & (t - t[prev_safe] <= max_gap_s) & (count >= min_points)
    )
    step = np.abs(x - x[prev_safe])
    threshold = np.maximum(deviations * sd, min_step)
    flags[evaluated] = QcFlag.PASS
    flags[evaluated & (step > threshold)] = QcFlag.SUSPECT
    flags[~present] = QcFlag.MISSING
    return flags


def flat_line_test(
    values: ArrayLike,
    *,
    suspect_count: int,
    fail_count: int,
    tolerance: float,
    usable: ArrayLike | None = None,
) -> FlagArray:
    """Flat line test, [QARTOD-TS] and [QARTOD-pH] test 8.

    The present value is compared with the previous usable values one by one; when it
    lies within ``tolerance`` of each of the previous ``fail_count`` values it fails,
    of each of the previous ``suspect_count`` values it is suspect. With fewer than
    ``suspect_count`` earlier values the test is not evaluated (2).

    ``values`` must be in time order.
    """
    x = np.asarray(values, dtype=np.float64)
    present = np.isfinite(x)
    usable_mask = present if usable is None else (np.asarray(usable, dtype=bool) & present)
    flags = np.full(x.shape, QcFlag.NOT_EVALUATED, dtype=np.int8)

    series = x[usable_mask]
    repeats = np.zeros(series.size, dtype=np.int64)
    still_flat = np.ones(series.size, dtype=bool)
    for lag in range(1, min(fail_count, series.size - 1) + 1):
        same = np.zeros(series.size, dtype=bool)
        same[lag:] = np.abs(series[lag:] - series[:-lag]) < tolerance
        still_flat &= same
        if not still_flat.any():
            break  # no value is flat this far back, so none is further back: repeats are final
        repeats += still_flat
    history = np.arange(series.size)
    series_flags = np.full(series.size, QcFlag.NOT_EVALUATED, dtype=np.int8)
    series_flags[history >= suspect_count] = QcFlag.PASS
    series_flags[repeats >= suspect_count] = QcFlag.SUSPECT
    series_flags[repeats >= fail_count] = QcFlag.FAIL
    flags[usable_mask] = series_flags
    flags[~present] = QcFlag.MISSING
    return flags


_RANK = np.zeros(max(QcFlag) + 1, dtype=np.int8)
for _rank, _flag in enumerate(FLAG_PRECEDENCE):
    _RANK[_flag] = _rank


def combine_flags(*flag_arrays: ArrayLike) -> FlagArray:
    """The worst flag element-wise, by ``FLAG_PRECEDENCE`` (design default)."""
    stacked = np.stack([np.asarray(f, dtype=np.int8) for f in flag_arrays])
    order = np.asarray(FLAG_PRECEDENCE, dtype=np.int8)
    return order[_RANK[stacked].max(axis=0)]


@dataclass(frozen=True)
class VariableQc:
    """Flags of one variable: per test and combined."""

    gross_range: FlagArray
    spike: FlagArray
    rate_of_change: FlagArray
    flat_line: FlagArray
    flag: FlagArray


def variable_qc(times: ArrayLike, values: ArrayLike, limits: QcLimits) -> VariableQc:
    """Run the four tests on one variable's time-ordered series and combine them.

    Values outside the sensor span fail the gross range test and are neither tested
    nor used as neighbours by the other tests (design default: a broken value must
    not make its neighbours look like spikes).
    """
    x = np.asarray(values, dtype=np.float64)
    gross = gross_range_test(
        x,
        sensor_min=limits.sensor_min,
        sensor_max=limits.sensor_max,
        user_min=limits.user_min,
        user_max=limits.user_max,
    )
    usable = (gross != QcFlag.FAIL) & (gross != QcFlag.MISSING)
    max_gap_s = limits.max_gap_minutes * 60.0
    spike = spike_test(
        times,
        x,
        suspect_threshold=limits.spike_suspect,
        fail_threshold=limits.spike_fail,
        max_gap_s=max_gap_s,
        usable=usable,
    )
    rate = rate_of_change_test(
        times,
        x,
        deviations=limits.rate_of_change_deviations,
        window_s=limits.rate_of_change_window_hours * 3600.0,
        min_points=limits.rate_of_change_min_points,
        min_step=limits.rate_of_change_min_step,
        max_gap_s=max_gap_s,
        usable=usable,
    )
    flat = flat_line_test(
        x,
        suspect_count=limits.flat_line_suspect_count,
        fail_count=limits.flat_line_fail_count,
        tolerance=limits.flat_line_tolerance,
        usable=usable,
    )
    combined = combine_flags(gross, spike, rate, flat)
    combined[~np.isfinite(x)] = QcFlag.MISSING
    return VariableQc(gross, spike, rate, flat, combined)


@dataclass(frozen=True)
class QcResult:
    """Flags per reading, in the order the readings were given to ``run_qc``."""

    temperature: FlagArray
    salinity: FlagArray
    ph: FlagArray
    alkalinity: FlagArray
    derived: FlagArray
    overall: FlagArray
    tests: Mapping[str, VariableQc] = field(default_factory=dict)


def run_qc(
    *,
    times: ArrayLike,
    temperature: ArrayLike,
    salinity: ArrayLike,
    ph: ArrayLike,
    alkalinity: ArrayLike | None = None,
    alkalinity_from_station: ArrayLike | None = None,
    derived_available: ArrayLike | None = None,
    limits: Mapping[str, QcLimits] = DEFAULT_QC_LIMITS,
) -> QcResult:
    """QC flags for one station's readings, tested in time order.

    Parameters
    ----------
    times : array_like
        Observation times (seconds since an epoch, or ``datetime64``), any order.
    temperature, salinity, ph : array_like
        Raw values (degC, practical salinity, pH); NaN where missing.
    alkalinity : array_like, optional
        Measured alkalinity, umol/kg; NaN where the reading had none.
    alkalinity_from_station : array_like of bool, optional
        True where the station's alkalinity mode supplied the value: such readings
        are not evaluated for alkalinity (2) instead of missing (9).
    derived_available : array_like of bool, optional
        False where the chemistry could not be derived: the derived flag is then
        missing (9) unless an input is suspect or failed.
    limits : mapping
        ``QcLimits`` per variable name, default ``DEFAULT_QC_LIMITS``.

    Returns
    -------
    QcResult
        Flags per variable, the derived chemistry's (the worst of its inputs) and the
        overall flag (the worst of all), in the input order.
    """
    t = _as_seconds(times)
    size = t.size
    order = np.argsort(t, kind="stable")
    inverse = np.empty_like(order)
    inverse[order] = np.arange(size)

    def ordered(values: ArrayLike | None) -> NDArray[np.float64]:
        if values is None:
            return np.full(size, np.nan)
        array = np.asarray(values, dtype=np.float64)
        if array.shape != (size,):
            raise ValueError(f"QC input has shape {array.shape}; expected ({size},) like times")
        return array[order]

    t_sorted = t[order]
    per_variable: dict[str, VariableQc] = {}
    flags: dict[str, FlagArray] = {}
    for name, raw in (
        ("temperature", temperature),
        ("salinity", salinity),
        ("ph", ph),
        ("alkalinity", alkalinity),
    ):
        result = variable_qc(t_sorted, ordered(raw), limits[name])
        per_variable[name] = result
        flags[name] = result.flag

    if alkalinity_from_station is not None:
        substituted = np.asarray(alkalinity_from_station, dtype=bool)[order]
        flags["alkalinity"] = np.where(
            substituted, np.int8(QcFlag.NOT_EVALUATED), flags["alkalinity"]
        ).astype(np.int8)

    derived = combine_flags(
        flags["temperature"], flags["salinity"], flags["ph"], flags["alkalinity"]
    )
    if derived_available is not None:
        missing = ~np.asarray(derived_available, dtype=bool)[order]
        derived = combine_flags(
            derived, np.where(missing, np.int8(QcFlag.MISSING), np.int8(QcFlag.NOT_EVALUATED))
        )
    overall = combine_flags(*flags.values(), derived)

    def back(array: FlagArray) -> FlagArray:
        return array[inverse]

    return QcResult(
        temperature=back(flags["temperature"]),
        salinity=back(flags["salinity"]),
        ph=back(flags["ph"]),
        alkalinity=back(flags["alkalinity"]),
        derived=back(derived),
        overall=back(overall),
        tests={
            name: VariableQc(
                back(v.gross_range),
                back(v.spike),
                back(v.rate_of_change),
                back(v.flat_line),
                back(v.flag),
            )
            for name, v in per_variable.items()
        },
    )
