"""Pure computations behind the daily status and the larval-batch exposure.

No database, no web: arrays in, numbers out, so every figure on the status page can be
checked by hand. Times are accepted as timezone-aware ``datetime`` objects or numpy
``datetime64`` values and handled internally as float seconds since the Unix epoch.

Time-weighted quantities treat a series as straight lines between consecutive samples
(linear interpolation), so a crossing of a threshold between two samples is placed where the
line crosses it. A gap between two samples longer than ``max_gap`` is not bridged: that
stretch counts neither as below nor as above, and is reported as missing coverage instead.

References
----------
Gimenez2018
    Gimenez, I., Waldbusser, G. G., Hales, B. (2018). Ocean acidification stress index for
    shellfish (OASIS): Linking Pacific oyster larval survival and exposure to variable
    carbonate chemistry regimes. Elementa: Science of the Anthropocene 6: 51.
    doi:10.1525/elementa.306 (bibliographic details from memory). The index sums the time
    larvae spend under saturation thresholds, weighting the first days after fertilisation;
    we report the plain ingredients (hours under the floor and under 1, first 48 h and the
    whole run, and the deficit integral) rather than the paper's fitted index.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field
from datetime import UTC, date, datetime, time, timedelta
from zoneinfo import ZoneInfo

import numpy as np

SECONDS_PER_MINUTE = 60.0
SECONDS_PER_HOUR = 3600.0

#: Longest spacing between two samples that is still bridged by a straight line. Twice a
#: typical 15-minute logger interval; matches the 30-minute default of the no-data alert
#: rule (design default).
DEFAULT_MAX_GAP = timedelta(minutes=30)

#: The first 48 h after spawning or stocking, when shell formation starts and larvae are
#: most sensitive to low saturation (Gimenez2018; Waldbusser et al. 2015).
EARLY_LARVAL_WINDOW = timedelta(hours=48)

#: Aragonite saturation below which shell mineral is thermodynamically unstable (definition
#: of the saturation state: Omega = 1 at equilibrium).
OMEGA_UNDERSATURATED = 1.0

#: QARTOD flag values (IOOS QARTOD manuals, "flag scheme") and the words we show for them.
QC_FLAG_NAMES: dict[int, str] = {
    1: "pass",
    2: "not_evaluated",
    3: "suspect",
    4: "fail",
    9: "missing",
}


class StatusInputError(ValueError):
    """Raised when a status computation gets inputs it cannot use (names the argument)."""


# --------------------------------------------------------------------------------------
# time handling
# --------------------------------------------------------------------------------------


def to_epoch_seconds(times: Iterable[datetime] | np.ndarray) -> np.ndarray:
    """Return times as float seconds since 1970-01-01T00:00Z.

    Parameters
    ----------
    times : sequence of timezone-aware datetime, numpy datetime64 array (taken as UTC), or
        numeric array of seconds since 1970 (returned as floats)
    """
    if isinstance(times, np.ndarray) and np.issubdtype(times.dtype, np.datetime64):
        return times.astype("datetime64[us]").astype(np.int64) / 1e6
    if isinstance(times, np.ndarray) and times.dtype.kind in "fiu":  # already seconds
        return times.astype(float, copy=False)
    out = []
    for t in times:
        if isinstance(t, datetime):
            if t.tzinfo is None:
                raise StatusInputError(
                    "times: a timestamp without a UTC offset cannot be placed in time; "
                    "give timezone-aware datetimes"
                )
            out.append(t.timestamp())
        else:
            out.append(float(t))
    return np.asarray(out, dtype=float)


def _as_seconds(value: datetime | float) -> float:
    if isinstance(value, datetime):
        if value.tzinfo is None:
            raise StatusInputError("window bounds must be timezone-aware datetimes")
        return value.timestamp()
    return float(value)


def local_day_window(day: date, timezone: str) -> tuple[datetime, datetime]:
    """Return the UTC start and end of a site-local calendar day.

    The day runs from local midnight to the next local midnight, so it lasts 23 or 25 hours
    on the days clocks change.
    """
    try:
        zone = ZoneInfo(timezone)
    except Exception as exc:  # zoneinfo raises several types for a bad key
        raise StatusInputError(f"timezone: {timezone!r} is not an IANA time zone name") from exc
    start = datetime.combine(day, time(0), tzinfo=zone)
    end = datetime.combine(day + timedelta(days=1), time(0), tzinfo=zone)
    return start.astimezone(UTC), end.astimezone(UTC)


# --------------------------------------------------------------------------------------
# series preparation
# --------------------------------------------------------------------------------------


def _clean_series(times: np.ndarray, values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Drop non-finite values, sort by time and keep one value per timestamp (their mean)."""
    t = np.asarray(times, dtype=float)
    v = np.asarray(values, dtype=float)
    if t.shape != v.shape or t.ndim != 1:
        raise StatusInputError(
            f"times and values must be one-dimensional and of equal length "
            f"(got {t.shape} and {v.shape})"
        )
    keep = np.isfinite(t) & np.isfinite(v)
    t, v = t[keep], v[keep]
    order = np.argsort(t, kind="stable")
    t, v = t[order], v[order]
    if t.size > 1 and np.any(np.diff(t) == 0):
        # Several sources may report the same instant; average rather than double count.
        unique_t, inverse = np.unique(t, return_inverse=True)
        sums = np.bincount(inverse, weights=v)
        counts = np.bincount(inverse)
        t, v = unique_t, sums / counts
    return t, v


@dataclass(frozen=True)
class _Segments:
    t0: np.ndarray
    t1: np.ndarray
    v0: np.ndarray
    v1: np.ndarray

    @property
    def duration(self) -> np.ndarray:
        return self.t1 - self.t0


def _segments(
    times: Sequence[datetime] | np.ndarray,
    values: Sequence[float] | np.ndarray,
    *,
    start: datetime | float,
    end: datetime | float,
    max_gap: timedelta,
) -> _Segments:
    """Straight-line pieces between consecutive samples, clipped to [start, end).

    Pieces longer than ``max_gap`` are dropped before clipping (a gap stays a gap even when
    only part of it lies in the window).
    """
    t, v = _clean_series(to_epoch_seconds(times), values)
    s, e = _as_seconds(start), _as_seconds(end)
    if e < s:
        raise StatusInputError("end: the window end must not be before its start")
    limit = max_gap.total_seconds()
    if limit <= 0:
        raise StatusInputError("max_gap: must be a positive duration")
    empty = np.empty(0)
    if t.size < 2:
        return _Segments(empty, empty, empty, empty)
    t0, t1, v0, v1 = t[:-1], t[1:], v[:-1], v[1:]
    keep = (t1 - t0 <= limit) & (t1 > s) & (t0 < e)
    t0, t1, v0, v1 = t0[keep], t1[keep], v0[keep], v1[keep]
    slope = (v1 - v0) / (t1 - t0)
    c0 = np.maximum(t0, s)
    c1 = np.minimum(t1, e)
    return _Segments(c0, c1, v0 + slope * (c0 - t0), v0 + slope * (c1 - t0))


def _seconds_below(seg: _Segments, level: float) -> np.ndarray:
    """Per piece, the time during which the straight line is strictly below ``level``."""
    lo = np.minimum(seg.v0, seg.v1)
    hi = np.maximum(seg.v0, seg.v1)
    span = hi - lo
    with np.errstate(divide="ignore", invalid="ignore"):
        crossing_fraction = np.where(span > 0, (level - lo) / span, 0.0)
    fraction = np.where(hi < level, 1.0, np.where(lo >= level, 0.0, crossing_fraction))
    return fraction * seg.duration


def _deficit_integral(seg: _Segments, level: float) -> np.ndarray:
    """Per piece, the integral of max(level - value, 0) over time (value x seconds)."""
    d0 = level - seg.v0
    d1 = level - seg.v1
    both = (d0 >= 0) & (d1 >= 0)
    trapezoid = 0.5 * (d0 + d1) * seg.duration
    # One end below the level: a triangle over the part of the piece that is below.
    below_time = _seconds_below(seg, level)
    triangle = 0.5 * np.maximum(np.maximum(d0, d1), 0.0) * below_time
    return np.where(both, trapezoid, triangle)


# --------------------------------------------------------------------------------------
# public computations
# --------------------------------------------------------------------------------------


def minutes_below(
    times: Sequence[datetime] | np.ndarray,
    values: Sequence[float] | np.ndarray,
    level: float,
    *,
    start: datetime | float,
    end: datetime | float,
    max_gap: timedelta = DEFAULT_MAX_GAP,
) -> float:
    """Time-weighted minutes a series spends strictly below ``level`` within [start, end).

    Parameters
    ----------
    times : timezone-aware datetimes (or datetime64, UTC), any order
    values : same length as ``times``; non-finite values are dropped
    level : threshold in the values' unit
    start, end : window bounds; give one sample either side of the window so that the
        pieces crossing the bounds are counted
    max_gap : longest spacing bridged by a straight line

    Returns
    -------
    float
        Minutes.
    """
    seg = _segments(times, values, start=start, end=end, max_gap=max_gap)
    return float(_seconds_below(seg, level).sum() / SECONDS_PER_MINUTE)


def covered_minutes(
    times: Sequence[datetime] | np.ndarray,
    values: Sequence[float] | np.ndarray,
    *,
    start: datetime | float,
    end: datetime | float,
    max_gap: timedelta = DEFAULT_MAX_GAP,
) -> float:
    """Minutes of [start, end) spanned by pieces no longer than ``max_gap``."""
    seg = _segments(times, values, start=start, end=end, max_gap=max_gap)
    return float(seg.duration.sum() / SECONDS_PER_MINUTE)


@dataclass(frozen=True)
class DayRange:
    """Minimum, mean and maximum of a variable over a day (``None`` without data)."""

    minimum: float | None
    mean: float | None
    maximum: float | None
    count: int

    def as_dict(self) -> dict[str, float | int | None]:
        return {"min": self.minimum, "mean": self.mean, "max": self.maximum, "n": self.count}


def day_range(values: Sequence[float | None] | np.ndarray) -> DayRange:
    """Minimum, arithmetic mean and maximum of the finite values.

    The mean is per reading, like the bucket means of the readings query, so the two agree;
    the caller leaves failed (QC 4) readings out beforehand.
    """
    v = np.asarray([np.nan if x is None else x for x in values], dtype=float)
    v = v[np.isfinite(v)]
    if v.size == 0:
        return DayRange(None, None, None, 0)
    return DayRange(float(v.min()), float(v.mean()), float(v.max()), int(v.size))


def infer_sampling_interval(
    times: Sequence[datetime] | np.ndarray,
) -> timedelta | None:
    """The station's usual spacing between readings: the median positive spacing.

    The median ignores outages and the odd burst of retries. ``None`` with fewer than two
    distinct timestamps.
    """
    t = _distinct_sorted(to_epoch_seconds(times))
    if t.size < 2:
        return None
    return timedelta(seconds=float(np.median(np.diff(t))))


def _distinct_sorted(values: np.ndarray) -> np.ndarray:
    """``np.unique(values)``, without its sort when the values are already strictly
    increasing (the status's occupied minutes are: a week of them is 10,080)."""
    if values.size < 2 or np.all(values[1:] > values[:-1]):
        return values
    return np.unique(values)


def completeness_percent(
    times: Sequence[datetime] | np.ndarray,
    *,
    start: datetime | float,
    end: datetime | float,
    expected_interval: timedelta,
) -> float | None:
    """Percent of the expected readings that arrived within [start, end).

    The window is cut into slots of ``expected_interval`` (the last one may be partial and
    counts as a slot); a slot with at least one reading counts as present. Counting slots
    rather than readings keeps two devices at one station, or a re-sent batch, from lifting
    the figure over 100 %. ``None`` for an empty window.
    """
    s, e = _as_seconds(start), _as_seconds(end)
    step = expected_interval.total_seconds()
    if step <= 0:
        raise StatusInputError("expected_interval: must be a positive duration")
    if e <= s:
        return None
    n_slots = math.ceil((e - s) / step)
    t = to_epoch_seconds(times)
    t = t[(t >= s) & (t < e)]
    slots = np.floor((t - s) / step).astype(np.int64)
    if slots.size > 1 and np.all(slots[1:] >= slots[:-1]):  # in time order: count changes
        filled = 1 + int(np.count_nonzero(slots[1:] != slots[:-1]))
    else:
        filled = np.unique(slots).size
    return 100.0 * filled / n_slots


def qc_counts(flags: Iterable[int | None]) -> dict[str, int]:
    """Count readings per QARTOD flag, by name; a missing flag counts as "missing" (9)."""
    counts = dict.fromkeys(QC_FLAG_NAMES.values(), 0)
    for flag in flags:
        name = QC_FLAG_NAMES.get(9 if flag is None else int(flag))
        if name is None:
            raise StatusInputError(
                f"flags: {flag!r} is not a QARTOD flag (allowed 1, 2, 3, 4, 9)"
            )
        counts[name] += 1
    return counts


def _local_hours(seconds: np.ndarray, zone: ZoneInfo) -> np.ndarray:
    """Local clock hour of each UTC time (seconds since 1970), for times on quarter hours.

    The zone's offset is looked up at the start and end of each UTC day; where the two
    agree the whole day has that offset (zones change offset at most once a day), and
    only a day with a change is looked up time by time.
    """
    if seconds.size == 0:
        return np.empty(0, dtype=np.int64)
    day = np.floor(seconds / 86400.0)
    offsets = np.empty(seconds.shape)
    for d in np.unique(day):
        in_day = day == d
        at_start, at_end = (
            datetime.fromtimestamp(x, tz=zone).utcoffset() for x in (d * 86400.0, (d + 1) * 86400.0)
        )
        if at_start == at_end and at_start is not None:
            offsets[in_day] = at_start.total_seconds()
        else:
            offsets[in_day] = [
                datetime.fromtimestamp(x, tz=zone).utcoffset().total_seconds()  # type: ignore[union-attr]
                for x in seconds[in_day]
            ]
    return (np.floor((seconds + offsets) / 3600.0) % 24).astype(np.int64)


@dataclass(frozen=True)
class FillWindowHint:
    """When in the local day intake water has been best for filling.

    ``hourly_median[h]`` is the median over the look-back of the values observed in local
    hour ``h`` (``None`` without data); ``best_hours`` are the hours with the highest
    medians, best first.
    """

    hourly_median: list[float | None]
    hourly_count: list[int]
    best_hours: list[int]

    def as_dict(self) -> dict[str, object]:
        return {
            "hourly_median": self.hourly_median,
            "hourly_count": self.hourly_count,
            "best_hours": self.best_hours,
        }


def fill_window_hint(
    times: Sequence[datetime] | np.ndarray,
    values: Sequence[float] | np.ndarray,
    *,
    timezone: str,
    best: int = 3,
    min_count: int = 1,
    counts: Sequence[int] | np.ndarray | None = None,
) -> FillWindowHint:
    """Median per site-local hour of day, and the hours with the highest medians.

    Parameters
    ----------
    times : reading times (timezone-aware, or datetime64 taken as UTC)
    values : e.g. omega aragonite of intake water carried to tank temperature
    timezone : IANA name of the site's zone; hours are local clock hours
    best : how many hours to name
    min_count : hours with fewer values than this are left out of ``best_hours``
    counts : when each value stands for several readings (a quarter hour's mean), how
        many; ``hourly_count`` and ``min_count`` then count readings. Default: one each.
    """
    if best < 1:
        raise StatusInputError("best: must be at least 1")
    try:
        zone = ZoneInfo(timezone)
    except Exception as exc:
        raise StatusInputError(f"timezone: {timezone!r} is not an IANA time zone name") from exc
    t = to_epoch_seconds(times)
    v = np.asarray(values, dtype=float)
    if t.shape != v.shape:
        raise StatusInputError("times and values must have equal length")
    n = np.ones(v.shape, dtype=np.int64) if counts is None else np.asarray(counts, np.int64)
    if n.shape != v.shape:
        raise StatusInputError("counts and values must have equal length")
    keep = np.isfinite(v)
    t, v, n = t[keep], v[keep], n[keep]
    # Every UTC offset in use today is a whole number of quarter hours and changes on a quarter
    # hour, so the local hour is constant within each UTC quarter hour: work it out per
    # quarter (a week has 672) instead of per reading.
    quarters, position = np.unique(np.floor(t / 900.0), return_inverse=True)
    quarter_hours = _local_hours(quarters * 900.0, zone)
    hours = quarter_hours[position.reshape(-1)] if t.size else np.empty(0, dtype=np.int64)
    medians, hourly_count = _hourly_medians(hours, v, n)
    ranked = sorted(
        (h for h in range(24) if medians[h] is not None and hourly_count[h] >= min_count),
        key=lambda h: (-medians[h], h),  # type: ignore[operator]
    )
    return FillWindowHint(medians, hourly_count, ranked[:best])


def _hourly_medians(
    hours: np.ndarray, values: np.ndarray, counts: np.ndarray
) -> tuple[list[float | None], list[int]]:
    """Per hour 0-23: the median of ``values`` in that hour (``None`` without any) and the
    sum of ``counts``. One sort by hour and value instead of a mask and a median per hour:
    the middle value, or the mean of the two middle values, is what ``np.median`` gives."""
    order = np.lexsort((values, hours))
    hours, values = hours[order], values[order]
    edges = np.searchsorted(hours, np.arange(25))
    totals = np.bincount(hours, weights=counts[order], minlength=24) if hours.size else None
    medians: list[float | None] = []
    hourly_count: list[int] = []
    for hour in range(24):
        lo, hi = int(edges[hour]), int(edges[hour + 1])
        hourly_count.append(0 if totals is None else int(totals[hour]))
        if hi == lo:
            medians.append(None)
            continue
        middle = lo + (hi - lo) // 2
        if (hi - lo) % 2:
            medians.append(float(values[middle]))
        else:
            medians.append(float(np.mean(values[middle - 1 : middle + 1])))
    return medians, hourly_count


@dataclass(frozen=True)
class Exposure:
    """A larval batch's exposure to low saturation (see Gimenez2018 in the module notes).

    Hours are time-weighted under straight lines between predictions; ``deficit_*`` is the
    integral of max(floor - omega, 0) over time in omega-hours. ``covered_hours_*`` is the
    time for which there was data to judge (gaps longer than the limit are not counted).
    """

    floor: float
    first_window_hours: float
    hours_below_floor_first_48h: float
    hours_below_1_first_48h: float
    deficit_omega_hours_first_48h: float
    covered_hours_first_48h: float
    run_hours: float
    hours_below_floor_run: float
    hours_below_1_run: float
    deficit_omega_hours_run: float
    covered_hours_run: float
    minimum_omega: float | None = None
    notes: list[str] = field(default_factory=list)

    def as_dict(self) -> dict[str, object]:
        return {
            "floor": self.floor,
            "first_window_hours": self.first_window_hours,
            "hours_below_floor_first_48h": self.hours_below_floor_first_48h,
            "hours_below_1_first_48h": self.hours_below_1_first_48h,
            "deficit_omega_hours_first_48h": self.deficit_omega_hours_first_48h,
            "covered_hours_first_48h": self.covered_hours_first_48h,
            "run_hours": self.run_hours,
            "hours_below_floor_run": self.hours_below_floor_run,
            "hours_below_1_run": self.hours_below_1_run,
            "deficit_omega_hours_run": self.deficit_omega_hours_run,
            "covered_hours_run": self.covered_hours_run,
            "minimum_omega": self.minimum_omega,
        }


def batch_exposure(
    times: Sequence[datetime] | np.ndarray,
    omega: Sequence[float] | np.ndarray,
    *,
    started_at: datetime,
    ended_at: datetime,
    floor: float,
    max_gap: timedelta = DEFAULT_MAX_GAP,
    early_window: timedelta = EARLY_LARVAL_WINDOW,
) -> Exposure:
    """Hours under the floor and under 1, first 48 h and whole run, and the deficit integral.

    Summing the time a larval cohort spends under saturation thresholds, with the first
    two days singled out, follows Gimenez2018.

    Parameters
    ----------
    times, omega : predicted omega aragonite of the batch's tank at culture temperature
    started_at : spawning or stocking time (timezone-aware)
    ended_at : end of the run, or now for a running batch
    floor : the tank's omega floor (dimensionless)
    max_gap : longest spacing bridged by a straight line
    early_window : length of the early window (48 h)
    """
    if not math.isfinite(floor) or floor <= 0:
        raise StatusInputError(f"floor: must be a positive number (got {floor!r})")
    if ended_at < started_at:
        raise StatusInputError("ended_at: must not be before started_at")
    early_end = min(ended_at, started_at + early_window)

    run = _segments(times, omega, start=started_at, end=ended_at, max_gap=max_gap)
    early = _segments(times, omega, start=started_at, end=early_end, max_gap=max_gap)

    def hours(x: np.ndarray) -> float:
        return float(x.sum() / SECONDS_PER_HOUR)

    in_run = _clean_series(to_epoch_seconds(times), omega)
    s, e = started_at.timestamp(), ended_at.timestamp()
    run_values = in_run[1][(in_run[0] >= s) & (in_run[0] <= e)]
    segment_ends = np.concatenate([run.v0, run.v1])
    candidates = np.concatenate([run_values, segment_ends])
    notes = []
    if run.duration.size == 0:
        notes.append("no predictions during the run: exposure cannot be judged")
    return Exposure(
        floor=floor,
        first_window_hours=(early_end - started_at).total_seconds() / SECONDS_PER_HOUR,
        hours_below_floor_first_48h=hours(_seconds_below(early, floor)),
        hours_below_1_first_48h=hours(_seconds_below(early, OMEGA_UNDERSATURATED)),
        deficit_omega_hours_first_48h=hours(_deficit_integral(early, floor)),
        covered_hours_first_48h=hours(early.duration),
        run_hours=(ended_at - started_at).total_seconds() / SECONDS_PER_HOUR,
        hours_below_floor_run=hours(_seconds_below(run, floor)),
        hours_below_1_run=hours(_seconds_below(run, OMEGA_UNDERSATURATED)),
        deficit_omega_hours_run=hours(_deficit_integral(run, floor)),
        covered_hours_run=hours(run.duration),
        minimum_omega=float(candidates.min()) if candidates.size else None,
        notes=notes,
    )
