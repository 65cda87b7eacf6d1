"""Quarter-hour rollups of each station's readings, kept in step with the readings table.

The daily status needs a day of figures per station and a week of history (the usual
sampling interval, the fill-window hint). Read from the readings that is some 70,000 rows
for a site of six one-minute stations; read from these rollups it is a few thousand small
rows. One row per station and UTC quarter hour holds:

- ``readings``, the QC counts by ``qc_overall`` flag, and ``off_minute`` (readings not on a
  whole minute);
- ``minute_mask``: bit ``m`` set when a reading falls in minute ``m`` (0 to 14) of the
  quarter. When every reading of a span is on a whole minute (``off_minute`` is 0) the
  occupied minutes *are* the distinct reading times, so the usual sampling interval and the
  completeness come out exactly as from the readings themselves;
- per summarised variable, over readings that did not fail QC: count, minimum, maximum and
  sum (the day's mean is the sum over the count, a per-reading mean as before);
- ``good`` and the sums of alkalinity, DIC and salinity over good readings (not failed,
  chemistry derived): the quarter's mean water, which the fill-window hint carries to each
  tank temperature (alkalinity and DIC are conserved on heating in a closed system).

Quarter hours rather than hours: every UTC offset in use today is a whole number of quarter
hours, so a site-local day and a site-local hour are whole quarters in every zone.

A quarter's row is always recomputed from the readings it covers (never incremented), so a
duplicate that was not stored cannot be counted, a late reading lands in its own quarter,
and a neighbour whose QC flag changed is counted under its new flag. :func:`refresh_rollups`
is the ingest's one call; readings written as ORM objects (tests, any other writer) are
caught at flush by :func:`_refresh_after_flush`.
"""

from __future__ import annotations

import datetime as dt
import functools
from collections import defaultdict
from collections.abc import Iterable, Mapping, Sequence
from typing import Any

import numpy as np
from sqlalchemy import (
    BigInteger,
    Float,
    ForeignKey,
    Index,
    Integer,
    Text,
    and_,
    bindparam,
    case,
    cast,
    delete,
    distinct,
    event,
    extract,
    func,
    insert,
    inspect,
    literal,
    literal_column,
    select,
    text,
)
from sqlalchemy.dialects.postgresql import aggregate_order_by
from sqlalchemy.orm import Mapped, Session, mapped_column
from sqlalchemy.sql.elements import ColumnElement

from app.db import Base
from app.db_rows import driver_rows
from app.readings.models import Reading

#: Width of a rollup bucket (seconds): a quarter hour.
QUARTER_SECONDS = 900
MINUTES_PER_QUARTER = QUARTER_SECONDS // 60

QC_FAIL = 4
#: ``qc_overall`` flags counted per quarter (QARTOD: pass, not evaluated, suspect, fail,
#: missing), with the rollup column for each.
QC_FLAG_COLUMNS: dict[int, str] = {1: "qc_1", 2: "qc_2", 3: "qc_3", 4: "qc_4", 9: "qc_9"}

#: Variables summarised per quarter (column name on ``readings``).
SUMMARISED = ("omega_aragonite", "ph_total", "pco2_uatm", "temperature_c", "salinity")

#: What a reading needs to be good for the fill-window hint (as the status's other good
#: readings, plus the DIC that carries the water to another temperature).
GOOD_INPUTS = ("ph_total", "alkalinity_used_umol_kg", "temperature_c", "salinity", "dic_umol_kg")

#: Sums over good readings: the quarter's mean water.
GOOD_SUMS = {
    "good_alkalinity_sum": "alkalinity_used_umol_kg",
    "good_dic_sum": "dic_umol_kg",
    "good_salinity_sum": "salinity",
}

#: PostgreSQL advisory-lock namespace for rollup refreshes (one lock per station).
_PG_LOCK_NAMESPACE = 610_601


class ReadingRollup(Base):
    """One station's readings in one UTC quarter hour, summarised (see the module notes)."""

    __tablename__ = "reading_rollups"
    # The status reads a week of every station's quarters for the minute masks and of the
    # intake's for the fill-window sums: from this index alone, without visiting the wide
    # rows (migration 0005).
    __table_args__ = (
        Index(
            "ix_reading_rollups_week",
            "station_pk",
            "quarter_start",
            "off_minute",
            "minute_mask",
            "good",
            "good_alkalinity_sum",
            "good_dic_sum",
            "good_salinity_sum",
        ),
    )

    station_pk: Mapped[int] = mapped_column(
        ForeignKey("stations.pk", ondelete="CASCADE"), primary_key=True
    )
    # Start of the quarter, seconds since 1970-01-01 UTC: plain integers compare and
    # subtract the same way on SQLite and PostgreSQL.
    quarter_start: Mapped[int] = mapped_column(BigInteger, primary_key=True, autoincrement=False)
    readings: Mapped[int] = mapped_column(Integer)
    off_minute: Mapped[int] = mapped_column(Integer)
    minute_mask: Mapped[int] = mapped_column(Integer)
    qc_1: Mapped[int] = mapped_column(Integer)
    qc_2: Mapped[int] = mapped_column(Integer)
    qc_3: Mapped[int] = mapped_column(Integer)
    qc_4: Mapped[int] = mapped_column(Integer)
    qc_9: Mapped[int] = mapped_column(Integer)
    omega_aragonite_n: Mapped[int] = mapped_column(Integer)
    omega_aragonite_min: Mapped[float | None] = mapped_column(Float, nullable=True)
    omega_aragonite_max: Mapped[float | None] = mapped_column(Float, nullable=True)
    omega_aragonite_sum: Mapped[float | None] = mapped_column(Float, nullable=True)
    ph_total_n: Mapped[int] = mapped_column(Integer)
    ph_total_min: Mapped[float | None] = mapped_column(Float, nullable=True)
    ph_total_max: Mapped[float | None] = mapped_column(Float, nullable=True)
    ph_total_sum: Mapped[float | None] = mapped_column(Float, nullable=True)
    pco2_uatm_n: Mapped[int] = mapped_column(Integer)
    pco2_uatm_min: Mapped[float | None] = mapped_column(Float, nullable=True)
    pco2_uatm_max: Mapped[float | None] = mapped_column(Float, nullable=True)
    pco2_uatm_sum: Mapped[float | None] = mapped_column(Float, nullable=True)
    temperature_c_n: Mapped[int] = mapped_column(Integer)
    temperature_c_min: Mapped[float | None] = mapped_column(Float, nullable=True)
    temperature_c_max: Mapped[float | None] = mapped_column(Float, nullable=True)
    temperature_c_sum: Mapped[float | None] = mapped_column(Float, nullable=True)
    salinity_n: Mapped[int] = mapped_column(Integer)
    salinity_min: Mapped[float | None] = mapped_column(Float, nullable=True)
    salinity_max: Mapped[float | None] = mapped_column(Float, nullable=True)
    salinity_sum: Mapped[float | None] = mapped_column(Float, nullable=True)
    good: Mapped[int] = mapped_column(Integer)
    good_alkalinity_sum: Mapped[float | None] = mapped_column(Float, nullable=True)
    good_dic_sum: Mapped[float | None] = mapped_column(Float, nullable=True)
    good_salinity_sum: Mapped[float | None] = mapped_column(Float, nullable=True)


#: Rollup columns in table order (the aggregate select yields them in this order).
COLUMNS: tuple[str, ...] = tuple(c.name for c in ReadingRollup.__table__.columns)


# --------------------------------------------------------------------------------------
# the aggregate over readings
# --------------------------------------------------------------------------------------


def _number(value: int) -> ColumnElement[Any]:
    """An integer written into the SQL, not bound: the aggregate has some sixty constants,
    and binding each costs SQLAlchemy more per execution than the database's work on a
    quarter."""
    return literal_column(str(int(value)), Integer)


def _epoch_seconds(dialect: str) -> ColumnElement[Any]:
    """Whole seconds since 1970 of ``observed_at`` (UTC), in SQL."""
    if dialect == "sqlite":
        # Stored as naive UTC text 'YYYY-MM-DD HH:MM:SS.ffffff'. strftime('%s') rounds the
        # fraction to the millisecond (12:14:59.9996 would become 12:15:00, the next
        # quarter), so the fraction is cut off first: whole seconds, rounded down.
        whole_seconds = func.substr(Reading.observed_at, _number(1), _number(19))
        return cast(func.strftime(literal_column("'%s'"), whole_seconds), Integer)
    return cast(func.floor(extract("epoch", Reading.observed_at)), BigInteger)


def _off_minute(dialect: str) -> ColumnElement[bool]:
    """True when ``observed_at`` is not on a whole minute (seconds or a fraction)."""
    if dialect == "sqlite":
        return cast(func.substr(Reading.observed_at, _number(18)), Float) != _number(0)
    # The seconds field with its fraction, in microseconds; every UTC offset is whole minutes.
    return extract("microseconds", Reading.observed_at) != _number(0)


def aggregate_select(dialect: str, *conditions: ColumnElement[bool]) -> Any:
    """SELECT of rollup rows (columns in :data:`COLUMNS` order) from the readings matching
    ``conditions``, grouped by station and quarter."""
    seconds = _epoch_seconds(dialect)
    quarter = seconds - seconds % _number(QUARTER_SECONDS)
    minute_bit = _number(1).op("<<")(
        cast((seconds % _number(QUARTER_SECONDS)) // _number(60), Integer)
    )
    usable = Reading.qc_overall != _number(QC_FAIL)
    good = and_(usable, *(getattr(Reading, name).is_not(None) for name in GOOD_INPUTS))

    def count_if(condition: ColumnElement[bool]) -> ColumnElement[Any]:
        one, zero = _number(1), _number(0)
        return cast(func.coalesce(func.sum(case((condition, one), else_=zero)), zero), Integer)

    values: dict[str, ColumnElement[Any]] = {
        "station_pk": Reading.station_pk,
        "quarter_start": quarter,
        "readings": cast(func.count(), Integer),
        "off_minute": count_if(_off_minute(dialect)),
        # The sum of the distinct bits is their OR.
        "minute_mask": cast(func.sum(distinct(minute_bit)), Integer),
        **{
            column: count_if(Reading.qc_overall == _number(flag))
            for flag, column in QC_FLAG_COLUMNS.items()
        },
    }
    for name in SUMMARISED:
        value = case((usable, getattr(Reading, name)))
        values[f"{name}_n"] = cast(func.count(value), Integer)
        values[f"{name}_min"] = func.min(value)
        values[f"{name}_max"] = func.max(value)
        values[f"{name}_sum"] = func.sum(value)
    values["good"] = count_if(good)
    for column, name in GOOD_SUMS.items():
        values[column] = func.sum(case((good, getattr(Reading, name))))
    if tuple(values) != COLUMNS:  # pragma: no cover - a column added to one and not the other
        raise RuntimeError("rollup aggregate and table columns differ")
    return (
        select(*(value.label(name) for name, value in values.items()))
        .where(*conditions)
        .group_by(Reading.station_pk, quarter)
    )


# --------------------------------------------------------------------------------------
# keeping the rollups in step
# --------------------------------------------------------------------------------------


def quarter_of(moment: dt.datetime) -> int:
    seconds = int(moment.timestamp() // 1)
    return seconds - seconds % QUARTER_SECONDS


def _from_epoch(seconds: int) -> dt.datetime:
    return dt.datetime.fromtimestamp(seconds, tz=dt.UTC)


def _runs(quarters: Iterable[int]) -> list[tuple[int, int]]:
    """Sorted quarter starts as [start, end) runs of consecutive quarters."""
    runs: list[list[int]] = []
    for quarter in sorted(set(quarters)):
        if runs and runs[-1][1] == quarter:
            runs[-1][1] = quarter + QUARTER_SECONDS
        else:
            runs.append([quarter, quarter + QUARTER_SECONDS])
    return [(start, end) for start, end in runs]


def _lock_station(connection: Any, station_pk: int) -> None:
    """On PostgreSQL, the station's advisory lock to the end of the transaction: a second
    request for the same station waits, then sees the first one's readings and rollups
    (two requests each counting only their own rows would otherwise race). SQLite writers
    already hold the database lock from their first write."""
    if connection.dialect.name == "postgresql":
        connection.execute(
            text("SELECT pg_advisory_xact_lock(:namespace, :station)"),
            {"namespace": _PG_LOCK_NAMESPACE, "station": station_pk},
        )


def refresh_quarters(*, session: Session, station_pk: int, quarters: Iterable[int]) -> None:
    """Recompute the station's rollup rows for these quarter starts from its readings
    (under the station's lock, see :func:`_lock_station`)."""
    runs = _runs(quarters)
    if not runs:
        return
    connection = session.connection()
    _lock_station(connection, station_pk)
    _recount(connection, station_pk, runs)


def _recount(connection: Any, station_pk: int, runs: Sequence[tuple[int, int]]) -> None:
    removal, recount = _refresh_statements(connection.dialect.name)
    for start, end in runs:
        values = {
            "station_pk": station_pk,
            "first": start,
            "end": end,
            "observed_from": _from_epoch(start),
            "observed_to": _from_epoch(end),
        }
        connection.execute(removal, values)
        connection.execute(recount, values)


@functools.lru_cache(maxsize=4)
def _refresh_statements(dialect: str) -> tuple[Any, Any]:
    """The DELETE and the INSERT ... SELECT of a station's quarters, built once per dialect
    (building the aggregate costs more than running it for a quarter)."""
    table = ReadingRollup.__table__
    removal = delete(table).where(
        table.c.station_pk == bindparam("station_pk"),
        table.c.quarter_start >= bindparam("first"),
        table.c.quarter_start < bindparam("end"),
    )
    recount = insert(table).from_select(
        list(COLUMNS),
        aggregate_select(
            dialect,
            Reading.station_pk == bindparam("station_pk"),
            Reading.observed_at >= bindparam("observed_from", type_=Reading.observed_at.type),
            Reading.observed_at < bindparam("observed_to", type_=Reading.observed_at.type),
        ),
    )
    return removal, recount


@functools.cache
def _held_quarters_statement() -> Any:
    table = ReadingRollup.__table__
    return select(table.c.quarter_start).where(
        table.c.station_pk == bindparam("station_pk"),
        table.c.quarter_start >= bindparam("first"),
        table.c.quarter_start <= bindparam("last"),
    )


_MICROSECONDS = 1_000_000
#: Requests storing fewer readings than this recount their quarters in SQL only.
_FEW_READINGS = 20


def rows_from_columns(
    *, station_pk: int, micros: np.ndarray, columns: Mapping[str, Sequence[Any]]
) -> list[tuple[Any, ...]]:
    """Rollup rows (:data:`COLUMNS` order) of one station's readings given as columns.

    The same definition as :func:`aggregate_select`, worked out in numpy, for readings the
    caller holds in memory: ``micros`` their ``observed_at`` in microseconds since 1970
    (UTC, in time order), ``columns`` their ``qc_overall`` and the summarised and good-input
    values (None for a missing value). Every quarter the readings touch gets a row, and
    the row counts only these readings: the caller must know they are all the quarter has.
    """
    micros = np.asarray(micros, dtype=np.int64)
    if micros.size == 0:
        return []
    if np.any(micros[1:] < micros[:-1]):
        raise ValueError("rows_from_columns needs the readings in time order")
    seconds = micros // _MICROSECONDS
    quarter = seconds - seconds % QUARTER_SECONDS
    starts = np.flatnonzero(np.concatenate(([True], quarter[1:] != quarter[:-1])))

    def count(condition: np.ndarray) -> list[int]:
        return np.add.reduceat(condition.astype(np.int64), starts).tolist()

    qc = np.asarray(columns["qc_overall"], dtype=np.int64)
    usable = qc != QC_FAIL
    values = {
        name: np.asarray(columns[name], dtype=float)  # None becomes NaN
        for name in {*SUMMARISED, *GOOD_INPUTS}
    }
    out: dict[str, list[Any]] = {
        "quarter_start": quarter[starts].tolist(),
        "readings": np.diff(np.append(starts, micros.size)).tolist(),
        "off_minute": count(micros % (60 * _MICROSECONDS) != 0),
        "minute_mask": np.bitwise_or.reduceat(
            np.left_shift(1, (seconds % QUARTER_SECONDS) // 60), starts
        ).tolist(),
        **{column: count(qc == flag) for flag, column in QC_FLAG_COLUMNS.items()},
    }

    def total(kept: np.ndarray, value: np.ndarray, counted: list[int]) -> dict[str, list[Any]]:
        # NULL where the quarter has no value, as SQL's aggregates over no rows give.
        def where_counted(results: np.ndarray) -> list[Any]:
            return [r if n else None for r, n in zip(results.tolist(), counted, strict=True)]

        return {
            "min": where_counted(np.fmin.reduceat(np.where(kept, value, np.nan), starts)),
            "max": where_counted(np.fmax.reduceat(np.where(kept, value, np.nan), starts)),
            "sum": where_counted(np.add.reduceat(np.where(kept, value, 0.0), starts)),
        }

    for name in SUMMARISED:
        kept = usable & np.isfinite(values[name])
        counted = count(kept)
        out[f"{name}_n"] = counted
        for part, results in total(kept, values[name], counted).items():
            out[f"{name}_{part}"] = results
    good = usable & np.all([np.isfinite(values[name]) for name in GOOD_INPUTS], axis=0)
    out["good"] = count(good)
    for column, name in GOOD_SUMS.items():
        out[column] = total(good, values[name], out["good"])["sum"]
    out["station_pk"] = [station_pk] * starts.size
    return list(zip(*(out[name] for name in COLUMNS), strict=True))


def _insert_rows(connection: Any, rows: Sequence[tuple[Any, ...]]) -> None:
    table = ReadingRollup.__table__
    if connection.dialect.name == "sqlite":
        # The driver's executemany: SQLAlchemy's per-row parameter handling of a few
        # dozen rows of 34 columns costs more than working them out.
        cursor = connection.connection.driver_connection.cursor()
        try:
            cursor.executemany(
                f"INSERT INTO {table.name} ({', '.join(COLUMNS)}) "
                f"VALUES ({', '.join('?' for _ in COLUMNS)})",
                rows,
            )
        finally:
            cursor.close()
        return
    connection.execute(insert(table), [dict(zip(COLUMNS, row, strict=True)) for row in rows])


def refresh_rollups(
    session: Session,
    *,
    station_pk: int,
    inserted: Mapping[dt.datetime, int],
    changed: Sequence[Mapping[str, Any]] = (),
    new_rows: Mapping[str, Sequence[Any]] | None = None,
    new_micros: np.ndarray | None = None,
) -> None:
    """The ingest's call: bring the rollups of the quarters it touched up to date.

    ``inserted`` maps observed_at to id for the rows actually inserted (duplicates are not
    in it); ``changed`` are the stored neighbours' flag updates (dicts with the reading
    ``id``). ``new_rows``, when given, are the rows the ingest offered to the insert as
    columns (``observed_at`` among them, in time order) and ``new_micros`` their times in
    microseconds since 1970.

    A quarter that had no rollup row before (checked under the station's lock) held no
    readings (every quarter with readings has a row: the aggregate and this function put a
    reading in the same quarter, its time rounded down to the second). Its row is worked out
    from ``new_rows`` in memory (:func:`rows_from_columns`), without reading back what was
    just written. Every other touched quarter, and all of them when ``new_rows`` is not
    given or the request stored fewer than twenty readings, is recomputed from the readings in SQL.
    """
    # A device's usual request (a reading or a few) lands in a quarter that already has
    # rows: the look-up of held quarters would be one round trip more for nothing.
    in_memory = (
        new_rows is not None and new_micros is not None and len(inserted) >= _FEW_READINGS
    )
    if in_memory:
        micros = np.asarray(new_micros, dtype=np.int64)
        seconds = micros // _MICROSECONDS
        quarter_starts = seconds - seconds % QUARTER_SECONDS
        ours = (
            np.ones(micros.size, dtype=bool)
            if len(inserted) == micros.size
            # Rows another request stored first are not ours to count.
            else np.array([t in inserted for t in new_rows["observed_at"]], dtype=bool)
        )
        new_quarters = set(np.unique(quarter_starts[ours]).tolist())
    else:
        new_quarters = {quarter_of(moment) for moment in inserted}
    quarters = set(new_quarters)
    ids = [int(change["id"]) for change in changed]
    for chunk_start in range(0, len(ids), 500):
        chunk = ids[chunk_start : chunk_start + 500]
        quarters.update(
            quarter_of(moment)
            for moment in session.scalars(
                select(Reading.observed_at).where(Reading.id.in_(chunk))
            )
        )
    if not quarters:
        return
    connection = session.connection()
    _lock_station(connection, station_pk)
    fresh: set[int] = set()
    if in_memory:
        held = {
            quarter
            for (quarter,) in connection.execute(
                _held_quarters_statement(),
                {"station_pk": station_pk, "first": min(new_quarters), "last": max(new_quarters)},
            )
        }
        # A neighbour whose flag changed is a stored reading, so its quarter is held.
        fresh = new_quarters - held
    if fresh:
        index = np.flatnonzero(ours & np.isin(quarter_starts, list(fresh)))
        names = ("qc_overall", *SUMMARISED, *GOOD_INPUTS)
        if index[-1] - index[0] + 1 == index.size:
            # The usual request: in time order, so its fresh quarters are one run of rows.
            run = slice(int(index[0]), int(index[-1]) + 1)
            picked = {name: new_rows[name][run] for name in names}
        else:
            picked = {name: [new_rows[name][i] for i in index.tolist()] for name in names}
        _insert_rows(
            connection,
            rows_from_columns(station_pk=station_pk, micros=micros[index], columns=picked),
        )
    _recount(connection, station_pk, _runs(quarters - fresh))


def rebuild(*, session: Session, station_pks: Sequence[int] | None = None) -> None:
    """Recompute every rollup row (of these stations) from the readings: for fixtures and
    for repairs; the migration that made the table did the same. It takes no per-station
    lock, so run it while nothing ingests (a repair, a fixture), not beside the service."""
    connection = session.connection()
    table = ReadingRollup.__table__
    conditions = [] if station_pks is None else [Reading.station_pk.in_(list(station_pks))]
    removal = delete(table)
    if station_pks is not None:
        removal = removal.where(table.c.station_pk.in_(list(station_pks)))
    connection.execute(removal)
    connection.execute(
        insert(table).from_select(
            list(COLUMNS), aggregate_select(connection.dialect.name, *conditions)
        )
    )


@event.listens_for(Session, "after_flush")
def _refresh_after_flush(session: Session, _context: Any) -> None:
    """Readings added, changed or deleted as ORM objects refresh their quarters at flush.

    The ingest writes through the driver and calls :func:`refresh_rollups` itself;
    this keeps any other writer (the tests' stored readings, a future tool) from leaving
    the rollups behind.
    """
    touched: dict[int, set[int]] = defaultdict(set)
    for instance in (*session.new, *session.dirty, *session.deleted):
        if not isinstance(instance, Reading):
            continue
        attrs = inspect(instance).attrs
        # A reading moved to another station or time leaves its old quarter too.
        stations = {instance.station_pk, *attrs.station_pk.history.deleted}
        moments = {instance.observed_at, *attrs.observed_at.history.deleted}
        quarters = {quarter_of(m) for m in moments if m is not None}
        for station_pk in stations:
            if station_pk is not None:
                touched[station_pk].update(quarters)
    for station_pk, quarters in touched.items():
        refresh_quarters(session=session, station_pk=station_pk, quarters=quarters)


# --------------------------------------------------------------------------------------
# reading the rollups
# --------------------------------------------------------------------------------------


def _ceil_quarter(seconds: float) -> int:
    return int(-(-seconds // QUARTER_SECONDS) * QUARTER_SECONDS)


def _floor_quarter(seconds: float) -> int:
    return int(seconds // QUARTER_SECONDS * QUARTER_SECONDS)


def _pieces(start: dt.datetime, end: dt.datetime) -> tuple[int, int, list[tuple[float, float]]]:
    """The whole quarters [first, last) inside [start, end) and the cut parts either side."""
    s, e = start.timestamp(), end.timestamp()
    first, last = _ceil_quarter(s), _floor_quarter(e)
    if first >= last:
        return first, first, [(s, e)] if e > s else []
    return first, last, [p for p in ((s, first), (last, e)) if p[1] > p[0]]


@functools.lru_cache(maxsize=4)
def _partial_statement(dialect: str) -> Any:
    """Rollup rows of the readings of some stations in [lo, hi) only (a quarter cut by the
    window): a subquery with parameters ``station_pks``, ``lo`` and ``hi``, built once."""
    return aggregate_select(
        dialect,
        Reading.station_pk.in_(bindparam("station_pks", expanding=True)),
        Reading.observed_at >= bindparam("lo", type_=Reading.observed_at.type),
        Reading.observed_at < bindparam("hi", type_=Reading.observed_at.type),
    ).subquery()


def _piece_values(station_pks: Sequence[int], lo: float, hi: float) -> dict[str, Any]:
    return {
        "station_pks": list(station_pks),
        "lo": _from_epoch_float(lo),
        "hi": _from_epoch_float(hi),
    }


@functools.lru_cache(maxsize=32)
def _quarters_statement(names: tuple[str, ...], stations: int) -> Any:
    table = ReadingRollup.__table__
    return (
        select(table.c.station_pk, *(table.c[n] for n in names))
        .where(*_whole_quarters(table, stations))
        .order_by(table.c.station_pk, table.c.quarter_start)
    )


def quarters_between(
    *,
    session: Session,
    station_pks: Sequence[int],
    start: dt.datetime,
    end: dt.datetime,
    names: Sequence[str],
) -> dict[int, dict[str, np.ndarray]]:
    """Rollup rows of these stations covering [start, end), per station, as numpy columns.

    Whole quarters come from the rollup table; the part of a quarter cut by ``start`` or
    ``end`` (today's status ends now) is aggregated from the readings of that part only, with
    the same aggregate, so every figure covers exactly the window. Rows are in time order;
    ``quarter_start`` is always included. Null sums and extremes come as NaN.
    """
    names = ("quarter_start", *(n for n in names if n != "quarter_start"))
    first, last, pieces = _pieces(start, end)
    connection = session.connection()
    dialect = connection.dialect.name
    rows = []
    if last > first and station_pks:
        rows = driver_rows(
            connection,
            _quarters_statement(names, len(station_pks)),
            _whole_quarter_values(station_pks, first, last),
        )
    partial = _partial_statement(dialect)
    for lo, hi in pieces:
        rows += connection.execute(
            select(partial.c.station_pk, *(partial.c[n] for n in names)),
            _piece_values(station_pks, lo, hi),
        ).all()
    columns = list(zip(*rows, strict=True)) if rows else [()] * (len(names) + 1)
    station = np.array(columns[0], dtype=np.int64)
    arrays = {
        name: np.array(values, dtype=_dtype(name))
        for name, values in zip(names, columns[1:], strict=True)
    }
    if pieces and station.size:  # cut quarters were appended: back into time order
        order = np.lexsort((arrays["quarter_start"], station))
        station = station[order]
        arrays = {name: values[order] for name, values in arrays.items()}
    return by_station(station, arrays, station_pks)


def by_station(
    station: np.ndarray, arrays: Mapping[str, np.ndarray], station_pks: Sequence[int]
) -> dict[int, dict[str, np.ndarray]]:
    """Columns of rows sorted by station split into one set of columns per station (a
    station without rows gets empty ones)."""
    out = {}
    for pk in station_pks:
        lo, hi = np.searchsorted(station, pk, "left"), np.searchsorted(station, pk, "right")
        out[pk] = {name: values[lo:hi] for name, values in arrays.items()}
    return out


def _total(name: str) -> Any:
    """How a rollup column adds up over quarters."""
    if name.endswith("_min"):
        return func.min
    if name.endswith("_max"):
        return func.max
    return func.sum


@functools.lru_cache(maxsize=32)
def _totals_statement(names: tuple[str, ...], stations: int) -> Any:
    table = ReadingRollup.__table__
    return (
        select(table.c.station_pk, *(_total(n)(table.c[n]) for n in names))
        .where(*_whole_quarters(table, stations))
        .group_by(table.c.station_pk)
    )


def _whole_quarters(table: Any, stations: int) -> list[Any]:
    """Rows of ``stations`` stations (parameters ``station_0`` ...) with ``first`` <=
    quarter_start < ``last``. One parameter per station rather than an expanding list:
    the statement is then compiled once per number of stations and runs on the driver's
    cursor (:func:`app.db_rows.driver_rows`)."""
    return [
        table.c.station_pk.in_([bindparam(f"station_{n}") for n in range(stations)]),
        table.c.quarter_start >= bindparam("first"),
        table.c.quarter_start < bindparam("last"),
    ]


def _whole_quarter_values(station_pks: Sequence[int], first: int, last: int) -> dict[str, Any]:
    return {
        **{f"station_{n}": pk for n, pk in enumerate(station_pks)},
        "first": first,
        "last": last,
    }


def totals_between(
    *,
    session: Session,
    station_pks: Sequence[int],
    start: dt.datetime,
    end: dt.datetime,
    names: Sequence[str],
) -> dict[int, dict[str, Any]]:
    """Per station, the rollup columns added up over [start, end): counts and sums summed,
    minima and maxima taken; cut quarters at either end from their readings, as in
    :func:`quarters_between`. A station without readings gets zero counts and ``None``."""
    first, last, pieces = _pieces(start, end)
    connection = session.connection()
    dialect = connection.dialect.name
    rows = []
    if last > first and station_pks:
        rows = driver_rows(
            connection,
            _totals_statement(tuple(names), len(station_pks)),
            _whole_quarter_values(station_pks, first, last),
        )
    partial = _partial_statement(dialect)
    for lo, hi in pieces:
        rows += connection.execute(
            select(partial.c.station_pk, *(_total(n)(partial.c[n]) for n in names)).group_by(
                partial.c.station_pk
            ),
            _piece_values(station_pks, lo, hi),
        ).all()
    zero = {n: None if n.endswith(("_min", "_max", "_sum")) else 0 for n in names}
    out: dict[int, dict[str, Any]] = {pk: dict(zero) for pk in station_pks}
    for row in rows:
        totals = out[row[0]]
        for name, value in zip(names, row[1:], strict=True):
            if value is None:
                continue
            held = totals[name]
            if held is None:
                totals[name] = value
            elif name.endswith("_min"):
                totals[name] = min(held, value)
            elif name.endswith("_max"):
                totals[name] = max(held, value)
            else:
                totals[name] = held + value
    return out


def _from_epoch_float(seconds: float) -> dt.datetime:
    return dt.datetime(1970, 1, 1, tzinfo=dt.UTC) + dt.timedelta(seconds=seconds)


def _dtype(name: str) -> Any:
    column = ReadingRollup.__table__.c[name]
    return np.int64 if isinstance(column.type, (Integer, BigInteger)) else float


@functools.lru_cache(maxsize=32)
def _masks_statement(dialect: str, stations: int) -> Any:
    table = ReadingRollup.__table__

    # One number per quarter: its index (the start over 900 s) and its 15-bit mask, so the
    # database writes and numpy reads half as many numbers as with two lists.
    # The starts are whole quarters: "/" of two integers is exact in both databases.
    index = table.c.quarter_start.op("/")(_number(QUARTER_SECONDS))
    packed = index * _number(_MASK_SPAN) + table.c.minute_mask
    if dialect == "postgresql":
        joined = func.string_agg(
            cast(packed, Text), aggregate_order_by(literal(","), table.c.quarter_start)
        )
    else:  # SQLite joins in row order; the quarters are sorted afterwards
        joined = func.group_concat(packed)
    return (
        select(table.c.station_pk, func.sum(table.c.off_minute), joined)
        .where(*_whole_quarters(table, stations))
        .group_by(table.c.station_pk)
    )


#: A quarter's minute mask is below this (15 bits), so index * span + mask packs both.
_MASK_SPAN = 1 << MINUTES_PER_QUARTER


def _unpacked(joined: str) -> tuple[np.ndarray, np.ndarray]:
    """Quarter starts and minute masks from :func:`_masks_statement`'s joined numbers."""
    packed = _integers(joined)
    return packed // _MASK_SPAN * QUARTER_SECONDS, packed % _MASK_SPAN


def minute_masks_between(
    *,
    session: Session,
    station_pks: Sequence[int],
    start: dt.datetime,
    end: dt.datetime,
) -> dict[int, tuple[np.ndarray, np.ndarray, int]]:
    """Per station: quarter starts and minute masks over [start, end) in time order, and the
    number of readings off a whole minute.

    The same figures as :func:`quarters_between`, with each station's quarters joined into
    one text column by the database (``group_concat`` / ``string_agg``): a week of six
    stations is 6 rows instead of 4,000, which is most of the cost of reading them.
    """
    first, last, pieces = _pieces(start, end)
    connection = session.connection()
    out: dict[int, tuple[list[np.ndarray], list[np.ndarray], int]] = {
        pk: ([], [], 0) for pk in station_pks
    }
    if last > first and station_pks:
        rows = driver_rows(
            connection,
            _masks_statement(connection.dialect.name, len(station_pks)),
            _whole_quarter_values(station_pks, first, last),
        )
        for pk, off_minute, joined in rows:
            quarters, masks = _unpacked(joined)
            out[pk] = ([quarters], [masks], int(off_minute))
    for lo, hi in pieces:  # cut quarters, from their readings
        part = quarters_between(
            session=session,
            station_pks=station_pks,
            start=_from_epoch_float(lo),
            end=_from_epoch_float(hi),
            names=("off_minute", "minute_mask"),
        )
        for pk, columns in part.items():
            quarters, masks, off = out[pk]
            quarters.append(columns["quarter_start"])
            masks.append(columns["minute_mask"])
            out[pk] = (quarters, masks, off + int(columns["off_minute"].sum()))
    result = {}
    for pk, (quarters, masks, off) in out.items():
        q = np.concatenate(quarters) if quarters else np.empty(0, dtype=np.int64)
        m = np.concatenate(masks) if masks else np.empty(0, dtype=np.int64)
        order = np.argsort(q, kind="stable")
        result[pk] = (q[order], m[order], off)
    return result


def _integers(joined: str) -> np.ndarray:
    """The integers of a comma-joined list from the database, parsed by numpy in C (about
    five times faster than splitting into Python strings first: a week of six stations
    is 8,000 numbers per status)."""
    values = np.fromstring(joined, dtype=np.int64, sep=",")
    if values.size != joined.count(",") + 1:  # numpy stops at the first non-number
        raise ValueError(f"not a comma-separated list of integers: {joined[:80]!r}")
    return values


_MINUTE_BITS = np.left_shift(1, np.arange(MINUTES_PER_QUARTER, dtype=np.int64))
_MINUTE_OFFSETS = 60 * np.arange(MINUTES_PER_QUARTER, dtype=np.int64)


def occupied_seconds(quarter_start: np.ndarray, minute_mask: np.ndarray) -> np.ndarray:
    """The minutes with a reading, as whole seconds since 1970 (UTC), in time order."""
    occupied = (np.asarray(minute_mask, dtype=np.int64)[:, None] & _MINUTE_BITS) != 0
    # Row by row and minute by minute: already in time order when the quarters are.
    seconds = (np.asarray(quarter_start, dtype=np.int64)[:, None] + _MINUTE_OFFSETS)[occupied]
    if quarter_start.size > 1 and not np.all(quarter_start[1:] > quarter_start[:-1]):
        seconds = np.sort(seconds)
    return seconds


