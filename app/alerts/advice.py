"""Tank advice: the water a tank's larvae will get, and what to do about it.

From the latest good reading at the tank's source station (QC overall not "fail"), the
water is carried to the tank's culture temperature in a closed system (alkalinity and DIC
kept; heating raises pCO2 and lowers pH), then:

* its omega aragonite, standard uncertainty and probability of being below the tank floor;
* the same after the tank's current treatment (if any);
* the dose of a chosen chemical that reaches the tank's target omega at culture temperature,
  in mg/L and in grams for the tank's volume, or the sentence saying why no dose is advised;
* what aeration to equilibrium with the site's atmosphere would give.

Every answer carries :data:`chemistry.DOSING_CAUTION`.
"""

from __future__ import annotations

import dataclasses
from typing import Any

import numpy as np
from sqlalchemy import select
from sqlalchemy.orm import Session

import chemistry
from app.readings.models import Reading
from app.sites.models import Site, Station, Tank

QC_FAIL = 4
DEFAULT_CHEMICAL = "sodium_carbonate"


@dataclasses.dataclass(frozen=True, slots=True)
class TankPrediction:
    """Arrays (one value per reading) of the tank water before and after treatment."""

    omega_aragonite: np.ndarray
    omega_aragonite_uncertainty: np.ndarray
    treated_omega_aragonite: np.ndarray | None
    treated_omega_aragonite_uncertainty: np.ndarray | None


def alkalinity_uncertainty(station: Station, reading: Reading | None = None) -> float:
    """Standard uncertainty (umol/kg) of the alkalinity a station's readings use.

    ``fixed`` mode: the uncertainty given with the value (0 if none); ``salinity_line``: the
    line's residual standard deviation (0 if none); alkalinity measured with the reading: 0,
    since the reading carries no uncertainty of its own and pH dominates the budget.
    """
    mode = (station.alkalinity or {}).get("mode")
    source = reading.alkalinity_source if reading is not None else mode
    if source == "fixed" and mode == "fixed":
        return float(station.alkalinity.get("uncertainty") or 0.0)
    if source == "salinity_line" and mode == "salinity_line":
        return float(station.alkalinity.get("residual_sd") or 0.0)
    return 0.0


def predict_tank_water(
    *,
    site: Site,
    tank: Tank,
    station: Station,
    temperature: Any,
    salinity: Any,
    ph_total: Any,
    alkalinity: Any,
    u_alkalinity: Any = 0.0,
) -> TankPrediction:
    """Omega aragonite of source water carried to the tank's culture temperature.

    Inputs are arrays (one element per reading) in deg C, practical salinity, pH total
    scale and umol/kg. The uncertainty propagates the station's pH uncertainty, the
    alkalinity uncertainty and the equilibrium constants' (Orr et al. 2018 values, via
    :func:`chemistry.standard_uncertainty`). After a treatment the relative uncertainty of
    the untreated prediction is kept: the dose is a known addition, and the budget is
    dominated by pH and the solubility product, which the dose does not change.
    """
    culture = float(tank.culture_temperature_c)
    inputs = dict(
        temperature=np.asarray(temperature, dtype=float),
        salinity=np.asarray(salinity, dtype=float),
        ph=np.asarray(ph_total, dtype=float),
        alkalinity=np.asarray(alkalinity, dtype=float),
        ph_scale="total",
        carbonic=site.carbonic_constants,
    )
    in_situ = chemistry.solve(**inputs)
    in_tank = chemistry.at_temperature(in_situ, culture)
    uncertainty = chemistry.standard_uncertainty(
        **inputs,
        u_ph=float(station.ph_uncertainty),
        u_alkalinity=np.asarray(u_alkalinity, dtype=float),
        at_temperature=culture,
    )["omega_aragonite"]
    omega = np.asarray(in_tank.omega_aragonite, dtype=float)
    treated = treated_u = None
    treatment = tank.treatment or {}
    if treatment.get("chemical") and float(treatment.get("dose_mg_per_l") or 0.0) > 0:
        after = chemistry.add_chemical(
            in_tank, treatment["chemical"], float(treatment["dose_mg_per_l"])
        )
        treated = np.asarray(after.omega_aragonite, dtype=float)
        treated_u = np.asarray(uncertainty, dtype=float) * treated / omega
    return TankPrediction(omega, np.asarray(uncertainty, dtype=float), treated, treated_u)


def latest_good_reading(*, session: Session, station_pk: int) -> Reading | None:
    """The newest reading at a station that did not fail QC and could be derived."""
    return session.scalars(
        select(Reading)
        .where(
            Reading.station_pk == station_pk,
            Reading.qc_overall != QC_FAIL,
            Reading.ph_total.is_not(None),
            Reading.alkalinity_used_umol_kg.is_not(None),
            Reading.temperature_c.is_not(None),
            Reading.salinity.is_not(None),
        )
        .order_by(Reading.observed_at.desc())
        .limit(1)
    ).first()


def _water(state: Any, uncertainty: float | None, floor: float) -> dict[str, Any]:
    omega = float(state.omega_aragonite)
    result = {
        "temperature_c": float(state.temperature),
        "ph_total": float(state.ph_total),
        "pco2_uatm": float(state.pco2),
        "dic_umol_kg": float(state.dic),
        "alkalinity_umol_kg": float(state.alkalinity),
        "carbonate_umol_kg": float(state.carbonate),
        "omega_aragonite": omega,
        "omega_calcite": float(state.omega_calcite),
        "omega_aragonite_uncertainty": uncertainty,
        "probability_below_floor": None,
    }
    if uncertainty is not None:
        result["probability_below_floor"] = float(
            chemistry.probability_below(omega, uncertainty, floor)
        )
    return result


def tank_advice(
    *,
    session: Session,
    site: Site,
    tank: Tank,
    chemical: str = DEFAULT_CHEMICAL,
    reading: Reading | None = None,
) -> dict[str, Any] | None:
    """Advice for one tank from the latest good reading at its source station.

    Returns ``None`` when the station has no good reading yet. The result is plain JSON-able
    data: the reading used, the water in the tank (untreated and after the current
    treatment), the dose for the target, aeration, and the caution.
    """
    station = tank.source_station
    if reading is None:
        reading = latest_good_reading(session=session, station_pk=station.pk)
    if reading is None:
        return None
    floor = float(tank.omega_floor)
    target = float(tank.omega_target)
    culture = float(tank.culture_temperature_c)
    u_alk = alkalinity_uncertainty(station, reading)
    prediction = predict_tank_water(
        site=site,
        tank=tank,
        station=station,
        temperature=reading.temperature_c,
        salinity=reading.salinity,
        ph_total=reading.ph_total,
        alkalinity=reading.alkalinity_used_umol_kg,
        u_alkalinity=u_alk,
    )
    in_situ = chemistry.solve(
        temperature=reading.temperature_c,
        salinity=reading.salinity,
        ph=reading.ph_total,
        alkalinity=reading.alkalinity_used_umol_kg,
        ph_scale="total",
        carbonic=site.carbonic_constants,
    )
    in_tank = chemistry.at_temperature(in_situ, culture)
    u_tank = float(prediction.omega_aragonite_uncertainty)

    treated = None
    treatment = tank.treatment or None
    if prediction.treated_omega_aragonite is not None and treatment:
        after = chemistry.add_chemical(
            in_tank, treatment["chemical"], float(treatment["dose_mg_per_l"])
        )
        treated = _water(after, float(prediction.treated_omega_aragonite_uncertainty), floor)

    dose: dict[str, Any]
    try:
        advice = chemistry.dose_for_target(in_situ, target, chemical=chemical, temperature=culture)
    except chemistry.DoseRefusedError as refusal:
        dose = {"chemical": chemical, "refused": str(refusal)}
    else:
        dose = {
            "chemical": chemical,
            "refused": None,
            "mg_per_l": advice.mg_per_l,
            "grams_for_tank": advice.mg_per_l * float(tank.volume_l) / 1000.0,
            "alkalinity_added_umol_kg": advice.alkalinity_added,
            "dic_added_umol_kg": advice.dic_added,
            "result": _water(advice.state, None, floor),
        }
    dose["target_omega_aragonite"] = target
    dose["caution"] = chemistry.DOSING_CAUTION

    aerated = chemistry.equilibrate_with_air(in_tank, xco2_ppm=float(site.atmospheric_xco2_ppm))

    return {
        "site_id": site.id,
        "tank_id": tank.id,
        "station_id": station.id,
        "volume_l": float(tank.volume_l),
        "culture_temperature_c": culture,
        "omega_floor": floor,
        "omega_target": target,
        "reading": {
            "observed_at": reading.observed_at,
            "temperature_c": reading.temperature_c,
            "salinity": reading.salinity,
            "ph_total": reading.ph_total,
            "alkalinity_umol_kg": reading.alkalinity_used_umol_kg,
            "alkalinity_source": reading.alkalinity_source,
            "omega_aragonite": reading.omega_aragonite,
            "omega_aragonite_uncertainty": reading.omega_aragonite_uncertainty,
            "qc_overall": reading.qc_overall,
        },
        "in_tank": _water(in_tank, u_tank, floor),
        "treatment": treatment,
        "after_treatment": treated,
        "dose": dose,
        "aeration": {
            "atmospheric_xco2_ppm": float(site.atmospheric_xco2_ppm),
            "result": _water(aerated, None, floor),
        },
        "chemistry_version": chemistry.CHEMISTRY_VERSION,
        "caution": chemistry.DOSING_CAUTION,
    }
