"""Daily status of a site with a year of one-minute readings, against the bare SQL aggregate.

Fixture: one site, 6 stations (one intake, five tank supplies) and 2 tanks fed by the
intake and by the second station, with a year (``--quick``: a month) of one-minute
readings per station ending now: 3.15 million rows, derived chemistry included, written
with plain SQL inserts into the migrated schema, then its quarter-hour rollups
(``reading_rollups``) with the app's aggregate, as the ingest keeps them. It is cached
under ``var/bench/`` keyed by the schema revision, the size and the day it was made (the
chart shows the last 7 days from now, so a fixture from an earlier day is made again).

Timed, against one ``spatline serve`` process on the cached file, each the median of
several runs:

- ``GET /api/v1/sites/{site}/status?date=`` for yesterday (a whole day), over HTTP;
- the bare aggregate of the same day: min/mean/max of the status's five variables per
  station with plain ``sqlite3`` on the same file (warm cache, same run);
- the 7-day chart of the intake station (``chart.svg``), signed in as a viewer.

Goal (issue 6): the status within 3 times the bare aggregate.
"""

from __future__ import annotations

import datetime as dt
import sqlite3
import statistics
import time
from pathlib import Path

import numpy as np

from bench._support import (
    CACHE_DIR,
    QUICK,
    load_average,
    make_site,
    sensor_series,
    serving,
)

STATIONS = 6
DAYS = 31 if QUICK else 365
RUNS = 15
GOAL_RATIO = 3.0
SITE_ID = "bench-status"
DAY_VARIABLES = ("omega_aragonite", "ph_total", "pco2_uatm", "temperature_c", "salinity")


def _revision() -> str:
    from alembic.script import ScriptDirectory

    script = ScriptDirectory(str(Path(__file__).resolve().parent.parent / "migrations"))
    return script.get_current_head() or "none"


def _fill(path: Path, station_pks: list[int], end: dt.datetime) -> None:
    """A year of one-minute readings per station, with chemistry from the engine."""
    import chemistry

    count = DAYS * 1440
    start = end - dt.timedelta(minutes=count)
    stamps = np.datetime64(start.replace(tzinfo=None), "us") + np.arange(count).astype(
        "timedelta64[m]"
    )
    observed = np.datetime_as_string(stamps, unit="us")
    observed = np.char.replace(observed, "T", " ")
    received = observed  # the fixture arrives as it is measured
    connection = sqlite3.connect(path, isolation_level=None)
    try:
        connection.execute("PRAGMA journal_mode=WAL")
        connection.execute("PRAGMA synchronous=OFF")
        for number, station_pk in enumerate(station_pks):
            series = sensor_series(count, seed=11 + number)
            temperature = series["temperature_c"] + 2.0 * number / STATIONS
            salinity = series["salinity"]
            ph = series["ph"] - 0.02 * number
            alkalinity = 47.7 * salinity + 647.0
            state = chemistry.solve(
                temperature=temperature,
                salinity=salinity,
                ph=ph,
                alkalinity=alkalinity,
                ph_scale="nbs",
            )
            columns = {
                "station_pk": np.full(count, station_pk),
                "source": np.full(count, "fixture"),
                "observed_at": observed,
                "received_at": received,
                "temperature_c": temperature,
                "salinity": salinity,
                "ph": ph,
                "ph_scale": np.full(count, "nbs"),
                "alkalinity_used_umol_kg": alkalinity,
                "alkalinity_source": np.full(count, "salinity_line"),
                "ph_total": np.asarray(state.ph_total, dtype=float),
                "dic_umol_kg": np.asarray(state.dic, dtype=float),
                "pco2_uatm": np.asarray(state.pco2, dtype=float),
                "carbonate_umol_kg": np.asarray(state.carbonate, dtype=float),
                "omega_aragonite": np.asarray(state.omega_aragonite, dtype=float),
                "omega_calcite": np.asarray(state.omega_calcite, dtype=float),
                # A typical figure for a salinity-line alkalinity (not computed per row:
                # the status shows stored values and does not depend on it).
                "omega_aragonite_uncertainty": np.full(count, 0.08),
                "qc_temperature": np.ones(count, dtype=int),
                "qc_salinity": np.ones(count, dtype=int),
                "qc_ph": np.ones(count, dtype=int),
                "qc_alkalinity": np.full(count, 2),
                "qc_derived": np.ones(count, dtype=int),
                "qc_overall": np.ones(count, dtype=int),
                "chemistry_version": np.full(count, chemistry.CHEMISTRY_VERSION),
            }
            names = list(columns)
            rows = zip(*(columns[name].tolist() for name in names), strict=True)
            connection.execute("BEGIN")
            connection.executemany(
                f"INSERT INTO readings ({', '.join(names)}) "
                f"VALUES ({', '.join('?' for _ in names)})",
                rows,
            )
            connection.execute("COMMIT")
        connection.execute("ANALYZE")
    finally:
        connection.close()


def _fixture() -> tuple[Path, str]:
    """The cached fixture file and its viewer key (made when missing or stale)."""
    today = dt.datetime.now(dt.UTC).date()
    CACHE_DIR.mkdir(parents=True, exist_ok=True)
    stem = f"status-r{_revision()}-{STATIONS}x{DAYS}d-{today.isoformat()}"
    path = CACHE_DIR / f"{stem}.db"
    key_file = CACHE_DIR / f"{stem}.key"
    if path.exists() and key_file.exists():
        return path, key_file.read_text().strip()
    for old in CACHE_DIR.glob(f"status-*-{STATIONS}x{DAYS}d-*"):
        old.unlink()
    began = time.perf_counter()
    partial = path.with_suffix(".partial")
    for leftover in (partial, Path(f"{partial}-wal"), Path(f"{partial}-shm")):
        leftover.unlink(missing_ok=True)
    url = f"sqlite:///{partial}"
    site = make_site(url, stations=STATIONS, devices_per_station=0, site_id=SITE_ID)
    _add_tanks(url, site.station_ids)
    end = dt.datetime.now(dt.UTC).replace(second=0, microsecond=0)
    _fill(partial, site.station_pks, end)
    _build_rollups(url)
    partial.rename(path)
    key_file.write_text(site.viewer_key)
    print(f"fixture made in {time.perf_counter() - began:.0f} s: {path}")
    return path, site.viewer_key


def _build_rollups(url: str) -> None:
    """The quarter-hour rollups of the plain-SQL readings, as the ingest keeps them: the
    app's own aggregate in one INSERT ... SELECT."""
    from app.db import make_engine, make_sessionmaker
    from app.status.rollups import rebuild
    from bench._support import settings_for

    engine = make_engine(settings_for(url))
    try:
        with make_sessionmaker(engine)() as session:
            rebuild(session=session)
            session.commit()
    finally:
        engine.dispose()


def _add_tanks(url: str, station_ids: list[str]) -> None:
    from app.db import make_engine, make_sessionmaker
    from app.sites import service as sites_service
    from app.sites.schemas import TankCreate
    from bench._support import settings_for

    engine = make_engine(settings_for(url))
    try:
        with make_sessionmaker(engine)() as session:
            site = sites_service.get_site(session=session, site_id=SITE_ID)
            for number, (station_id, temperature) in enumerate(
                ((station_ids[0], 20.0), (station_ids[1], 25.0))
            ):
                sites_service.create_tank(
                    session=session,
                    site=site,
                    data=TankCreate(
                        id=f"tank-{number + 1}",
                        name=f"Larval tank {number + 1}",
                        source_station_id=station_id,
                        stage="larvae",
                        volume_l=4000.0,
                        culture_temperature_c=temperature,
                    ),
                )
            session.commit()
    finally:
        engine.dispose()


def _bare_aggregate(path: Path, start: dt.datetime, end: dt.datetime) -> list[tuple]:
    aggregates = ", ".join(f"min({name}), avg({name}), max({name})" for name in DAY_VARIABLES)
    connection = sqlite3.connect(path)
    try:
        return connection.execute(
            f"SELECT station_pk, count(*), {aggregates} FROM readings "
            "WHERE station_pk IN (SELECT pk FROM stations WHERE site_id = ?) "
            "AND observed_at >= ? AND observed_at < ? AND qc_overall != 4 "
            "GROUP BY station_pk",
            (
                SITE_ID,
                start.replace(tzinfo=None).isoformat(sep=" "),
                end.replace(tzinfo=None).isoformat(sep=" "),
            ),
        ).fetchall()
    finally:
        connection.close()


def _median_seconds(action, runs: int = RUNS) -> float:  # type: ignore[no-untyped-def]
    action()  # warm: caches, imports, the first connection
    times = []
    for _ in range(runs):
        began = time.perf_counter()
        action()
        times.append(time.perf_counter() - began)
    return statistics.median(times)


def main() -> bool:
    import httpx

    path, viewer_key = _fixture()
    day = dt.datetime.now(dt.UTC).date() - dt.timedelta(days=1)
    start = dt.datetime.combine(day, dt.time(), tzinfo=dt.UTC)
    end = start + dt.timedelta(days=1)
    rows = _bare_aggregate(path, start, end)
    if len(rows) != STATIONS or any(row[1] != 1440 for row in rows):
        raise RuntimeError(f"fixture day incomplete: {[row[:2] for row in rows]}")
    headers = {"Authorization": f"Bearer {viewer_key}"}
    with serving(f"sqlite:///{path}") as base, httpx.Client(base_url=base, timeout=120) as client:

        def get_status() -> None:
            answer = client.get(
                f"/api/v1/sites/{SITE_ID}/status",
                params={"date": day.isoformat()},
                headers=headers,
            )
            answer.raise_for_status()

        # The bare aggregate and the status in turn, so that both meet the machine as it is
        # at that moment (on a shared machine either moves by half from one minute to the
        # next); the figure is the median of the runs' ratios.
        _bare_aggregate(path, start, end)
        get_status()  # warm: caches, imports, the first connection
        pairs = []
        for _ in range(RUNS):
            began = time.perf_counter()
            _bare_aggregate(path, start, end)
            middle = time.perf_counter()
            get_status()
            pairs.append((middle - began, time.perf_counter() - middle))
        bare = statistics.median(b for b, _ in pairs)
        status_seconds = statistics.median(s for _, s in pairs)
        ratio = statistics.median(s / b for b, s in pairs)
        body = client.get(
            f"/api/v1/sites/{SITE_ID}/status", params={"date": day.isoformat()}, headers=headers
        ).json()
        if [s["readings"] for s in body["stations"]] != [1440] * STATIONS:
            raise RuntimeError("the status did not count the fixture's day")

        signed = client.post("/sign-in", data={"key": viewer_key}, follow_redirects=False)
        if signed.status_code != 303:
            raise RuntimeError(f"sign-in failed: {signed.status_code}")

        def get_chart() -> None:
            answer = client.get(f"/sites/{SITE_ID}/stations/station-1/chart.svg")
            answer.raise_for_status()

        chart_seconds = _median_seconds(get_chart, runs=3)

    met = ratio <= GOAL_RATIO
    print(load_average())
    print(f"fixture: {STATIONS} stations x {DAYS} days of 1-minute readings, 2 tanks")
    print(f"bare SQL min/mean/max per station for one day: median {bare * 1000:.1f} ms")
    print(f"status of that day over HTTP: median {status_seconds * 1000:.1f} ms")
    print(
        f"ratio, median of {RUNS} alternating runs' {ratio:.2f} (goal <= {GOAL_RATIO:g}): "
        f"{'met' if met else 'MISSED'}"
    )
    print(f"7-day chart (chart.svg, intake station, 2 tank temperatures): {chart_seconds:.2f} s")
    return met


if __name__ == "__main__":
    main()
