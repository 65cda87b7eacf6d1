"""Shared pieces of the service benchmarks: a scratch database, a site with stations and
device keys, and a ``spatline serve`` process on a free loopback port.

Not a benchmark itself (no ``main()``), so ``python -m bench`` skips it.
"""

from __future__ import annotations

import contextlib
import datetime as dt
import os
import secrets
import signal
import socket
import subprocess
import sys
import tempfile
import time
from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np

REPO = Path(__file__).resolve().parent.parent
# Benchmarks' cached fixtures (never committed: var/ is ignored).
CACHE_DIR = REPO / "var" / "bench"
QUICK = "--quick" in sys.argv


def load_average() -> str:
    """The 1-, 5- and 15-minute load averages, to print beside the figures."""
    try:
        one, five, fifteen = os.getloadavg()
    except OSError:  # pragma: no cover - not every platform has it
        return "load n/a"
    return f"load {one:.2f} {five:.2f} {fifteen:.2f} on {os.cpu_count()} cores"


def free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as probe:
        probe.bind(("127.0.0.1", 0))
        return int(probe.getsockname()[1])


def settings_for(url: str):  # type: ignore[no-untyped-def]
    from app.settings import Settings

    return Settings(
        _env_file=None,
        database_url=url,
        secret_key=secrets.token_urlsafe(32),
        run_worker_in_serve=False,
    )


@dataclass
class BenchSite:
    site_id: str
    station_pks: list[int]
    station_ids: list[str]
    device_keys: list[str]
    viewer_key: str


def make_site(
    url: str, *, stations: int = 1, devices_per_station: int = 1, site_id: str | None = None
) -> BenchSite:
    """A migrated database with one site, its stations (salinity-line alkalinity) and keys."""
    from app import migrate
    from app.auth import keys
    from app.db import make_engine, make_sessionmaker
    from app.sites import service as sites_service
    from app.sites.schemas import SiteCreate, StationCreate

    settings = settings_for(url)
    migrate.upgrade(settings, "head")
    engine = make_engine(settings)
    try:
        with make_sessionmaker(engine)() as session:
            site = sites_service.create_site(
                session=session,
                data=SiteCreate(
                    id=site_id or f"bench-{secrets.token_hex(4)}", name="Bench", timezone="UTC"
                ),
            )
            pks: list[int] = []
            ids: list[str] = []
            device_keys: list[str] = []
            for number in range(stations):
                station = sites_service.create_station(
                    session=session,
                    site=site,
                    data=StationCreate(
                        id=f"station-{number + 1}",
                        name=f"Station {number + 1}",
                        role="intake" if number == 0 else "tank",
                        alkalinity={"mode": "salinity_line", "slope": 47.7, "intercept": 647.0},
                    ),
                )
                session.flush()
                pks.append(station.pk)
                ids.append(station.id)
                for _ in range(devices_per_station):
                    _, plaintext = sites_service.create_device(session=session, station=station)
                    device_keys.append(plaintext)
            _, viewer = keys.create_key(session=session, role="viewer", label="bench viewer")
            session.commit()
            return BenchSite(site.id, pks, ids, device_keys, viewer)
    finally:
        engine.dispose()


def sensor_series(count: int, seed: int = 7) -> Mapping[str, np.ndarray]:
    """Plausible intake water with a daily cycle: temperature, salinity, pH (NBS)."""
    rng = np.random.default_rng(seed)
    minutes = np.arange(count)
    day = np.sin(2 * np.pi * minutes / 1440.0)
    return {
        "temperature_c": np.round(12.0 + 1.5 * day + 0.05 * rng.standard_normal(count), 3),
        "salinity": np.round(31.0 - 0.3 * day + 0.02 * rng.standard_normal(count), 3),
        "ph": np.round(7.85 + 0.08 * day + 0.005 * rng.standard_normal(count), 4),
    }


def reading_items(start: dt.datetime, count: int, seed: int = 7) -> list[dict[str, object]]:
    """``count`` one-minute readings from ``start`` as a device posts them."""
    series = sensor_series(count, seed)
    return [
        {
            "reading_id": f"r{seed}-{minute}",
            "observed_at": (start + dt.timedelta(minutes=minute)).isoformat(),
            "temperature_c": float(series["temperature_c"][minute]),
            "salinity": float(series["salinity"][minute]),
            "ph": float(series["ph"][minute]),
            "ph_scale": "nbs",
        }
        for minute in range(count)
    ]


@contextlib.contextmanager
def serving(
    url: str, *, workers: int = 1, extra_env: Mapping[str, str] | None = None
) -> Iterator[str]:
    """``spatline serve`` on a free loopback port; yields its base URL, stops it after."""
    import httpx

    port = free_port()
    env = dict(os.environ)
    env.update(
        SPATLINE_DATABASE_URL=url,
        SPATLINE_SECRET_KEY=secrets.token_urlsafe(32),
        SPATLINE_RUN_WORKER_IN_SERVE="false",
        SPATLINE_ENVIRONMENT="development",
    )
    env.update(extra_env or {})
    command: Sequence[str] = [
        str(Path(sys.executable).with_name("spatline")),
        "serve",
        "--host",
        "127.0.0.1",
        "--port",
        str(port),
        "--workers",
        str(workers),
    ]
    # The server's log goes to a file: an undrained pipe would fill and block the server.
    log = tempfile.NamedTemporaryFile(  # noqa: SIM115 - closed when the server stops
        prefix="spatline-bench-", suffix=".log", delete=False
    )
    process = subprocess.Popen(command, cwd=REPO, env=env, stdout=subprocess.DEVNULL, stderr=log)
    base = f"http://127.0.0.1:{port}"
    try:
        deadline = time.monotonic() + 60
        while True:
            if process.poll() is not None:
                raise RuntimeError(f"the server exited: {Path(log.name).read_text()[-2000:]}")
            try:
                if httpx.get(f"{base}/healthz", timeout=1.0).status_code < 500:
                    break
            except httpx.HTTPError:
                pass
            if time.monotonic() > deadline:
                raise RuntimeError("the server did not answer within 60 s")
            time.sleep(0.2)
        yield base
    finally:
        process.send_signal(signal.SIGINT)
        try:
            process.wait(timeout=20)
        except subprocess.TimeoutExpired:
            process.kill()
            process.wait()
        log.close()
        errors = [line for line in Path(log.name).read_text().splitlines() if "Traceback" in line]
        if errors:
            print(f"the server logged {len(errors)} tracebacks; its log: {log.name}")
        else:
            Path(log.name).unlink()
