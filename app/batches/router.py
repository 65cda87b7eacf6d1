"""Larval batches and their exposure over HTTP."""

from __future__ import annotations

from typing import Annotated, Literal

from fastapi import APIRouter, HTTPException, Query, Response, status

from app.auth.dependencies import AdminDep, ReaderDep
from app.batches import service
from app.batches.schemas import BatchCreate, BatchExposure, BatchPublic
from app.db import SessionDep, utcnow
from app.errors import site_has_no
from app.sites.router import site_or_404

router = APIRouter(prefix="/sites/{site_id}/batches", tags=["larval batches"])


@router.post("", status_code=status.HTTP_201_CREATED, response_model=BatchPublic,
             summary="Record a larval batch (spawning or stocking)")
def create_batch(
    site_id: str, body: BatchCreate, session: SessionDep, _principal: AdminDep
) -> BatchPublic:
    site = site_or_404(session, site_id)
    try:
        batch = service.create_batch(session=session, site=site, data=body)
    except service.UnknownTankError as error:
        raise HTTPException(status.HTTP_422_UNPROCESSABLE_CONTENT, str(error)) from error
    except service.BatchConflictError as error:
        raise HTTPException(status.HTTP_409_CONFLICT, str(error)) from error
    session.commit()
    return service.batch_public(batch)


@router.get("", response_model=list[BatchPublic], summary="A site's larval batches")
def list_batches(site_id: str, session: SessionDep, _principal: ReaderDep) -> list[BatchPublic]:
    site_or_404(session, site_id)
    return [service.batch_public(b) for b in service.list_batches(session=session, site_id=site_id)]


@router.get(
    "/{batch_id}/exposure",
    response_model=BatchExposure,
    summary="Hours of a batch under the tank's floor and under 1; deficit below the floor",
    description="Hours with predicted tank omega aragonite below the floor and below 1.0, "
    "in the first 48 hours and over the whole run (to now while it runs), and the "
    "omega-hours of deficit below the floor (Gimenez et al. 2018). `format=csv` gives one "
    "row per window.",
    responses={200: {"content": {"text/csv": {}}}},
)
def get_exposure(
    site_id: str,
    batch_id: str,
    session: SessionDep,
    _principal: ReaderDep,
    output: Annotated[Literal["json", "csv"], Query(alias="format")] = "json",
) -> BatchExposure | Response:
    site = site_or_404(session, site_id)
    batch = service.get_batch(session=session, site_id=site_id, batch_id=batch_id)
    if batch is None:
        raise HTTPException(status.HTTP_404_NOT_FOUND, site_has_no(site_id, "batch", batch_id))
    exposure = service.batch_exposure(session=session, site=site, batch=batch, now=utcnow())
    if output == "csv":
        return Response(
            content=service.exposure_csv(exposure),
            media_type="text/csv",
            headers={"Content-Disposition": f'attachment; filename="{batch.id}-exposure.csv"'},
        )
    return exposure
