"""Requests racing with the same readings store each reading once.

Several threads, each with its own connection and transaction, ingest the same batch at
the same moment. Their duplicate checks may all find nothing; the unique constraints
(INSERT ... ON CONFLICT DO NOTHING) must still let exactly one of them store each
reading, and the others must count it as a duplicate.

This test commits (the threads cannot see the per-test rolled-back transaction), so it
removes its own site at the end; the cascade takes the station and readings with it.
"""

from __future__ import annotations

import datetime as dt
import os
import threading
from concurrent.futures import ThreadPoolExecutor

import pytest
from sqlalchemy import delete, func, select
from sqlalchemy.orm import Session

from app.db import make_sessionmaker
from app.readings.ingest import IngestResult, ingest_readings
from app.readings.models import Reading
from app.sites.models import Site, Station
from tests.scratch import add_site_with_intake

pytestmark = pytest.mark.db

THREADS = 4
READINGS = 60


@pytest.fixture
def race_station(engine):
    site_id = f"race-{os.getpid()}"
    with Session(engine) as session:
        _site, station = add_site_with_intake(session, site_id=site_id, site_name="Race")
        session.commit()
        station_pk = station.pk
    yield station_pk
    with Session(engine) as session:
        session.execute(delete(Site).where(Site.id == site_id))
        session.commit()


def test_racing_requests_store_each_reading_once(engine, race_station):
    now = dt.datetime.now(dt.UTC).replace(microsecond=0)
    items = [
        {
            "reading_id": f"r{i}",
            "observed_at": (now - dt.timedelta(minutes=5 * (READINGS - i))).isoformat(),
            "temperature_c": 12.0,
            "salinity": 31.0,
            "ph": 7.8 + 0.001 * i,
            "ph_scale": "nbs",
        }
        for i in range(READINGS)
    ]
    factory = make_sessionmaker(engine)
    start = threading.Barrier(THREADS)

    def request(_: int) -> IngestResult:
        with factory() as session:
            station = session.get(Station, race_station)
            session.commit()
            start.wait()
            result = ingest_readings(
                session=session, station=station, source="dev_race", items=items, now=now
            )
            session.commit()
            return result

    with ThreadPoolExecutor(THREADS) as pool:
        results = list(pool.map(request, range(THREADS)))

    assert sum(r.accepted for r in results) == READINGS
    assert sum(r.duplicates for r in results) == READINGS * (THREADS - 1)
    assert all(r.rejected == [] for r in results)
    with factory() as session:
        stored = session.scalar(
            select(func.count()).select_from(Reading).where(Reading.station_pk == race_station)
        )
    assert stored == READINGS
