"""Fixtures of the reliability tests: a real uvicorn process on a scratch SQLite database."""

from __future__ import annotations

import pytest
from sqlalchemy.orm import Session

from app.auth.keys import create_key
from app.sites import service as sites_service
from tests.reliability.server import ServerProcess
from tests.scratch import add_site_with_intake, migrated_engine


@pytest.fixture(scope="session")
def served(tmp_path_factory):
    directory = tmp_path_factory.mktemp("served")
    url = f"sqlite:///{directory / 'served.db'}"
    _settings, engine = migrated_engine(url)
    with Session(engine) as session:
        _site, station = add_site_with_intake(session)
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
