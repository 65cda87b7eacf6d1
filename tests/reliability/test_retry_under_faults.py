"""10,000 readings from 20 retrying clients survive a crash of the app or of the database.

Each client owns one device and posts its 500 readings in batches of 20; on any error or
timeout it sends the same batch again (same reading ids) after a short pause. Half-way
through, the fault is injected: the uvicorn process is killed with SIGKILL and started
again (SQLite), or the PostgreSQL server is restarted. At the end every reading is stored
exactly once. Every loop is bounded in count and in time.
"""

from __future__ import annotations

import datetime as dt
import os
import secrets
import subprocess
import threading
import time
from collections.abc import Callable, Iterator
from pathlib import Path

import httpx
import pytest
from sqlalchemy import func, select, text
from sqlalchemy.engine import make_url
from sqlalchemy.orm import Session

from app.db import make_engine
from app.readings.models import Reading
from app.settings import Settings
from app.sites import service as sites_service
from tests.reliability.server import ServerProcess
from tests.scratch import add_site_with_intake, migrated_engine

pytestmark = pytest.mark.slow

CLIENTS = 20
PER_CLIENT = 500
BATCH = 20
TOTAL = CLIENTS * PER_CLIENT
MAX_ATTEMPTS_PER_BATCH = 300
DEADLINE_S = 300.0
REQUEST_TIMEOUT_S = 10.0
START = dt.datetime(2026, 3, 1, tzinfo=dt.UTC)


def _prepare(database_url: str) -> list[str]:
    """Migrate the scratch database; a site, a station and one device key per client."""
    _settings, engine = migrated_engine(database_url)
    keys = []
    with Session(engine) as session:
        _site, station = add_site_with_intake(session)
        for n in range(CLIENTS):
            _device, key = sites_service.create_device(
                session=session, station=station, label=f"probe {n}"
            )
            keys.append(key)
        session.commit()
    engine.dispose()
    return keys


def _batches(client_no: int) -> list[list[dict]]:
    readings = [
        {
            "reading_id": f"c{client_no}-r{i}",
            "observed_at": (START + dt.timedelta(minutes=i)).isoformat(),
            "temperature_c": 12.0 + (i % 50) / 10,
            "salinity": 31.0,
            "ph": 7.8 + (i % 20) / 100,
            "ph_scale": "total",
        }
        for i in range(PER_CLIENT)
    ]
    return [readings[i : i + BATCH] for i in range(0, PER_CLIENT, BATCH)]


class Load:
    """The 20 clients, counting the batches answered 200 and the retries."""

    def __init__(self, base_url: str, keys: list[str]) -> None:
        self.base_url = base_url
        self.keys = keys
        self.done_batches = 0
        self.retries = 0
        self.failures: list[str] = []
        self._lock = threading.Lock()
        self._deadline = time.monotonic() + DEADLINE_S

    def _client(self, client_no: int) -> None:
        headers = {"Authorization": f"Bearer {self.keys[client_no]}"}
        with httpx.Client(
            base_url=self.base_url, headers=headers, timeout=REQUEST_TIMEOUT_S
        ) as http:
            for batch in _batches(client_no):
                for _attempt in range(MAX_ATTEMPTS_PER_BATCH):
                    if time.monotonic() > self._deadline:
                        self.failures.append(f"client {client_no}: out of time")
                        return
                    try:
                        response = http.post("/api/v1/readings", json={"readings": batch})
                        if response.status_code == 200 and not response.json()["rejected"]:
                            break
                        if response.status_code == 429:
                            time.sleep(float(response.headers.get("Retry-After", "1")))
                    except httpx.HTTPError:
                        pass
                    with self._lock:
                        self.retries += 1
                    time.sleep(0.05)
                else:
                    self.failures.append(f"client {client_no}: batch never accepted")
                    return
                with self._lock:
                    self.done_batches += 1

    def run(self, fault: Callable[[], None]) -> None:
        threads = [
            threading.Thread(target=self._client, args=(n,), daemon=True) for n in range(CLIENTS)
        ]
        for thread in threads:
            thread.start()
        total_batches = TOTAL // BATCH
        while self.done_batches < total_batches // 3 and time.monotonic() < self._deadline:
            if not any(t.is_alive() for t in threads):
                break
            time.sleep(0.02)
        fault()
        for thread in threads:
            thread.join(timeout=max(1.0, self._deadline - time.monotonic()))
        assert not any(t.is_alive() for t in threads), "clients still running at the deadline"
        assert not self.failures, self.failures[:5]
        assert self.done_batches == total_batches


def _assert_each_reading_once(database_url: str) -> None:
    settings = Settings(
        _env_file=None,
        environment="test",
        database_url=database_url,
        secret_key=secrets.token_urlsafe(32),
    )
    engine = make_engine(settings)
    try:
        with Session(engine) as session:
            stored = session.execute(select(func.count()).select_from(Reading)).scalar_one()
            distinct = session.execute(
                select(func.count()).select_from(
                    select(Reading.source, Reading.reading_id).distinct().subquery()
                )
            ).scalar_one()
    finally:
        engine.dispose()
    assert stored == TOTAL
    assert distinct == TOTAL


def test_app_killed_and_restarted_on_sqlite(tmp_path):
    url = f"sqlite:///{tmp_path / 'crash.db'}"
    keys = _prepare(url)
    server = ServerProcess(
        database_url=url,
        log_path=tmp_path / "uvicorn.log",
        extra_env={"SPATLINE_DEVICE_REQUESTS_PER_MINUTE": "6000"},
    )
    server.start()
    load = Load(server.base_url, keys)

    def crash_and_restart() -> None:
        server.kill()
        time.sleep(0.5)  # the clients see refused connections for a while
        server.start()

    try:
        load.run(crash_and_restart)
    finally:
        server.stop()
    assert load.retries > 0, "the crash was not noticed by any client"
    _assert_each_reading_once(url)


# --- PostgreSQL -------------------------------------------------------------------------


def _postgres_version() -> str:
    versions = sorted(os.listdir("/etc/postgresql")) if Path("/etc/postgresql").is_dir() else []
    if not versions:
        pytest.skip("no local PostgreSQL cluster to restart (/etc/postgresql is empty)")
    return versions[-1]


def _pg_ready(host: str, port: int) -> bool:
    return (
        subprocess.run(["pg_isready", "-h", host, "-p", str(port), "-q"], check=False).returncode
        == 0
    )


def _ensure_postgres_answers(version: str, host: str, port: int) -> None:
    for _ in range(60):
        if _pg_ready(host, port):
            return
        time.sleep(0.5)
    subprocess.run(
        ["pg_ctlcluster", "--skip-systemctl-redirect", version, "main", "start"],
        check=False,
        timeout=60,
    )
    for _ in range(60):
        if _pg_ready(host, port):
            return
        time.sleep(0.5)
    raise RuntimeError("PostgreSQL does not answer after the test")


@pytest.fixture
def scratch_postgres() -> Iterator[tuple[str, str, str, int]]:
    base = os.environ.get("SPATLINE_TEST_DATABASE_URL", "")
    if not base.startswith("postgresql"):
        pytest.skip("needs PostgreSQL: set SPATLINE_TEST_DATABASE_URL to a scratch database")
    if os.geteuid() != 0:
        pytest.skip("restarting the PostgreSQL server needs root")
    version = _postgres_version()
    url = make_url(base)
    host, port = url.host or "127.0.0.1", url.port or 5432
    name = f"spatline_fault_{os.getpid()}"
    admin = make_engine(
        Settings(
            _env_file=None,
            environment="test",
            database_url=base,
            secret_key=secrets.token_urlsafe(32),
        )
    )
    with admin.connect().execution_options(isolation_level="AUTOCOMMIT") as connection:
        connection.execute(text(f"DROP DATABASE IF EXISTS {name} WITH (FORCE)"))
        connection.execute(text(f"CREATE DATABASE {name}"))
    admin.dispose()
    try:
        yield url.set(database=name).render_as_string(hide_password=False), version, host, port
    finally:
        _ensure_postgres_answers(version, host, port)
        admin = make_engine(
            Settings(
                _env_file=None,
                environment="test",
                database_url=base,
                secret_key=secrets.token_urlsafe(32),
            )
        )
        with admin.connect().execution_options(isolation_level="AUTOCOMMIT") as connection:
            connection.execute(text(f"DROP DATABASE IF EXISTS {name} WITH (FORCE)"))
        admin.dispose()


@pytest.mark.postgres
def test_postgres_restarted_mid_load(tmp_path, scratch_postgres):
    url, version, host, port = scratch_postgres
    keys = _prepare(url)
    server = ServerProcess(
        database_url=url,
        log_path=tmp_path / "uvicorn.log",
        extra_env={"SPATLINE_DEVICE_REQUESTS_PER_MINUTE": "6000"},
    )
    server.start()
    load = Load(server.base_url, keys)

    def restart_postgres() -> None:
        subprocess.run(
            ["pg_ctlcluster", "--skip-systemctl-redirect", version, "main", "restart"],
            check=True,
            timeout=120,
        )

    try:
        load.run(restart_postgres)
    finally:
        server.stop()
        _ensure_postgres_answers(version, host, port)
    assert load.retries > 0, "the restart was not noticed by any client"
    _assert_each_reading_once(url)
