"""Sites, stations, tanks and devices over HTTP. Admins configure; viewers read."""

from __future__ import annotations

from collections.abc import Callable
from typing import NoReturn, TypeVar

from fastapi import APIRouter, HTTPException, Response, status
from fastapi.exceptions import RequestValidationError
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session

from app.auth.dependencies import AdminDep, ReaderDep
from app.db import SessionDep
from app.errors import no_site, site_has_no
from app.sites import service
from app.sites.models import Device, Site, Station, Tank
from app.sites.schemas import (
    DeviceCreate,
    DeviceCreated,
    SiteCreate,
    SitePublic,
    SiteUpdate,
    StationCreate,
    StationPublic,
    StationUpdate,
    TankCreate,
    TankPublic,
    TankUpdate,
)

router = APIRouter(prefix="/sites", tags=["sites"])

Saved = TypeVar("Saved")


def _not_found(detail: str) -> HTTPException:
    return HTTPException(status_code=status.HTTP_404_NOT_FOUND, detail=detail)


# The lookups below are shared by the routers of everything under a site (samples,
# batches), so a missing site or station reads the same everywhere.


def site_or_404(session: Session, site_id: str) -> Site:
    site = service.get_site(session=session, site_id=site_id)
    if site is None:
        raise _not_found(no_site(site_id))
    return site


def station_or_404(session: Session, site_id: str, station_id: str) -> Station:
    site_or_404(session, site_id)
    station = service.get_station(session=session, site_id=site_id, station_id=station_id)
    if station is None:
        raise _not_found(site_has_no(site_id, "station", station_id))
    return station


def tank_or_404(session: Session, site_id: str, tank_id: str) -> Tank:
    site_or_404(session, site_id)
    tank = service.get_tank(session=session, site_id=site_id, tank_id=tank_id)
    if tank is None:
        raise _not_found(site_has_no(site_id, "tank", tank_id))
    return tank


def _raise_for(error: service.SiteConfigError) -> NoReturn:
    if isinstance(error, service.AlreadyExistsError):
        raise HTTPException(status_code=status.HTTP_409_CONFLICT, detail=str(error))
    if isinstance(error, service.InvalidFieldError):
        # Answered by the one validation handler, so clients handle one format.
        raise RequestValidationError(
            [{"loc": ("body", error.field), "msg": str(error), "type": "value_error"}]
        )
    raise HTTPException(status_code=status.HTTP_400_BAD_REQUEST, detail=str(error))


def _save(session: Session, change: Callable[[], Saved], *, conflict: str | None = None) -> Saved:
    """Apply one service change and commit it; a refused change leaves nothing behind.

    ``conflict`` is the 409 sentence for a create that loses a unique-key race to a
    concurrent request (the service's own check found no such id a moment before).
    """
    try:
        saved = change()
    except service.SiteConfigError as error:
        session.rollback()
        _raise_for(error)
    try:
        session.commit()
    except IntegrityError:
        session.rollback()
        if conflict is None:
            raise
        raise HTTPException(status_code=status.HTTP_409_CONFLICT, detail=conflict) from None
    return saved


# --- sites -----------------------------------------------------------------------------


@router.post("", status_code=status.HTTP_201_CREATED, response_model=SitePublic)
def create_site(body: SiteCreate, session: SessionDep, _: AdminDep) -> Site:
    return _save(
        session,
        lambda: service.create_site(session=session, data=body),
        conflict=f"A site with id {body.id!r} already exists.",
    )


@router.get("", response_model=list[SitePublic])
def list_sites(session: SessionDep, _: ReaderDep) -> list[Site]:
    return service.list_sites(session=session)


@router.get("/{site_id}", response_model=SitePublic)
def read_site(site_id: str, session: SessionDep, _: ReaderDep) -> Site:
    return site_or_404(session, site_id)


@router.patch("/{site_id}", response_model=SitePublic)
def update_site(site_id: str, body: SiteUpdate, session: SessionDep, _: AdminDep) -> Site:
    site = site_or_404(session, site_id)
    service.update_site(session=session, site=site, data=body)
    session.commit()
    return site


# --- stations --------------------------------------------------------------------------


@router.post(
    "/{site_id}/stations", status_code=status.HTTP_201_CREATED, response_model=StationPublic
)
def create_station(
    site_id: str, body: StationCreate, session: SessionDep, _: AdminDep
) -> StationPublic:
    site = site_or_404(session, site_id)
    station = _save(
        session,
        lambda: service.create_station(session=session, site=site, data=body),
        conflict=f"Site {site_id!r} already has a station with id {body.id!r}.",
    )
    return service.station_public(station)


@router.get("/{site_id}/stations", response_model=list[StationPublic])
def list_stations(site_id: str, session: SessionDep, _: ReaderDep) -> list[StationPublic]:
    site_or_404(session, site_id)
    return [
        service.station_public(station)
        for station in service.list_stations(session=session, site_id=site_id)
    ]


@router.get("/{site_id}/stations/{station_id}", response_model=StationPublic)
def read_station(site_id: str, station_id: str, session: SessionDep, _: ReaderDep) -> StationPublic:
    return service.station_public(station_or_404(session, site_id, station_id))


@router.patch("/{site_id}/stations/{station_id}", response_model=StationPublic)
def update_station(
    site_id: str, station_id: str, body: StationUpdate, session: SessionDep, _: AdminDep
) -> StationPublic:
    station = station_or_404(session, site_id, station_id)
    _save(session, lambda: service.update_station(session=session, station=station, data=body))
    return service.station_public(station)


# --- tanks -----------------------------------------------------------------------------


@router.post("/{site_id}/tanks", status_code=status.HTTP_201_CREATED, response_model=TankPublic)
def create_tank(site_id: str, body: TankCreate, session: SessionDep, _: AdminDep) -> TankPublic:
    site = site_or_404(session, site_id)
    tank = _save(
        session,
        lambda: service.create_tank(session=session, site=site, data=body),
        conflict=f"Site {site_id!r} already has a tank with id {body.id!r}.",
    )
    return service.tank_public(tank)


@router.get("/{site_id}/tanks", response_model=list[TankPublic])
def list_tanks(site_id: str, session: SessionDep, _: ReaderDep) -> list[TankPublic]:
    site_or_404(session, site_id)
    return [
        service.tank_public(tank) for tank in service.list_tanks(session=session, site_id=site_id)
    ]


@router.get("/{site_id}/tanks/{tank_id}", response_model=TankPublic)
def read_tank(site_id: str, tank_id: str, session: SessionDep, _: ReaderDep) -> TankPublic:
    return service.tank_public(tank_or_404(session, site_id, tank_id))


@router.patch("/{site_id}/tanks/{tank_id}", response_model=TankPublic)
def update_tank(
    site_id: str, tank_id: str, body: TankUpdate, session: SessionDep, _: AdminDep
) -> TankPublic:
    tank = tank_or_404(session, site_id, tank_id)
    _save(session, lambda: service.update_tank(session=session, tank=tank, data=body))
    return service.tank_public(tank)


# --- devices ---------------------------------------------------------------------------


@router.post(
    "/{site_id}/stations/{station_id}/devices",
    status_code=status.HTTP_201_CREATED,
    response_model=DeviceCreated,
    summary="Register a sensor at this station; answers its key, shown only once",
)
def create_device(
    site_id: str,
    station_id: str,
    session: SessionDep,
    _: AdminDep,
    body: DeviceCreate | None = None,
) -> DeviceCreated:
    station = station_or_404(session, site_id, station_id)
    device, plaintext = service.create_device(
        session=session, station=station, label=body.label if body else ""
    )
    session.commit()
    return DeviceCreated(id=device.id, key=plaintext)


@router.delete(
    "/{site_id}/stations/{station_id}/devices/{device_id}",
    status_code=status.HTTP_204_NO_CONTENT,
    summary="Revoke a device and its key",
)
def revoke_device(
    site_id: str, station_id: str, device_id: str, session: SessionDep, _: AdminDep
) -> Response:
    station = station_or_404(session, site_id, station_id)
    device: Device | None = service.get_device(
        session=session, station=station, device_id=device_id
    )
    if device is None:
        raise _not_found(f"Station {site_id!r}/{station_id!r} has no device with id {device_id!r}.")
    service.revoke_device(session=session, device=device)
    session.commit()
    return Response(status_code=status.HTTP_204_NO_CONTENT)
