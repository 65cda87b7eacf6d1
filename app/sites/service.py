"""Data access for sites, stations, tanks and devices.

Functions take keyword-only arguments, flush but never commit (the caller owns the
transaction), and raise ``SiteConfigError`` subclasses that the router turns into HTTP
answers.
"""

from __future__ import annotations

import secrets
from collections.abc import Mapping
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from app.alerts.rules import create_default_rules
from app.auth.keys import create_key, revoke_device_keys
from app.db import utcnow
from app.readings.qc import limits_with_overrides
from app.sites.models import Device, Site, Station, Tank
from app.sites.schemas import (
    SiteCreate,
    SiteUpdate,
    StationCreate,
    StationPublic,
    StationUpdate,
    TankCreate,
    TankPublic,
    TankUpdate,
    check_floor_below_target,
)


class SiteConfigError(Exception):
    """Base of the errors below; the message is a sentence for the API user."""


class AlreadyExistsError(SiteConfigError):
    pass


class InvalidFieldError(SiteConfigError):
    def __init__(self, field: str, message: str) -> None:
        super().__init__(message)
        self.field = field


# --- sites -----------------------------------------------------------------------------


def get_site(*, session: Session, site_id: str) -> Site | None:
    return session.get(Site, site_id)


def list_sites(*, session: Session) -> list[Site]:
    return list(session.scalars(select(Site).order_by(Site.id)))


def create_site(*, session: Session, data: SiteCreate) -> Site:
    if session.get(Site, data.id) is not None:
        raise AlreadyExistsError(f"A site with id {data.id!r} already exists.")
    now = utcnow()
    site = Site(**data.model_dump(), created_at=now, updated_at=now)
    session.add(site)
    session.flush()
    return site


def update_site(*, session: Session, site: Site, data: SiteUpdate) -> Site:
    for field, value in data.model_dump(exclude_unset=True).items():
        setattr(site, field, value)
    site.updated_at = utcnow()
    session.flush()
    return site


# --- stations --------------------------------------------------------------------------


def validate_qc_overrides(overrides: Mapping[str, Mapping[str, Any]]) -> None:
    try:
        limits_with_overrides(overrides)
    except ValueError as error:
        raise InvalidFieldError("qc_limits", str(error)) from None


def effective_qc_limits(station: Station) -> dict[str, dict[str, Any]]:
    return {
        variable: limits.model_dump()
        for variable, limits in limits_with_overrides(station.qc_limits).items()
    }


def station_public(station: Station) -> StationPublic:
    return StationPublic(
        id=station.id,
        site_id=station.site_id,
        name=station.name,
        role=station.role,
        alkalinity=station.alkalinity,
        ph_uncertainty=station.ph_uncertainty,
        qc_limits=effective_qc_limits(station),
        created_at=station.created_at,
        updated_at=station.updated_at,
    )


def get_station(*, session: Session, site_id: str, station_id: str) -> Station | None:
    return session.scalars(
        select(Station).where(Station.site_id == site_id, Station.id == station_id)
    ).one_or_none()


def list_stations(*, session: Session, site_id: str) -> list[Station]:
    return list(
        session.scalars(select(Station).where(Station.site_id == site_id).order_by(Station.id))
    )


def create_station(*, session: Session, site: Site, data: StationCreate) -> Station:
    if get_station(session=session, site_id=site.id, station_id=data.id) is not None:
        raise AlreadyExistsError(f"Site {site.id!r} already has a station with id {data.id!r}.")
    validate_qc_overrides(data.qc_limits)
    now = utcnow()
    station = Station(
        site_id=site.id,
        id=data.id,
        name=data.name,
        role=data.role,
        alkalinity=data.alkalinity.model_dump(exclude_none=True),
        ph_uncertainty=data.ph_uncertainty,
        qc_limits=data.qc_limits,
        created_at=now,
        updated_at=now,
    )
    session.add(station)
    session.flush()
    return station


def _merge_overrides(
    current: Mapping[str, Mapping[str, Any]], changes: Mapping[str, Mapping[str, Any]]
) -> dict[str, dict[str, Any]]:
    merged = {variable: dict(values) for variable, values in current.items()}
    for variable, values in changes.items():
        merged.setdefault(variable, {}).update(values)
    return merged


def update_station(*, session: Session, station: Station, data: StationUpdate) -> Station:
    changes = data.model_dump(exclude_unset=True)
    if "qc_limits" in changes:
        given = changes.pop("qc_limits")
        overrides = {} if given is None else _merge_overrides(station.qc_limits, given)
        validate_qc_overrides(overrides)
        station.qc_limits = overrides
    if "alkalinity" in changes:
        station.alkalinity = data.alkalinity.model_dump(exclude_none=True)
        changes.pop("alkalinity")
    for field, value in changes.items():
        setattr(station, field, value)
    station.updated_at = utcnow()
    session.flush()
    return station


# --- tanks -----------------------------------------------------------------------------


def tank_public(tank: Tank) -> TankPublic:
    return TankPublic(
        id=tank.id,
        site_id=tank.site_id,
        name=tank.name,
        source_station_id=tank.source_station.id,
        stage=tank.stage,
        volume_l=tank.volume_l,
        culture_temperature_c=tank.culture_temperature_c,
        omega_floor=tank.omega_floor,
        omega_target=tank.omega_target,
        treatment=tank.treatment,
        created_at=tank.created_at,
        updated_at=tank.updated_at,
    )


def get_tank(*, session: Session, site_id: str, tank_id: str) -> Tank | None:
    return session.scalars(
        select(Tank).where(Tank.site_id == site_id, Tank.id == tank_id)
    ).one_or_none()


def list_tanks(*, session: Session, site_id: str) -> list[Tank]:
    return list(session.scalars(select(Tank).where(Tank.site_id == site_id).order_by(Tank.id)))


def _source_station(*, session: Session, site_id: str, station_id: str) -> Station:
    station = get_station(session=session, site_id=site_id, station_id=station_id)
    if station is None:
        raise InvalidFieldError(
            "source_station_id",
            f"source_station_id {station_id!r} is not a station of site {site_id!r}; "
            "create the station first.",
        )
    return station


def create_tank(*, session: Session, site: Site, data: TankCreate) -> Tank:
    if get_tank(session=session, site_id=site.id, tank_id=data.id) is not None:
        raise AlreadyExistsError(f"Site {site.id!r} already has a tank with id {data.id!r}.")
    source = _source_station(session=session, site_id=site.id, station_id=data.source_station_id)
    now = utcnow()
    tank = Tank(
        site_id=site.id,
        id=data.id,
        name=data.name,
        source_station=source,
        stage=data.stage,
        volume_l=data.volume_l,
        culture_temperature_c=data.culture_temperature_c,
        omega_floor=data.omega_floor,
        omega_target=data.omega_target,
        treatment=data.treatment.model_dump() if data.treatment is not None else None,
        created_at=now,
        updated_at=now,
    )
    session.add(tank)
    session.flush()
    create_default_rules(session=session, tank=tank)
    return tank


def update_tank(*, session: Session, tank: Tank, data: TankUpdate) -> Tank:
    changes = data.model_dump(exclude_unset=True)
    floor = changes.get("omega_floor", tank.omega_floor)
    target = changes.get("omega_target", tank.omega_target)
    try:
        check_floor_below_target(floor, target)
    except ValueError as error:
        field = "omega_floor" if "omega_floor" in changes else "omega_target"
        raise InvalidFieldError(field, str(error)) from None
    if "source_station_id" in changes:
        tank.source_station = _source_station(
            session=session, site_id=tank.site_id, station_id=changes.pop("source_station_id")
        )
    if "treatment" in changes:
        changes.pop("treatment")
        tank.treatment = data.treatment.model_dump() if data.treatment is not None else None
    for field, value in changes.items():
        setattr(tank, field, value)
    tank.updated_at = utcnow()
    session.flush()
    return tank


# --- devices ---------------------------------------------------------------------------

DEVICE_ID_PREFIX = "dev_"


def create_device(*, session: Session, station: Station, label: str = "") -> tuple[Device, str]:
    """A new device bound to ``station`` and its key's plaintext (shown once)."""
    device = Device(
        id=DEVICE_ID_PREFIX + secrets.token_hex(8),
        station_pk=station.pk,
        label=label,
        created_at=utcnow(),
    )
    session.add(device)
    session.flush()
    key_label = label or f"device {device.id} at {station.site_id}/{station.id}"
    _, plaintext = create_key(session=session, role="device", label=key_label, device_id=device.id)
    return device, plaintext


def get_device(*, session: Session, station: Station, device_id: str) -> Device | None:
    return session.scalars(
        select(Device).where(Device.id == device_id, Device.station_pk == station.pk)
    ).one_or_none()


def revoke_device(*, session: Session, device: Device) -> Device:
    """Revoke the device and every key it holds (idempotent)."""
    if device.revoked_at is None:
        device.revoked_at = utcnow()
    revoke_device_keys(session=session, device_id=device.id)
    session.flush()
    return device
