"""A site's status for one site-local day, assembled from the database.

The figures come from :mod:`app.status.compute` (pure), the tank predictions from
:mod:`app.alerts.advice` (the same code that drives alerts and dose advice), so the API,
the web page and the mail all show the same numbers.

Station figures and the fill-window hint read the quarter-hour rollups of
:mod:`app.status.rollups` (a few thousand small rows instead of a week of readings per
station); each tank's day still reads its source station's readings of that day, since
minutes below the floor follow every reading. What changed in the figures' definitions is
said at :func:`station_status` and :func:`fill_window_hints` (and in DEVELOPERS.md).
"""

from __future__ import annotations

import functools
from collections.abc import Sequence
from dataclasses import dataclass
from datetime import UTC, date, datetime, timedelta
from typing import Any
from zoneinfo import ZoneInfo

import numpy as np
from sqlalchemy import String, bindparam, select, type_coerce
from sqlalchemy.orm import Session

import chemistry
from app.alerts.advice import (
    alkalinity_uncertainty,
    latest_good_reading,
    predict_tank_water,
    source_description,
    stale_after_by_tank,
    tank_advice,
)
from app.alerts.models import Alert, AlertRule
from app.alerts.state_machine import OPEN_ALERT_STATES
from app.db_rows import driver_rows
from app.readings.models import Reading
from app.sites.models import Site, Station, Tank
from app.status import compute, rollups

QC_FAIL = 4

#: Variables summarised per station per day (column name on ``readings``).
DAY_VARIABLES = ("omega_aragonite", "ph_total", "pco2_uatm", "temperature_c", "salinity")

#: Look-back for the fill-window hint and for the usual sampling interval.
LOOKBACK = timedelta(days=7)

#: Shown when a station has too little history to tell its sampling interval (design
#: default: the demo's and a common logger's 5-minute interval).
FALLBACK_SAMPLING_INTERVAL = timedelta(minutes=5)

#: Order of severity used to give a tank one alert state on the page.
_ALERT_STATE_RANK = {"active": 3, "acknowledged": 2, "pending": 1}


@dataclass(frozen=True)
class DayWindow:
    day: date
    start: datetime
    end: datetime
    as_of: datetime  # the end, or now for today: nothing after it can exist yet

    @property
    def is_complete(self) -> bool:
        return self.as_of >= self.end


def day_window(site: Site, day: date | None, now: datetime) -> DayWindow:
    zone = ZoneInfo(site.timezone)
    local_day = day or now.astimezone(zone).date()
    start, end = compute.local_day_window(local_day, site.timezone)
    return DayWindow(local_day, start, end, min(end, now))


# --------------------------------------------------------------------------------------
# data access
# --------------------------------------------------------------------------------------


def station_readings(
    *, session: Session, station_pk: int, start: datetime, end: datetime
) -> list[Reading]:
    """Readings of a station with start <= observed_at < end, in time order."""
    return list(
        session.scalars(
            select(Reading)
            .where(
                Reading.station_pk == station_pk,
                Reading.observed_at >= start,
                Reading.observed_at < end,
            )
            .order_by(Reading.observed_at, Reading.id)
        )
    )


#: Columns that hold small integers (QC flags) rather than floats.
_FLAG_COLUMNS = frozenset(
    ("qc_temperature", "qc_salinity", "qc_ph", "qc_alkalinity", "qc_derived", "qc_overall")
)


def station_columns(
    *,
    session: Session,
    station_pk: int,
    start: datetime,
    end: datetime,
    names: Sequence[str] = (),
) -> dict[str, np.ndarray]:
    """Readings of a station with start <= observed_at < end, time order, as numpy columns.

    ``observed_at`` comes as naive UTC ``datetime64[us]`` (what :mod:`app.status.compute`
    takes), flags as integers, numbers as floats with NaN for null, text as objects. The
    status reads a day of rows per tank: the driver's plain rows turned into arrays in bulk
    cost a fraction of ORM objects (and, on SQLite, numpy parses the stored time text in C).
    """
    return stations_columns(
        session=session, station_pks=[station_pk], start=start, end=end, names=names
    )[station_pk]


@functools.lru_cache(maxsize=16)
def _columns_query(sqlite: bool, names: tuple[str, ...]) -> Any:
    """The query of :func:`stations_columns`, built once (parameters ``station_pks``,
    ``start`` and ``end``)."""
    observed = type_coerce(Reading.observed_at, String) if sqlite else Reading.observed_at
    return (
        select(Reading.station_pk, observed, *(getattr(Reading, name) for name in names))
        .where(
            Reading.station_pk.in_(bindparam("station_pks", expanding=True)),
            Reading.observed_at >= bindparam("start", type_=Reading.observed_at.type),
            Reading.observed_at < bindparam("end", type_=Reading.observed_at.type),
        )
        .order_by(Reading.station_pk, Reading.observed_at, Reading.id)
    )


def stations_columns(
    *,
    session: Session,
    station_pks: Sequence[int],
    start: datetime,
    end: datetime,
    names: Sequence[str] = (),
) -> dict[int, dict[str, np.ndarray]]:
    """:func:`station_columns` of several stations in one query, by station."""
    sqlite = session.get_bind().dialect.name == "sqlite"
    rows = driver_rows(
        session.connection(),
        _columns_query(sqlite, tuple(names)),
        {"station_pks": list(station_pks), "start": start, "end": end},
    )
    columns: list[Sequence[Any]] = (
        list(zip(*rows, strict=True)) if rows else [() for _ in range(len(names) + 2)]
    )
    arrays: dict[str, np.ndarray] = {"observed_at": _utc_times(columns[1], sqlite=sqlite)}
    for name, values in zip(names, columns[2:], strict=True):
        if name in _FLAG_COLUMNS:
            arrays[name] = np.array(values, dtype=np.int64)
        elif isinstance(getattr(Reading, name).type, String):
            arrays[name] = np.array(values, dtype=object)
        else:
            arrays[name] = np.array(values, dtype=float)  # None becomes NaN
    return rollups.by_station(np.array(columns[0], dtype=np.int64), arrays, station_pks)


@functools.lru_cache(maxsize=4)
def _good_water_query(sqlite: bool) -> Any:
    """The query of :func:`good_water_columns`, built once (parameters ``station_pk``,
    ``start`` and ``end``)."""
    observed = type_coerce(Reading.observed_at, String) if sqlite else Reading.observed_at
    return (
        select(observed, *(getattr(Reading, name) for name in _GOOD_WATER_COLUMNS))
        .where(
            Reading.station_pk == bindparam("station_pk"),
            Reading.observed_at >= bindparam("start", type_=Reading.observed_at.type),
            Reading.observed_at < bindparam("end", type_=Reading.observed_at.type),
            Reading.qc_overall != QC_FAIL,
            *(getattr(Reading, name).is_not(None) for name in _GOOD_COLUMNS[1:]),
        )
        .order_by(Reading.observed_at, Reading.id)
    )


def good_water_columns(
    *, session: Session, station_pks: Sequence[int], start: datetime, end: datetime
) -> dict[int, dict[str, np.ndarray] | None]:
    """Per station, its good readings in [start, end) (not failed, chemistry derived) as
    columns: ``observed_at`` and the alkalinity, salinity and DIC that carry the water to
    a tank's temperature in one solve. The database leaves the other readings out, and
    the columns a tank's day does not need are not read (a day of two stations is some
    3,000 rows, and each value read costs more than the arithmetic on it). None for a
    station with a good reading lacking its stored DIC: :func:`stations_columns` then."""
    sqlite = session.get_bind().dialect.name == "sqlite"
    out: dict[int, dict[str, np.ndarray] | None] = {}
    for pk in station_pks:
        rows = driver_rows(
            session.connection(),
            _good_water_query(sqlite),
            {"station_pk": pk, "start": start, "end": end},
        )
        columns = list(zip(*rows, strict=True)) if rows else [()] * (1 + len(_GOOD_WATER_COLUMNS))
        arrays = {"observed_at": _utc_times(columns[0], sqlite=sqlite)}
        for name, values in zip(_GOOD_WATER_COLUMNS, columns[1:], strict=True):
            arrays[name] = np.array(values, dtype=float)  # None becomes NaN
        out[pk] = arrays if np.all(np.isfinite(arrays["dic_umol_kg"])) else None
    return out


def _utc_times(values: Sequence[Any], *, sqlite: bool) -> np.ndarray:
    """Stored times as naive UTC ``datetime64[us]`` (SQLite gives its naive UTC text)."""
    if sqlite:
        return np.array(values, dtype="datetime64[us]")
    return np.array(
        [t.astimezone(UTC).replace(tzinfo=None) for t in values], dtype="datetime64[us]"
    )


def latest_readings(
    *, session: Session, station_pks: Sequence[int], before: datetime
) -> dict[int, Reading]:
    """Each station's newest reading before ``before`` (stations without one are left out),
    in one query: a scalar sub-select per station picks the id from the time index."""
    if not station_pks:
        return {}
    parameters: dict[str, Any] = {f"pk_{n}": pk for n, pk in enumerate(station_pks)}
    parameters["before"] = before
    statement = _latest_readings_query(len(station_pks))
    return {r.station_pk: r for r in session.scalars(statement, parameters)}


@functools.lru_cache(maxsize=16)
def _latest_readings_query(stations: int) -> Any:
    """The query of :func:`latest_readings` for this many stations, built once (parameters
    ``pk_0`` ... and ``before``): building it is a good part of its cost."""
    before = bindparam("before", type_=Reading.observed_at.type)
    ids = [
        select(Reading.id)
        .where(Reading.station_pk == bindparam(f"pk_{n}"), Reading.observed_at < before)
        .order_by(Reading.observed_at.desc(), Reading.id.desc())
        .limit(1)
        .scalar_subquery()
        for n in range(stations)
    ]
    return select(Reading).where(Reading.id.in_(ids))


def open_alerts(*, session: Session, site_id: str) -> list[tuple[Alert, AlertRule]]:
    rows = session.execute(_open_alerts_query(), {"site_id": site_id}).all()
    return [(alert, rule) for alert, rule in rows]


@functools.cache
def _open_alerts_query() -> Any:
    """The query of :func:`open_alerts`, built once (parameter ``site_id``): every status
    asks, and building an ORM select costs about what running it does."""
    states = [str(s) for s in OPEN_ALERT_STATES]
    return (
        select(Alert, AlertRule)
        .join(AlertRule, Alert.rule_id == AlertRule.id)
        .where(Alert.site_id == bindparam("site_id"), Alert.state.in_(states))
        .order_by(Alert.since)
    )


@functools.cache
def _site_stations_query() -> Any:
    return select(Station).where(Station.site_id == bindparam("site_id")).order_by(Station.id)


@functools.cache
def _site_tanks_query() -> Any:
    return select(Tank).where(Tank.site_id == bindparam("site_id")).order_by(Tank.id)


# --------------------------------------------------------------------------------------
# series of tank predictions
# --------------------------------------------------------------------------------------


def _good(readings: Sequence[Reading]) -> list[Reading]:
    """Readings fit for statistics and predictions: not failed, chemistry derived."""
    return [
        r
        for r in readings
        if r.qc_overall != QC_FAIL
        and r.ph_total is not None
        and r.alkalinity_used_umol_kg is not None
        and r.temperature_c is not None
        and r.salinity is not None
    ]


@dataclass(frozen=True)
class TankSeries:
    times: list[datetime] | np.ndarray  # aware datetimes, or naive UTC datetime64
    omega: np.ndarray
    treated_omega: np.ndarray | None

    @property
    def larvae_omega(self) -> np.ndarray:
        """What the larvae get: the treated water when the tank has a treatment (as the
        alert rules judge it)."""
        return self.omega if self.treated_omega is None else self.treated_omega


def tank_prediction_series(
    *, site: Site, tank: Tank, station: Station, readings: Sequence[Reading]
) -> TankSeries:
    """Predicted omega aragonite at culture temperature for each good reading."""
    good = _good(readings)
    if not good:
        return TankSeries([], np.empty(0), None)
    prediction = predict_tank_water(
        site=site,
        tank=tank,
        station=station,
        temperature=[r.temperature_c for r in good],
        salinity=[r.salinity for r in good],
        ph_total=[r.ph_total for r in good],
        alkalinity=[r.alkalinity_used_umol_kg for r in good],
        u_alkalinity=[alkalinity_uncertainty(station, r) for r in good],
        with_uncertainty=False,  # the series carries values only
    )
    return _series(good_times=[r.observed_at for r in good], prediction=prediction)


def _tank_series_from_columns(
    *, site: Site, tank: Tank, station: Station, columns: dict[str, np.ndarray]
) -> TankSeries:
    """:func:`tank_prediction_series` over columns from :func:`station_columns` (with the
    stored DIC, when read and present for every good reading, for one solve)."""
    # Columns of good readings only (:func:`good_water_columns`) carry no QC flag.
    good = (
        _good_mask(columns)
        if "qc_overall" in columns
        else np.ones(columns["observed_at"].size, dtype=bool)
    )
    if not np.any(good):
        return TankSeries([], np.empty(0), None)
    dic = columns["dic_umol_kg"][good] if "dic_umol_kg" in columns else None
    use_dic = dic is not None and bool(np.all(np.isfinite(dic)))
    prediction = predict_tank_water(
        site=site,
        tank=tank,
        station=station,
        # Unused when the DIC carries the water (and then not read).
        temperature=columns["temperature_c"][good] if not use_dic else np.nan,
        salinity=columns["salinity"][good],
        ph_total=columns["ph_total"][good] if not use_dic else np.nan,
        alkalinity=columns["alkalinity_used_umol_kg"][good],
        with_uncertainty=False,  # the series carries values only
        dic=dic if use_dic else None,
    )
    return _series(good_times=columns["observed_at"][good], prediction=prediction)


def _series(*, good_times: Any, prediction: Any) -> TankSeries:
    return TankSeries(
        good_times,
        np.atleast_1d(prediction.omega_aragonite),
        None
        if prediction.treated_omega_aragonite is None
        # Treated where the treatment is inside the dose limits, as the alerts judge it.
        else np.atleast_1d(prediction.larvae_omega_aragonite),
    )


def omega_at_temperature(
    *, site: Site, readings: Sequence[Reading], temperature_c: float | Sequence[float]
) -> tuple[list[datetime], np.ndarray]:
    """Omega aragonite of each good reading's water carried to ``temperature_c`` (closed).

    Without the uncertainty budget: the fill-window hint and the chart need the values only.
    With one reading, ``temperature_c`` may be several temperatures (one value each).
    """
    good = _good(readings)
    if not good:
        return [], np.empty(0)
    state = chemistry.solve(
        temperature=np.array([r.temperature_c for r in good], dtype=float),
        salinity=np.array([r.salinity for r in good], dtype=float),
        ph=np.array([r.ph_total for r in good], dtype=float),
        alkalinity=np.array([r.alkalinity_used_umol_kg for r in good], dtype=float),
        ph_scale="total",
        carbonic=site.carbonic_constants,
    )
    carried = chemistry.at_temperature(state, np.asarray(temperature_c, dtype=float))
    return [r.observed_at for r in good], np.atleast_1d(
        np.asarray(carried.omega_aragonite, dtype=float)
    )


#: What a reading needs to count as good and to be carried to another temperature.
_GOOD_COLUMNS = ("qc_overall", "ph_total", "alkalinity_used_umol_kg", "temperature_c", "salinity")
#: What a tank's day reads of its source station's readings (the stored DIC carries the
#: water to the culture temperature in one solve).
_TANK_DAY_COLUMNS = (*_GOOD_COLUMNS, "dic_umol_kg")
#: What :func:`good_water_columns` reads of each good reading besides its time.
_GOOD_WATER_COLUMNS = ("alkalinity_used_umol_kg", "salinity", "dic_umol_kg")


def _good_mask(columns: dict[str, np.ndarray]) -> np.ndarray:
    """:func:`_good` over columns from :func:`station_columns`."""
    return (columns["qc_overall"] != QC_FAIL) & np.all(
        [np.isfinite(columns[name]) for name in _GOOD_COLUMNS[1:]], axis=0
    )


# --------------------------------------------------------------------------------------
# the status
# --------------------------------------------------------------------------------------


def _reading_summary(reading: Reading, as_of: datetime) -> dict[str, Any]:
    return {
        "observed_at": reading.observed_at,
        "age_minutes": (as_of - reading.observed_at).total_seconds() / 60.0,
        "omega_aragonite": reading.omega_aragonite,
        "omega_aragonite_uncertainty": reading.omega_aragonite_uncertainty,
        "ph_total": reading.ph_total,
        "pco2_uatm": reading.pco2_uatm,
        "temperature_c": reading.temperature_c,
        "salinity": reading.salinity,
        "qc_overall": reading.qc_overall,
    }


def _day_figures(totals: dict[str, Any]) -> dict[str, Any]:
    """Per variable: min, per-reading mean and max from the day's rollup totals."""
    figures = {}
    for name in DAY_VARIABLES:
        count = int(totals[f"{name}_n"])
        if count == 0:
            figures[name] = compute.DayRange(None, None, None, 0).as_dict()
            continue
        figures[name] = compute.DayRange(
            float(totals[f"{name}_min"]),
            float(totals[f"{name}_sum"]) / count,
            float(totals[f"{name}_max"]),
            count,
        ).as_dict()
    return figures


#: Rollup columns the station figures add up over the day.
_DAY_ROLLUP_COLUMNS = (
    "readings",
    *rollups.QC_FLAG_COLUMNS.values(),
    *(f"{name}_{part}" for name in DAY_VARIABLES for part in ("n", "min", "max", "sum")),
)


def station_status(
    *,
    session: Session,
    station: Station,
    window: DayWindow,
    day: dict[str, Any],
    week: tuple[np.ndarray, np.ndarray, int],
    latest: Reading | None,
) -> dict[str, Any]:
    """A station's day from its quarter-hour rollups (``day``: the day's totals from
    :func:`app.status.rollups.totals_between`; ``week``: the look-back's quarter starts,
    minute masks and off-minute count from :func:`app.status.rollups.minute_masks_between`).

    The usual sampling interval (median spacing of the week's distinct reading times) and
    the completeness need reading times. When every reading of the week is on a whole
    minute, the rollups' occupied minutes are exactly those times; otherwise (seconds in
    the times, sub-minute sampling) the times are read from the readings as before.
    """
    quarter_start, minute_mask, off_minute = week
    # Times as float seconds since 1970: plain number comparisons and no conversions in
    # the computations below (a week is 10,080 minutes a station).
    if off_minute == 0:
        history = rollups.occupied_seconds(quarter_start, minute_mask).astype(float)
    else:
        history = compute.to_epoch_seconds(
            station_columns(
                session=session,
                station_pk=station.pk,
                start=window.as_of - LOOKBACK,
                end=window.as_of,
            )["observed_at"]
        )
    # The day lies inside the look-back week (both end at as_of).
    day_times = history[history >= window.start.timestamp()]
    inferred = compute.infer_sampling_interval(history)
    interval = inferred or FALLBACK_SAMPLING_INTERVAL
    return {
        "station_id": station.id,
        "name": station.name,
        "role": station.role,
        "latest_reading": None if latest is None else _reading_summary(latest, window.as_of),
        "day": _day_figures(day),
        "readings": int(day["readings"]),
        "expected_interval_minutes": interval.total_seconds() / 60.0,
        "expected_interval_inferred": inferred is not None,
        "completeness_percent": compute.completeness_percent(
            day_times,
            start=window.start,
            end=window.as_of,
            expected_interval=interval,
        ),
        "qc_counts": {
            compute.QC_FLAG_NAMES[flag]: int(day[column])
            for flag, column in rollups.QC_FLAG_COLUMNS.items()
        },
    }


def _tank_alert_state(tank: Tank, alerts: Sequence[tuple[Alert, AlertRule]]) -> str | None:
    states = [
        alert.state
        for alert, rule in alerts
        if rule.tank_pk == tank.pk
        or (rule.tank_pk is None and rule.station_pk == tank.source_station_pk)
    ]
    return max(states, key=lambda s: _ALERT_STATE_RANK.get(s, 0)) if states else None


def tank_status(
    *,
    session: Session,
    site: Site,
    tank: Tank,
    window: DayWindow,
    alerts: Sequence[tuple[Alert, AlertRule]],
    max_gap: timedelta,
    readings: dict[str, np.ndarray] | None = None,
    latest_good: Reading | bool | None = False,
    stale_after: float | None = None,
) -> dict[str, Any]:
    """A tank's day. ``readings``: its source station's columns from ``window.start -
    max_gap`` to ``window.as_of + max_gap`` (read here when not given); ``latest_good``:
    the station's latest good reading before ``window.as_of`` (looked up when ``False``);
    ``stale_after``: the tank's no-data window in minutes (looked up when ``None``)."""
    station = tank.source_station
    if readings is None:
        # One reading either side of the day so that pieces crossing midnight are counted.
        readings = station_columns(
            session=session,
            station_pk=station.pk,
            start=window.start - max_gap,
            end=window.as_of + max_gap,
            names=_TANK_DAY_COLUMNS,
        )
    series = _tank_series_from_columns(site=site, tank=tank, station=station, columns=readings)
    floor = float(tank.omega_floor)
    span = {"start": window.start, "end": window.as_of, "max_gap": max_gap}
    minutes = compute.minutes_below(series.times, series.larvae_omega, floor, **span)
    covered = compute.covered_minutes(series.times, series.larvae_omega, **span)
    minutes_untreated = compute.minutes_below(series.times, series.omega, floor, **span)

    reading = (
        latest_good_reading(session=session, station_pk=station.pk, before=window.as_of)
        if latest_good is False
        else latest_good
    )
    advice = None
    if reading is not None:
        advice = tank_advice(
            session=session,
            site=site,
            tank=tank,
            reading=reading,
            now=window.as_of,
            stale_after=stale_after,
        )
    predicted = None
    after_treatment = None
    untreated = None
    dose = None
    if advice is not None:
        water = advice["in_tank"]
        predicted = {
            "observed_at": reading.observed_at,
            "omega_aragonite": water["omega_aragonite"],
            "omega_aragonite_uncertainty": water["omega_aragonite_uncertainty"],
            "probability_below_floor": water["probability_below_floor"],
            "ph_total": water["ph_total"],
            "pco2_uatm": water["pco2_uatm"],
            "basis": advice["in_tank_basis"],
            "age_minutes": advice["reading"]["age_minutes"],
            "stale": advice["reading"]["stale"],
        }
        untreated = {
            key: advice["untreated"][key]
            for key in ("omega_aragonite", "omega_aragonite_uncertainty", "probability_below_floor")
        }
        treated = advice.get("after_treatment")
        if treated:
            after_treatment = {
                "omega_aragonite": treated["omega_aragonite"],
                "omega_aragonite_uncertainty": treated["omega_aragonite_uncertainty"],
                "probability_below_floor": treated["probability_below_floor"],
            }
        dose = advice["dose"]
    return {
        "tank_id": tank.id,
        "name": tank.name,
        "stage": tank.stage,
        "source_station_id": station.id,
        "volume_l": float(tank.volume_l),
        "culture_temperature_c": float(tank.culture_temperature_c),
        "omega_floor": floor,
        "omega_target": float(tank.omega_target),
        "treatment": tank.treatment,
        "predicted": predicted,
        "after_treatment": after_treatment,
        "untreated": untreated,
        "source": source_description(station),
        "warnings": [] if advice is None else advice["warnings"],
        "minutes_below_floor": minutes,
        "minutes_below_floor_untreated": minutes_untreated,
        "minutes_with_data": covered,
        "alert_state": _tank_alert_state(tank, alerts),
        "dose": dose,
    }


def _quarter_omega_at_temperatures(
    *, site: Site, week: dict[str, np.ndarray], filled: np.ndarray, temperatures: Sequence[float]
) -> np.ndarray:
    """Omega aragonite of each quarter hour's mean water carried to each temperature (one
    row per temperature, one solve for all).

    The mean water is the mean alkalinity, DIC and salinity of the quarter's good readings
    (stored at ingest); alkalinity and DIC do not change on heating in a closed system, so
    this is the water at the tank's temperature.
    """
    if not np.any(filled) or not temperatures:
        return np.empty((len(temperatures), 0))
    good = week["good"][filled]
    state = chemistry.solve(
        temperature=np.asarray(temperatures, dtype=float)[:, None],
        salinity=week["good_salinity_sum"][filled] / good,
        alkalinity=week["good_alkalinity_sum"][filled] / good,
        dic=week["good_dic_sum"][filled] / good,
        carbonic=site.carbonic_constants,
    )
    return np.broadcast_to(
        np.asarray(state.omega_aragonite, dtype=float), (len(temperatures), int(good.size))
    )


def _fill_sources(stations: Sequence[Station], tanks: Sequence[Tank]) -> list[Station]:
    """The stations the fill-window hint is about: the intakes, or without one the
    stations that feed the tanks."""
    sources = [s for s in stations if s.role == "intake"]
    if not sources:
        fed = {t.source_station_pk for t in tanks}
        sources = [s for s in stations if s.pk in fed]
    return sources


def fill_window_hints(
    *,
    session: Session,
    site: Site,
    stations: Sequence[Station],
    tanks: Sequence[Tank],
    window: DayWindow,
    latest_good: dict[int, Reading | None] | None = None,
) -> list[dict[str, Any]]:
    """Per intake station and tank temperature: best local hours over the last 7 days.

    Intake stations are the ones the hint is about (water taken in to fill); a site
    without one falls back to the stations that feed its tanks.

    From the quarter-hour rollups: each quarter hour's mean water (good readings only) is
    carried to the tank temperature, and ``hourly_median[h]`` is the median of those
    quarter-hour values in local hour ``h`` over the week (before the rollups it was the
    median of every reading's value; for a station sampling every 15 minutes or slower
    the two are the same). ``hourly_count`` still counts the good readings behind each
    hour. The current value is the latest good reading's own, as before.
    """
    sources = _fill_sources(stations, tanks)
    temperatures = sorted({float(t.culture_temperature_c) for t in tanks})
    weeks = rollups.quarters_between(
        session=session,
        station_pks=[s.pk for s in sources],
        start=window.as_of - LOOKBACK,
        end=window.as_of,
        names=("good", *rollups.GOOD_SUMS),
    )
    hints = []
    for station in sources:
        week = weeks[station.pk]
        filled = week["good"] > 0
        count = week["good"][filled]
        times = week["quarter_start"][filled].astype("datetime64[s]").astype("datetime64[us]")
        latest = (
            latest_good_reading(session=session, station_pk=station.pk, before=window.as_of)
            if latest_good is None
            else latest_good[station.pk]
        )
        if latest is not None and latest.observed_at < window.as_of - LOOKBACK:
            latest = None
        omegas = _quarter_omega_at_temperatures(
            site=site, week=week, filled=filled, temperatures=temperatures
        )
        # The latest good reading's own water at every temperature, in one solve.
        current = (
            None
            if latest is None
            else omega_at_temperature(site=site, readings=[latest], temperature_c=temperatures)
        )
        for number, temperature in enumerate(temperatures):
            hint = compute.fill_window_hint(
                times, omegas[number], timezone=site.timezone, counts=count
            )
            now_vs_history = current_against_medians(
                times=[] if current is None else current[0],
                omega=[] if current is None else current[1][number : number + 1],
                best_medians=[hint.hourly_median[h] for h in hint.best_hours],
            )
            hints.append(
                {
                    "station_id": station.id,
                    "culture_temperature_c": temperature,
                    "tank_ids": [
                        t.id for t in tanks if float(t.culture_temperature_c) == temperature
                    ],
                    "station": source_description(station),
                    # Each tank's own source: a tank fed from a treated header does not get
                    # this intake's water as it is.
                    "tank_sources": {
                        t.id: source_description(t.source_station)
                        for t in tanks
                        if float(t.culture_temperature_c) == temperature
                    },
                    "lookback_days": LOOKBACK.days,
                    **hint.as_dict(),
                    **now_vs_history,
                }
            )
    return hints


#: The latest value is "far below" the best hours' medians when it is under this fraction of
#: the lowest of them (design default: a quarter lower is more than a day-night swing).
FAR_BELOW_MEDIAN_FRACTION = 0.75


def current_against_medians(
    *, times: Any, omega: Any, best_medians: Sequence[float | None]
) -> dict[str, Any]:
    """The latest value beside the best hours' medians, and a note when it is far below them.

    The medians summarise the past week; during an event (an upwelling under way) the water
    now can be far from them, and the hint must not read as a forecast.
    """
    values = np.asarray(omega, dtype=float)
    finite = np.flatnonzero(np.isfinite(values))
    medians = [m for m in best_medians if m is not None]
    if finite.size == 0:
        return {"current_omega_aragonite": None, "current_observed_at": None,
                "current_far_below": False, "current_note": None}
    last = int(finite[-1])
    current = float(values[last])
    observed = times[last]
    if isinstance(observed, np.datetime64):
        observed = datetime.fromtimestamp(
            observed.astype("datetime64[us]").astype(np.int64) / 1e6, tz=UTC)
    far_below = bool(medians) and current < FAR_BELOW_MEDIAN_FRACTION * min(medians)
    note = None
    if far_below:
        note = (
            f"The latest value, {current:.2f}, is far below these medians "
            f"({min(medians):.2f} to {max(medians):.2f}): the medians are the past week, not a "
            "forecast, and the water now differs (an upwelling or other event may be under "
            "way). Measure the intake before filling."
        )
    return {"current_omega_aragonite": current, "current_observed_at": observed,
            "current_far_below": far_below, "current_note": note}


def alert_summary(alert: Alert, rule: AlertRule, tanks_by_pk: dict[int, Tank],
                  stations_by_pk: dict[int, Station]) -> dict[str, Any]:
    return {
        "id": alert.id,
        "rule_id": rule.id,
        "metric": rule.metric,
        "direction": rule.direction,
        "level": rule.level,
        "tank_id": tanks_by_pk[rule.tank_pk].id if rule.tank_pk in tanks_by_pk else None,
        "station_id": (
            stations_by_pk[rule.station_pk].id if rule.station_pk in stations_by_pk else None
        ),
        "state": alert.state,
        "since": alert.since,
        "raised_at": alert.raised_at,
        "last_value": alert.last_value,
        "last_value_uncertainty": alert.last_value_uncertainty,
        "acknowledged_at": alert.acknowledged_at,
        "acknowledged_by": alert.acknowledged_by,
        "caution": chemistry.DOSING_CAUTION,
    }


def site_status(
    *,
    session: Session,
    site: Site,
    day: date | None,
    now: datetime,
    max_gap: timedelta = compute.DEFAULT_MAX_GAP,
) -> dict[str, Any]:
    """Everything the daily status shows, as JSON-able data."""
    window = day_window(site, day, now)
    stations = list(session.scalars(_site_stations_query(), {"site_id": site.id}))
    tanks = list(session.scalars(_site_tanks_query(), {"site_id": site.id}))
    alerts = open_alerts(session=session, site_id=site.id)
    tanks_by_pk = {t.pk: t for t in tanks}
    stations_by_pk = {s.pk: s for s in stations}
    station_pks = [s.pk for s in stations]
    days = rollups.totals_between(
        session=session,
        station_pks=station_pks,
        start=window.start,
        end=window.as_of,
        names=_DAY_ROLLUP_COLUMNS,
    )
    weeks = rollups.minute_masks_between(
        session=session, station_pks=station_pks, start=window.as_of - LOOKBACK, end=window.as_of
    )
    latest = latest_readings(session=session, station_pks=station_pks, before=window.as_of)
    fed = sorted({t.source_station_pk for t in tanks})
    # One reading either side of the day so that pieces crossing midnight are counted.
    day_span = {"start": window.start - max_gap, "end": window.as_of + max_gap}
    found = good_water_columns(session=session, station_pks=fed, **day_span)
    lacking = [pk for pk, columns in found.items() if columns is None]
    tank_days = {pk: columns for pk, columns in found.items() if columns is not None}
    if lacking:  # readings stored without their DIC: every column, filtered here
        tank_days.update(
            stations_columns(
                session=session, station_pks=lacking, names=_TANK_DAY_COLUMNS, **day_span
            )
        )
    latest_good: dict[int, Reading | None] = {}
    for pk in sorted({*fed, *(s.pk for s in _fill_sources(stations, tanks))}):
        # Usually the station's latest reading is good: then it is the latest good one
        # (no second look-up; of readings at the same time, the one latest_readings picks).
        newest = latest.get(pk)
        # No reading at all: no good one either.
        latest_good[pk] = (
            newest
            if newest is None or _good([newest])
            else latest_good_reading(session=session, station_pk=pk, before=window.as_of)
        )
    stale_after = stale_after_by_tank(session=session, tanks=tanks)
    return {
        "site_id": site.id,
        "site_name": site.name,
        "timezone": site.timezone,
        "date": window.day,
        "start": window.start,
        "end": window.end,
        "as_of": window.as_of,
        "day_complete": window.is_complete,
        "max_gap_minutes": max_gap.total_seconds() / 60.0,
        "stations": [
            station_status(
                session=session,
                station=s,
                window=window,
                day=days[s.pk],
                week=weeks[s.pk],
                latest=latest.get(s.pk),
            )
            for s in stations
        ],
        "tanks": [
            tank_status(
                session=session, site=site, tank=t, window=window, alerts=alerts,
                max_gap=max_gap, readings=tank_days[t.source_station_pk],
                latest_good=latest_good[t.source_station_pk],
                stale_after=stale_after[t.pk],
            )
            for t in tanks
        ],
        "open_alerts": [alert_summary(a, r, tanks_by_pk, stations_by_pk) for a, r in alerts],
        "fill_window": fill_window_hints(
            session=session, site=site, stations=stations, tanks=tanks, window=window,
            latest_good=latest_good,
        ),
        "chemistry_version": chemistry.CHEMISTRY_VERSION,
        "caution": chemistry.DOSING_CAUTION,
    }
