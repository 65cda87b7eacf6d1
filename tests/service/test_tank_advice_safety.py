"""Tank advice safety: treatment limits, total versus additional dose, one prediction, age.

Check values: the limits are those of chemistry.dose_for_target (omega aragonite 5 after
Moras et al. 2022; pH total 8.5, a design default of the package). Doses of one chemical add
alkalinity and DIC linearly (hand stoichiometry: Na2CO3 gives 2 equivalents of alkalinity and
1 mol DIC per mole), so a total dose from untreated water equals the current dose plus the
additional dose on top of it, to within the dose solver's tolerance and the density of the
water (common practice).
"""

from __future__ import annotations

import datetime as dt

import pytest
from sqlalchemy import select

import chemistry
from app.alerts.advice import source_description
from app.alerts.evaluation import evaluate_after_ingest
from app.alerts.models import Alert, AlertRule
from app.readings.models import Reading
from app.sites.models import Tank
from tests.stored import stored_reading

pytestmark = pytest.mark.db

T_IN, S, TA = 12.0, 32.0, 2200.0
PH_LOW = 7.7  # untreated tank omega at 24 degC below the 1.5 floor (checked below)


def _reading(station, at: dt.datetime, ph: float) -> Reading:
    return stored_reading(
        station, at, ph=ph, temperature=T_IN, salinity=S, alkalinity=TA, derive=False
    )


@pytest.fixture
def fresh_reading_tank(session, make_site, make_station, make_tank):
    def factory(treatment=None, ph=PH_LOW, age=dt.timedelta(minutes=5)):
        site = make_site()
        station = make_station(site=site, alkalinity={"mode": "fixed", "value": TA})
        tank = make_tank(
            site=site, station=station, culture_temperature_c=24.0, volume_l=1200.0,
            treatment=treatment,
        )
        session.add(_reading(station, dt.datetime.now(dt.UTC) - age, ph))
        session.commit()
        return site, station, tank

    return factory


def _advice(client, headers, tank, **params):
    response = client.get(
        f"/api/v1/sites/{tank.site_id}/tanks/{tank.id}/advice", params=params, headers=headers
    )
    assert response.status_code == 200, response.text
    return response.json()


def test_untreated_low_water_is_below_the_floor():
    state = chemistry.solve(temperature=T_IN, salinity=S, ph=PH_LOW, alkalinity=TA)
    assert float(chemistry.at_temperature(state, 24.0).omega_aragonite) < 1.5


def test_treatment_dose_above_the_design_maximum_is_refused(
    client, admin_headers, session, make_tank
):
    tank = make_tank(treatment={"chemical": "sodium_carbonate", "dose_mg_per_l": 5.0})
    response = client.patch(
        f"/api/v1/sites/{tank.site_id}/tanks/{tank.id}",
        json={"treatment": {"chemical": "sodium_carbonate", "dose_mg_per_l": 500}},
        headers=admin_headers,
    )
    assert response.status_code == 422
    # The sentence names the field and the design maximum.
    assert "dose_mg_per_l" in response.text and "100" in response.text
    session.expire_all()
    assert session.get(Tank, tank.pk).treatment["dose_mg_per_l"] == 5.0  # nothing changed


def test_treatment_outside_limits_is_flagged_and_not_used(
    client, viewer_headers, fresh_reading_tank
):
    # 90 mg/L soda ash adds about 1700 umol/kg of alkalinity: far beyond omega 5 / pH 8.5.
    _site, _station, tank = fresh_reading_tank(
        treatment={"chemical": "sodium_carbonate", "dose_mg_per_l": 90.0}
    )
    advice = _advice(client, viewer_headers, tank)
    treated = advice["after_treatment"]
    assert treated["omega_aragonite"] > 5.0 or treated["ph_total"] > 8.5
    assert advice["treatment_within_limits"] is False
    assert advice["in_tank_basis"] == "untreated_treatment_outside_limits"
    assert advice["in_tank"] == advice["untreated"]
    assert any("outside safe limits" in w for w in advice["warnings"])
    assert advice["dose"]["additional_mg_per_l"] is None
    assert "outside safe limits" in advice["dose"]["additional_refused"]


def test_absurd_treatment_does_not_silence_the_tank_alert(
    session, make_site, make_station, make_tank
):
    site = make_site()
    station = make_station(site=site, alkalinity={"mode": "fixed", "value": TA})
    tank = make_tank(
        site=site, station=station, culture_temperature_c=24.0,
        treatment={"chemical": "sodium_carbonate", "dose_mg_per_l": 90.0},
    )
    start = dt.datetime(2026, 6, 1, 12, 0, tzinfo=dt.UTC)
    for i in range(5):  # 20 minutes of low water: past the default 15-minute hold
        at = start + dt.timedelta(minutes=5 * i)
        reading = _reading(station, at, PH_LOW)
        session.add(reading)
        session.flush()
        evaluate_after_ingest(session=session, station=station, readings=[reading], now=at)
    [alert] = session.scalars(
        select(Alert).join(AlertRule, AlertRule.id == Alert.rule_id).where(
            AlertRule.tank_pk == tank.pk, AlertRule.metric == "tank_omega_aragonite"
        )
    ).all()
    assert alert.state == "active"
    assert alert.last_value < 1.5


def test_same_chemical_gives_total_and_additional_dose(
    client, viewer_headers, fresh_reading_tank
):
    _site, _station, tank = fresh_reading_tank(
        treatment={"chemical": "sodium_carbonate", "dose_mg_per_l": 8.0}
    )
    advice = _advice(client, viewer_headers, tank)
    dose = advice["dose"]
    assert dose["total_refused"] is None and dose["additional_refused"] is None
    assert dose["total_mg_per_l"] > 8.0
    assert dose["additional_mg_per_l"] == pytest.approx(dose["total_mg_per_l"] - 8.0, abs=0.05)
    assert dose["additional_grams_for_tank"] == pytest.approx(
        dose["additional_mg_per_l"] * 1200.0 / 1000.0
    )
    text = dose["text"]
    assert f"Total dose {dose['total_mg_per_l']:.1f} mg/L sodium carbonate" in text
    assert "replaces the current treatment (8 mg/L sodium carbonate)" in text
    assert f"add {dose['additional_mg_per_l']:.1f} mg/L" in text
    assert dose["caution"] == chemistry.DOSING_CAUTION
    # The one prediction is the treated water, with the untreated value beside it.
    assert advice["in_tank"] == advice["after_treatment"]
    assert advice["untreated"]["omega_aragonite"] < advice["in_tank"]["omega_aragonite"]


def test_other_chemical_gives_the_total_only(client, viewer_headers, fresh_reading_tank):
    _site, _station, tank = fresh_reading_tank(
        treatment={"chemical": "sodium_bicarbonate", "dose_mg_per_l": 8.0}
    )
    dose = _advice(client, viewer_headers, tank)["dose"]
    assert dose["total_mg_per_l"] > 0
    assert dose["additional_mg_per_l"] is None
    assert "cannot be added on top" in dose["additional_refused"]
    assert "use the total dose only" in dose["text"]


def test_untreated_tank_additional_equals_total(client, viewer_headers, fresh_reading_tank):
    _site, _station, tank = fresh_reading_tank()
    advice = _advice(client, viewer_headers, tank)
    dose = advice["dose"]
    assert advice["in_tank_basis"] == "untreated_no_treatment"
    assert dose["additional_mg_per_l"] == dose["total_mg_per_l"] > 0
    assert "no current treatment" in dose["text"]


def test_advice_gives_the_reading_age_and_warns_when_stale(
    client, viewer_headers, fresh_reading_tank
):
    _site, _station, fresh = fresh_reading_tank()
    reading = _advice(client, viewer_headers, fresh)["reading"]
    assert 4.0 < reading["age_minutes"] < 10.0 and reading["stale"] is False
    assert reading["stale_after_minutes"] == 30.0  # the default no-data rule
    _site, _station, old = fresh_reading_tank(age=dt.timedelta(days=180))
    advice = _advice(client, viewer_headers, old)
    assert advice["reading"]["stale"] is True
    assert advice["reading"]["age_minutes"] > 180 * 24 * 60 - 1
    assert any("no-data window" in w for w in advice["warnings"])


def test_status_table_and_mail_use_the_treated_prediction(
    client, viewer_headers, fresh_reading_tank
):
    site, station, tank = fresh_reading_tank(
        treatment={"chemical": "sodium_carbonate", "dose_mg_per_l": 8.0}
    )
    advice = _advice(client, viewer_headers, tank)
    status = client.get(f"/api/v1/sites/{site.id}/status", headers=viewer_headers).json()
    [row] = [t for t in status["tanks"] if t["tank_id"] == tank.id]
    assert row["predicted"]["omega_aragonite"] == pytest.approx(
        advice["in_tank"]["omega_aragonite"], rel=1e-9
    )
    assert row["predicted"]["probability_below_floor"] == pytest.approx(
        advice["in_tank"]["probability_below_floor"], rel=1e-9
    )
    assert row["untreated"]["omega_aragonite"] == pytest.approx(
        advice["untreated"]["omega_aragonite"], rel=1e-9
    )
    assert row["source"] == source_description(station) and station.name in row["source"]
    assert row["dose"]["text"] == advice["dose"]["text"]


def test_pending_tank_alert_lapses_when_its_reading_goes_stale(
    session, make_site, make_station, make_tank
):
    from app.alerts.evaluation import sweep

    site = make_site()
    station = make_station(site=site, alkalinity={"mode": "fixed", "value": TA})
    tank = make_tank(site=site, station=station, culture_temperature_c=24.0)
    at = dt.datetime(2026, 6, 1, 12, 0, tzinfo=dt.UTC)
    reading = _reading(station, at, PH_LOW)
    session.add(reading)
    session.flush()
    evaluate_after_ingest(session=session, station=station, readings=[reading], now=at)

    def tank_alert():
        return session.scalars(
            select(Alert).join(AlertRule, AlertRule.id == Alert.rule_id).where(
                AlertRule.tank_pk == tank.pk, AlertRule.metric == "tank_omega_aragonite"
            )
        ).one()

    assert tank_alert().state == "pending"
    sweep(session=session, now=at + dt.timedelta(minutes=29))  # inside the 30-minute window
    assert tank_alert().state == "pending"
    sweep(session=session, now=at + dt.timedelta(minutes=31))
    lapsed = tank_alert()
    assert (lapsed.state, lapsed.closed_reason) == ("lapsed", "stale_data")
    # The silence itself is the no-data rule's alert.
    silent = session.scalars(
        select(Alert).join(AlertRule, AlertRule.id == Alert.rule_id).where(
            AlertRule.tank_pk == tank.pk, AlertRule.metric == "no_data"
        )
    ).all()
    assert [a.state for a in silent] == ["active"]
