"""Readings over HTTP: devices post, viewers and admins read; any key may use the calculator."""

from __future__ import annotations

import datetime as dt
from typing import Annotated, Any, Literal

from fastapi import APIRouter, Body, Depends, HTTPException, Query, status
from fastapi.responses import JSONResponse, Response, StreamingResponse
from sqlalchemy import select
from sqlalchemy.orm import Session

from app.auth.dependencies import Principal, ReaderDep, require_role
from app.db import SessionDep, utcnow
from app.limits import ParsedJsonRoute, RateLimitedDeviceDep
from app.readings import queries
from app.readings.chemistry_api import ChemistrySolveIn, ChemistrySolveOut, solve_sample
from app.readings.ingest import ingest_readings
from app.readings.schemas import (
    MAX_READINGS_PER_REQUEST,
    IngestRefused,
    IngestSummary,
    ReadingIn,
    ReadingPublic,
    RejectedItem,
    readings_from_body,
)
from app.sites.models import Site, Station
from app.sites.router import station_or_404
from app.timefmt import json_body

router = APIRouter(tags=["readings"])

AnyKeyDep = Annotated[Principal, Depends(require_role("admin", "viewer", "device"))]

_READING_SCHEMA = ReadingIn.model_json_schema()
_READING_SCHEMA.pop("title", None)
_BODY_SCHEMA = {
    "oneOf": [
        {
            "type": "object",
            "properties": {
                "readings": {
                    "type": "array",
                    "items": _READING_SCHEMA,
                    "minItems": 1,
                    "maxItems": MAX_READINGS_PER_REQUEST,
                }
            },
            "required": ["readings"],
            "additionalProperties": False,
        },
        _READING_SCHEMA,
    ]
}


def post_readings(
    principal: RateLimitedDeviceDep,
    session: SessionDep,
    payload: Annotated[Any, Body()],
) -> IngestSummary:
    """Store 1 to 5,000 readings of the device's own station.

    The body is `{"readings": [...]}` or one reading object. A device posting more often
    than the configured rate gets 429 with `Retry-After`. Each item is checked on its
    own: good items are stored even when others are rejected, and the answer lists each
    rejected item's position with sentences saying what is wrong. A retry of a stored
    reading (same `reading_id`, or same `observed_at`) counts as a duplicate; the same key
    with different values is rejected, never overwritten. The chemistry at in-situ
    temperature and QC flags are derived for every stored reading.

    Derived values support, and do not replace, the operator's judgement.
    """
    try:
        items = readings_from_body(payload)
    except ValueError as error:
        raise HTTPException(status.HTTP_422_UNPROCESSABLE_CONTENT, detail=str(error)) from None
    # The station with its site in one query: the ingest's look-up of the site is then
    # answered from the session, one round trip less on every reading posted.
    found = session.execute(
        select(Station, Site)
        .join(Site, Site.id == Station.site_id)
        .where(Station.pk == principal.station_pk)
    ).first()
    station = found[0] if found is not None else None
    if station is None:  # the device's station was removed while its key lives on
        raise HTTPException(status.HTTP_403_FORBIDDEN, detail="This device has no station.")
    result = ingest_readings(
        session=session,
        station=station,
        source=principal.device_id or "device",
        items=items,
        now=utcnow(),
    )
    session.commit()
    if result.rejected and not result.accepted and not result.duplicates:
        # Nothing of the request was kept: an error status, so that a client that only
        # looks at the status does not take the readings as stored.
        refused = IngestRefused(
            detail=_refusal_sentence(result.rejected),
            accepted=0,
            duplicates=0,
            rejected=result.rejected,
        )
        return JSONResponse(  # type: ignore[return-value]
            status_code=status.HTTP_422_UNPROCESSABLE_CONTENT, content=refused.model_dump()
        )
    summary = IngestSummary(
        accepted=result.accepted, duplicates=result.duplicates, rejected=result.rejected
    )
    # The answer as it is, not through the response model again: for a sync endpoint
    # FastAPI would validate it on another trip through the thread pool, on every post.
    return JSONResponse(content=summary.model_dump(mode="json"))  # type: ignore[return-value]


# Added here rather than by decorator, to give the route its own class: the body as
# StrictJsonMiddleware parsed it (checking for repeated keys), not a second parse of the
# same bytes.
router.add_api_route(
    "/readings",
    post_readings,
    methods=["POST"],
    route_class_override=ParsedJsonRoute,
    response_model=IngestSummary,
    summary="Post sensor readings (device key)",
    openapi_extra={
        "requestBody": {"required": True, "content": {"application/json": {"schema": _BODY_SCHEMA}}}
    },
)


def _refusal_sentence(rejected: list[RejectedItem]) -> str:
    shown = "; ".join(f"item {item.index}: {' and '.join(item.errors)}" for item in rejected[:5])
    more = f" (and {len(rejected) - 5} more)" if len(rejected) > 5 else ""
    return f"No reading was stored. {shown}{more}."


def _station_or_404(session: Session, site_id: str, station_id: str) -> Station:
    # The lookup every router under a site shares, so a missing site or station reads the same.
    return station_or_404(session, site_id, station_id)


@router.get(
    "/sites/{site_id}/stations/{station_id}/readings",
    summary="A station's readings: raw, derived chemistry and QC flags; JSON or CSV",
    responses={200: {"content": {"text/csv": {}}}},
)
def get_readings(
    site_id: str,
    station_id: str,
    _principal: ReaderDep,
    session: SessionDep,
    start: Annotated[
        dt.datetime | None, Query(description="From this time (with offset); default end - 24 h.")
    ] = None,
    end: Annotated[
        dt.datetime | None, Query(description="Up to (not including) this time; default now.")
    ] = None,
    every: Annotated[
        str | None,
        Query(description="Aggregate per bucket (mean, min, max), e.g. 15m, 1h, 1d."),
    ] = None,
    format: Annotated[Literal["json", "csv"], Query(description="json or csv")] = "json",
) -> Response:
    """Readings with `start <= observed_at < end`, oldest first, times in UTC.

    With `every`, one row per bucket (aligned to UTC) with the mean, minimum and maximum
    of each variable; readings whose overall QC flag is 4 (fail) are counted in `failed`
    and left out of the statistics. QC flags: 1 pass, 2 not evaluated, 3 suspect,
    4 fail, 9 missing.
    """
    station = _station_or_404(session, site_id, station_id)
    try:
        start_at, end_at = queries.time_range(start, end, now=utcnow())
        step = queries.parse_every(every) if every is not None else None
        if step is None:
            readings = queries.raw_readings(
                session=session, station_pk=station.pk, start=start_at, end=end_at
            )
            rows = [ReadingPublic.model_validate(r).model_dump() for r in readings]
            columns = queries.READING_COLUMNS
            key = "readings"
        else:
            rows = queries.aggregated_readings(
                session=session, station_pk=station.pk, start=start_at, end=end_at, every=step
            )
            columns = queries.BUCKET_COLUMNS
            key = "buckets"
    except queries.QueryError as error:
        raise HTTPException(status.HTTP_422_UNPROCESSABLE_CONTENT, detail=str(error)) from None

    if format == "csv":
        filename = f"{site_id}_{station_id}_{start_at:%Y%m%dT%H%M}Z.csv"
        return StreamingResponse(
            queries.csv_lines(columns, rows),
            media_type="text/csv; charset=utf-8",
            headers={"Content-Disposition": f'attachment; filename="{filename}"'},
        )
    body = {
        "site_id": site_id,
        "station_id": station_id,
        "start": start_at,
        "end": end_at,
        "every": every,
        key: rows,
    }
    return JSONResponse(json_body(body))


@router.post(
    "/chemistry/solve",
    response_model=ChemistrySolveOut,
    tags=["chemistry"],
    summary="The carbonate-system calculator for a bottle sample (any key)",
)
def post_chemistry_solve(_principal: AnyKeyDep, sample: ChemistrySolveIn) -> ChemistrySolveOut:
    """Solve the CO2 system from temperature, salinity and two of pH, alkalinity, DIC and
    pCO2; optionally carry the water to a tank temperature in a closed system. Every value
    comes with its standard uncertainty from the given input uncertainties and the
    constants' uncertainties. Nothing is stored.

    The results support, and do not replace, the operator's judgement.
    """
    from chemistry import ChemistryInputError

    try:
        return solve_sample(sample)
    except ChemistryInputError as error:
        raise HTTPException(status.HTTP_422_UNPROCESSABLE_CONTENT, detail=str(error)) from None
