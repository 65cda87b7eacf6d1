"""The recent-values memory (app/readings/recent.py) changes no QC flag.

The same readings are ingested, batch by batch with a commit each, once with the memory
and once with it switched off; every stored flag must be the same. The batches overlap
(a retry), leave a gap, arrive late into an earlier stretch, and another writer (a reading
of another station written as an ORM row) comes in between, so the memory is used,
extended, refused and refilled. SQLite only: PostgreSQL never uses it.
"""

from __future__ import annotations

import datetime as dt
import math
from typing import Any

import pytest
from sqlalchemy import select
from sqlalchemy.orm import Session

from app.readings import recent
from app.readings.ingest import QC_COLUMNS, ingest_readings
from app.readings.models import Reading
from app.sites import service as sites_service
from app.sites.schemas import StationCreate
from tests.scratch import add_site_with_intake, migrated_engine
from tests.stored import stored_reading

START = dt.datetime(2026, 3, 2, tzinfo=dt.UTC)
NOW = START + dt.timedelta(days=10)


def _items(first_minute: int, count: int) -> list[dict[str, Any]]:
    items = []
    for m in range(first_minute, first_minute + count):
        at = START + dt.timedelta(minutes=m)
        # A slow swing with a spike and a flat stretch, so spike, rate and flat-line
        # tests all have something to say.
        ph = 7.8 + 0.05 * math.sin(m / 40.0) + (0.6 if m % 211 == 0 else 0.0)
        temperature = 12.0 if 300 <= m < 360 else 12.0 + 0.3 * math.sin(m / 90.0)
        items.append(
            {
                "observed_at": at.isoformat(),
                "reading_id": f"r{m}",
                "temperature_c": temperature,
                "salinity": 31.0 + 0.1 * math.cos(m / 70.0),
                "ph": ph,
                "ph_scale": "total",
            }
        )
    return items


def _run(url: str, *, memory: bool, monkeypatch: pytest.MonkeyPatch) -> tuple[list, int]:
    recent.forget_all()
    hits = 0
    original = recent.recall

    def recall(*args: Any, **kwargs: Any) -> Any:
        nonlocal hits
        found = original(*args, **kwargs) if memory else None
        hits += found is not None
        return found

    monkeypatch.setattr(recent, "recall", recall)
    _settings, engine = migrated_engine(url)
    try:
        with Session(engine) as setup:
            site, station = add_site_with_intake(setup)
            other = sites_service.create_station(
                session=setup,
                site=site,
                data=StationCreate(id="header", name="Header", role="treated"),
            )
            setup.commit()
            station_pk, other_pk = station.pk, other.pk
        batches = [
            _items(0, 400),
            _items(350, 400),  # overlaps the first: the overlap are duplicates
            _items(900, 300),  # after a gap
            _items(760, 100),  # late, into the gap
            _items(1200, 500),
        ]
        for number, batch in enumerate(batches):
            with Session(engine) as session:
                if number == 3:  # other writers between two requests
                    other_station = session.get(type(station), other_pk)
                    session.add(stored_reading(other_station, START, ph=7.9))
                    # ... and one of this station, inside the window the memory holds: a
                    # kept value standing in for the table would miss it in the QC.
                    same_station = session.get(type(station), station_pk)
                    session.add(
                        stored_reading(
                            same_station,
                            START + dt.timedelta(minutes=880),
                            ph=8.6,
                            source="orm",
                        )
                    )
                    session.commit()
                current = session.get(type(station), station_pk)
                result = ingest_readings(
                    session=session, station=current, source="dev", items=batch, now=NOW
                )
                assert not result.rejected
                session.commit()
        with Session(engine) as check:
            rows = check.execute(
                select(Reading.observed_at, *(getattr(Reading, n) for n in QC_COLUMNS))
                .where(Reading.station_pk == station_pk)
                .order_by(Reading.observed_at)
            ).all()
    finally:
        engine.dispose()
        recent.forget_all()
    return [tuple(row) for row in rows], hits


def test_flags_are_the_same_with_and_without_the_memory(tmp_path, monkeypatch, settings):
    if not settings.database_url.startswith("sqlite"):
        pytest.skip("the memory is for SQLite only")
    with_memory, hits = _run(f"sqlite:///{tmp_path / 'a.db'}", memory=True, monkeypatch=monkeypatch)
    without, no_hits = _run(
        f"sqlite:///{tmp_path / 'b.db'}", memory=False, monkeypatch=monkeypatch
    )
    assert no_hits == 0
    # Used after the first batch, refused after the other writer (batch 4), used again.
    assert hits == 3
    # The gaps 750-759 and 860-899, but for the reading written as an ORM row at 880.
    assert len(with_memory) == 1700 - 10 - 40 + 1
    assert with_memory == without
    assert {row[-1] for row in with_memory} >= {1, 3}  # some readings were flagged


@pytest.fixture
def memory_engine(tmp_path, settings):
    """A migrated scratch SQLite database, with the memory empty before and after."""
    if not settings.database_url.startswith("sqlite"):
        pytest.skip("the memory is for SQLite only")
    recent.forget_all()
    _settings, engine = migrated_engine(f"sqlite:///{tmp_path / 'memory.db'}")
    try:
        yield engine
    finally:
        engine.dispose()
        recent.forget_all()


def test_a_rolled_back_request_leaves_nothing_behind(memory_engine):
    with Session(memory_engine) as session:
        _site, station = add_site_with_intake(session)
        session.commit()
        station_pk = station.pk
        ingest_readings(
            session=session, station=station, source="dev", items=_items(0, 50), now=NOW
        )
        session.rollback()
        # A later commit of the same session must not keep what the rolled-back
        # request staged.
        session.add(stored_reading(station, START - dt.timedelta(days=3), ph=7.9))
        session.commit()
    assert recent.entry_count() == 0
    with Session(memory_engine) as session:
        station = session.get(type(station), station_pk)
        ingest_readings(
            session=session, station=station, source="dev", items=_items(0, 50), now=NOW
        )
        session.commit()
    assert recent.entry_count() == 1


def test_a_savepoint_released_keeps_nothing_until_the_outer_commit(memory_engine):
    with Session(memory_engine) as session:
        _site, station = add_site_with_intake(session)
        session.commit()
        nested = session.begin_nested()
        ingest_readings(
            session=session, station=station, source="dev", items=_items(0, 50), now=NOW
        )
        nested.commit()
        assert recent.entry_count() == 0  # released, not committed
        session.commit()
        assert recent.entry_count() == 1


def test_kept_values_are_read_only_once_staged(session):
    import numpy as np

    recent.forget_all()  # other tests' commits may have kept entries
    columns = {name: np.arange(3, dtype=float) for name in recent.VALUE_COLUMNS}
    entry = recent.RecentValues(lo_us=0, hi_us=10, table_max_id=3, columns=columns)
    recent.stage(session, ("station", 1), entry)
    for values in columns.values():
        with pytest.raises(ValueError, match="read-only"):
            values[0] = 1.0
    session.rollback()  # and dropped with the transaction
    assert recent.entry_count() == 0
