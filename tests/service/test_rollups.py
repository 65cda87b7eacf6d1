"""The quarter-hour rollups (app/status/rollups.py) equal a recomputation from the readings.

A regression check against the stored readings themselves, worked out here in plain Python
(no SQL aggregate): after ingest with duplicates re-sent, late readings that land in older
quarters (and change their neighbours' QC flags), off-minute times and a failed reading;
after readings written as ORM objects are changed and deleted; and after the migration's
backfill of readings that were stored before the table existed.
"""

from __future__ import annotations

import datetime as dt
import math
from typing import Any

import pytest
from sqlalchemy import select
from sqlalchemy.orm import Session

from app import migrate
from app.db import make_engine
from app.readings.ingest import ingest_readings
from app.readings.models import Reading
from app.status.rollups import (
    COLUMNS,
    GOOD_INPUTS,
    GOOD_SUMS,
    QC_FLAG_COLUMNS,
    SUMMARISED,
    ReadingRollup,
    rebuild,
)
from tests.scratch import add_site_with_intake
from tests.stored import stored_reading

pytestmark = pytest.mark.db

NOW = dt.datetime.now(dt.UTC).replace(second=0, microsecond=0)


def _expected(readings: list[Reading]) -> dict[tuple[int, int], dict[str, Any]]:
    """Rollup rows recomputed reading by reading (the definition in the module notes)."""
    out: dict[tuple[int, int], dict[str, Any]] = {}
    for r in readings:
        seconds = math.floor(r.observed_at.timestamp())
        quarter = seconds - seconds % 900
        row = out.setdefault((r.station_pk, quarter), _empty_row())
        row["readings"] += 1
        row["off_minute"] += r.observed_at.second != 0 or r.observed_at.microsecond != 0
        row["minute_mask"] |= 1 << ((seconds % 900) // 60)
        row[QC_FLAG_COLUMNS[r.qc_overall]] += 1
        if r.qc_overall == 4:
            continue
        for name in SUMMARISED:
            value = getattr(r, name)
            if value is None:
                continue
            row[f"{name}_n"] += 1
            row[f"{name}_min"] = min(value, row[f"{name}_min"] or math.inf)
            row[f"{name}_max"] = max(value, row[f"{name}_max"] or -math.inf)
            row[f"{name}_sum"] = (row[f"{name}_sum"] or 0.0) + value
        if all(getattr(r, name) is not None for name in GOOD_INPUTS):
            row["good"] += 1
            for column, name in GOOD_SUMS.items():
                row[column] = (row[column] or 0.0) + getattr(r, name)
    return out


def _empty_row() -> dict[str, Any]:
    counts = {"readings", "off_minute", "minute_mask", "good", *QC_FLAG_COLUMNS.values()}
    counts |= {f"{name}_n" for name in SUMMARISED}
    return {c: 0 if c in counts else None for c in COLUMNS[2:]}


def _stored_rollups(connection: Any, station_pks: list[int]) -> dict[tuple[int, int], dict]:
    table = ReadingRollup.__table__
    rows = connection.execute(
        select(table).where(table.c.station_pk.in_(station_pks))
    ).mappings()
    return {(r["station_pk"], r["quarter_start"]): dict(r) for r in rows}


def _assert_rollups_match(session: Session, station_pks: list[int]) -> int:
    readings = list(
        session.scalars(select(Reading).where(Reading.station_pk.in_(station_pks)))
    )
    expected = _expected(readings)
    stored = _stored_rollups(session.connection(), station_pks)
    assert set(stored) == set(expected)
    for key, row in expected.items():
        for column, value in row.items():
            got = stored[key][column]
            if isinstance(value, float):
                assert got == pytest.approx(value, rel=1e-12), (key, column)
            else:
                assert got == value, (key, column)
    return len(expected)


def _item(at: dt.datetime, *, reading_id: str | None = None, ph: float = 7.71) -> dict:
    item: dict[str, Any] = {
        "observed_at": at.isoformat(),
        "temperature_c": 11.8 + 0.01 * (at.minute % 7),
        "salinity": 31.2 + 0.01 * (at.minute % 5),
        "ph": ph + 0.001 * (at.minute % 3),
        "ph_scale": "nbs",
    }
    if reading_id is not None:
        item["reading_id"] = reading_id
    return item


def test_rollups_follow_ingest_with_duplicates_and_late_readings(session, make_station):
    station = make_station(alkalinity={"mode": "fixed", "value": 2150.0, "uncertainty": 12.0})
    start = NOW - dt.timedelta(hours=3)
    batch = [
        _item(start + dt.timedelta(minutes=m), reading_id=f"r{m}")
        for m in range(0, 120, 2)
    ]
    first = ingest_readings(session=session, station=station, source="dev", items=batch, now=NOW)
    assert first.accepted == len(batch)
    # The same batch again (a retry): nothing stored, nothing counted twice.
    again = ingest_readings(session=session, station=station, source="dev", items=batch, now=NOW)
    assert (again.accepted, again.duplicates) == (0, len(batch))
    # Late readings into the gaps of older quarters, one of them off the minute, one with a
    # pH outside any sensor's range (fails QC), and a second device at the same times.
    late = [
        _item(start + dt.timedelta(minutes=13)),
        _item(start + dt.timedelta(minutes=41, seconds=30)),
        _item(start + dt.timedelta(minutes=77), ph=13.5),
    ]
    result = ingest_readings(session=session, station=station, source="dev", items=late, now=NOW)
    assert result.accepted == 3
    other = ingest_readings(
        session=session, station=station, source="dev2", items=batch[:10], now=NOW
    )
    assert other.accepted == 10
    session.flush()
    flags = session.scalars(
        select(Reading.qc_overall).where(Reading.station_pk == station.pk)
    ).all()
    assert 4 in flags  # the failed reading is there, and left out of the statistics
    assert _assert_rollups_match(session, [station.pk]) >= 8


def test_new_quarters_worked_out_in_memory_equal_the_sql_aggregate(
    session, make_station, monkeypatch
):
    """Quarters that held nothing before a request get their rows from the request's own
    columns (rows_from_columns), the others from SQL; both equal the readings, and a
    rebuild with the SQL aggregate gives the same rows."""
    from app.status import rollups

    in_memory: list[int] = []
    original = rollups.rows_from_columns

    def counting(**kwargs: Any) -> list[tuple[Any, ...]]:
        rows = original(**kwargs)
        in_memory.append(len(kwargs["micros"]))
        return rows

    monkeypatch.setattr(rollups, "rows_from_columns", counting)
    station = make_station()  # alkalinity from the readings: items without it get no chemistry
    start = NOW.replace(minute=0) - dt.timedelta(hours=6)
    batch = []
    for m in range(0, 95):
        at = start + dt.timedelta(minutes=m, seconds=17 * (m % 9 == 4), microseconds=5 * (m == 30))
        item = _item(at, ph=13.5 if m == 50 else 7.71)  # one reading fails QC
        if m % 3:
            item["alkalinity_umol_kg"] = 2150.0 + m
        batch.append(item)
    first = ingest_readings(session=session, station=station, source="dev", items=batch, now=NOW)
    assert first.accepted == len(batch)
    assert in_memory == [len(batch)]  # seven new quarters, all worked out in memory
    # A second request continuing the last quarter (held: recounted in SQL) and opening new
    # ones (in memory), with the readings of the held quarter left out of the memory path.
    more = [_item(start + dt.timedelta(minutes=m)) for m in range(96, 140)]
    second = ingest_readings(session=session, station=station, source="dev", items=more, now=NOW)
    assert second.accepted == len(more)
    assert in_memory[1] == len([m for m in range(96, 140) if m >= 105])
    session.flush()
    assert _assert_rollups_match(session, [station.pk]) == 10
    kept = _stored_rollups(session.connection(), [station.pk])
    rebuild(session=session, station_pks=[station.pk])
    rebuilt = _stored_rollups(session.connection(), [station.pk])
    assert set(rebuilt) == set(kept)
    for key, row in rebuilt.items():
        for column, value in row.items():
            if isinstance(value, float):
                assert kept[key][column] == pytest.approx(value, rel=1e-12), (key, column)
            else:
                assert kept[key][column] == value, (key, column)


def test_rows_from_columns_refuse_readings_out_of_time_order():
    import numpy as np

    from app.status.rollups import rows_from_columns

    columns = {name: [1.0, 1.0] for name in (*SUMMARISED, *GOOD_INPUTS)}
    with pytest.raises(ValueError, match="time order"):
        rows_from_columns(
            station_pk=1,
            micros=np.array([2_000_000, 1_000_000]),
            columns={**columns, "qc_overall": [1, 1]},
        )


def test_regression_a_time_a_moment_before_a_quarter_ends_stays_in_its_quarter(
    session, make_station
):
    """SQLite's strftime('%s') rounds the fraction to the millisecond: 12:14:59.9996 was
    counted in the 12:15 quarter by the SQL aggregate and in the 12:00 one by the numpy
    rows, and an ingest could fail on the rollups' primary key. Times are rounded down."""
    station = make_station()
    base = NOW.replace(minute=0) - dt.timedelta(hours=8)
    edge = base + dt.timedelta(minutes=14, seconds=59, microseconds=999_600)
    batch = [_item(base + dt.timedelta(minutes=m)) for m in range(0, 14)]
    batch += [_item(edge)]
    batch += [_item(base + dt.timedelta(minutes=m)) for m in range(15, 40)]
    result = ingest_readings(session=session, station=station, source="dev", items=batch, now=NOW)
    assert result.accepted == len(batch)
    # The same moment from a one-reading request (the SQL path) and a later edge reading.
    late = base + dt.timedelta(minutes=29, seconds=59, microseconds=999_900)
    single = ingest_readings(
        session=session, station=station, source="dev2", items=[_item(late)], now=NOW
    )
    assert single.accepted == 1
    session.flush()
    assert _assert_rollups_match(session, [station.pk]) == 3
    kept = _stored_rollups(session.connection(), [station.pk])
    rebuild(session=session, station_pks=[station.pk])
    assert set(_stored_rollups(session.connection(), [station.pk])) == set(kept)


def test_rollups_follow_orm_writes(session, make_station):
    station = make_station()
    base = NOW.replace(minute=0) - dt.timedelta(days=2)
    readings = [
        stored_reading(station, base + dt.timedelta(minutes=5 * i), ph=7.9 + 0.01 * i)
        for i in range(12)
    ]
    session.add_all(readings)
    session.flush()
    _assert_rollups_match(session, [station.pk])
    readings[3].qc_overall = 4
    readings[4].observed_at = base + dt.timedelta(hours=5)  # moved to another quarter
    session.delete(readings[0])
    session.flush()
    # Four quarters of readings, and the one the moved reading went to.
    assert _assert_rollups_match(session, [station.pk]) == 5


def test_migration_backfill_equals_the_recomputation(tmp_path, settings):
    """Readings stored before the rollups existed are summarised by the migration."""
    if settings.database_url.startswith("postgresql"):
        pytest.skip("on PostgreSQL: test_migration_backfill_on_postgresql")
    scratch = settings.model_copy(update={"database_url": f"sqlite:///{tmp_path / 'b.db'}"})
    _backfill_check(scratch)


@pytest.mark.postgres
def test_migration_backfill_on_postgresql(settings, engine):
    if not settings.database_url.startswith("postgresql"):
        pytest.skip("SPATLINE_TEST_DATABASE_URL is not a PostgreSQL database")
    try:
        _backfill_check(settings)
    finally:  # leave the shared test database empty and at head, as the other tests expect
        migrate.downgrade(settings, "base")
        migrate.upgrade(settings, "head")


def _backfill_check(settings: Any) -> None:
    migrate.downgrade(settings, "base")
    migrate.upgrade(settings, "0003")
    engine = make_engine(settings)
    try:
        with Session(engine) as setup:
            _site, station = add_site_with_intake(setup, site_id="backfill")
            setup.commit()
            station_pk = station.pk
        base = NOW - dt.timedelta(days=1)
        rows = [
            stored_reading(
                station,
                base + dt.timedelta(minutes=m, seconds=30 * (m % 4 == 1)),
                ph=7.8 + 0.001 * m,
            )
            for m in range(0, 200, 3)
        ]
        rows[5].qc_overall = 4
        rows[6].ph_total = None
        table = Reading.__table__
        values = [
            {c.name: getattr(r, c.key) for c in table.columns if c.name != "id"} for r in rows
        ]
        with engine.begin() as connection:
            connection.execute(table.insert(), values)  # Core: before the table exists
        migrate.upgrade(settings, "head")
        with Session(engine) as check:
            assert _assert_rollups_match(check, [station_pk]) >= 10
            backfilled = _stored_rollups(check.connection(), [station_pk])
        # The app's own aggregate (used at ingest) gives the same rows as the frozen SQL.
        with Session(engine) as again:
            rebuild(session=again, station_pks=[station_pk])
            assert _stored_rollups(again.connection(), [station_pk]) == backfilled
            again.rollback()
    finally:
        engine.dispose()


def test_joined_integers_parse_exactly_and_refuse_anything_else():
    # minute_masks_between reads each station's quarters and masks as one joined text.
    import warnings

    import numpy as np

    from app.status.rollups import _integers

    parsed = _integers("1764633600,1764634500,-900,32767,0")
    assert parsed.dtype == np.int64
    assert parsed.tolist() == [1764633600, 1764634500, -900, 32767, 0]
    # Refused (by numpy itself, or by the count check where numpy only warns and stops).
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DeprecationWarning)
        for bad in ("900,oops,1800", "900,1800,", "12.5"):
            with pytest.raises(ValueError):
                _integers(bad)


def test_occupied_seconds_are_in_time_order_whatever_the_quarter_order():
    import numpy as np

    from app.status.rollups import _unpacked, occupied_seconds

    # Minutes 0 and 14 of the 00:00 quarter, minute 1 of the 00:15 quarter (bits 0, 14, 1).
    quarters = np.array([0, 900], dtype=np.int64)
    masks = np.array([1 | 1 << 14, 1 << 1], dtype=np.int64)
    expected = [0, 14 * 60, 900 + 60]
    assert occupied_seconds(quarters, masks).tolist() == expected
    assert occupied_seconds(quarters[::-1], masks[::-1]).tolist() == expected
    # As the status reads them: each quarter's index and mask packed in one number.
    packed = ",".join(str(q // 900 * 32768 + m) for q, m in zip(quarters, masks, strict=True))
    unpacked_quarters, unpacked_masks = _unpacked(packed)
    assert unpacked_quarters.tolist() == quarters.tolist()
    assert unpacked_masks.tolist() == masks.tolist()
