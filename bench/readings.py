"""Speed of the readings ingest and of the aggregated query, on a scratch SQLite file.

Loads two weeks of one-minute readings of one station through ``ingest_readings`` in
batches of 5,000 (the largest ``POST /readings``), then times a real-time post of one
reading on top of them (its QC reads the 25 hours before it) and the two-week query
aggregated per hour. Design goals (a hatchery computer, not a server): a 5,000-reading
batch in under 5 s, one reading in under 0.5 s, the hourly aggregate of two weeks in
under 1 s.

Run with ``python -m bench readings``; ``SPATLINE_BENCH_DATABASE_URL`` may name a
scratch PostgreSQL database instead (its readings table is added to, not wiped).
"""

from __future__ import annotations

import datetime as dt
import os
import secrets
import tempfile
import time
from pathlib import Path

import numpy as np

BATCH = 5000
DAYS = 14
BATCH_GOAL_SECONDS = 5.0
SINGLE_GOAL_SECONDS = 0.5
AGGREGATE_GOAL_SECONDS = 1.0


def _readings(start: dt.datetime, count: int, seed: int = 7) -> list[dict[str, object]]:
    rng = np.random.default_rng(seed)
    minutes = np.arange(count)
    day = np.sin(2 * np.pi * minutes / 1440.0)
    temperature = 12.0 + 1.5 * day + 0.05 * rng.standard_normal(count)
    salinity = 31.0 - 0.3 * day + 0.02 * rng.standard_normal(count)
    ph = 7.85 + 0.08 * day + 0.005 * rng.standard_normal(count)
    return [
        {
            "observed_at": (start + dt.timedelta(minutes=int(m))).isoformat(),
            "temperature_c": round(float(t), 3),
            "salinity": round(float(s), 3),
            "ph": round(float(p), 4),
            "ph_scale": "nbs",
        }
        for m, t, s, p in zip(minutes, temperature, salinity, ph, strict=True)
    ]


def main() -> bool:
    from app import migrate
    from app.db import make_engine, make_sessionmaker
    from app.readings.ingest import ingest_readings
    from app.readings.queries import aggregated_readings
    from app.settings import Settings
    from app.sites import service as sites_service
    from app.sites.schemas import SiteCreate, StationCreate

    with tempfile.TemporaryDirectory() as scratch:
        url = os.environ.get("SPATLINE_BENCH_DATABASE_URL") or (
            f"sqlite:///{Path(scratch) / 'bench.db'}"
        )
        settings = Settings(_env_file=None, database_url=url, secret_key=secrets.token_urlsafe(32))
        migrate.upgrade(settings, "head")
        engine = make_engine(settings)
        try:
            with make_sessionmaker(engine)() as session:
                site = sites_service.create_site(
                    session=session,
                    data=SiteCreate(
                        id=f"bench-{secrets.token_hex(4)}", name="Bench", timezone="UTC"
                    ),
                )
                station = sites_service.create_station(
                    session=session,
                    site=site,
                    data=StationCreate(
                        id="intake",
                        name="Intake",
                        role="intake",
                        alkalinity={"mode": "salinity_line", "slope": 47.7, "intercept": 647.0},
                    ),
                )
                session.commit()

                now = dt.datetime.now(dt.UTC).replace(second=0, microsecond=0)
                start = now - dt.timedelta(days=DAYS)
                items = _readings(start, DAYS * 1440)
                batch_times = []
                for first in range(0, len(items), BATCH):
                    began = time.perf_counter()
                    ingest_readings(
                        session=session,
                        station=station,
                        source="bench",
                        items=items[first : first + BATCH],
                        now=now,
                    )
                    session.commit()
                    batch_times.append(time.perf_counter() - began)

                began = time.perf_counter()
                ingest_readings(
                    session=session,
                    station=station,
                    source="bench",
                    items=[dict(items[-1], observed_at=now.isoformat())],
                    now=now,
                )
                session.commit()
                single = time.perf_counter() - began

                began = time.perf_counter()
                buckets = aggregated_readings(
                    session=session,
                    station_pk=station.pk,
                    start=start,
                    end=now + dt.timedelta(minutes=1),
                    every=dt.timedelta(hours=1),
                )
                aggregate = time.perf_counter() - began
        finally:
            engine.dispose()

    worst_batch = max(batch_times)
    print(f"database: {url.split(':', 1)[0]}")
    print(
        f"ingest of {BATCH} readings: median {np.median(batch_times):.2f} s, worst "
        f"{worst_batch:.2f} s (goal < {BATCH_GOAL_SECONDS} s)"
    )
    print(
        f"ingest of 1 reading after {len(items)}: {single * 1000:.0f} ms "
        f"(goal < {SINGLE_GOAL_SECONDS * 1000:.0f} ms)"
    )
    print(
        f"hourly aggregate of {DAYS} days ({len(buckets)} buckets): {aggregate * 1000:.0f} ms "
        f"(goal < {AGGREGATE_GOAL_SECONDS * 1000:.0f} ms)"
    )
    return (
        worst_batch < BATCH_GOAL_SECONDS
        and single < SINGLE_GOAL_SECONDS
        and aggregate < AGGREGATE_GOAL_SECONDS
    )
