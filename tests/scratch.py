"""Scratch databases for tests that run outside the rolled-back per-test session: a real
server process, the command line, or threads with their own connections."""

from __future__ import annotations

import secrets
from typing import Any

from sqlalchemy import Engine
from sqlalchemy.orm import Session

from app import migrate
from app.db import make_engine
from app.settings import Settings
from app.sites import service as sites_service
from app.sites.models import Site, Station
from app.sites.schemas import SiteCreate, StationCreate

# An invented intake water (demo scenario), not a check value.
INTAKE_ALKALINITY_UMOL_KG = 2150.0


def migrated_engine(database_url: str, **settings_fields: Any) -> tuple[Settings, Engine]:
    """Test settings for ``database_url`` (migrated to head) and an engine on it."""
    settings = Settings(
        _env_file=None,
        environment="test",
        database_url=database_url,
        secret_key=secrets.token_urlsafe(32),
        **settings_fields,
    )
    migrate.upgrade(settings, "head")
    return settings, make_engine(settings)


def add_site_with_intake(
    session: Session, *, site_id: str = "cove", site_name: str = "Cove"
) -> tuple[Site, Station]:
    """A site in UTC with one intake station whose alkalinity is a fixed value."""
    site = sites_service.create_site(
        session=session, data=SiteCreate(id=site_id, name=site_name, timezone="UTC")
    )
    station = sites_service.create_station(
        session=session,
        site=site,
        data=StationCreate(
            id="intake",
            name="Intake",
            role="intake",
            alkalinity={"mode": "fixed", "value": INTAKE_ALKALINITY_UMOL_KG},
        ),
    )
    return site, station
