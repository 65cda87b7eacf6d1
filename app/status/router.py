"""``GET /api/v1/sites/{site_id}/status``: the site's status for one site-local day."""

from __future__ import annotations

from datetime import date
from typing import Annotated

from fastapi import APIRouter, HTTPException, Query, status
from fastapi.responses import JSONResponse

from app.auth.dependencies import ReaderDep
from app.db import SessionDep, utcnow
from app.sites.router import site_or_404
from app.status.days import StatusDayError, check_status_day
from app.status.service import site_status
from app.timefmt import json_body

router = APIRouter(tags=["status"])


@router.get(
    "/sites/{site_id}/status",
    summary="A site's status for one local day",
    description=(
        "Per station: the latest reading and its age; the day's minimum, mean and maximum "
        "of omega aragonite, pH (total scale), pCO2, temperature and salinity (failed "
        "readings left out); completeness against the station's usual sampling interval; "
        "QC counts by flag. Per tank: predicted omega aragonite at culture temperature with "
        "its standard uncertainty and the probability below the floor, time-weighted "
        "minutes below the floor that day, and dose advice. Open alerts, a fill-window hint "
        "and the caution. `date` is the site-local day (default: today there), from "
        "2000-01-01 up to today; another day is refused with 422."
    ),
)
def get_site_status(
    site_id: str,
    session: SessionDep,
    _principal: ReaderDep,
    day: Annotated[
        date | None,
        Query(alias="date", description="Site-local day, YYYY-MM-DD (default: today)."),
    ] = None,
) -> JSONResponse:
    site = site_or_404(session, site_id)
    now = utcnow()
    try:
        check_status_day(day, timezone=site.timezone, now=now)
    except StatusDayError as error:
        raise HTTPException(status.HTTP_422_UNPROCESSABLE_CONTENT, str(error)) from None
    # Written here rather than by FastAPI so times come out in UTC with Z like elsewhere.
    return JSONResponse(json_body(site_status(session=session, site=site, day=day, now=now)))
