"""Bottle samples (alkalinity line, pH check with the drift alert) and larval batch exposure.

Expected values are computed in the test: the line by numpy least squares (residual SD with
n - 2 degrees of freedom, the usual standard error of a straight-line fit), sample and tank
chemistry by the chemistry engine, exposure hours from the construction of the series.
"""

from __future__ import annotations

import csv
import datetime as dt
import io

import numpy as np
import pytest

import chemistry
from tests.stored import stored_reading

pytestmark = pytest.mark.db

T0 = dt.datetime(2026, 5, 4, 12, 0, tzinfo=dt.UTC)


def _add_reading(session, station, at, *, ph_total, temperature=12.0, salinity=31.0,
                 alkalinity=2100.0):
    session.add(stored_reading(
        station, at, ph=ph_total, temperature=temperature, salinity=salinity,
        alkalinity=alkalinity, source="dev_x", alkalinity_source="reading", qc_alkalinity=1,
        chemistry_version="test",
    ))


def _samples_url(station):
    return f"/api/v1/sites/{station.site_id}/stations/{station.id}"


# --- bottle samples ----------------------------------------------------------------------


def test_sample_validation_roles_and_duplicates(client, admin_headers, viewer_headers,
                                                make_station):
    station = make_station()
    url = _samples_url(station) + "/lab-samples"
    body = {"collected_at": T0.isoformat(), "salinity": 31.0, "temperature_c": 20.0,
            "alkalinity_umol_kg": 2100.0}
    assert client.post(url, json=body, headers=viewer_headers).status_code == 403
    created = client.post(url, json=body, headers=admin_headers)
    assert created.status_code == 201, created.text
    assert created.json()["station_id"] == station.id
    again = client.post(url, json=body, headers=admin_headers)
    assert again.status_code == 409
    assert "collected_at" in again.json()["detail"]
    bad = client.post(url, json=body | {"salinity": 60, "collected_at": "2026-05-04T13:00Z"},
                      headers=admin_headers)
    assert bad.status_code == 422
    assert "salinity" in bad.text and "50" in bad.text
    empty = client.post(url, json={"collected_at": "2026-05-04T14:00Z", "salinity": 31,
                                   "temperature_c": 20}, headers=admin_headers)
    assert empty.status_code == 422
    assert "alkalinity_umol_kg" in empty.text
    listed = client.get(url, headers=viewer_headers).json()
    assert [s["collected_at"] for s in listed] == ["2026-05-04T12:00:00Z"]


def test_alkalinity_line_needs_five_samples_then_fits_and_applies(
        client, admin_headers, viewer_headers, make_station):
    station = make_station(role="intake")
    url = _samples_url(station)
    salinity = np.array([28.0, 29.5, 30.2, 31.0, 32.4])
    alkalinity = np.array([1985.0, 2040.0, 2081.0, 2102.0, 2170.0])
    for k in range(4):
        client.post(url + "/lab-samples", headers=admin_headers, json={
            "collected_at": (T0 + dt.timedelta(days=k)).isoformat(),
            "salinity": salinity[k], "temperature_c": 15.0,
            "alkalinity_umol_kg": alkalinity[k]})
    short = client.get(url + "/alkalinity-line", headers=viewer_headers)
    assert short.status_code == 409
    assert "at least 5" in short.json()["detail"]
    client.post(url + "/lab-samples", headers=admin_headers, json={
        "collected_at": (T0 + dt.timedelta(days=4)).isoformat(), "salinity": salinity[4],
        "temperature_c": 15.0, "alkalinity_umol_kg": alkalinity[4]})
    line = client.get(url + "/alkalinity-line", headers=viewer_headers).json()
    slope, intercept = np.polyfit(salinity, alkalinity, 1)
    residual_sd = np.sqrt(np.sum((alkalinity - (slope * salinity + intercept)) ** 2) / 3)
    assert line["slope"] == pytest.approx(slope, rel=1e-9)
    assert line["intercept"] == pytest.approx(intercept, rel=1e-9)
    assert line["residual_sd"] == pytest.approx(residual_sd, rel=1e-9)
    assert (line["n"], line["salinity_min"], line["salinity_max"]) == (5, 28.0, 32.4)
    assert client.post(url + "/alkalinity-line/apply",
                       headers=viewer_headers).status_code == 403
    applied = client.post(url + "/alkalinity-line/apply", headers=admin_headers)
    assert applied.status_code == 200, applied.text
    mode = client.get(url, headers=viewer_headers).json()["alkalinity"]
    assert mode["mode"] == "salinity_line"
    assert mode["slope"] == pytest.approx(slope, rel=1e-9)
    assert mode["residual_sd"] == pytest.approx(residual_sd, rel=1e-9)


def _drift_alerts(session, station):
    from sqlalchemy import select

    from app.alerts.models import Alert, AlertRule

    return session.execute(
        select(Alert.id, Alert.state)
        .join(AlertRule, Alert.rule_id == AlertRule.id)
        .where(AlertRule.station_pk == station.pk, AlertRule.metric == "sensor_drift")
        .order_by(Alert.id)
    ).all()


def _row_counts(session) -> dict[str, int]:
    from sqlalchemy import func, select

    from app.alerts.models import Alert, AlertRule

    return {
        model.__tablename__: session.scalar(select(func.count()).select_from(model))
        for model in (Alert, AlertRule)
    }


def test_ph_check_offsets_and_one_drift_alert(client, session, admin_headers, viewer_headers,
                                              make_station):
    station = make_station(role="intake")
    url = _samples_url(station)
    # Sensor: pH 7.78 and 7.82 five minutes either side of collection, 12 degC: 7.80 at T0.
    for at, ph in ((T0 - dt.timedelta(minutes=5), 7.78), (T0 + dt.timedelta(minutes=5), 7.82),
                   (T0 + dt.timedelta(days=1), 7.80)):
        _add_reading(session, station, at, ph_total=ph)
    session.commit()
    # The bottle: the same water with the truth pH 7.88 at 12 degC, measured at 25 degC in the
    # lab (the sensor reads 0.08 low). Build the lab pH with the engine, then expect the
    # service to carry it back to 12 degC.
    truth = chemistry.solve(temperature=12.0, salinity=31.0, ph=7.88, alkalinity=2100.0)
    lab_ph = float(chemistry.at_temperature(truth, 25.0).ph_total)
    posted = client.post(url + "/lab-samples", headers=admin_headers, json={
        "collected_at": T0.isoformat(), "salinity": 31.0, "temperature_c": 25.0,
        "alkalinity_umol_kg": 2100.0, "ph": lab_ph, "ph_scale": "total"})
    assert posted.status_code == 201, posted.text
    # Posting the sample judged it: the drift alert exists before anyone reads the check.
    raised = _drift_alerts(session, station)
    assert [state for _, state in raised] == ["active"]
    check = client.get(url + "/ph-check", headers=viewer_headers)
    assert check.status_code == 200, check.text
    body = check.json()
    offset = body["offsets"][0]
    assert offset["sensor_ph_total"] == pytest.approx(7.80, abs=1e-12)
    assert offset["sensor_temperature_c"] == pytest.approx(12.0)
    assert offset["sample_ph_total"] == pytest.approx(7.88, abs=1e-6)
    assert offset["offset"] == pytest.approx(0.08, abs=1e-6)
    assert body["level"] == pytest.approx(0.05)  # the drift rule's default level
    assert body["drifting"] is True and body["alert_id"] == raised[0].id
    assert body["caution"] == chemistry.DOSING_CAUTION
    alerts = client.get(f"/api/v1/sites/{station.site_id}/alerts",
                        params={"state": "active"}, headers=viewer_headers).json()
    assert [a["id"] for a in alerts] == [body["alert_id"]]

    # A day later a sample agreeing with the sensor (offset 0) clears the alert when it is
    # posted; the trend over the two offsets is (0 - 0.08) per day = -2.4 per 30 days.
    at = T0 + dt.timedelta(days=1)
    client.post(url + "/lab-samples", headers=admin_headers, json={
        "collected_at": at.isoformat(), "salinity": 31.0, "temperature_c": 12.0,
        "alkalinity_umol_kg": 2100.0, "ph": 7.80, "ph_scale": "total"})
    assert [state for _, state in _drift_alerts(session, station)] == ["cleared"]
    later = client.get(url + "/ph-check", headers=viewer_headers).json()
    assert later["latest_offset"] == pytest.approx(0.0, abs=1e-9)
    assert later["drifting"] is False and later["alert_id"] is None
    assert later["trend_per_30_days"] == pytest.approx(-0.08 * 30, abs=1e-4)
    open_now = client.get(f"/api/v1/sites/{station.site_id}/alerts",
                          params={"state": "open"}, headers=viewer_headers).json()
    assert open_now == []


def test_ph_check_only_reads(client, session, admin_headers, viewer_headers, make_station):
    """A drifting sample stored without its judgement (as before this rule) stays unjudged
    by GET: the view reports the offset but creates no rule, alert or mail."""
    from app.samples import service
    from app.samples.schemas import LabSampleCreate

    station = make_station(role="intake")
    for at, ph in ((T0 - dt.timedelta(minutes=5), 7.80), (T0 + dt.timedelta(minutes=5), 7.80)):
        _add_reading(session, station, at, ph_total=ph)
    service.create_sample(session=session, station=station, data=LabSampleCreate(
        collected_at=T0, salinity=31.0, temperature_c=12.0, alkalinity_umol_kg=2100.0,
        ph=7.95, ph_scale="total"))
    session.commit()
    before = _row_counts(session)
    for _ in range(2):
        body = client.get(_samples_url(station) + "/ph-check", headers=viewer_headers).json()
        assert body["latest_offset"] == pytest.approx(0.15, abs=1e-9)
        assert body["drifting"] is True and body["alert_id"] is None
    assert _row_counts(session) == before
    assert _drift_alerts(session, station) == []


def test_older_sample_posted_late_does_not_overrule_the_latest(
        client, session, admin_headers, make_station):
    station = make_station(role="intake")
    url = _samples_url(station) + "/lab-samples"
    for day in (0, 1):
        for minutes, ph in ((-5, 7.80), (5, 7.80)):
            _add_reading(session, station,
                         T0 + dt.timedelta(days=day, minutes=minutes), ph_total=ph)
    session.commit()
    sample = {"salinity": 31.0, "temperature_c": 12.0, "alkalinity_umol_kg": 2100.0,
              "ph_scale": "total"}
    # The newer sample agrees with the sensor; an older, drifting one arrives afterwards.
    client.post(url, headers=admin_headers, json=sample | {
        "collected_at": (T0 + dt.timedelta(days=1)).isoformat(), "ph": 7.80})
    client.post(url, headers=admin_headers, json=sample | {
        "collected_at": T0.isoformat(), "ph": 7.95})
    assert [state for _, state in _drift_alerts(session, station)] == []


# --- larval batches ----------------------------------------------------------------------


def test_batch_exposure_json_and_csv(client, session, admin_headers, viewer_headers,
                                     make_station, make_tank):
    station = make_station(role="intake")
    tank = make_tank(station=station, culture_temperature_c=25.0, omega_floor=1.5)
    # Six hours of readings every 15 min at pH 7.60 (12 degC): tank water stays below the
    # floor the whole time, so every hour of the run counts.
    start = T0
    for k in range(25):
        _add_reading(session, station, start + dt.timedelta(minutes=15 * k), ph_total=7.60)
    session.commit()
    omega = float(chemistry.at_temperature(
        chemistry.solve(temperature=12.0, salinity=31.0, ph=7.60, alkalinity=2100.0),
        25.0).omega_aragonite)
    assert omega < 1.5
    base = f"/api/v1/sites/{tank.site_id}/batches"
    body = {"id": "b-1", "species": "Pacific oyster", "tank_id": tank.id,
            "started_at": start.isoformat(),
            "ended_at": (start + dt.timedelta(hours=6)).isoformat(), "count_start": 1000000}
    assert client.post(base, json=body, headers=viewer_headers).status_code == 403
    created = client.post(base, json=body, headers=admin_headers)
    assert created.status_code == 201, created.text
    assert client.post(base, json=body, headers=admin_headers).status_code == 409
    wrong_tank = client.post(base, json=body | {"id": "b-2", "tank_id": "nope"},
                             headers=admin_headers)
    assert wrong_tank.status_code == 422 and "tank_id" in wrong_tank.text
    backwards = client.post(base, json=body | {"id": "b-3",
                                               "ended_at": "2026-05-01T00:00:00Z"},
                            headers=admin_headers)
    assert backwards.status_code == 422 and "ended_at" in backwards.text
    assert [b["id"] for b in client.get(base, headers=viewer_headers).json()] == ["b-1"]

    exposure = client.get(f"{base}/b-1/exposure", headers=viewer_headers).json()
    assert exposure["run"]["hours"] == pytest.approx(6.0)
    assert exposure["run"]["hours_below_floor"] == pytest.approx(6.0)
    assert exposure["first_48h"]["hours_below_floor"] == pytest.approx(6.0)
    expected_below_1 = 6.0 if omega < 1.0 else 0.0
    assert exposure["run"]["hours_below_1"] == pytest.approx(expected_below_1)
    assert exposure["run"]["deficit_omega_hours"] == pytest.approx((1.5 - omega) * 6.0,
                                                                   rel=1e-9)
    assert exposure["minimum_omega"] == pytest.approx(omega, rel=1e-9)
    assert "Gimenez" in exposure["reference"]

    csv_response = client.get(f"{base}/b-1/exposure", params={"format": "csv"},
                              headers=viewer_headers)
    assert csv_response.headers["content-type"].startswith("text/csv")
    rows = list(csv.DictReader(io.StringIO(csv_response.text)))
    assert [r["window"] for r in rows] == ["first_48h", "run"]
    assert float(rows[1]["deficit_omega_hours"]) == pytest.approx((1.5 - omega) * 6.0,
                                                                  abs=1e-4)
    assert client.get(f"{base}/nope/exposure", headers=viewer_headers).status_code == 404
