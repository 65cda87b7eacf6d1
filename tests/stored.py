"""A sensor reading as ingest would store it, built directly for tests of what reads it."""

from __future__ import annotations

import datetime as dt
from typing import Any

import chemistry
from app.readings.models import Reading


def stored_reading(
    station,
    at: dt.datetime,
    *,
    ph: float,
    temperature: float = 12.0,
    salinity: float = 32.0,
    alkalinity: float = 2200.0,
    derive: bool = True,
    **columns: Any,
) -> Reading:
    """A passed, total-scale reading of ``station`` at ``at`` (not yet added to a session).

    With ``derive`` the derived columns come from the chemistry engine for (pH, alkalinity);
    ``columns`` override any column (a QC flag, the source, the uncertainty...).
    """
    values: dict[str, Any] = dict(
        station_pk=station.pk,
        source="dev_test",
        observed_at=at,
        received_at=at,
        temperature_c=temperature,
        salinity=salinity,
        ph=ph,
        ph_scale="total",
        ph_total=ph,
        alkalinity_used_umol_kg=alkalinity,
        alkalinity_source="fixed",
        qc_temperature=1,
        qc_salinity=1,
        qc_ph=1,
        qc_alkalinity=2,
        qc_derived=1,
        qc_overall=1,
    )
    if derive:
        state = chemistry.solve(
            temperature=temperature, salinity=salinity, ph=ph, alkalinity=alkalinity
        )
        values.update(
            dic_umol_kg=float(state.dic),
            pco2_uatm=float(state.pco2),
            carbonate_umol_kg=float(state.carbonate),
            omega_aragonite=float(state.omega_aragonite),
            omega_calcite=float(state.omega_calcite),
        )
    values.update(columns)
    return Reading(**values)
