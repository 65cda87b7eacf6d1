"""Bottle samples: storing them, fitting the alkalinity line, checking the pH sensor."""

from __future__ import annotations

import datetime as dt
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from sqlalchemy import select
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session

import chemistry
from app.readings.models import Reading
from app.samples.models import LabSample
from app.samples.schemas import LabSampleCreate
from app.sites.models import Site, Station
from chemistry.fitting import AlkalinitySalinityFit

QC_FAIL = 4

#: Samples with alkalinity needed before a line is offered. Three points fix a line and its
#: residual SD; five give the SD a little meaning (design default, as the issue asks).
MIN_SAMPLES_FOR_LINE = 5

#: Offset between bottle and sensor pH (total scale) above which the sensor is said to
#: drift. A glass electrode's standard uncertainty is about 0.05 (common practice).
DEFAULT_DRIFT_LEVEL = 0.05
#: Offset size at or below which a drift alert clears: under the alert level, so that an
#: offset hovering near 0.05 does not raise and clear at each sample (design default).
DEFAULT_DRIFT_CLEAR_LEVEL = 0.03
#: Sensor readings within this time of a sample's collection are compared with it (their
#: median); bottle collection times are noted to a few minutes (design default).
DRIFT_SENSOR_WINDOW = dt.timedelta(minutes=30)

SECONDS_PER_30_DAYS = 30 * 86400.0


class SampleConflictError(Exception):
    """A sample already exists for this station and collection time."""


def sample_public(sample: LabSample, station: Station) -> dict[str, object]:
    return {
        "id": sample.id,
        "station_id": station.id,
        "collected_at": sample.collected_at,
        "salinity": sample.salinity,
        "temperature_c": sample.temperature_c,
        "alkalinity_umol_kg": sample.alkalinity_umol_kg,
        "dic_umol_kg": sample.dic_umol_kg,
        "ph": sample.ph,
        "ph_scale": sample.ph_scale,
        "method": sample.method,
        "notes": sample.notes,
        "created_at": sample.created_at,
    }


def create_sample(*, session: Session, station: Station, data: LabSampleCreate) -> LabSample:
    """Store a sample; a second one at the same station and time raises SampleConflictError."""
    existing = session.scalars(
        select(LabSample).where(
            LabSample.station_pk == station.pk, LabSample.collected_at == data.collected_at
        )
    ).first()
    if existing is not None:
        raise SampleConflictError(
            f"collected_at: station {station.id!r} already has a sample collected at "
            f"{data.collected_at.isoformat()}"
        )
    sample = LabSample(station_pk=station.pk, **data.model_dump())
    try:
        with session.begin_nested():
            session.add(sample)
            session.flush()
    except IntegrityError as exc:  # a concurrent request stored the same sample first
        raise SampleConflictError(
            f"collected_at: station {station.id!r} already has a sample collected at "
            f"{data.collected_at.isoformat()}"
        ) from exc
    return sample


def list_samples(
    *, session: Session, station: Station, start: dt.datetime | None = None,
    end: dt.datetime | None = None,
) -> list[LabSample]:
    query = select(LabSample).where(LabSample.station_pk == station.pk)
    if start is not None:
        query = query.where(LabSample.collected_at >= start)
    if end is not None:
        query = query.where(LabSample.collected_at < end)
    return list(session.scalars(query.order_by(LabSample.collected_at)))


class NotEnoughSamplesError(Exception):
    pass


def alkalinity_line(*, session: Session, station: Station) -> AlkalinitySalinityFit:
    """The least-squares alkalinity-salinity line of the station's samples."""
    samples = [
        s for s in list_samples(session=session, station=station)
        if s.alkalinity_umol_kg is not None
    ]
    if len(samples) < MIN_SAMPLES_FOR_LINE:
        raise NotEnoughSamplesError(
            f"An alkalinity line needs at least {MIN_SAMPLES_FOR_LINE} samples with "
            f"alkalinity_umol_kg at station {station.id!r}; it has {len(samples)}."
        )
    return chemistry.fit_alkalinity_salinity(
        [s.salinity for s in samples], [s.alkalinity_umol_kg for s in samples]
    )


# --------------------------------------------------------------------------------------
# pH sensor check
# --------------------------------------------------------------------------------------


@dataclass(frozen=True)
class SensorAt:
    ph_total: float
    temperature_c: float
    readings: int = 1


def sensor_at(
    *, session: Session, station: Station, at: dt.datetime, window: dt.timedelta
) -> SensorAt | None:
    """Median sensor pH (total) and temperature of the good readings within ``window`` of ``at``.

    The median over the readings around collection, not one reading, so that one noisy
    reading (a glass electrode wanders by a few hundredths from one reading to the next)
    does not decide whether the sensor drifts. ``None`` when no good reading is that close.
    """
    rows = session.execute(
        select(Reading.ph_total, Reading.temperature_c).where(
            Reading.station_pk == station.pk,
            Reading.qc_overall != QC_FAIL,
            Reading.ph_total.is_not(None),
            Reading.temperature_c.is_not(None),
            Reading.observed_at >= at - window,
            Reading.observed_at <= at + window,
        )
    ).all()
    if not rows:
        return None
    values = np.array(rows, dtype=float)
    return SensorAt(
        float(np.median(values[:, 0])), float(np.median(values[:, 1])), readings=len(rows)
    )


def carbonate_pair(sample: LabSample) -> dict[str, float | str] | None:
    """The two carbonate parameters to solve a sample from, measured pH first.

    A lab pH is the direct counterpart of the sensor's, so it is preferred; alkalinity and
    DIC alone give pH through the equilibrium constants.
    """
    if sample.ph is not None and sample.alkalinity_umol_kg is not None:
        return {"ph": sample.ph, "ph_scale": sample.ph_scale or "total",
                "alkalinity": sample.alkalinity_umol_kg}
    if sample.ph is not None and sample.dic_umol_kg is not None:
        return {"ph": sample.ph, "ph_scale": sample.ph_scale or "total",
                "dic": sample.dic_umol_kg}
    if sample.alkalinity_umol_kg is not None and sample.dic_umol_kg is not None:
        return {"alkalinity": sample.alkalinity_umol_kg, "dic": sample.dic_umol_kg}
    return None


_PARAMETER_NAMES = {"ph": "ph", "alkalinity": "alkalinity_umol_kg", "dic": "dic_umol_kg"}


def sample_ph_offsets(
    *, session: Session, site: Site, station: Station, samples: Sequence[LabSample],
    window: dt.timedelta = DRIFT_SENSOR_WINDOW,
) -> list[dict[str, object]]:
    """Per sample with two carbonate parameters: sample pH minus sensor pH (total scale).

    The sensor's value is the median of its good readings within ``window`` of collection.
    A negative offset means the sensor reads high.

    The sample is solved at the temperature its pH was measured at and carried, in a
    closed bottle, to the sensor's temperature at collection, so both pH values describe
    the same water at the same temperature.
    """
    offsets = []
    for sample in samples:
        pair = carbonate_pair(sample)
        if pair is None:
            continue
        entry: dict[str, object] = {
            "sample_id": sample.id,
            "collected_at": sample.collected_at,
            "parameters": [_PARAMETER_NAMES[k] for k in pair if k != "ph_scale"],
            "sensor_temperature_c": None,
            "sample_ph_total": None,
            "sensor_ph_total": None,
            "offset": None,
            "note": None,
        }
        sensor = sensor_at(session=session, station=station, at=sample.collected_at,
                           window=window)
        if sensor is None:
            entry["note"] = (
                "no good sensor reading within "
                f"{int(window.total_seconds() // 60)} minutes of collection"
            )
            offsets.append(entry)
            continue
        state = chemistry.solve(
            temperature=sample.temperature_c,
            salinity=sample.salinity,
            carbonic=site.carbonic_constants,
            **pair,
        )
        carried = chemistry.at_temperature(state, sensor.temperature_c)
        sample_ph = float(carried.ph_total)
        entry.update(
            sensor_temperature_c=sensor.temperature_c,
            sample_ph_total=sample_ph,
            sensor_ph_total=sensor.ph_total,
            offset=sample_ph - sensor.ph_total,
        )
        offsets.append(entry)
    return offsets


def offset_trend_per_30_days(offsets: Sequence[dict[str, object]]) -> float | None:
    """Least-squares slope of offset against collection time, pH units per 30 days."""
    points = [(o["collected_at"], o["offset"]) for o in offsets if o["offset"] is not None]
    if len(points) < 2:
        return None
    t = np.array([p[0].timestamp() for p in points])  # type: ignore[union-attr]
    y = np.array([p[1] for p in points], dtype=float)
    if np.ptp(t) == 0:
        return None
    slope = np.polyfit(t - t[0], y, 1)[0]
    return float(slope * SECONDS_PER_30_DAYS)
