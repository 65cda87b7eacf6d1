"""Bottle samples, the alkalinity-salinity line and the pH sensor check over HTTP."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, HTTPException, Query, status
from sqlalchemy.orm import Session

import chemistry
from app.auth.dependencies import AdminDep, ReaderDep
from app.db import SessionDep, utcnow
from app.samples import service
from app.samples.drift import judge_drift
from app.samples.schemas import (
    AlkalinityLine,
    AlkalinityLineApplied,
    LabSampleCreate,
    LabSamplePublic,
    PhCheck,
)
from app.sites import service as sites_service
from app.sites.models import Site, Station
from app.sites.schemas import AlkalinitySalinityLine, StationUpdate

router = APIRouter(prefix="/sites/{site_id}/stations/{station_id}", tags=["lab samples"])


def _site_and_station(session: Session, site_id: str, station_id: str) -> tuple[Site, Station]:
    site = sites_service.get_site(session=session, site_id=site_id)
    if site is None:
        raise HTTPException(status.HTTP_404_NOT_FOUND, f"There is no site with id {site_id!r}.")
    station = sites_service.get_station(session=session, site_id=site_id, station_id=station_id)
    if station is None:
        raise HTTPException(
            status.HTTP_404_NOT_FOUND, f"Site {site_id!r} has no station with id {station_id!r}."
        )
    return site, station


@router.post(
    "/lab-samples",
    status_code=status.HTTP_201_CREATED,
    response_model=LabSamplePublic,
    summary="Record a bottle sample analysed in a lab",
)
def create_lab_sample(
    site_id: str, station_id: str, body: LabSampleCreate, session: SessionDep,
    _principal: AdminDep,
) -> dict[str, object]:
    _, station = _site_and_station(session, site_id, station_id)
    try:
        sample = service.create_sample(session=session, station=station, data=body)
    except service.SampleConflictError as error:
        raise HTTPException(status.HTTP_409_CONFLICT, str(error)) from error
    session.commit()
    return service.sample_public(sample, station)


@router.get(
    "/lab-samples", response_model=list[LabSamplePublic], summary="A station's bottle samples"
)
def list_lab_samples(
    site_id: str, station_id: str, session: SessionDep, _principal: ReaderDep
) -> list[dict[str, object]]:
    _, station = _site_and_station(session, site_id, station_id)
    return [
        service.sample_public(s, station)
        for s in service.list_samples(session=session, station=station)
    ]


def _line(session: Session, station: Station) -> AlkalinityLine:
    try:
        fit = service.alkalinity_line(session=session, station=station)
    except service.NotEnoughSamplesError as error:
        raise HTTPException(status.HTTP_409_CONFLICT, str(error)) from error
    except chemistry.ChemistryInputError as error:
        raise HTTPException(
            status.HTTP_409_CONFLICT, f"The samples give no line: {error}"
        ) from error
    return AlkalinityLine(
        station_id=station.id,
        slope=fit.slope,
        intercept=fit.intercept,
        residual_sd=fit.residual_sd,
        n=fit.n,
        salinity_min=fit.salinity_min,
        salinity_max=fit.salinity_max,
        current_alkalinity_mode=station.alkalinity,
    )


@router.get(
    "/alkalinity-line",
    response_model=AlkalinityLine,
    summary="The alkalinity-salinity line fitted to the station's samples",
    description=f"Needs at least {service.MIN_SAMPLES_FOR_LINE} samples with alkalinity.",
)
def get_alkalinity_line(
    site_id: str, station_id: str, session: SessionDep, _principal: ReaderDep
) -> AlkalinityLine:
    _, station = _site_and_station(session, site_id, station_id)
    return _line(session, station)


@router.post(
    "/alkalinity-line/apply",
    response_model=AlkalinityLineApplied,
    summary="Use the fitted line for readings without alkalinity",
    description="Sets the station's alkalinity mode to the salinity line; its residual SD "
    "becomes the alkalinity uncertainty of later readings.",
)
def apply_alkalinity_line(
    site_id: str, station_id: str, session: SessionDep, _principal: AdminDep
) -> AlkalinityLineApplied:
    _, station = _site_and_station(session, site_id, station_id)
    line = _line(session, station)
    try:
        mode = AlkalinitySalinityLine(
            mode="salinity_line",
            slope=line.slope,
            intercept=line.intercept,
            residual_sd=line.residual_sd,
        )
    except ValueError as error:
        raise HTTPException(
            status.HTTP_409_CONFLICT,
            f"The fitted line is outside the ranges a station accepts: {error}",
        ) from error
    sites_service.update_station(
        session=session, station=station, data=StationUpdate(alkalinity=mode)
    )
    session.commit()
    return AlkalinityLineApplied(
        station_id=station.id,
        alkalinity=station.alkalinity,
        line=line.model_copy(update={"current_alkalinity_mode": station.alkalinity}),
    )


@router.get(
    "/ph-check",
    response_model=PhCheck,
    summary="Bottle-sample pH against the sensor's, and the drift alert",
    description="For each sample with two carbonate parameters: its pH (total scale) at the "
    "sensor's temperature minus the sensor's pH interpolated at collection time, and the "
    "trend of these offsets. When the latest offset exceeds `level` in size, a "
    "'sensor_drift' alert is raised (once); a later sample within it clears it.",
)
def get_ph_check(
    site_id: str,
    station_id: str,
    session: SessionDep,
    _principal: ReaderDep,
    level: Annotated[
        float,
        Query(gt=0.0, le=1.0, description="Offset, pH units, above which the sensor drifts."),
    ] = service.DEFAULT_DRIFT_LEVEL,
) -> PhCheck:
    site, station = _site_and_station(session, site_id, station_id)
    samples = service.list_samples(session=session, station=station)
    offsets = service.sample_ph_offsets(
        session=session, site=site, station=station, samples=samples
    )
    judged = [o for o in offsets if o["offset"] is not None]
    latest = judged[-1] if judged else None
    alert = None
    if latest is not None:
        alert = judge_drift(
            session=session,
            site=site,
            station=station,
            offset=float(latest["offset"]),  # type: ignore[arg-type]
            collected_at=latest["collected_at"],  # type: ignore[arg-type]
            level=level,
            now=utcnow(),
        )
        session.commit()
    latest_offset = None if latest is None else float(latest["offset"])  # type: ignore[arg-type]
    return PhCheck(
        station_id=station.id,
        level=level,
        offsets=offsets,  # type: ignore[arg-type]
        trend_per_30_days=service.offset_trend_per_30_days(offsets),
        latest_offset=latest_offset,
        drifting=latest_offset is not None and abs(latest_offset) > level,
        alert_id=None if alert is None else alert.id,
        caution=chemistry.DOSING_CAUTION,
    )
