"""Fixtures of the reliability tests: a real uvicorn process on a scratch SQLite database."""

from __future__ import annotations

import secrets

import pytest
from sqlalchemy.orm import Session

from app import migrate
from app.auth.keys import create_key
from app.db import make_engine
from app.settings import Settings
from app.sites import service as sites_service
from app.sites.schemas import SiteCreate, StationCreate
from tests.reliability.server import ServerProcess


@pytest.fixture(scope="session")
def served(tmp_path_factory):
    directory = tmp_path_factory.mktemp("served")
    url = f"sqlite:///{directory / 'served.db'}"
    settings = Settings(
        _env_file=None, environment="test", database_url=url, secret_key=secrets.token_urlsafe(32)
    )
    migrate.upgrade(settings, "head")
    engine = make_engine(settings)
    with Session(engine) as session:
        site = sites_service.create_site(
            session=session, data=SiteCreate(id="cove", name="Cove", timezone="UTC")
        )
        station = sites_service.create_station(
            session=session,
            site=site,
            data=StationCreate(
                id="intake",
                name="Intake",
                role="intake",
                alkalinity={"mode": "fixed", "value": 2150.0},
            ),
        )
        _device, device_key = sites_service.create_device(session=session, station=station)
        _, admin_key = create_key(session=session, role="admin", label="admin")
        session.commit()
    engine.dispose()
    server = ServerProcess(database_url=url, log_path=directory / "uvicorn.log")
    server.start()
    try:
        yield server, {"device": device_key, "admin": admin_key, "viewer": admin_key}
    finally:
        server.stop()
