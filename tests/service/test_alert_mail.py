"""Alerts end to end: readings -> rule evaluation -> outbox -> a real SMTP server on loopback.

The SMTP server is aiosmtpd's Controller on a free loopback port, started by the tests.
Readings are stored and evaluated in the test's session, as the ingest does in its own
transaction; the sender and the sweep run on the same connection (savepoints), so the
test's rollback removes everything.
"""

from __future__ import annotations

import datetime as dt

import pytest
from sqlalchemy import select

import chemistry
from app.alerts.evaluation import evaluate_after_ingest, sweep
from app.alerts.models import Alert, AlertRule, OutboxMessage
from app.alerts.sender import retry_delay, send_due
from app.readings.models import Reading
from tests.mailserver import MailServer
from tests.stored import stored_reading

pytestmark = pytest.mark.db

T0 = dt.datetime(2026, 6, 1, 12, 0, tzinfo=dt.UTC)
RECIPIENT = "manager@hatchery.example"
# Intake water at 12 °C, S 32, TA 2200 umol/kg, carried to a 24 °C larval tank. The pH
# values give these predicted tank omegas with the engine (checked in _check_levels):
PH_BAD = 7.7  # about 1.09: below the 1.5 floor
PH_BAND = 7.9  # about 1.62: between the floor and the 1.7 clear level
PH_GOOD = 8.05  # about 2.2: above the clear level


@pytest.fixture
def tank_site(session, make_site, make_station, make_tank):
    site = make_site(timezone="America/Los_Angeles")
    station = make_station(site=site, role="intake", alkalinity={"mode": "fixed", "value": 2200})
    tank = make_tank(site=site, station=station, culture_temperature_c=24.0, volume_l=1500.0)
    rules = session.scalars(select(AlertRule).where(AlertRule.tank_pk == tank.pk)).all()
    for rule in rules:
        rule.recipients = [RECIPIENT]
        if rule.metric == "tank_omega_aragonite":
            assert (rule.level, rule.clear_level, rule.hold_minutes) == (1.5, 1.7, 15)
    session.commit()
    return site, station, tank


def _check_levels() -> None:
    def tank_omega(ph: float) -> float:
        state = chemistry.solve(temperature=12.0, salinity=32.0, ph=ph, alkalinity=2200.0)
        return float(chemistry.at_temperature(state, 24.0).omega_aragonite)

    assert tank_omega(PH_BAD) < 1.5
    assert 1.5 < tank_omega(PH_BAND) < 1.7
    assert tank_omega(PH_GOOD) > 1.7


def _ingest(session, station, points, *, start=T0, step_minutes=5) -> list[Reading]:
    """Store readings (one per ``step_minutes``) and evaluate the rules, as the ingest does."""
    readings = []
    for i, ph in enumerate(points):
        at = start + dt.timedelta(minutes=step_minutes * i)
        reading = stored_reading(station, at, ph=ph, omega_aragonite_uncertainty=0.1)
        session.add(reading)
        session.flush()
        # One ingest per reading, as a sensor posting every 5 minutes would.
        evaluate_after_ingest(session=session, station=station, readings=[reading], now=at)
        readings.append(reading)
    session.commit()
    return readings


def _subject(message) -> str:
    # A long Subject is folded on the wire; mail clients unfold it and drop the fold's space.
    return " ".join(str(message["Subject"]).split())


def _send(factory, mail_settings, now):
    return send_due(factory=factory, settings=mail_settings, now=now)


def _alerts(session, site, metric):
    return session.scalars(
        select(Alert)
        .join(AlertRule, AlertRule.id == Alert.rule_id)
        .where(Alert.site_id == site.id, AlertRule.metric == metric)
        .order_by(Alert.id)
    ).all()


def test_omega_drop_gives_one_mail_after_the_hold_and_one_after_recovery(
    session, factory, mail_server, mail_settings, tank_site
):
    _check_levels()
    site, station, tank = tank_site
    # 10 minutes of good water, then bad water from 12:10 on.
    _ingest(session, station, [PH_GOOD, PH_GOOD])
    _ingest(session, station, [PH_BAD] * 3, start=T0 + dt.timedelta(minutes=10))
    # 12:10, 12:15, 12:20: held for 10 minutes only, still pending, nothing sent.
    assert _send(factory, mail_settings, T0 + dt.timedelta(minutes=21))["sent"] == 0
    assert mail_server.messages == []
    [pending] = _alerts(session, site, "tank_omega_aragonite")
    assert pending.state == "pending"

    _ingest(session, station, [PH_BAD] * 4, start=T0 + dt.timedelta(minutes=25))
    assert _send(factory, mail_settings, T0 + dt.timedelta(minutes=41))["sent"] == 1
    [raised] = mail_server.messages
    assert str(raised["Subject"]).strip().startswith(f"[{site.name}] ALERT")
    assert raised["To"] == RECIPIENT
    text = raised.get_body(("plain",)).get_content()
    html = raised.get_body(("html",)).get_content()
    assert tank.name in text and station.name in text
    # 12:10 UTC is 05:10 PDT: "since when" in site-local time.
    assert "Condition since: 2026-06-01 05:10 PDT" in text
    assert "± " in text  # value with its uncertainty
    assert "mg/L sodium carbonate" in text  # the recommended dose
    assert "https://spatline.hatchery.example/" in text and "{{" not in text
    assert chemistry.DOSING_CAUTION in text
    # Links open the web page (no API key needed in a browser), not the API.
    assert f'href="https://spatline.hatchery.example/sites/{site.id}"' in html
    assert "/api/" not in text

    # Recovery past the band: one clear mail; good water afterwards sends nothing.
    _ingest(session, station, [PH_BAND, PH_GOOD, PH_GOOD], start=T0 + dt.timedelta(minutes=45))
    assert _send(factory, mail_settings, T0 + dt.timedelta(minutes=60))["sent"] == 1
    assert _send(factory, mail_settings, T0 + dt.timedelta(minutes=90))["sent"] == 0
    subjects = [_subject(m) for m in mail_server.messages]
    assert len(subjects) == 2 and "CLEARED" in subjects[1]
    assert len({m["Message-ID"] for m in mail_server.messages}) == 2
    [alert] = _alerts(session, site, "tank_omega_aragonite")
    assert (alert.state, alert.closed_reason) == ("cleared", "recovered")
    assert alert.since == T0 + dt.timedelta(minutes=10)
    assert alert.raised_at == T0 + dt.timedelta(minutes=25)


def test_flapping_water_sends_no_extra_mail(
    session, factory, mail_server, mail_settings, tank_site
):
    _check_levels()
    site, station, _tank = tank_site
    # Around the floor, never bad for 15 minutes in a row: nothing.
    _ingest(session, station, [PH_BAD, PH_BAND] * 6)
    # Then an excursion that holds, flapping inside the band for an hour, and recovery.
    _ingest(session, station, [PH_BAD] * 4, start=T0 + dt.timedelta(minutes=60))
    _ingest(session, station, [PH_BAND, PH_BAD] * 6, start=T0 + dt.timedelta(minutes=80))
    _ingest(session, station, [PH_GOOD], start=T0 + dt.timedelta(minutes=140))
    # Then water bobbing between the band and good water: already cleared, nothing new.
    _ingest(session, station, [PH_BAND, PH_GOOD] * 4, start=T0 + dt.timedelta(minutes=145))
    _send(factory, mail_settings, T0 + dt.timedelta(hours=4))
    kinds = [_subject(m).split("]")[1].split(":")[0].strip() for m in mail_server.messages]
    assert kinds == ["ALERT", "CLEARED"]
    states = [a.state for a in _alerts(session, site, "tank_omega_aragonite")]
    assert states.count("cleared") == 1 and set(states) <= {"lapsed", "cleared"}


def test_smtp_down_then_up_delivers_once(session, factory, mail_settings, tank_site):
    site, station, _tank = tank_site
    server = MailServer()
    down_settings = mail_settings.model_copy(update={"smtp_port": server.port})
    _ingest(session, station, [PH_BAD] * 4)
    now = T0 + dt.timedelta(minutes=16)
    counts = _send(factory, down_settings, now)
    assert counts == {"sent": 0, "retry": 1, "failed": 0}
    row = session.scalars(select(OutboxMessage).where(OutboxMessage.site_id == site.id)).one()
    session.refresh(row)
    assert (row.status, row.attempts, row.lease_owner) == ("pending", 1, None)
    assert row.next_attempt_at == now + retry_delay(1)
    # Before the back-off has passed nothing is tried, even with the server back.
    server.start()
    try:
        assert _send(factory, down_settings, now + dt.timedelta(seconds=5))["sent"] == 0
        assert _send(factory, down_settings, now + retry_delay(1))["sent"] == 1
        assert _send(factory, down_settings, now + dt.timedelta(hours=1))["sent"] == 0
        assert len(server.messages) == 1
        assert server.messages[0]["Message-ID"] == row.message_id
    finally:
        server.stop()
    session.refresh(row)
    assert (row.status, row.attempts) == ("sent", 2)


def test_silent_sensor_gives_one_no_data_alert_and_one_recovery(
    session, factory, mail_server, mail_settings, tank_site
):
    site, station, _tank = tank_site
    _ingest(session, station, [PH_GOOD] * 3)  # last reading at 12:10
    for minutes in (20, 39, 41, 45, 60, 90):
        with factory() as swept, swept.begin():
            sweep(session=swept, now=T0 + dt.timedelta(minutes=minutes))
    _send(factory, mail_settings, T0 + dt.timedelta(minutes=91))
    [alert] = _alerts(session, site, "no_data")
    assert alert.state == "active"
    assert alert.since == T0 + dt.timedelta(minutes=40)  # 30 minutes after the last reading
    assert alert.raised_at == T0 + dt.timedelta(minutes=41)
    assert [_subject(m) for m in mail_server.messages] == [
        f"[{site.name}] ALERT: time without a reading, tank {_tank.name}"
    ]
    # The sensor comes back: the ingest clears the alert; a later sweep changes nothing.
    _ingest(session, station, [PH_GOOD], start=T0 + dt.timedelta(minutes=95))
    with factory() as swept, swept.begin():
        sweep(session=swept, now=T0 + dt.timedelta(minutes=100))
    _send(factory, mail_settings, T0 + dt.timedelta(minutes=101))
    assert len(mail_server.messages) == 2 and "CLEARED" in _subject(mail_server.messages[1])
    [alert] = _alerts(session, site, "no_data")
    assert alert.state == "cleared"


def test_acknowledge_records_who_and_stops_reminders(
    client, session, factory, mail_server, mail_settings, tank_site, viewer_headers
):
    site, station, tank = tank_site
    rule = session.scalars(
        select(AlertRule).where(
            AlertRule.tank_pk == tank.pk, AlertRule.metric == "tank_omega_aragonite"
        )
    ).one()
    rule.repeat_minutes = 30
    session.commit()
    _ingest(session, station, [PH_BAD] * 4)  # raised at 12:15
    _ingest(session, station, [PH_BAD], start=T0 + dt.timedelta(minutes=50))  # reminder
    [alert] = _alerts(session, site, "tank_omega_aragonite")
    listed = client.get(f"/api/v1/sites/{site.id}/alerts?state=active", headers=viewer_headers)
    assert [a["id"] for a in listed.json()] == [alert.id]
    response = client.post(f"/api/v1/alerts/{alert.id}/acknowledge", headers=viewer_headers)
    assert response.status_code == 200, response.text
    body = response.json()
    assert body["state"] == "acknowledged" and body["acknowledged_by"].startswith("test viewer")
    assert body["acknowledged_at"] is not None and body["caution"] == chemistry.DOSING_CAUTION
    _ingest(session, station, [PH_BAD], start=T0 + dt.timedelta(minutes=120))  # no reminder
    with factory() as swept, swept.begin():
        # 20 minutes after the last reading (no silence alert), 90 after the last mail.
        sweep(session=swept, now=T0 + dt.timedelta(minutes=140))
    _send(factory, mail_settings, T0 + dt.timedelta(minutes=141))
    kinds = [_subject(m).split("]")[1].split(":")[0].strip() for m in mail_server.messages]
    assert kinds == ["ALERT", "STILL ACTIVE"]
    notes = client.get(f"/api/v1/sites/{site.id}/notifications", headers=viewer_headers).json()
    assert sorted(n["kind"] for n in notes) == ["raised", "reminder"]
    assert all(n["status"] == "sent" for n in notes)
    again = client.post(f"/api/v1/alerts/{alert.id}/acknowledge", headers=viewer_headers)
    assert again.status_code == 200 and again.json()["acknowledged_at"] == body["acknowledged_at"]


def test_without_smtp_mail_waits_in_the_outbox(
    client, session, factory, settings, tank_site, viewer_headers
):
    site, station, _tank = tank_site
    _ingest(session, station, [PH_BAD] * 4)
    assert _send(factory, settings, T0 + dt.timedelta(hours=1)) == {
        "sent": 0,
        "retry": 0,
        "failed": 0,
    }
    notes = client.get(f"/api/v1/sites/{site.id}/notifications", headers=viewer_headers).json()
    assert [(n["kind"], n["status"], n["attempts"]) for n in notes] == [("raised", "pending", 0)]
    assert chemistry.DOSING_CAUTION in notes[0]["body_text"]
