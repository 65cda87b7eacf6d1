"""Sensor drift: the sensor's median around collection, a signed offset in the mail, and a
clear level under the alert level.

Expected offsets come from the construction of the test (sample pH set on the total scale at
the sensor's temperature, so no carrying between temperatures is involved).
"""

from __future__ import annotations

import datetime as dt

import pytest
from sqlalchemy import select

from app.alerts.models import Alert, AlertRule, OutboxMessage
from tests.service.test_samples_batches_api import _add_reading, _samples_url

pytestmark = pytest.mark.db

T0 = dt.datetime(2026, 5, 4, 12, 0, tzinfo=dt.UTC)
SENSOR_PH = 7.80


@pytest.fixture
def sensor_station(session, make_station):
    station = make_station(role="intake")
    # Readings every 5 minutes for two days; the one nearest each collection is a noisy
    # spike of +0.034, which a one-reading comparison would take as the sensor's value.
    for minutes in range(0, 2 * 24 * 60, 5):
        at = T0 - dt.timedelta(hours=1) + dt.timedelta(minutes=minutes)
        spike = at in {T0 - dt.timedelta(minutes=5), T0 + dt.timedelta(hours=24, minutes=-5)}
        _add_reading(session, station, at, ph_total=SENSOR_PH + (0.034 if spike else 0.0))
    session.commit()
    return station


def _post_sample(client, headers, station, at, ph):
    response = client.post(_samples_url(station) + "/lab-samples", headers=headers, json={
        "collected_at": at.isoformat(), "salinity": 31.0, "temperature_c": 12.0,
        "alkalinity_umol_kg": 2100.0, "ph": ph, "ph_scale": "total"})
    assert response.status_code == 201, response.text


def _drift_alerts(session, station):
    return session.scalars(
        select(Alert).join(AlertRule, Alert.rule_id == AlertRule.id)
        .where(AlertRule.station_pk == station.pk, AlertRule.metric == "sensor_drift")
        .order_by(Alert.id)
    ).all()


def test_sensor_value_is_the_median_around_collection(
    client, admin_headers, viewer_headers, sensor_station
):
    # Collected 2 minutes after the spike: the nearest reading is 7.834, the median 7.800.
    _post_sample(client, admin_headers, sensor_station, T0 - dt.timedelta(minutes=3), 7.80)
    body = client.get(_samples_url(sensor_station) + "/ph-check", headers=viewer_headers).json()
    assert body["offsets"][0]["sensor_ph_total"] == pytest.approx(SENSOR_PH, abs=1e-12)
    assert body["latest_offset"] == pytest.approx(0.0, abs=1e-9)
    assert body["drifting"] is False


def test_drift_mail_keeps_the_sign_and_clears_below_the_level(
    client, session, admin_headers, sensor_station
):
    station = sensor_station
    # The bottle says 7.744: the sensor reads 0.056 high (offset -0.056).
    _post_sample(client, admin_headers, station, T0, SENSOR_PH - 0.056)
    [alert] = _drift_alerts(session, station)
    assert alert.state == "active"
    assert alert.last_value == pytest.approx(-0.056, abs=1e-9)
    rule = session.get(AlertRule, alert.rule_id)
    assert (rule.level, rule.clear_level) == (0.05, 0.03)
    [mail] = session.scalars(
        select(OutboxMessage).where(OutboxMessage.alert_id == alert.id)
    ).all()
    assert "sensor reads high by 0.056 pH" in mail.body_text
    assert "bottle sample minus sensor: -0.056" in mail.body_text
    assert "clears when it is 0.03 or less" in mail.body_text

    # 0.04 is inside the band (between 0.03 and 0.05): still open, no new mail.
    _post_sample(client, admin_headers, station, T0 + dt.timedelta(hours=6), SENSOR_PH + 0.04)
    session.expire_all()
    assert [a.state for a in _drift_alerts(session, station)] == ["active"]
    # 0.02: cleared.
    _post_sample(client, admin_headers, station, T0 + dt.timedelta(hours=12), SENSOR_PH + 0.02)
    session.expire_all()
    [cleared] = _drift_alerts(session, station)
    assert cleared.state == "cleared"
    assert cleared.worst_value == pytest.approx(-0.056, abs=1e-9)  # largest size, sign kept
    kinds = session.scalars(
        select(OutboxMessage.kind).where(OutboxMessage.alert_id == alert.id)
        .order_by(OutboxMessage.id)
    ).all()
    assert kinds == ["raised", "cleared"]
