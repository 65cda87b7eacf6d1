"""Tank advice: the water a tank's larvae will get, and what to do about it.

From the latest good reading at the tank's source station (QC overall not "fail"), the
water is carried to the tank's culture temperature in a closed system (alkalinity and DIC
kept; heating raises pCO2 and lowers pH), then:

* the untreated water: omega aragonite, standard uncertainty, probability below the floor;
* the same after the tank's current treatment (if any);
* ``in_tank``, the one prediction every view shows as the tank's water (advice, status, the
  web table, mail, the daily summary and the tank alerts): the water the larvae get, i.e.
  after the current treatment. When the treated water would be outside the limits dose
  advice keeps to (omega aragonite above :data:`chemistry.dosing.MAX_RESULT_OMEGA_ARAGONITE`
  or pH total above :data:`chemistry.dosing.MAX_RESULT_PH_TOTAL`), the treatment is taken
  to be a mistake (a typing or unit slip): the advice says so and ``in_tank`` and the
  tank alerts fall back to the untreated water, the safe side, so an absurd treatment can
  never silence a low-omega alert;
* the dose of a chosen chemical that reaches the tank's target omega at culture
  temperature: the total from untreated water (which replaces the current treatment) and,
  with the same chemical as the current treatment, the additional amount on top of it;
* what aeration to equilibrium with the site's atmosphere would give;
* the reading's time and age, and a warning when it is older than the station's no-data
  window (the tank's silence is the no-data rule's job: see :func:`stale_after_minutes`).

Every answer carries :data:`chemistry.DOSING_CAUTION`.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import functools
from typing import Any

import numpy as np
from sqlalchemy import bindparam, func, or_, select
from sqlalchemy.orm import Session

import chemistry
from app.alerts.models import AlertRule
from app.alerts.rules import DEFAULT_SILENCE_MINUTES
from app.db import utcnow
from app.readings.models import Reading
from app.sites.models import Site, Station, Tank
from chemistry.dosing import MAX_RESULT_OMEGA_ARAGONITE, MAX_RESULT_PH_TOTAL

QC_FAIL = 4
DEFAULT_CHEMICAL = "sodium_carbonate"


def treatment_limit_problem(omega_aragonite: float, ph_total: float) -> str | None:
    """The sentence saying why treated water is outside safe limits, or ``None``.

    The limits are the ones :func:`chemistry.dose_for_target` refuses to advise beyond.
    """
    if omega_aragonite > MAX_RESULT_OMEGA_ARAGONITE or ph_total > MAX_RESULT_PH_TOTAL:
        return (
            f"The current treatment is outside safe limits: it would give omega aragonite "
            f"{omega_aragonite:.2f} and pH total {ph_total:.2f}, above the omega "
            f"{MAX_RESULT_OMEGA_ARAGONITE:g} / pH total {MAX_RESULT_PH_TOTAL:g} this tool "
            "allows. Check the dose entered for the tank; the prediction and the tank alerts "
            "use the untreated water until it is corrected."
        )
    return None


@dataclasses.dataclass(frozen=True, slots=True)
class TankPrediction:
    """Arrays (one value per reading) of the tank water before and after treatment."""

    omega_aragonite: np.ndarray
    omega_aragonite_uncertainty: np.ndarray
    treated_omega_aragonite: np.ndarray | None
    treated_omega_aragonite_uncertainty: np.ndarray | None
    treated_ph_total: np.ndarray | None = None

    @property
    def treatment_within_limits(self) -> np.ndarray | None:
        """Per reading, whether the treated water is inside the dose limits (None: no treatment)."""
        if self.treated_omega_aragonite is None or self.treated_ph_total is None:
            return None
        return (np.asarray(self.treated_omega_aragonite) <= MAX_RESULT_OMEGA_ARAGONITE) & (
            np.asarray(self.treated_ph_total) <= MAX_RESULT_PH_TOTAL
        )

    @property
    def larvae_omega_aragonite(self) -> np.ndarray:
        """What the larvae get: treated where the treatment is inside the limits, else untreated."""
        within = self.treatment_within_limits
        if within is None:
            return self.omega_aragonite
        return np.where(within, self.treated_omega_aragonite, self.omega_aragonite)

    @property
    def larvae_omega_aragonite_uncertainty(self) -> np.ndarray:
        within = self.treatment_within_limits
        if within is None:
            return self.omega_aragonite_uncertainty
        return np.where(
            within, self.treated_omega_aragonite_uncertainty, self.omega_aragonite_uncertainty
        )


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


def _current_treatment(tank: Tank) -> dict[str, Any] | None:
    treatment = tank.treatment or {}
    if treatment.get("chemical") and float(treatment.get("dose_mg_per_l") or 0.0) > 0:
        return treatment
    return None


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
    with_uncertainty: bool = True,
    dic: Any = None,
    in_tank: Any = None,
) -> TankPrediction:
    """Omega aragonite of source water carried to the tank's culture temperature.

    Inputs are arrays (one element per reading) in deg C, practical salinity, pH total
    scale and umol/kg. The uncertainty propagates the station's pH uncertainty, the
    alkalinity uncertainty and the equilibrium constants' (Orr et al. 2018 values, via
    :func:`chemistry.standard_uncertainty`). After a treatment the relative uncertainty of
    the untreated prediction is kept: the dose is a known addition, and the budget is
    dominated by pH and the solubility product, which the dose does not change.
    ``with_uncertainty=False`` leaves the uncertainties NaN for callers that need the
    values only (a day's series for minutes below the floor): the budget costs several
    solves more. ``dic`` (umol/kg, the stored DIC derived from the same pH and alkalinity)
    lets the water be solved at the culture temperature from alkalinity and DIC at once,
    one solve instead of two: the same closed-system water. ``in_tank``: the water the
    caller has already solved from these inputs and carried to the culture temperature
    (:func:`chemistry.at_temperature`), used as it is, also as the uncertainty budget's
    unperturbed water (the scalar advice solves it for its own figures; the same numbers).
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
    if in_tank is not None:
        base = in_tank
    elif dic is None:
        in_tank = base = chemistry.at_temperature(chemistry.solve(**inputs), culture)
    else:
        base = None  # the budget's own base comes from pH and alkalinity
        in_tank = chemistry.solve(
            temperature=culture,
            salinity=inputs["salinity"],
            alkalinity=inputs["alkalinity"],
            dic=np.asarray(dic, dtype=float),
            carbonic=site.carbonic_constants,
        )
    omega = np.asarray(in_tank.omega_aragonite, dtype=float)
    if with_uncertainty:
        uncertainty = chemistry.standard_uncertainty(
            **inputs,
            u_ph=float(station.ph_uncertainty),
            u_alkalinity=np.asarray(u_alkalinity, dtype=float),
            at_temperature=culture,
            base=base,
            outputs=("omega_aragonite",),
        )["omega_aragonite"]
    else:
        uncertainty = np.full(omega.shape, np.nan)
    treated = treated_u = treated_ph = None
    treatment = _current_treatment(tank)
    if treatment is not None:
        after = chemistry.add_chemical(
            in_tank, treatment["chemical"], float(treatment["dose_mg_per_l"])
        )
        treated = np.asarray(after.omega_aragonite, dtype=float)
        treated_u = np.asarray(uncertainty, dtype=float) * treated / omega
        treated_ph = np.asarray(after.ph_total, dtype=float)
    return TankPrediction(
        omega, np.asarray(uncertainty, dtype=float), treated, treated_u, treated_ph
    )


def latest_good_reading(
    *, session: Session, station_pk: int, before: dt.datetime | None = None
) -> Reading | None:
    """The newest reading at a station (before ``before`` when given) that did not fail QC
    and could be derived: the advice's input."""
    query = select(Reading).where(
        Reading.station_pk == station_pk,
        Reading.qc_overall != QC_FAIL,
        Reading.ph_total.is_not(None),
        Reading.alkalinity_used_umol_kg.is_not(None),
        Reading.temperature_c.is_not(None),
        Reading.salinity.is_not(None),
    )
    if before is not None:
        query = query.where(Reading.observed_at < before)
    return session.scalars(query.order_by(Reading.observed_at.desc()).limit(1)).first()


def stale_after_minutes(*, session: Session, tank: Tank) -> float:
    """Age (minutes) beyond which a tank's reading is stale: its station's no-data window.

    The shortest enabled no-data rule on the tank or its source station; without one, the
    default rule's 30 minutes. Silence itself is the no-data rule's alert; the advice only
    warns, and a tank alert left pending on such a reading lapses at the sweep
    (:func:`app.alerts.evaluation.sweep`).
    """
    return stale_after_by_tank(session=session, tanks=[tank])[tank.pk]


def no_data_window_minutes(
    *, session: Session, station_pk: int, tank_pk: int | None = None
) -> float:
    """The shortest enabled no-data rule level on a station (or a tank it feeds), else 30."""
    fed = select(Tank.pk).where(Tank.source_station_pk == station_pk)
    level = session.scalar(
        select(func.min(AlertRule.level)).where(
            AlertRule.metric == "no_data",
            AlertRule.enabled.is_(True),
            AlertRule.deleted_at.is_(None),
            or_(
                AlertRule.station_pk == station_pk,
                AlertRule.tank_pk == tank_pk if tank_pk is not None else AlertRule.tank_pk.in_(fed),
            ),
        )
    )
    return float(level) if level is not None else DEFAULT_SILENCE_MINUTES


@functools.cache
def _no_data_rules_query() -> Any:
    """The query of :func:`stale_after_by_tank`, built once."""
    return select(AlertRule.station_pk, AlertRule.tank_pk, AlertRule.level).where(
        AlertRule.metric == "no_data",
        AlertRule.enabled.is_(True),
        AlertRule.deleted_at.is_(None),
        or_(
            AlertRule.station_pk.in_(bindparam("station_pks", expanding=True)),
            AlertRule.tank_pk.in_(bindparam("tank_pks", expanding=True)),
        ),
    )


def stale_after_by_tank(*, session: Session, tanks: list[Tank]) -> dict[int, float]:
    """:func:`stale_after_minutes` of several tanks from one query (the status shows every
    tank of a site): the enabled no-data rules on the tanks or their source stations."""
    if not tanks:
        return {}
    rules = session.execute(
        _no_data_rules_query(),
        {
            "station_pks": sorted({t.source_station_pk for t in tanks}),
            "tank_pks": sorted({t.pk for t in tanks}),
        },
    ).all()
    out = {}
    for tank in tanks:
        levels = [
            float(level)
            for station_pk, tank_pk, level in rules
            if level is not None
            and (station_pk == tank.source_station_pk or tank_pk == tank.pk)
        ]
        out[tank.pk] = min(levels) if levels else DEFAULT_SILENCE_MINUTES
    return out


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


def _chemical_words(chemical: str) -> str:
    return chemical.replace("_", " ")


def dose_sentence(dose: dict[str, Any], volume_l: float) -> str:
    """The one wording of a tank's dose advice, used by mail, the daily summary and the web.

    Names the total (from untreated water, replacing the current treatment) and the
    additional amount on top of the current treatment, so neither can be mistaken for the
    other. The caution is carried separately (``dose["caution"]``) and shown beside it.
    """
    chemical = _chemical_words(dose["chemical"])
    target = dose["target_omega_aragonite"]
    current = dose.get("current_treatment")
    if dose.get("total_refused"):
        return f"No dose advised: {dose['total_refused']}"
    total = (
        f"{dose['total_mg_per_l']:.1f} mg/L {chemical} "
        f"({dose['total_grams_for_tank']:.0f} g for {volume_l:g} L)"
    )
    if current is None:
        if dose["total_mg_per_l"] == 0:
            return f"No dose needed: the water already reaches omega {target:g}."
        return f"Dose {total} to reach omega {target:g} (the tank has no current treatment)."
    current_words = (
        f"{float(current['dose_mg_per_l']):g} mg/L {_chemical_words(current['chemical'])}"
    )
    text = (
        f"Total dose {total} to reach omega {target:g}, computed from untreated water: it "
        f"replaces the current treatment ({current_words}), it is not added to it."
    )
    if dose.get("additional_mg_per_l") is not None:
        if dose["additional_mg_per_l"] == 0:
            text += " On top of the current treatment: nothing more is needed."
        else:
            text += (
                f" On top of the current treatment: add {dose['additional_mg_per_l']:.1f} mg/L "
                f"({dose['additional_grams_for_tank']:.0f} g for {volume_l:g} L) more."
            )
    elif dose.get("additional_refused"):
        text += f" On top of the current treatment: {dose['additional_refused']}"
    return text


def _dose(
    *,
    untreated_state: Any,
    treated_state: Any | None,
    treatment: dict[str, Any] | None,
    treatment_problem: str | None,
    chemical: str,
    target: float,
    volume_l: float,
    floor: float,
) -> dict[str, Any]:
    """The dose advice. ``untreated_state``: the untreated water already carried to the
    culture temperature (what :func:`chemistry.dose_for_target` would carry it to when
    given the in-situ water and that temperature: the same water, not solved again)."""
    dose: dict[str, Any] = {
        "chemical": chemical,
        "target_omega_aragonite": target,
        "current_treatment": treatment,
        "total_refused": None,
        "total_mg_per_l": None,
        "total_grams_for_tank": None,
        "total_alkalinity_added_umol_kg": None,
        "total_dic_added_umol_kg": None,
        "total_result": None,
        "additional_refused": None,
        "additional_mg_per_l": None,
        "additional_grams_for_tank": None,
    }
    try:
        total = chemistry.dose_for_target(untreated_state, target, chemical=chemical)
    except chemistry.DoseRefusedError as refusal:
        dose["total_refused"] = str(refusal)
    else:
        dose.update(
            total_mg_per_l=total.mg_per_l,
            total_grams_for_tank=total.mg_per_l * volume_l / 1000.0,
            total_alkalinity_added_umol_kg=total.alkalinity_added,
            total_dic_added_umol_kg=total.dic_added,
            total_result=_water(total.state, None, floor),
        )
    if treatment is None:
        # Nothing in the water yet: the additional dose is the total.
        for part in ("refused", "mg_per_l", "grams_for_tank"):
            dose[f"additional_{part}"] = dose[f"total_{part}"]
    elif treatment_problem is not None:
        dose["additional_refused"] = (
            "no dose on top of the current treatment is advised while that treatment is "
            "outside safe limits; correct it first."
        )
    elif treatment["chemical"] != chemical:
        dose["additional_refused"] = (
            f"{_chemical_words(chemical)} cannot be added on top of the current "
            f"{_chemical_words(treatment['chemical'])} treatment by this tool; use the total "
            "dose only, in place of the current treatment."
        )
    else:
        try:
            extra = chemistry.dose_for_target(treated_state, target, chemical=chemical)
        except chemistry.DoseRefusedError as refusal:
            dose["additional_refused"] = str(refusal)
        else:
            dose["additional_mg_per_l"] = extra.mg_per_l
            dose["additional_grams_for_tank"] = extra.mg_per_l * volume_l / 1000.0
    dose["text"] = dose_sentence(dose, volume_l)
    dose["caution"] = chemistry.DOSING_CAUTION
    return dose


def tank_advice(
    *,
    session: Session,
    site: Site,
    tank: Tank,
    chemical: str = DEFAULT_CHEMICAL,
    reading: Reading | None = None,
    now: dt.datetime | None = None,
    stale_after: float | None = None,
) -> dict[str, Any] | None:
    """Advice for one tank from the latest good reading at its source station.

    Returns ``None`` when the station has no good reading yet. The result is plain JSON-able
    data: the reading used (with its age at ``now``, default the clock), the water in the
    tank (``in_tank``: what the larvae get, after the current treatment unless that is
    outside safe limits; ``untreated``; ``after_treatment``), the dose for the target
    (total and additional, see :func:`dose_sentence`), aeration, warnings, and the caution.
    ``stale_after``: the tank's :func:`stale_after_minutes` when the caller has already
    looked it up (the status does, for all its tanks in one query).
    """
    station = tank.source_station
    if reading is None:
        reading = latest_good_reading(session=session, station_pk=station.pk)
    if reading is None:
        return None
    floor = float(tank.omega_floor)
    target = float(tank.omega_target)
    culture = float(tank.culture_temperature_c)
    volume = float(tank.volume_l)
    u_alk = alkalinity_uncertainty(station, reading)
    in_situ = chemistry.solve(
        temperature=reading.temperature_c,
        salinity=reading.salinity,
        ph=reading.ph_total,
        alkalinity=reading.alkalinity_used_umol_kg,
        ph_scale="total",
        carbonic=site.carbonic_constants,
    )
    untreated_state = chemistry.at_temperature(in_situ, culture)
    prediction = predict_tank_water(
        site=site,
        tank=tank,
        station=station,
        temperature=reading.temperature_c,
        salinity=reading.salinity,
        ph_total=reading.ph_total,
        alkalinity=reading.alkalinity_used_umol_kg,
        u_alkalinity=u_alk,
        in_tank=untreated_state,  # solved just above: not again
    )
    untreated = _water(
        untreated_state, float(prediction.omega_aragonite_uncertainty), floor
    )

    warnings: list[str] = []
    treated = treated_state = treatment_problem = None
    treatment = _current_treatment(tank)
    if treatment is not None:
        treated_state = chemistry.add_chemical(
            untreated_state, treatment["chemical"], float(treatment["dose_mg_per_l"])
        )
        treated = _water(
            treated_state, float(prediction.treated_omega_aragonite_uncertainty), floor
        )
        treatment_problem = treatment_limit_problem(
            treated["omega_aragonite"], treated["ph_total"]
        )
        if treatment_problem:
            warnings.append(treatment_problem)
    if treated is not None and treatment_problem is None:
        in_tank, basis = treated, "after_current_treatment"
    elif treated is not None:
        in_tank, basis = untreated, "untreated_treatment_outside_limits"
    else:
        in_tank, basis = untreated, "untreated_no_treatment"

    now = now or utcnow()
    observed = reading.observed_at
    if observed.tzinfo is None:
        observed = observed.replace(tzinfo=dt.UTC)
    age_minutes = (now - observed).total_seconds() / 60.0
    if stale_after is None:
        stale_after = stale_after_minutes(session=session, tank=tank)
    stale = age_minutes > stale_after
    if stale:
        warnings.append(
            f"The reading is {age_minutes:.0f} minutes old, older than the station's "
            f"{stale_after:g}-minute no-data window: this advice may not describe the water "
            "now. Check the sensor at the source station."
        )

    dose = _dose(
        untreated_state=untreated_state,
        treated_state=treated_state,
        treatment=treatment,
        treatment_problem=treatment_problem,
        chemical=chemical,
        target=target,
        volume_l=volume,
        floor=floor,
    )
    aerated = chemistry.equilibrate_with_air(
        untreated_state, xco2_ppm=float(site.atmospheric_xco2_ppm)
    )

    return {
        "site_id": site.id,
        "tank_id": tank.id,
        "station_id": station.id,
        "source": source_description(station),
        "volume_l": volume,
        "culture_temperature_c": culture,
        "omega_floor": floor,
        "omega_target": target,
        "reading": {
            "observed_at": reading.observed_at,
            "age_minutes": age_minutes,
            "stale": stale,
            "stale_after_minutes": stale_after,
            "temperature_c": reading.temperature_c,
            "salinity": reading.salinity,
            "ph_total": reading.ph_total,
            "alkalinity_umol_kg": reading.alkalinity_used_umol_kg,
            "alkalinity_source": reading.alkalinity_source,
            "omega_aragonite": reading.omega_aragonite,
            "omega_aragonite_uncertainty": reading.omega_aragonite_uncertainty,
            "qc_overall": reading.qc_overall,
        },
        "in_tank": in_tank,
        "in_tank_basis": basis,
        "untreated": untreated,
        "treatment": treatment,
        "treatment_within_limits": None if treatment is None else treatment_problem is None,
        "after_treatment": treated,
        "dose": dose,
        "aeration": {
            "applies_to": "the untreated water",
            "atmospheric_xco2_ppm": float(site.atmospheric_xco2_ppm),
            "result": _water(aerated, None, floor),
        },
        "warnings": warnings,
        "chemistry_version": chemistry.CHEMISTRY_VERSION,
        "caution": chemistry.DOSING_CAUTION,
    }


#: How each ``in_tank_basis`` is worded in mail and the daily summary.
IN_TANK_BASIS_WORDS = {
    "after_current_treatment": "after the current treatment",
    "untreated_treatment_outside_limits": "untreated: the current treatment is outside safe limits",
    "untreated_no_treatment": "no treatment",
}


STATION_ROLE_WORDS = {
    "intake": "intake",
    "treated": "treated header",
    "tank": "tank sensor",
}


def source_description(station: Station) -> str:
    """How a tank's source is named everywhere: the station's name, id and role."""
    role = STATION_ROLE_WORDS.get(station.role, station.role)
    return f"{station.name} ({station.id}, {role})"
