"""Larval batches: storing them and judging their exposure to low saturation."""

from __future__ import annotations

import csv
import datetime as dt
import io

from sqlalchemy import select
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session

from app.batches.models import LarvalBatch
from app.batches.schemas import BatchCreate, BatchExposure, BatchPublic, ExposureWindow
from app.sites.models import Site, Tank
from app.status import compute
from app.status.service import station_readings, tank_prediction_series

METHOD = (
    "Omega aragonite predicted at the tank's culture temperature for every good reading at "
    "its source station (closed-system heating; the tank's current treatment applied when it "
    "has one); straight lines between predictions; gaps longer than {gap:g} minutes are not "
    "counted. Summing time under saturation thresholds over a larval run, with the first "
    "48 hours singled out, follows Gimenez et al. (2018)."
)
REFERENCE = (
    "Gimenez, I., Waldbusser, G. G., Hales, B. (2018). Ocean acidification stress index for "
    "shellfish (OASIS): Linking Pacific oyster larval survival and exposure to variable "
    "carbonate chemistry regimes. Elementa: Science of the Anthropocene 6: 51."
)


class BatchConflictError(Exception):
    pass


class UnknownTankError(Exception):
    pass


def batch_public(batch: LarvalBatch) -> BatchPublic:
    return BatchPublic(
        id=batch.id,
        site_id=batch.site_id,
        species=batch.species,
        tank_id=batch.tank.id,
        started_at=batch.started_at,
        ended_at=batch.ended_at,
        count_start=batch.count_start,
        count_end=batch.count_end,
        notes=batch.notes,
        created_at=batch.created_at,
    )


def get_batch(*, session: Session, site_id: str, batch_id: str) -> LarvalBatch | None:
    return session.scalars(
        select(LarvalBatch).where(LarvalBatch.site_id == site_id, LarvalBatch.id == batch_id)
    ).one_or_none()


def list_batches(*, session: Session, site_id: str) -> list[LarvalBatch]:
    return list(
        session.scalars(
            select(LarvalBatch)
            .where(LarvalBatch.site_id == site_id)
            .order_by(LarvalBatch.started_at.desc(), LarvalBatch.id)
        )
    )


def create_batch(*, session: Session, site: Site, data: BatchCreate) -> LarvalBatch:
    tank = session.scalars(
        select(Tank).where(Tank.site_id == site.id, Tank.id == data.tank_id)
    ).one_or_none()
    if tank is None:
        raise UnknownTankError(f"tank_id: site {site.id!r} has no tank {data.tank_id!r}")
    if get_batch(session=session, site_id=site.id, batch_id=data.id) is not None:
        raise BatchConflictError(f"id: site {site.id!r} already has a batch {data.id!r}")
    now = dt.datetime.now(dt.UTC)
    batch = LarvalBatch(
        site_id=site.id,
        tank_pk=tank.pk,
        created_at=now,
        updated_at=now,
        **data.model_dump(exclude={"tank_id"}),
    )
    try:
        with session.begin_nested():
            session.add(batch)
            session.flush()
    except IntegrityError as exc:  # the same id stored by a concurrent request
        raise BatchConflictError(f"id: site {site.id!r} already has a batch {data.id!r}") from exc
    batch.tank = tank
    return batch


def batch_exposure(
    *,
    session: Session,
    site: Site,
    batch: LarvalBatch,
    now: dt.datetime,
    max_gap: dt.timedelta = compute.DEFAULT_MAX_GAP,
) -> BatchExposure:
    tank = batch.tank
    station = tank.source_station
    end = batch.ended_at or now
    running = batch.ended_at is None
    notes: list[str] = []
    if end < batch.started_at:
        notes.append("the batch starts in the future: nothing to judge yet")
        end = batch.started_at
    readings = station_readings(
        session=session,
        station_pk=station.pk,
        start=batch.started_at - max_gap,
        end=end + max_gap,
    )
    series = tank_prediction_series(site=site, tank=tank, station=station, readings=readings)
    exposure = compute.batch_exposure(
        series.times,
        series.larvae_omega,
        started_at=batch.started_at,
        ended_at=end,
        floor=float(tank.omega_floor),
        max_gap=max_gap,
    )
    notes.extend(exposure.notes)
    if series.treated_omega is not None:
        notes.append(
            "the tank's current treatment is applied to the whole run; past treatments are "
            "not recorded"
        )
    return BatchExposure(
        batch_id=batch.id,
        tank_id=tank.id,
        species=batch.species,
        started_at=batch.started_at,
        ended_at=end,
        running=running,
        omega_floor=float(tank.omega_floor),
        culture_temperature_c=float(tank.culture_temperature_c),
        treatment_applied=series.treated_omega is not None,
        first_48h=ExposureWindow(
            hours=exposure.first_window_hours,
            hours_with_data=exposure.covered_hours_first_48h,
            hours_below_floor=exposure.hours_below_floor_first_48h,
            hours_below_1=exposure.hours_below_1_first_48h,
            deficit_omega_hours=exposure.deficit_omega_hours_first_48h,
        ),
        run=ExposureWindow(
            hours=exposure.run_hours,
            hours_with_data=exposure.covered_hours_run,
            hours_below_floor=exposure.hours_below_floor_run,
            hours_below_1=exposure.hours_below_1_run,
            deficit_omega_hours=exposure.deficit_omega_hours_run,
        ),
        minimum_omega=exposure.minimum_omega,
        method=METHOD.format(gap=max_gap.total_seconds() / 60.0),
        reference=REFERENCE,
        notes=notes,
    )


CSV_COLUMNS = (
    "batch_id", "tank_id", "species", "started_at", "ended_at", "window", "hours",
    "hours_with_data", "hours_below_floor", "hours_below_1", "deficit_omega_hours",
    "omega_floor",
)


def exposure_csv(exposure: BatchExposure) -> str:
    """One row per window (first 48 h, whole run), for a spreadsheet."""
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(CSV_COLUMNS)
    for name, window in (("first_48h", exposure.first_48h), ("run", exposure.run)):
        writer.writerow([
            exposure.batch_id, exposure.tank_id, exposure.species,
            exposure.started_at.isoformat(), exposure.ended_at.isoformat(), name,
            f"{window.hours:.4f}", f"{window.hours_with_data:.4f}",
            f"{window.hours_below_floor:.4f}", f"{window.hours_below_1:.4f}",
            f"{window.deficit_omega_hours:.4f}", f"{exposure.omega_floor:g}",
        ])
    return buffer.getvalue()
