"""Storing sensor readings: validation, duplicates, derived chemistry and QC.

``ingest_readings`` is the one code path for every way readings arrive (the HTTP API,
the CSV importer, the demo loader). It runs inside the caller's transaction and leaves
the commit to the caller, so the readings, the QC flags of their neighbours and any
alert change commit or roll back together.

Duplicates: a reading is identified by (station, source, observed_at) and, when the
sensor gives one, by (station, source, reading_id). A retry with the same values is
counted as a duplicate; the same key with other values is rejected, never overwritten.
Two requests racing with the same reading are settled by the unique constraints
(``INSERT ... ON CONFLICT DO NOTHING``), not by the check that precedes the insert.
"""

from __future__ import annotations

import datetime as dt
import functools
import logging
import math
from collections import namedtuple
from collections.abc import Callable, Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from types import SimpleNamespace
from typing import Any

import numpy as np
from sqlalchemy import (
    Connection,
    Float,
    Integer,
    Select,
    String,
    bindparam,
    cast,
    func,
    literal_column,
    or_,
    select,
    text,
    type_coerce,
    update,
)
from sqlalchemy.orm import Session

from app.db_rows import driver_rows
from app.readings import recent
from app.readings.models import Reading
from app.readings.qc import (
    QcFlag,
    QcLimits,
    gross_range_test,
    limits_with_overrides,
    run_qc,
)
from app.readings.schemas import CheckedReading, ReadingIn, RejectedItem, validate_readings
from app.sites.models import Site, Station
from app.status.rollups import refresh_rollups

logger = logging.getLogger(__name__)

# Standard uncertainty of the alkalinity used, umol/kg, when the station does not say.
# Design defaults: a careful hatchery titration is good to about 10 umol/kg (common
# practice); an assumed constant or a salinity line stands for water that varies, so
# it gets twice that.
DEFAULT_ALKALINITY_UNCERTAINTY: Mapping[str, float] = {
    "reading": 10.0,
    "fixed": 20.0,
    "salinity_line": 20.0,
}

# Database round trips: IN lists and executemany batches are kept at this size.
CHUNK = 900
# Requests of up to this many readings look up stored matches by time and id in one
# query (the IN lists stay short).
SMALL_REQUEST = 20
# Rows per multi-row INSERT: about 30 columns each stays under SQLite's 32766 bound
# parameters per statement (and PostgreSQL's 65535).
INSERT_CHUNK = 500
# Rows per INSERT ... SELECT FROM unnest on PostgreSQL (the whole largest request).
POSTGRESQL_INSERT_CHUNK = 5000

QC_COLUMNS = (
    "qc_temperature",
    "qc_salinity",
    "qc_ph",
    "qc_alkalinity",
    "qc_derived",
    "qc_overall",
)

DERIVED_COLUMNS = (
    "ph_total",
    "dic_umol_kg",
    "pco2_uatm",
    "carbonate_umol_kg",
    "omega_aragonite",
    "omega_calcite",
    "omega_aragonite_uncertainty",
)


@dataclass
class IngestResult:
    accepted: int = 0
    duplicates: int = 0
    rejected: list[RejectedItem] = field(default_factory=list)
    stored_ids: list[int] = field(default_factory=list)

    def reject(self, index: int, errors: list[str]) -> None:
        self.rejected.append(RejectedItem(index=index, errors=errors))


@dataclass(slots=True)
class _Candidate:
    index: int
    reading: ReadingIn | CheckedReading
    alkalinity_input: float | None = None

    @property
    def identity(self) -> tuple[Any, ...]:
        """The raw values a retry must repeat exactly to count as a duplicate."""
        r = self.reading
        return (r.temperature_c, r.salinity, r.ph, r.ph_scale, self.alkalinity_input)


def _same_values(stored: tuple[Any, ...], posted: tuple[Any, ...]) -> bool:
    for old, new in zip(stored, posted, strict=True):
        if old is None or new is None:
            if old is not new:
                return False
        elif isinstance(old, float) or isinstance(new, float):
            # The stored float went through the database; allow for its last bit only.
            if not math.isclose(float(old), float(new), rel_tol=1e-12, abs_tol=1e-12):
                return False
        elif old != new:
            return False
    return True


def _chunks(items: Sequence[Any], size: int = CHUNK) -> list[Sequence[Any]]:
    return [items[start : start + size] for start in range(0, len(items), size)]


_MATCH_COLUMNS = (
    Reading.id,
    Reading.observed_at,
    Reading.reading_id,
    Reading.temperature_c,
    Reading.salinity,
    Reading.ph,
    Reading.ph_scale,
    Reading.alkalinity_input_umol_kg,
)


# A stored match found on SQLite's own cursor, with the attributes of a Core row.
_Match = namedtuple("_Match", [column.key for column in _MATCH_COLUMNS])


def _stored_matches(
    session: Session, *, station_pk: int, source: str, candidates: Sequence[_Candidate]
) -> list[Any]:
    """Stored readings of this station and source sharing a time or id with a candidate."""
    times = [c.reading.observed_at for c in candidates]
    wanted = set(times)  # aware datetimes hash by their UTC instant, whatever the offset
    this_sensor = (Reading.station_pk == station_pk, Reading.source == source)
    ids = [c.reading.reading_id for c in candidates if c.reading.reading_id is not None]
    if len(candidates) <= SMALL_REQUEST:
        # A device's usual request (a reading or a few): times and ids in one round trip.
        parameters: dict[str, Any] = {"station_pk": station_pk, "source": source, "times": times}
        if ids:
            parameters["ids"] = ids
        rows = list(session.execute(_small_match_query(bool(ids)), parameters))
        return list({row.id: row for row in rows}.values())
    # Readings usually arrive in time order, so the span of a request holds few stored
    # rows or none: one range scan of the unique index beats binding every time. A span
    # that turns out to be crowded (a backfill between stored readings) is looked up
    # time by time instead.
    crowded = 2 * len(candidates) + 100
    connection = session.connection()
    if connection.dialect.name == "sqlite":
        return _sqlite_matches(
            connection,
            station_pk=station_pk,
            source=source,
            times=times,
            ids=ids,
            crowded=crowded,
        )
    in_span = session.execute(
        select(*_MATCH_COLUMNS)
        .where(*this_sensor, Reading.observed_at >= min(times), Reading.observed_at <= max(times))
        .limit(crowded + 1)
    ).all()
    if len(in_span) <= crowded:
        rows = [row for row in in_span if row.observed_at in wanted]
    else:
        rows = []
        for chunk in _chunks(times):
            rows.extend(
                session.execute(
                    select(*_MATCH_COLUMNS).where(*this_sensor, Reading.observed_at.in_(chunk))
                ).all()
            )
    for chunk in _chunks(ids):
        rows.extend(
            session.execute(
                select(*_MATCH_COLUMNS).where(*this_sensor, Reading.reading_id.in_(chunk))
            ).all()
        )
    unique = {row.id: row for row in rows}
    return list(unique.values())


def _sqlite_matches(
    connection: Connection,
    *,
    station_pk: int,
    source: str,
    times: Sequence[dt.datetime],
    ids: Sequence[str],
    crowded: int,
) -> list[Any]:
    """``_stored_matches`` of a large request on SQLite, on the driver's cursor.

    The same three look-ups (the span, or the times one by one when the span is
    crowded, and the ids). SQLAlchemy spends longer expanding an IN list of hundreds of
    values than SQLite spends answering it, so the statements are written here; times
    are bound as the text the column stores, and only the rows found (usually none)
    are converted back, by the columns' own result processors.
    """
    table = Reading.__table__
    dialect = connection.dialect
    time_text = table.c.observed_at.type.dialect_impl(dialect).bind_processor(dialect)
    selected = f"SELECT {', '.join(c.key for c in _MATCH_COLUMNS)} FROM {table.name} "
    sensor = "WHERE station_pk = ? AND source = ? AND "
    found: list[tuple[Any, ...]] = []
    cursor = connection.connection.driver_connection.cursor()
    try:

        def fetch(condition: str, values: Sequence[Any]) -> list[tuple[Any, ...]]:
            cursor.execute(selected + sensor + condition, (station_pk, source, *values))
            return cursor.fetchall()

        in_span = fetch(
            "observed_at >= ? AND observed_at <= ? LIMIT ?",
            (time_text(min(times)), time_text(max(times)), crowded + 1),
        )
        if len(in_span) <= crowded:
            found.extend(in_span)  # the rows at other times are left out below
        else:
            texts = [time_text(t) for t in times]
            for chunk in _chunks(texts):
                found.extend(fetch(f"observed_at IN ({_marks(len(chunk))})", list(chunk)))
        for chunk in _chunks(ids):
            found.extend(fetch(f"reading_id IN ({_marks(len(chunk))})", list(chunk)))
    finally:
        cursor.close()
    if not found:
        return []
    convert = [
        column.type.dialect_impl(dialect).result_processor(dialect, None)
        for column in _MATCH_COLUMNS
    ]
    unique = {row[0]: row for row in found}
    matches = [
        _Match(*(v if fn is None else fn(v) for fn, v in zip(convert, row, strict=True)))
        for row in unique.values()
    ]
    wanted = set(times)  # aware datetimes hash by their UTC instant, whatever the offset
    wanted_ids = set(ids)
    return [m for m in matches if m.observed_at in wanted or m.reading_id in wanted_ids]


def _marks(count: int) -> str:
    return ", ".join(["?"] * count)


def _classify_against_stored(
    candidates: Sequence[_Candidate], stored: Sequence[Any], result: IngestResult
) -> list[_Candidate]:
    """Count duplicates, reject conflicts, return the candidates that are new."""
    by_time = {row.observed_at: row for row in stored}
    by_id = {row.reading_id: row for row in stored if row.reading_id is not None}
    fresh: list[_Candidate] = []
    for candidate in candidates:
        reading = candidate.reading
        same_time = by_time.get(reading.observed_at)
        same_id = by_id.get(reading.reading_id) if reading.reading_id is not None else None
        if same_time is None and same_id is None:
            fresh.append(candidate)
            continue
        matched = same_time or same_id
        stored_values = (
            matched.temperature_c,
            matched.salinity,
            matched.ph,
            matched.ph_scale,
            matched.alkalinity_input_umol_kg,
        )
        id_agrees = reading.reading_id is None or matched.reading_id in (None, reading.reading_id)
        if (
            (same_time is None or same_id is None or same_time.id == same_id.id)
            and matched.observed_at == reading.observed_at
            and id_agrees
            and _same_values(stored_values, candidate.identity)
        ):
            result.duplicates += 1
            continue
        key = (
            f"reading_id {reading.reading_id!r}"
            if same_id is not None
            else f"observed_at {reading.observed_at.isoformat()}"
        )
        result.reject(
            candidate.index,
            [
                f"a reading with {key} is already stored for this sensor with different "
                "values; stored readings are never overwritten (send a new reading_id or "
                "observed_at)"
            ],
        )
    return fresh


def _deduplicate_batch(candidates: Sequence[_Candidate], result: IngestResult) -> list[_Candidate]:
    """Settle repeats inside one request: the first item of a key wins."""
    first_by_time: dict[dt.datetime, _Candidate] = {}
    first_by_id: dict[str, _Candidate] = {}
    unique: list[_Candidate] = []
    for candidate in candidates:
        reading = candidate.reading
        earlier = first_by_time.get(reading.observed_at)
        if earlier is None and reading.reading_id is not None:
            earlier = first_by_id.get(reading.reading_id)
        if earlier is None:
            first_by_time[reading.observed_at] = candidate
            if reading.reading_id is not None:
                first_by_id[reading.reading_id] = candidate
            unique.append(candidate)
            continue
        if (
            earlier.reading.observed_at == reading.observed_at
            and earlier.reading.reading_id == reading.reading_id
            and _same_values(earlier.identity, candidate.identity)
        ):
            result.duplicates += 1
        else:
            result.reject(
                candidate.index,
                [
                    f"item {earlier.index} of this request has the same observed_at or "
                    "reading_id with different values"
                ],
            )
    return unique


def _convert_alkalinity(candidates: Sequence[_Candidate]) -> None:
    from chemistry import alkalinity_from_mg_per_l_caco3

    in_mg = [c for c in candidates if c.reading.alkalinity_mg_l_caco3 is not None]
    if in_mg:
        converted = alkalinity_from_mg_per_l_caco3(
            np.array([c.reading.alkalinity_mg_l_caco3 for c in in_mg]),
            np.array([c.reading.temperature_c for c in in_mg]),
            np.array([c.reading.salinity for c in in_mg]),
        )
        for candidate, value in zip(in_mg, np.atleast_1d(converted), strict=True):
            candidate.alkalinity_input = float(value)
    for candidate in candidates:
        if candidate.reading.alkalinity_umol_kg is not None:
            candidate.alkalinity_input = candidate.reading.alkalinity_umol_kg


def _alkalinity_used(
    candidates: Sequence[_Candidate], station: Station
) -> tuple[np.ndarray, np.ndarray, list[str | None]]:
    """Alkalinity used per candidate (umol/kg, NaN if none), its uncertainty and source."""
    mode = station.alkalinity or {"mode": "reading"}
    kind = mode.get("mode", "reading")
    used = np.full(len(candidates), np.nan)
    uncertainty = np.full(len(candidates), np.nan)
    sources: list[str | None] = [None] * len(candidates)
    for i, candidate in enumerate(candidates):
        salinity = candidate.reading.salinity
        if candidate.alkalinity_input is not None:
            used[i] = candidate.alkalinity_input
            uncertainty[i] = DEFAULT_ALKALINITY_UNCERTAINTY["reading"]
            sources[i] = "reading"
        elif kind == "fixed" and mode.get("value") is not None:
            used[i] = float(mode["value"])
            uncertainty[i] = float(
                mode.get("uncertainty") or DEFAULT_ALKALINITY_UNCERTAINTY["fixed"]
            )
            sources[i] = "fixed"
        elif kind == "salinity_line" and salinity is not None:
            used[i] = float(mode["slope"]) * salinity + float(mode["intercept"])
            uncertainty[i] = float(
                mode.get("residual_sd") or DEFAULT_ALKALINITY_UNCERTAINTY["salinity_line"]
            )
            sources[i] = "salinity_line"
    return used, uncertainty, sources


def _derive(
    *,
    temperature: np.ndarray,
    salinity: np.ndarray,
    ph: np.ndarray,
    ph_scale: Sequence[str | None],
    alkalinity: np.ndarray,
    u_alkalinity: np.ndarray,
    u_ph: float,
    carbonic: str,
    sensor_fault: np.ndarray,
) -> dict[str, np.ndarray]:
    """Chemistry at in-situ temperature for every derivable reading (NaN elsewhere).

    Readings with an input outside its sensor span (a gross-range fail) are not
    derived: their chemistry would be numbers about a broken sensor, not about water.

    One vectorised ``solve`` per pH scale present; a batch the engine refuses as a
    whole is retried reading by reading, so one underivable reading costs only itself.
    """
    from chemistry import ChemistryInputError, solve, standard_uncertainty

    size = temperature.size
    out = {name: np.full(size, np.nan) for name in DERIVED_COLUMNS}
    scales = np.array([s or "" for s in ph_scale])
    derivable = (
        np.isfinite(temperature)
        & np.isfinite(salinity)
        & np.isfinite(ph)
        & np.isfinite(alkalinity)
        & (scales != "")
        & ~sensor_fault
    )

    def run(index: np.ndarray, scale: str) -> None:
        inputs = dict(
            temperature=temperature[index],
            salinity=salinity[index],
            ph=ph[index],
            alkalinity=alkalinity[index],
            ph_scale=scale,
            carbonic=carbonic,
        )
        state = solve(**inputs)
        uncertainty = standard_uncertainty(
            **inputs,
            u_ph=u_ph,
            u_alkalinity=u_alkalinity[index],
            base=state,
            outputs=("omega_aragonite",),  # the one uncertainty a reading stores
        )
        values = {
            "ph_total": state.ph_total,
            "dic_umol_kg": state.dic,
            "pco2_uatm": state.pco2,
            "carbonate_umol_kg": state.carbonate,
            "omega_aragonite": state.omega_aragonite,
            "omega_calcite": state.omega_calcite,
            "omega_aragonite_uncertainty": uncertainty["omega_aragonite"],
        }
        for name, value in values.items():
            out[name][index] = np.broadcast_to(np.asarray(value, dtype=float), index.shape)

    for scale in sorted(set(scales[derivable].tolist())):
        index = np.flatnonzero(derivable & (scales == scale))
        try:
            run(index, scale)
        except ChemistryInputError:
            for single in index:
                try:
                    run(np.array([single]), scale)
                except ChemistryInputError as error:
                    logger.info("reading not derived: %s", error)
    return out


def _qc_limits(station: Station) -> Mapping[str, QcLimits]:
    try:
        return limits_with_overrides(station.qc_limits or None)
    except ValueError as error:
        # Limits are validated when a station is saved; a stored set that no longer
        # validates must not stop readings from being stored.
        logger.warning("station %s: QC limits ignored (%s); using the defaults", station.pk, error)
        return limits_with_overrides(None)


@functools.cache
def _context_query(sqlite: bool) -> Select[Any]:
    """The neighbours query, built once: building a select costs more than running it."""
    # SQLite keeps naive UTC text, which numpy parses a column at a time in C; PostgreSQL
    # gives the epoch seconds itself (exact microseconds, rounded once to a double, as
    # ``_epoch_seconds`` rounds the new readings' times).
    observed = (
        type_coerce(Reading.observed_at, String)
        if sqlite
        else cast(func.extract("epoch", Reading.observed_at), Float)
    )
    return (
        select(
            Reading.id,
            observed,
            Reading.temperature_c,
            Reading.salinity,
            Reading.ph,
            Reading.alkalinity_input_umol_kg,
            *_CONTEXT_MARKS,
            *(getattr(Reading, name) for name in QC_COLUMNS),
        )
        .where(
            Reading.station_pk == bindparam("station_pk"),
            Reading.observed_at >= bindparam("start"),
            Reading.observed_at <= bindparam("end"),
        )
        .order_by(Reading.observed_at, Reading.id)
    )


# The columns QC reads of each stored neighbour: its time, then the values the recent-values
# memory keeps (which holds the time as epoch seconds instead of the stored text).
_VALUE_NAMES = ("observed_at", *recent.VALUE_COLUMNS[1:])

#: What QC needs of a stored reading's alkalinity source and chemistry, as 0 or 1 from the
#: database (small integers cost Python nothing; a string or float per row does).
_CONTEXT_MARKS = (
    # Written into the SQL: the statements are compiled once and run on the driver's cursor.
    cast(
        Reading.alkalinity_source.in_(
            [literal_column("'fixed'"), literal_column("'salinity_line'")]
        ),
        Integer,
    ).label("from_station"),
    cast(Reading.omega_aragonite.is_not(None), Integer).label("available"),
)


@functools.cache
def _sqlite_context_queries() -> tuple[Select[Any], Select[Any]]:
    """SQLite's neighbours in two parts, built once: what QC tests (times and values) for
    the whole window, and ids with the stored flags only where flags may change.

    SQLite's cost here is per column and row returned; the flags of the rows outside the
    span a new reading can touch are never compared, so they are not read.
    """
    span = (
        Reading.station_pk == bindparam("station_pk"),
        Reading.observed_at >= bindparam("start"),
        Reading.observed_at <= bindparam("end"),
    )
    observed = type_coerce(Reading.observed_at, String)
    order = (Reading.observed_at, Reading.id)
    values = select(
        observed, *(getattr(Reading, name) for name in _VALUE_NAMES[1:5]), *_CONTEXT_MARKS
    )
    flags = select(observed, Reading.id, *(getattr(Reading, name) for name in QC_COLUMNS))
    return values.where(*span).order_by(*order), flags.where(*span).order_by(*order)


@functools.cache
def _small_match_query(with_ids: bool) -> Select[Any]:
    """Stored readings of a sensor at any of ``times`` (or with any of ``ids``), built once."""
    at_times = Reading.observed_at.in_(bindparam("times", expanding=True))
    return select(*_MATCH_COLUMNS).where(
        Reading.station_pk == bindparam("station_pk"),
        Reading.source == bindparam("source"),
        or_(at_times, Reading.reading_id.in_(bindparam("ids", expanding=True)))
        if with_ids
        else at_times,
    )


@dataclass
class _Context:
    """The stored neighbours QC read (``columns``, see :func:`_context_columns`) and, on
    SQLite, what the recent-values memory needs to keep them after the commit: the
    window read (microseconds since 1970, both ends included) and the readings table's
    largest id when it was read."""

    columns: dict[str, np.ndarray]
    start_us: int
    end_us: int
    table_max_id: int | None = None


def _context_columns(
    session: Session,
    station: Station,
    start: dt.datetime,
    end: dt.datetime,
    *,
    affected: tuple[dt.datetime, dt.datetime],
) -> _Context:
    """The station's stored readings in [start, end], time order, as numpy columns.

    QC reads about a day of neighbours for every request, so the rows are taken as plain
    tuples and turned into arrays in bulk: per-row datetime objects (and, on SQLite,
    parsing each stored time in Python) cost more than the QC itself. ``affected`` is the
    span whose stored flags may change (``"affected"`` marks those rows); ids and flags
    are only meaningful there. On SQLite the values the last committed request of this
    process read and stored are reused when still current (:mod:`app.readings.recent`).
    """
    connection = session.connection()
    start_us, end_us = (int(v) for v in _epoch_micros([start, end]))
    if connection.dialect.name == "sqlite":
        found = _sqlite_context(connection, station, (start, end), (start_us, end_us), affected)
        if found is not None:
            columns, table_max_id = found
            return _Context(columns, start_us, end_us, table_max_id)
    # SQLite's parts disagreed (kept values that no longer match the table; the table's
    # own two reads cannot disagree within one transaction) or PostgreSQL: every column of
    # every row in one query.
    columns = _context_columns_whole(connection, station.pk, start, end, affected)
    return _Context(columns, start_us, end_us)


def _context_arrays(
    columns: Mapping[str, Sequence[Any]], seconds: np.ndarray
) -> dict[str, np.ndarray]:
    out: dict[str, np.ndarray] = {
        "seconds": seconds,
        # NULL (no alkalinity source) counts as not from the station.
        "from_station": np.array(columns["from_station"], dtype=float) == 1,
        "available": np.array(columns["available"], dtype=bool),
    }
    for name in ("temperature_c", "salinity", "ph", "alkalinity_input_umol_kg"):
        out[name] = np.array(columns[name], dtype=float)  # None becomes NaN
    return out


def _sqlite_seconds(texts: Sequence[str]) -> np.ndarray:
    # SQLite keeps naive UTC text, which numpy parses a column at a time in C.
    return np.array(texts, dtype="datetime64[us]").astype(np.int64) / 1e6


def _memory_key(station: Station) -> tuple[int, Any]:
    # created_at too: a station deleted (with its readings) and made again gets a new one.
    return (station.pk, station.created_at)


def _sqlite_context(
    connection: Connection,
    station: Station,
    window: tuple[dt.datetime, dt.datetime],
    window_us: tuple[int, int],
    affected: tuple[dt.datetime, dt.datetime],
) -> tuple[dict[str, np.ndarray], int] | None:
    """``_context_columns`` on SQLite's own cursor, values and flags read apart; with the
    readings table's largest id at the time.

    Every selected column comes back from the driver as SQLAlchemy would give it (text,
    floats, integers: no result processing). The values kept by the last committed
    request (``recent.recall``) stand for the part of the window they cover, and only the
    rest is read. The flags' rows are the values' rows with a time in ``affected``, in the
    same order; None if they do not line up.
    """
    values_query, flags_query = _sqlite_context_queries()
    cursor = connection.connection.driver_connection.cursor()
    try:
        cursor.execute(f"SELECT coalesce(max(id), 0) FROM {Reading.__table__.name}")
        (table_max_id,) = cursor.fetchone()
    finally:
        cursor.close()
    start, end = window
    start_us, end_us = window_us
    key = _memory_key(station)
    kept = recent.recall(key, start_us=start_us, table_max_id=table_max_id)
    parts: list[Mapping[str, np.ndarray]] = []
    read_from: dt.datetime | None = start
    if kept is not None:
        parts.append(recent.between(kept, start_us, end_us))
        # The rest of the window: after what is kept, and never before the window itself
        # (kept values of an earlier stretch, after a backfill, cover none of it).
        read_from = (
            None
            if kept.hi_us >= end_us
            else _EPOCH + dt.timedelta(microseconds=max(start_us, kept.hi_us + 1))
        )
    if read_from is not None:
        rows = driver_rows(
            connection, values_query, {"station_pk": station.pk, "start": read_from, "end": end}
        )
        if rows:
            columns = dict(zip(_VALUE_NAMES, zip(*rows, strict=True), strict=True))
        else:
            columns = {name: () for name in _VALUE_NAMES}
        parts.append(_context_arrays(columns, _sqlite_seconds(columns["observed_at"])))
    out = recent.joined(parts) if len(parts) > 1 else dict(parts[0])
    flag_rows = driver_rows(
        connection,
        flags_query,
        {"station_pk": station.pk, "start": affected[0], "end": affected[1]},
    )
    seconds = out["seconds"]
    low = int(np.searchsorted(seconds, _epoch_seconds(affected[0]), side="left"))
    high = int(np.searchsorted(seconds, _epoch_seconds(affected[1]), side="right"))
    flag_times = _sqlite_seconds([row[0] for row in flag_rows])
    if high - low != len(flag_rows) or not np.array_equal(flag_times, seconds[low:high]):
        if kept is not None:  # the kept values disagree with the table: never again
            recent.forget(key)
        return None
    count = seconds.size
    out["affected"] = np.zeros(count, dtype=bool)
    out["affected"][low:high] = True
    flags = list(zip(*flag_rows, strict=True)) if flag_rows else [()] * (2 + len(QC_COLUMNS))
    # Rows outside the affected span keep id and flags 0: never compared nor updated.
    for position, name in enumerate(("id", *QC_COLUMNS), start=1):
        out[name] = np.zeros(count, dtype=np.int64)
        out[name][low:high] = np.array(flags[position], dtype=np.int64)
    return out, table_max_id


def _context_columns_whole(
    connection: Connection,
    station_pk: int,
    start: dt.datetime,
    end: dt.datetime,
    affected: tuple[dt.datetime, dt.datetime],
) -> dict[str, np.ndarray]:
    sqlite = connection.dialect.name == "sqlite"
    query = _context_query(sqlite)
    parameters = {"station_pk": station_pk, "start": start, "end": end}
    if sqlite:
        rows: Sequence[Any] = driver_rows(connection, query, parameters)
    else:
        # Core rows straight from the connection: no ORM row processing.
        rows = connection.execute(query, parameters).all()
    names = ("id", *_VALUE_NAMES, *QC_COLUMNS)
    if not rows:
        columns: dict[str, Sequence[Any]] = {name: () for name in names}
    else:
        columns = dict(zip(names, zip(*rows, strict=True), strict=True))
    if sqlite:
        seconds = _sqlite_seconds(columns["observed_at"])
    else:
        # PostgreSQL gives the epoch seconds itself (exact microseconds, rounded once to
        # a double, as ``_epoch_seconds`` rounds the new readings' times).
        seconds = np.array(columns["observed_at"], dtype=float)
    out = _context_arrays(columns, seconds)
    out["affected"] = (seconds >= _epoch_seconds(affected[0])) & (
        seconds <= _epoch_seconds(affected[1])
    )
    out["id"] = np.array(columns["id"], dtype=np.int64)
    for name in QC_COLUMNS:
        out[name] = np.array(columns[name], dtype=np.int64)
    return out


_EPOCH = dt.datetime(1970, 1, 1, tzinfo=dt.UTC)


def _epoch_seconds(moment: dt.datetime) -> float:
    return (moment - _EPOCH).total_seconds()


def _quality_control(
    session: Session,
    *,
    station: Station,
    limits: Mapping[str, QcLimits],
    times: list[dt.datetime],
    temperature: np.ndarray,
    salinity: np.ndarray,
    ph: np.ndarray,
    alkalinity_input: np.ndarray,
    alkalinity_source: Sequence[str | None],
    derived_available: np.ndarray,
) -> tuple[dict[str, np.ndarray], list[dict[str, Any]], _Context]:
    """QC flags for the new readings, the changed flags of stored neighbours and the stored
    neighbours read.

    The new readings are tested together with the station's stored readings around
    them, in time order: a backfilled reading is judged against its neighbours in
    time, and neighbours whose tests it touches (the spike test of the reading before
    it, the rate-of-change window of the readings after it) are tested again.
    """
    window = dt.timedelta(hours=max(lim.rate_of_change_window_hours for lim in limits.values()))
    gap = dt.timedelta(minutes=max(lim.max_gap_minutes for lim in limits.values()))
    first, last = min(times), max(times)
    # Stored flags can change from a gap before the first new reading (its spike test gains
    # a neighbour) to a window after the last (their rate of change sees it); testing
    # those needs a window and a gap more on each side.
    context = _context_columns(
        session,
        station,
        first - window - gap,
        last + window + gap,
        affected=(first - gap, last + window),
    )
    stored = context.columns

    count = stored["id"].size
    # datetime.timestamp() of an aware time is _epoch_seconds, in one C call.
    seconds = np.concatenate([stored["seconds"], [t.timestamp() for t in times]])
    from_station = np.concatenate(
        [
            stored["from_station"],
            np.array(
                [source in ("fixed", "salinity_line") for source in alkalinity_source],
                dtype=bool,
            ),
        ]
    )
    available = np.concatenate([stored["available"], derived_available])

    def column(name: str, new: np.ndarray) -> np.ndarray:
        return np.concatenate([stored[name], new])

    result = run_qc(
        times=seconds,
        temperature=column("temperature_c", temperature),
        salinity=column("salinity", salinity),
        ph=column("ph", ph),
        alkalinity=column("alkalinity_input_umol_kg", alkalinity_input),
        alkalinity_from_station=from_station,
        derived_available=available,
        limits=limits,
    )
    flags = {
        "qc_temperature": result.temperature,
        "qc_salinity": result.salinity,
        "qc_ph": result.ph,
        "qc_alkalinity": result.alkalinity,
        "qc_derived": result.derived,
        "qc_overall": result.overall,
    }
    changed = stored["affected"].copy()
    changed &= (
        np.any([stored[name] != flags[name][:count] for name in QC_COLUMNS], axis=0)
        if count
        else np.zeros(0, dtype=bool)
    )
    changes: list[dict[str, Any]] = [
        {"id": int(stored["id"][i]), **{name: int(flags[name][i]) for name in QC_COLUMNS}}
        for i in np.flatnonzero(changed)
    ]
    new_reading_flags = {name: flags[name][count:] for name in QC_COLUMNS}
    return new_reading_flags, changes, context


def _keep_recent_values(
    session: Session,
    *,
    station: Station,
    context: _Context,
    micros: np.ndarray,
    new_values: Mapping[str, np.ndarray],
    stored_here: np.ndarray,
    inserted: Mapping[dt.datetime, int],
) -> None:
    """Stage, for after the commit, the neighbours QC read and the rows this request stored
    (``stored_here`` marks them among the new values, in time order): the next request of
    the station reads only what lies outside them (:mod:`app.readings.recent`)."""
    if context.table_max_id is None or not inserted:
        return
    ours = {name: values[stored_here] for name, values in new_values.items()}
    ours["seconds"] = micros[stored_here] / 1e6  # as _sqlite_seconds reads them back
    neighbours = {name: context.columns[name] for name in recent.VALUE_COLUMNS}
    recent.stage(
        session,
        _memory_key(station),
        recent.RecentValues(
            lo_us=context.start_us,
            hi_us=context.end_us,
            # SQLite gave this request's rows the largest ids, under its write lock.
            table_max_id=max(context.table_max_id, *inserted.values()),
            columns=recent.joined([neighbours, ours]),
        ),
    )


def _column_chunks(columns: Mapping[str, list[Any]], size: int) -> list[dict[str, list[Any]]]:
    count = len(next(iter(columns.values())))
    return [
        {name: values[start : start + size] for name, values in columns.items()}
        for start in range(0, count, size)
    ]


def _insert_new(
    session: Session, columns: Mapping[str, list[Any]], micros: np.ndarray
) -> dict[dt.datetime, int]:
    """Insert the rows given as columns (name to one value per row, all the same length),
    skipping any that a concurrent request stored first. ``micros``: each row's
    observed_at in microseconds since 1970 (:func:`_epoch_micros`).

    Returns the id of every row this call stored, by observed_at (unique per station
    and source).
    """
    connection = session.connection()
    dialect = connection.dialect.name
    stored: dict[dt.datetime, int] = {}
    if dialect == "postgresql":
        for chunk in _column_chunks(columns, POSTGRESQL_INSERT_CHUNK):
            for row_id, observed_at in _insert_postgresql(connection, chunk):
                stored[observed_at] = row_id
        return stored
    if dialect != "sqlite":  # pragma: no cover - the service supports these two databases
        raise RuntimeError(f"unsupported database dialect {dialect!r}")

    for number, chunk in enumerate(_column_chunks(columns, INSERT_CHUNK)):
        first = number * INSERT_CHUNK
        stored.update(_insert_sqlite(connection, chunk, micros[first : first + INSERT_CHUNK]))
    return stored


_MICROSECOND = dt.timedelta(microseconds=1)


def _epoch_micros(values: Sequence[dt.datetime]) -> np.ndarray:
    """Aware times as whole microseconds since 1970 (exact, unlike ``timestamp()``)."""
    return np.array([(value - _EPOCH) // _MICROSECOND for value in values], dtype=np.int64)


def _sqlite_time_texts(
    values: list[dt.datetime], process: Callable[[Any], Any], micros: np.ndarray
) -> list[Any]:
    """The stored text of each aware time (``micros``: :func:`_epoch_micros` of them),
    formatted by numpy a column at a time.

    The unique index compares this text, so it must be exactly what the column type
    writes (naive UTC, ``YYYY-MM-DD HH:MM:SS.ffffff``); the first and last values are
    checked against the type's own processor, and any difference sends every value
    through the processor instead.
    """
    if not values:
        return []
    texts = np.datetime_as_string(micros.astype("datetime64[us]"), unit="us").astype("S26")
    texts.view("S1").reshape(-1, 26)[:, 10] = b" "  # ISO's "T" as the column writes it
    written = texts.astype("U26").tolist()
    if written[0] != process(values[0]) or written[-1] != process(values[-1]):
        return [process(value) for value in values]
    return written


def _insert_sqlite(
    connection: Connection, columns: Mapping[str, list[Any]], micros: np.ndarray
) -> dict[dt.datetime, int]:
    """The driver's executemany of ``INSERT ... ON CONFLICT DO NOTHING``, then our new rows.

    The values go through each column type's own bind processor once per column, so
    stored times have exactly the text SQLAlchemy writes (the unique index compares
    that text); SQLAlchemy's per-row parameter handling, and RETURNING (which makes
    SQLite step the statement once per row), cost more than the insert itself.

    The rows this call stored are the ones with a rowid above the largest before it:
    the transaction holds SQLite's write lock from its first write (the service begins
    IMMEDIATE), so no other writer interleaves, and SQLite gives a new row the largest
    rowid plus one. When every row went in, those rowids are the next ``count`` in
    order; otherwise they are read back with their times.
    """
    table = Reading.__table__
    dialect = connection.dialect
    names = list(columns)
    count = len(columns["observed_at"])
    bound: list[list[Any]] = []
    for name in names:
        values = columns[name]
        process = table.c[name].type.dialect_impl(dialect).bind_processor(dialect)
        if process is None:
            bound.append(values)
        elif name == "received_at":  # one ingest time for the whole request
            bound.append([process(values[0])] * len(values))
        elif name == "observed_at":
            bound.append(_sqlite_time_texts(values, process, micros))
        else:
            bound.append(list(map(process, values)))
    statement = (
        f"INSERT INTO {table.name} ({', '.join(names)}) "
        f"VALUES ({', '.join('?' for _ in names)}) ON CONFLICT DO NOTHING"
    )
    # The driver's own cursor, in the session's transaction: SQLAlchemy's executemany
    # checks every parameter row again on its way through.
    cursor = connection.connection.driver_connection.cursor()
    try:
        cursor.execute(f"SELECT coalesce(max(id), 0) FROM {table.name}")
        (before,) = cursor.fetchone()
        cursor.executemany(statement, zip(*bound, strict=True))
        if before >= 2**63 - 1 - count:  # pragma: no cover - SQLite would pick random rowids
            raise RuntimeError("the readings table has run out of rowids")
        if cursor.rowcount == count:
            # Every row went in (none was stored first by another request), one rowid
            # after another in the order given: no need to read them back.
            return dict(
                zip(columns["observed_at"], range(before + 1, before + 1 + count), strict=True)
            )
        cursor.execute(f"SELECT id, observed_at FROM {table.name} WHERE id > ?", (before,))
        new = cursor.fetchall()
    finally:
        cursor.close()
    by_text = dict(zip(bound[names.index("observed_at")], columns["observed_at"], strict=True))
    return {by_text[observed_at]: row_id for row_id, observed_at in new}


@functools.lru_cache(maxsize=8)
def _unnest_insert(names: tuple[str, ...], dialect: Any) -> Any:
    """The INSERT ... SELECT FROM unnest statement for these columns, built once."""
    table = Reading.__table__
    arrays = ", ".join(
        f"CAST(:{name} AS {table.c[name].type.compile(dialect=dialect)}[])" for name in names
    )
    return text(
        f"INSERT INTO {table.name} ({', '.join(names)}) "
        f"SELECT * FROM unnest({arrays}) "
        "ON CONFLICT DO NOTHING RETURNING id, observed_at"
    ).columns(table.c.id, table.c.observed_at)


def _insert_postgresql(connection: Connection, columns: Mapping[str, list[Any]]) -> list[Any]:
    """One INSERT ... SELECT FROM unnest(arrays): one parameter per column, not per value.

    psycopg parses every placeholder of a statement in Python, so a multi-row VALUES with
    150,000 placeholders spends seconds there; thirty arrays cost nothing.
    """
    statement = _unnest_insert(tuple(columns), connection.dialect)
    return list(connection.execute(statement, dict(columns)).all())


class _RowReadings(Sequence[Any]):
    """Stored rows (by position in the insert's columns) as objects with the readings'
    attributes and ``id``, for the alert rules; made when first read, since a station
    without rules never reads them."""

    def __init__(
        self,
        columns: Mapping[str, list[Any]],
        positions: list[int],
        ids: Mapping[dt.datetime, int],
    ) -> None:
        self._columns = columns
        self._positions = positions
        self._ids = ids
        self._made: list[SimpleNamespace] | None = None

    def _objects(self) -> list[SimpleNamespace]:
        if self._made is None:
            names = list(self._columns)
            made = []
            for position in self._positions:
                row = {name: self._columns[name][position] for name in names}
                made.append(SimpleNamespace(**row, id=self._ids[row["observed_at"]]))
            self._made = made
        return self._made

    def __len__(self) -> int:
        return len(self._positions)

    def __getitem__(self, index: Any) -> Any:
        return self._objects()[index]

    def __iter__(self) -> Iterator[Any]:
        return iter(self._objects())


def ingest_readings(
    *,
    session: Session,
    station: Station,
    source: str,
    items: Sequence[Any],
    now: dt.datetime,
    index_offset: int = 0,
) -> IngestResult:
    """Validate, deduplicate, derive, QC and store readings of one station and source.

    Parameters
    ----------
    session : Session
        The caller's session; this function flushes but does not commit.
    station : Station
        The station the readings belong to.
    source : str
        The device id, or ``"import"`` for readings loaded from a file.
    items : sequence
        Raw reading objects (dicts as posted); each is validated on its own.
    now : datetime
        The ingest time (UTC): received_at, and the limit for future timestamps.
    index_offset : int
        Added to the item positions in the rejection list (for callers that feed a
        long file in chunks).

    Returns
    -------
    IngestResult
        Counts of accepted and duplicate readings, the rejected items with sentences
        saying why, and the ids of the stored readings.
    """
    from chemistry import CHEMISTRY_VERSION

    result = IngestResult()
    candidates: list[_Candidate] = []
    for position, validated in enumerate(validate_readings(items, now=now)):
        if isinstance(validated, list):  # the sentences saying what is wrong
            result.reject(index_offset + position, validated)
        else:
            candidates.append(_Candidate(index=index_offset + position, reading=validated))

    _convert_alkalinity(candidates)
    candidates = _deduplicate_batch(candidates, result)
    if candidates:
        stored = _stored_matches(
            session, station_pk=station.pk, source=source, candidates=candidates
        )
        candidates = _classify_against_stored(candidates, stored, result)
    if not candidates:
        result.rejected.sort(key=lambda item: item.index)
        return result

    # One order for every request, so that two inserting the same readings wait for each
    # other on the unique index instead of deadlocking; every column below follows it.
    candidates.sort(key=lambda candidate: candidate.reading.observed_at)
    site = session.get(Site, station.site_id)
    carbonic = site.carbonic_constants if site is not None else "lueker2000"
    # Validated values are floats or None; numpy makes None NaN.
    temperature = np.array([c.reading.temperature_c for c in candidates], dtype=float)
    salinity = np.array([c.reading.salinity for c in candidates], dtype=float)
    ph = np.array([c.reading.ph for c in candidates], dtype=float)
    scales = [c.reading.ph_scale for c in candidates]
    alkalinity_input = np.array([c.alkalinity_input for c in candidates], dtype=float)
    alkalinity, u_alkalinity, alkalinity_source = _alkalinity_used(candidates, station)
    limits = _qc_limits(station)
    sensor_fault = np.zeros(len(candidates), dtype=bool)
    for variable, values in (
        ("temperature", temperature),
        ("salinity", salinity),
        ("ph", ph),
        ("alkalinity", alkalinity_input),
    ):
        span = limits[variable]
        sensor_fault |= (
            gross_range_test(values, sensor_min=span.sensor_min, sensor_max=span.sensor_max)
            == QcFlag.FAIL
        )
    derived = _derive(
        temperature=temperature,
        salinity=salinity,
        ph=ph,
        ph_scale=scales,
        alkalinity=alkalinity,
        u_alkalinity=u_alkalinity,
        u_ph=float(station.ph_uncertainty),
        carbonic=carbonic,
        sensor_fault=sensor_fault,
    )
    derived_available = np.isfinite(derived["omega_aragonite"])
    flags, neighbour_changes, context = _quality_control(
        session,
        station=station,
        limits=limits,
        times=[c.reading.observed_at for c in candidates],
        temperature=temperature,
        salinity=salinity,
        ph=ph,
        alkalinity_input=alkalinity_input,
        alkalinity_source=alkalinity_source,
        derived_available=derived_available,
    )

    def finite(values: np.ndarray) -> list[float | None]:
        # Column-wise: one list per column instead of a Python call per value.
        return [
            None if v != v else v for v in np.where(np.isfinite(values), values, np.nan).tolist()
        ]

    readings = [c.reading for c in candidates]
    count = len(readings)
    # Column by column, as the insert binds them: a Python statement per value costs more
    # than the values' chemistry.
    columns: dict[str, list[Any]] = {
        "station_pk": [station.pk] * count,
        "source": [source] * count,
        "reading_id": [r.reading_id for r in readings],
        # In UTC, as the database gives it back (the alert rules read these rows).
        "observed_at": [r.observed_at.astimezone(dt.UTC) for r in readings],
        "received_at": [now] * count,
        "temperature_c": [r.temperature_c for r in readings],
        "salinity": [r.salinity for r in readings],
        "ph": [r.ph for r in readings],
        "ph_scale": scales,
        "alkalinity_input_umol_kg": [c.alkalinity_input for c in candidates],
        "alkalinity_used_umol_kg": finite(alkalinity),
        "alkalinity_source": alkalinity_source,
        "chemistry_version": [
            CHEMISTRY_VERSION if ok else None for ok in derived_available.tolist()
        ],
        **{name: finite(derived[name]) for name in DERIVED_COLUMNS},
        **{name: flags[name].astype(int).tolist() for name in QC_COLUMNS},
    }
    micros = _epoch_micros(columns["observed_at"])
    inserted = _insert_new(session, columns, micros)
    raced = [c for c in candidates if c.reading.observed_at not in inserted]
    if raced:
        # Another request stored these between our check and our insert.
        stored = _stored_matches(session, station_pk=station.pk, source=source, candidates=raced)
        for leftover in _classify_against_stored(raced, stored, result):
            result.reject(
                leftover.index,
                [
                    "a reading with this reading_id is already stored for this sensor at another "
                    "time; stored readings are never overwritten"
                ],
            )
    _keep_recent_values(
        session,
        station=station,
        context=context,
        micros=micros,
        new_values={
            "temperature_c": temperature,
            "salinity": salinity,
            "ph": ph,
            "alkalinity_input_umol_kg": alkalinity_input,
            "from_station": np.array(
                [source in ("fixed", "salinity_line") for source in alkalinity_source],
                dtype=bool,
            ),
            "available": derived_available,
        },
        stored_here=(
            np.ones(len(candidates), dtype=bool)
            if len(inserted) == len(candidates)
            else np.array([c.reading.observed_at in inserted for c in candidates], dtype=bool)
        ),
        inserted=inserted,
    )
    if neighbour_changes:
        for chunk in _chunks(neighbour_changes):
            session.execute(update(Reading), list(chunk))
    refresh_rollups(
        session,
        station_pk=station.pk,
        inserted=inserted,
        changed=neighbour_changes,
        new_rows=columns,
        new_micros=micros,
    )
    result.accepted = len(inserted)
    result.stored_ids = sorted(inserted.values())
    result.rejected.sort(key=lambda item: item.index)
    session.flush()
    # The alert rules read the new readings' values; the rows just written hold them, so
    # they are handed over as they are instead of loaded back as ORM objects.
    failed = int(QcFlag.FAIL)
    passed = _RowReadings(
        columns,
        [
            index
            for index, (observed_at, overall) in enumerate(
                zip(columns["observed_at"], columns["qc_overall"], strict=True)
            )
            if observed_at in inserted and overall != failed
        ],
        inserted,
    )
    if passed:
        from app.alerts.evaluation import evaluate_after_ingest

        evaluate_after_ingest(session=session, station=station, readings=passed, now=now)
    return result
