"""GET /api/v1/sites/{site_id}/status against numbers worked out independently in the test.

Tank predictions are recomputed here with the chemistry engine (``chemistry.solve`` then
``chemistry.at_temperature``); minutes below the floor by brute force on a one-second grid
(``numpy.interp``), not by the service's piecewise formula; the probability below the floor
from the normal distribution with ``math.erf``.
"""

from __future__ import annotations

import datetime as dt
import math
from zoneinfo import ZoneInfo

import numpy as np
import pytest

import chemistry
from app.alerts.models import Alert, AlertRule
from app.readings.models import Reading

pytestmark = pytest.mark.db

ZONE = "America/Los_Angeles"
DAY = dt.date(2026, 6, 10)
# Pacific daylight time (UTC-7) in June: local midnight is 07:00 UTC.
DAY_START = dt.datetime(2026, 6, 10, 7, 0, tzinfo=dt.UTC)
DAY_END = DAY_START + dt.timedelta(hours=24)
STEP = dt.timedelta(minutes=15)
SALINITY = 31.0
ALKALINITY = 2100.0
CULTURE_C = 24.0
FLOOR = 1.5


def _intake_ph(t: dt.datetime) -> float:
    """An invented day-night swing of intake pH (total scale), 7.7 to 8.1."""
    hours = (t - DAY_START).total_seconds() / 3600.0
    return 7.9 + 0.2 * math.sin(2 * math.pi * hours / 24.0)


def _intake_temperature(t: dt.datetime) -> float:
    hours = (t - DAY_START).total_seconds() / 3600.0
    return 12.0 + 1.0 * math.cos(2 * math.pi * hours / 24.0)


def _reading(station_pk: int, at: dt.datetime, *, qc: int = 1, source: str = "dev_a",
             ph: float | None = None) -> Reading:
    temperature = _intake_temperature(at)
    ph_total = _intake_ph(at) if ph is None else ph
    state = chemistry.solve(temperature=temperature, salinity=SALINITY, ph=ph_total,
                            alkalinity=ALKALINITY, ph_scale="total")
    return Reading(
        station_pk=station_pk, source=source, observed_at=at, received_at=at,
        temperature_c=temperature, salinity=SALINITY, ph=ph_total, ph_scale="total",
        alkalinity_input_umol_kg=ALKALINITY, alkalinity_used_umol_kg=ALKALINITY,
        alkalinity_source="reading", ph_total=ph_total, dic_umol_kg=float(state.dic),
        pco2_uatm=float(state.pco2), carbonate_umol_kg=float(state.carbonate),
        omega_aragonite=float(state.omega_aragonite), omega_calcite=float(state.omega_calcite),
        omega_aragonite_uncertainty=0.1, qc_temperature=qc, qc_salinity=1, qc_ph=qc,
        qc_alkalinity=1, qc_derived=qc, qc_overall=qc,
        chemistry_version=chemistry.CHEMISTRY_VERSION,
    )


@pytest.fixture
def scene(session, make_site, make_station, make_tank):
    site = make_site(timezone=ZONE)
    intake = make_station(site=site, role="intake")
    tank = make_tank(site=site, station=intake, culture_temperature_c=CULTURE_C,
                     omega_floor=FLOOR, omega_target=3.0, volume_l=5000.0)
    # 15-minute readings from one step before the day to one step after it, with an outage
    # from 10:00 to 12:00 local (no readings in 8 slots), plus a failed reading at 06:00 that
    # carries an absurd pH which must not reach any statistic.
    times = []
    t = DAY_START - STEP
    while t <= DAY_END:
        local = t.astimezone(ZoneInfo(ZONE))
        if not (local.date() == DAY and 10 <= local.hour < 12):
            times.append(t)
        t += STEP
    session.add_all([_reading(intake.pk, t) for t in times])
    failed_at = DAY_START + dt.timedelta(hours=6)
    session.add(_reading(intake.pk, failed_at, qc=4, source="dev_b", ph=6.5))
    session.commit()
    return site, intake, tank, times


def _tank_omega(times):
    temperature = np.array([_intake_temperature(t) for t in times])
    ph = np.array([_intake_ph(t) for t in times])
    state = chemistry.solve(temperature=temperature, salinity=SALINITY, ph=ph,
                            alkalinity=ALKALINITY, ph_scale="total")
    return np.asarray(chemistry.at_temperature(state, CULTURE_C).omega_aragonite, dtype=float)


def _brute_force_minutes_below(times, values, level, start, end, max_gap_s=1800):
    """Count one-second steps with the linearly interpolated series below ``level``."""
    t = np.array([x.timestamp() for x in times])
    grid = np.arange(start.timestamp(), end.timestamp(), 1.0) + 0.5
    interpolated = np.interp(grid, t, values)
    # Leave out seconds that fall in a gap longer than the limit.
    right = np.searchsorted(t, grid)
    inside = (right > 0) & (right < t.size)
    spacing = np.where(inside, t[np.clip(right, 1, t.size - 1)] - t[np.clip(right - 1, 0,
                       t.size - 2)], np.inf)
    counted = inside & (spacing <= max_gap_s)
    return float(np.count_nonzero(counted & (interpolated < level)) / 60.0)


def test_status_numbers_match_the_engine(client, viewer_headers, scene):
    site, intake, tank, times = scene
    response = client.get(f"/api/v1/sites/{site.id}/status", params={"date": DAY.isoformat()},
                          headers=viewer_headers)
    assert response.status_code == 200, response.text
    body = response.json()
    assert body["date"] == "2026-06-10"
    assert body["day_complete"] is True
    assert body["caution"] == chemistry.DOSING_CAUTION

    # --- station: day statistics without the failed reading -------------------------------
    station = next(s for s in body["stations"] if s["station_id"] == intake.id)
    in_day = [t for t in times if DAY_START <= t < DAY_END]
    ph_values = np.array([_intake_ph(t) for t in in_day])
    assert station["day"]["ph_total"]["min"] == pytest.approx(ph_values.min(), abs=1e-12)
    assert station["day"]["ph_total"]["mean"] == pytest.approx(ph_values.mean(), abs=1e-12)
    assert station["day"]["ph_total"]["max"] == pytest.approx(ph_values.max(), abs=1e-12)
    assert station["day"]["ph_total"]["n"] == len(in_day)
    in_situ = chemistry.solve(temperature=np.array([_intake_temperature(t) for t in in_day]),
                              salinity=SALINITY, ph=ph_values, alkalinity=ALKALINITY)
    assert station["day"]["omega_aragonite"]["min"] == pytest.approx(
        float(np.min(in_situ.omega_aragonite)), rel=1e-9)
    # 96 fifteen-minute slots in the day, 8 of them in the outage: 88/96. The usual spacing
    # (median over the week) is 15 minutes.
    assert station["expected_interval_minutes"] == pytest.approx(15.0)
    assert station["completeness_percent"] == pytest.approx(100 * 88 / 96)
    assert station["qc_counts"]["pass"] == 88
    assert station["qc_counts"]["fail"] == 1
    assert station["latest_reading"]["observed_at"].startswith("2026-06-11T06:45")

    # --- tank: prediction at culture temperature for the day's last good reading ----------
    tank_body = next(t for t in body["tanks"] if t["tank_id"] == tank.id)
    last = in_day[-1]
    inputs = dict(temperature=_intake_temperature(last), salinity=SALINITY,
                  ph=_intake_ph(last), alkalinity=ALKALINITY, ph_scale="total")
    expected = chemistry.at_temperature(chemistry.solve(**inputs), CULTURE_C)
    predicted = tank_body["predicted"]
    assert predicted["omega_aragonite"] == pytest.approx(float(expected.omega_aragonite),
                                                         rel=1e-9)
    u = float(chemistry.standard_uncertainty(**inputs, u_ph=intake.ph_uncertainty,
                                             at_temperature=CULTURE_C)["omega_aragonite"])
    assert predicted["omega_aragonite_uncertainty"] == pytest.approx(u, rel=1e-6)
    z = (FLOOR - float(expected.omega_aragonite)) / u
    assert predicted["probability_below_floor"] == pytest.approx(
        0.5 * (1 + math.erf(z / math.sqrt(2))), abs=1e-6)
    assert tank_body["dose"]["caution"] == chemistry.DOSING_CAUTION

    # --- tank: minutes below the floor, brute force --------------------------------------
    omega = _tank_omega(times)
    assert omega.min() < FLOOR < omega.max()  # the scene does cross the floor
    expected_minutes = _brute_force_minutes_below(times, omega, FLOOR, DAY_START, DAY_END)
    assert expected_minutes > 0
    assert tank_body["minutes_below_floor"] == pytest.approx(expected_minutes, abs=0.1)
    # The outage leaves no reading from 10:00 to 11:45, so the pieces from 09:45 to 12:00
    # (135 min, longer than the 30-min limit) are not counted: 1440 - 135 = 1305 min.
    assert tank_body["minutes_with_data"] == pytest.approx(1305.0)

    # --- fill-window hint: best local hours by median tank omega --------------------------
    hint = next(h for h in body["fill_window"] if h["station_id"] == intake.id)
    week = [t for t in times if t < DAY_END]
    week_omega = _tank_omega(week)
    by_hour: dict[int, list[float]] = {}
    for t, value in zip(week, week_omega, strict=True):
        by_hour.setdefault(t.astimezone(ZoneInfo(ZONE)).hour, []).append(value)
    best = max(by_hour, key=lambda h: np.median(by_hour[h]))
    assert hint["best_hours"][0] == best
    assert hint["hourly_median"][best] == pytest.approx(float(np.median(by_hour[best])),
                                                        rel=1e-9)


def test_open_alerts_and_tank_alert_state(client, viewer_headers, session, scene):
    site, _intake, tank, _ = scene
    rule = session.query(AlertRule).filter(AlertRule.tank_pk == tank.pk).first()
    if rule is None:
        rule = AlertRule(site_id=site.id, tank_pk=tank.pk, metric="tank_omega_aragonite",
                         direction="below", level=FLOOR, clear_level=FLOOR + 0.1,
                         recipients=[])
        session.add(rule)
        session.flush()
    since = DAY_START + dt.timedelta(hours=3)
    session.add(Alert(rule_id=rule.id, site_id=site.id, state="active", since=since,
                      raised_at=since, last_value=1.2))
    session.commit()
    body = client.get(f"/api/v1/sites/{site.id}/status", params={"date": DAY.isoformat()},
                      headers=viewer_headers).json()
    assert [a["state"] for a in body["open_alerts"]] == ["active"]
    assert body["open_alerts"][0]["tank_id"] == tank.id
    assert body["open_alerts"][0]["caution"] == chemistry.DOSING_CAUTION
    assert body["tanks"][0]["alert_state"] == "active"


def test_status_errors(client, viewer_headers, make_site):
    site = make_site()
    assert client.get(f"/api/v1/sites/{site.id}/status").status_code == 401
    missing = client.get("/api/v1/sites/no-such-site/status", headers=viewer_headers)
    assert missing.status_code == 404
    assert "no-such-site" in missing.json()["detail"]
    bad = client.get(f"/api/v1/sites/{site.id}/status", params={"date": "2026-13-40"},
                     headers=viewer_headers)
    assert bad.status_code == 422
    assert "date" in bad.text


def test_empty_site_has_a_status(client, viewer_headers, make_site, make_station):
    site = make_site()
    make_station(site=site)
    body = client.get(f"/api/v1/sites/{site.id}/status", headers=viewer_headers).json()
    station = body["stations"][0]
    assert station["latest_reading"] is None
    assert station["completeness_percent"] == 0.0
    assert station["day"]["omega_aragonite"] == {"min": None, "mean": None, "max": None, "n": 0}
