"""Shared fixtures: settings, a migrated database, a rolled-back session per test, the app
and an HTTP client, API keys, and factories for sites, stations, tanks and devices.

The database is PostgreSQL when ``SPATLINE_TEST_DATABASE_URL`` is set (it is wiped: downgrade
to base, then upgrade to head) and otherwise a fresh SQLite file in pytest's tmp dir. Tables
are made only by the Alembic migrations.

Each test runs inside one outer transaction that is rolled back at the end; the code under
test commits into savepoints (``join_transaction_mode="create_savepoint"``), so nothing has
to be deleted. The HTTP client shares that session with the app.

``client`` is a synchronous ``httpx.Client`` whose transport is ``httpx.ASGITransport`` run
on a blocking anyio portal: ``client.get(...)`` in plain test functions, no event loop
plugin needed. ``async_client`` is the plain ``httpx.AsyncClient`` for async tests.
"""

from __future__ import annotations

import itertools
import os
import secrets
from collections.abc import Callable, Iterator
from typing import Any

import httpx
import pytest
from anyio.from_thread import BlockingPortal, start_blocking_portal
from fastapi import FastAPI
from sqlalchemy import Engine
from sqlalchemy.orm import Session, sessionmaker

from app import migrate
from app.auth.keys import create_key
from app.db import get_session, make_engine
from app.main import create_app
from app.settings import Settings
from app.sites import service as sites_service
from app.sites.models import Device, Site, Station, Tank
from app.sites.schemas import SiteCreate, StationCreate, TankCreate
from tests.mailserver import MailServer

TEST_DATABASE_ENV = "SPATLINE_TEST_DATABASE_URL"
BASE_URL = "http://testserver"


def _is_postgres(url: str) -> bool:
    return url.startswith("postgresql")


@pytest.fixture(scope="session")
def database_url(tmp_path_factory: pytest.TempPathFactory) -> str:
    from_env = os.environ.get(TEST_DATABASE_ENV)
    if from_env:
        return from_env
    return f"sqlite:///{tmp_path_factory.mktemp('db') / 'spatline-test.db'}"


@pytest.fixture(scope="session")
def settings(database_url: str) -> Settings:
    return Settings(
        _env_file=None,
        environment="test",
        database_url=database_url,
        secret_key=secrets.token_urlsafe(32),
        smtp_host=None,
        run_worker_in_serve=False,
    )


@pytest.fixture(scope="session")
def engine(settings: Settings) -> Iterator[Engine]:
    if _is_postgres(settings.database_url):
        migrate.downgrade(settings, "base")
    migrate.upgrade(settings, "head")
    engine = make_engine(settings)
    yield engine
    engine.dispose()


@pytest.fixture
def session(engine: Engine) -> Iterator[Session]:
    connection = engine.connect()
    outer = connection.begin()
    session = Session(
        bind=connection,
        join_transaction_mode="create_savepoint",
        expire_on_commit=False,
        autoflush=False,
    )
    try:
        yield session
    finally:
        session.close()
        if outer.is_active:
            outer.rollback()
        connection.close()


@pytest.fixture
def app(settings: Settings, engine: Engine, session: Session) -> FastAPI:
    application = create_app(settings, engine=engine)

    def _test_session() -> Iterator[Session]:
        yield session

    application.dependency_overrides[get_session] = _test_session
    return application


class _PortalASGITransport(httpx.BaseTransport):
    """Runs ``httpx.ASGITransport`` on an anyio portal so that a sync client can use it."""

    def __init__(self, app: FastAPI, portal: BlockingPortal) -> None:
        self._transport = httpx.ASGITransport(app=app)
        self._portal = portal

    def handle_request(self, request: httpx.Request) -> httpx.Response:
        body = request.read()

        async def send() -> tuple[int, httpx.Headers, bytes]:
            async_request = httpx.Request(
                request.method, request.url, headers=request.headers, content=body
            )
            response = await self._transport.handle_async_request(async_request)
            content = b"".join([chunk async for chunk in response.stream])
            return response.status_code, response.headers, content

        status_code, headers, content = self._portal.call(send)
        return httpx.Response(status_code, headers=headers, content=content, request=request)


@pytest.fixture
def client(app: FastAPI) -> Iterator[httpx.Client]:
    with (
        start_blocking_portal() as portal,
        httpx.Client(transport=_PortalASGITransport(app, portal), base_url=BASE_URL) as http,
    ):
        yield http


@pytest.fixture
async def async_client(app: FastAPI) -> Any:
    async with httpx.AsyncClient(transport=httpx.ASGITransport(app=app), base_url=BASE_URL) as http:
        yield http


# --- keys ------------------------------------------------------------------------------


def _new_key(session: Session, role: str) -> str:
    _, plaintext = create_key(session=session, role=role, label=f"test {role}")
    session.commit()
    return plaintext


@pytest.fixture
def admin_key(session: Session) -> str:
    """Plaintext of a fresh admin key."""
    return _new_key(session, "admin")


@pytest.fixture
def viewer_key(session: Session) -> str:
    """Plaintext of a fresh viewer key."""
    return _new_key(session, "viewer")


@pytest.fixture
def admin_headers(admin_key: str) -> dict[str, str]:
    return {"Authorization": f"Bearer {admin_key}"}


@pytest.fixture
def viewer_headers(viewer_key: str) -> dict[str, str]:
    return {"Authorization": f"Bearer {viewer_key}"}


# --- factories -------------------------------------------------------------------------

_serial = itertools.count(1)


@pytest.fixture
def make_site(session: Session) -> Callable[..., Site]:
    """``make_site(**fields)``: a committed site; fields as in ``SiteCreate``."""

    def factory(**fields: Any) -> Site:
        n = next(_serial)
        values = {"id": f"site-{n}", "name": f"Test site {n}", "timezone": "UTC"} | fields
        site = sites_service.create_site(session=session, data=SiteCreate(**values))
        session.commit()
        return site

    return factory


@pytest.fixture
def make_station(session: Session, make_site: Callable[..., Site]) -> Callable[..., Station]:
    """``make_station(site=None, **fields)``: a committed station (new site if none given)."""

    def factory(site: Site | None = None, **fields: Any) -> Station:
        site = site or make_site()
        n = next(_serial)
        values = {"id": f"station-{n}", "name": f"Test station {n}", "role": "intake"} | fields
        station = sites_service.create_station(
            session=session, site=site, data=StationCreate(**values)
        )
        session.commit()
        return station

    return factory


@pytest.fixture
def make_tank(
    session: Session, make_site: Callable[..., Site], make_station: Callable[..., Station]
) -> Callable[..., Tank]:
    """``make_tank(site=None, station=None, **fields)``: a committed tank fed by ``station``."""

    def factory(site: Site | None = None, station: Station | None = None, **fields: Any) -> Tank:
        if site is None:
            site = session.get(Site, station.site_id) if station is not None else make_site()
        station = station or make_station(site=site, role="treated")
        n = next(_serial)
        values = {
            "id": f"tank-{n}",
            "name": f"Test tank {n}",
            "source_station_id": station.id,
            "stage": "larvae",
            "volume_l": 2000.0,
            "culture_temperature_c": 24.0,
        } | fields
        tank = sites_service.create_tank(session=session, site=site, data=TankCreate(**values))
        session.commit()
        return tank

    return factory


@pytest.fixture
def make_device(
    session: Session, make_station: Callable[..., Station]
) -> Callable[..., tuple[Device, str]]:
    """``make_device(station=None, label="")``: a committed device and its key's plaintext."""

    def factory(station: Station | None = None, label: str = "") -> tuple[Device, str]:
        station = station or make_station()
        device, plaintext = sites_service.create_device(
            session=session, station=station, label=label
        )
        session.commit()
        return device, plaintext

    return factory


# --- mail --------------------------------------------------------------------------------


@pytest.fixture
def mail_server() -> Iterator[MailServer]:
    server = MailServer()
    server.start()
    yield server
    server.stop()


@pytest.fixture
def mail_settings(settings: Settings, mail_server: MailServer) -> Settings:
    return settings.model_copy(
        update={
            "smtp_host": "127.0.0.1",
            "smtp_port": mail_server.port,
            "smtp_security": "none",
            "smtp_from": "alerts@hatchery.example",
            "public_url": "https://spatline.hatchery.example",
        }
    )


@pytest.fixture
def factory(session: Session) -> sessionmaker[Session]:
    """Sessions for code that opens its own short transactions (the sender, the sweep),
    as savepoints of the test's rolled-back transaction."""
    return sessionmaker(
        bind=session.connection(),
        join_transaction_mode="create_savepoint",
        expire_on_commit=False,
        autoflush=False,
    )
