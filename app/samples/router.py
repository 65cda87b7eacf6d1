"""Bottle samples, the alkalinity-salinity line and the pH sensor check over HTTP."""

from __future__ import annotations

from fastapi import APIRouter, HTTPException, status
from sqlalchemy.orm import Session

import chemistry
from app.alerts.rules import open_alert
from app.auth.dependencies import AdminDep, ReaderDep
from app.db import SessionDep, utcnow
from app.samples import service
from app.samples.drift import existing_drift_rule, record_sample
from app.samples.schemas import (
    AlkalinityLine,
    AlkalinityLineApplied,
    LabSampleCreate,
    LabSamplePublic,
    PhCheck,
)
from app.sites import service as sites_service
from app.sites.models import Site, Station
from app.sites.router import site_or_404, station_or_404
from app.sites.schemas import AlkalinitySalinityLine, StationUpdate

router = APIRouter(prefix="/sites/{site_id}/stations/{station_id}", tags=["lab samples"])


def _site_and_station(session: Session, site_id: str, station_id: str) -> tuple[Site, Station]:
    return site_or_404(session, site_id), station_or_404(session, site_id, station_id)


@router.post(
    "/lab-samples",
    status_code=status.HTTP_201_CREATED,
    response_model=LabSamplePublic,
    summary="Record a bottle sample analysed in a lab",
    description="With two carbonate parameters, the station's latest sample is compared "
    "with the pH sensor in the same transaction, and the 'sensor_drift' alert raised or "
    "cleared (see `GET .../ph-check`).",
)
def create_lab_sample(
    site_id: str, station_id: str, body: LabSampleCreate, session: SessionDep,
    _principal: AdminDep,
) -> dict[str, object]:
    site, station = _site_and_station(session, site_id, station_id)
    # Judged with the sample, like readings on ingest: the alert and its mail are stored
    # together with the sample or not at all.
    try:
        sample = record_sample(
            session=session, site=site, station=station, data=body, now=utcnow()
        )
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
    "trend of these offsets. The 'sensor_drift' alert is judged when a sample is posted "
    "(raised once when the latest offset exceeds the drift rule's level in size, cleared by "
    "a later sample within it); this view only reads.",
)
def get_ph_check(
    site_id: str, station_id: str, session: SessionDep, _principal: ReaderDep
) -> PhCheck:
    site, station = _site_and_station(session, site_id, station_id)
    samples = service.list_samples(session=session, station=station)
    offsets = service.sample_ph_offsets(
        session=session, site=site, station=station, samples=samples
    )
    judged = [o for o in offsets if o["offset"] is not None]
    latest_offset = float(judged[-1]["offset"]) if judged else None  # type: ignore[arg-type]
    rule = existing_drift_rule(session=session, station=station)
    level = service.DEFAULT_DRIFT_LEVEL if rule is None else rule.level
    alert = None if rule is None else open_alert(session=session, rule_id=rule.id)
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
