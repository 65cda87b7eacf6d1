"""An omega drop end to end through the HTTP API, down to mail on a loopback SMTP server.

A device posts readings (``POST /api/v1/readings``) whose predicted tank omega falls below
the tank's floor; the default rule (floor 1.5, clear 1.7, held 15 minutes) must raise one
alert after the hold time, list one notification, clear once above the clear level, and
the sender, run once, must deliver exactly those two mails.

The readings are timed in the last half hour of the real clock: the ingest judges
``observed_at`` against its own clock (no future readings), and the tank's default no-data
rule (30 minutes) must stay quiet so that the only notifications are the omega alert's.
The pH values and the engine check of the tank omega they give come from
tests/service/test_alert_mail.py.
"""

from __future__ import annotations

import datetime as dt

import pytest
from sqlalchemy import select

import chemistry
from app.alerts.evaluation import sweep
from app.alerts.models import Alert, AlertRule
from app.alerts.sender import send_due
from tests.service.test_alert_mail import PH_BAD, PH_BAND, PH_GOOD, _check_levels

pytestmark = pytest.mark.db

RECIPIENT = "tank-room@hatchery.example"
STEP = dt.timedelta(minutes=3)


@pytest.fixture
def tank_with_device(session, make_site, make_station, make_tank, make_device):
    site = make_site(timezone="Pacific/Auckland")
    station = make_station(site=site, role="intake", alkalinity={"mode": "fixed", "value": 2200})
    tank = make_tank(site=site, station=station, culture_temperature_c=24.0)
    for rule in session.scalars(select(AlertRule).where(AlertRule.tank_pk == tank.pk)):
        rule.recipients = [RECIPIENT]
        if rule.metric == "tank_omega_aragonite":
            assert (rule.level, rule.clear_level, rule.hold_minutes) == (1.5, 1.7, 15)
        else:
            assert (rule.metric, rule.level) == ("no_data", 30)
    session.commit()
    _device, key = make_device(station=station)
    return site, station, tank, {"Authorization": f"Bearer {key}"}


def _post(client, headers, start: dt.datetime, ph_values: list[float]) -> None:
    body = {
        "readings": [
            {
                "observed_at": (start + i * STEP).isoformat(),
                "temperature_c": 12.0,
                "salinity": 32.0,
                "ph": ph,
                "ph_scale": "total",
            }
            for i, ph in enumerate(ph_values)
        ]
    }
    response = client.post("/api/v1/readings", json=body, headers=headers)
    assert response.status_code == 200, response.text
    assert response.json() == {"accepted": len(ph_values), "duplicates": 0, "rejected": []}


def _omega_alerts(session, tank) -> list[Alert]:
    return list(
        session.scalars(
            select(Alert)
            .join(AlertRule, AlertRule.id == Alert.rule_id)
            .where(AlertRule.tank_pk == tank.pk, AlertRule.metric == "tank_omega_aragonite")
            .order_by(Alert.id)
        )
    )


def _notes(client, site, headers) -> list[dict]:
    response = client.get(f"/api/v1/sites/{site.id}/notifications", headers=headers)
    assert response.status_code == 200, response.text
    return response.json()


def test_omega_drop_over_http_gives_one_alert_one_clear_and_two_mails(
    client, session, factory, settings, mail_server, tank_with_device, viewer_headers
):
    _check_levels()
    site, _station, tank, device = tank_with_device
    # Minutes, not seconds: the ingest rejects timestamps more than 10 minutes ahead.
    start = dt.datetime.now(dt.UTC).replace(second=0, microsecond=0) - dt.timedelta(minutes=27)

    # Bad water at start, +3 and +6 minutes: held 6 of 15 minutes, pending, nothing listed.
    _post(client, device, start, [PH_BAD] * 3)
    [pending] = _omega_alerts(session, tank)
    assert pending.state == "pending" and pending.since == start
    assert _notes(client, site, viewer_headers) == []

    # +9 .. +15: the condition has held 15 minutes at +15: active, one "raised" note.
    _post(client, device, start + 3 * STEP, [PH_BAD] * 3)
    [active] = _omega_alerts(session, tank)
    assert active.state == "active" and active.raised_at == start + 5 * STEP
    notes = _notes(client, site, viewer_headers)
    assert [(n["kind"], n["alert_id"], n["status"]) for n in notes] == [
        ("raised", active.id, "pending")
    ]
    assert notes[0]["recipients"] == [RECIPIENT]
    assert chemistry.DOSING_CAUTION in notes[0]["body_text"]

    # +18 still bad, +21 inside the band (nothing new), +24 above the clear level: cleared.
    _post(client, device, start + 6 * STEP, [PH_BAD, PH_BAND, PH_GOOD])
    # A sweep at the clock's now sees a station that reported minutes ago: nothing to add.
    with factory() as swept, swept.begin():
        sweep(session=swept, now=dt.datetime.now(dt.UTC))
    [cleared] = _omega_alerts(session, tank)
    assert (cleared.id, cleared.state, cleared.closed_reason) == (active.id, "cleared", "recovered")
    assert cleared.closed_at == start + 8 * STEP
    notes = _notes(client, site, viewer_headers)
    assert sorted(n["kind"] for n in notes) == ["cleared", "raised"]
    assert {n["alert_id"] for n in notes} == {active.id}
    listed = client.get(f"/api/v1/sites/{site.id}/alerts", headers=viewer_headers).json()
    assert [(a["id"], a["state"]) for a in listed] == [(active.id, "cleared")]

    mail_settings = settings.model_copy(
        update={
            "smtp_host": "127.0.0.1",
            "smtp_port": mail_server.port,
            "smtp_security": "none",
            "smtp_from": "alerts@hatchery.example",
        }
    )
    counts = send_due(factory=factory, settings=mail_settings, now=dt.datetime.now(dt.UTC))
    assert counts == {"sent": 2, "retry": 0, "failed": 0}
    received = mail_server.messages
    assert sorted(str(m["Message-ID"]) for m in received) == sorted(n["message_id"] for n in notes)
    subjects = sorted(" ".join(str(m["Subject"]).split()) for m in received)
    assert [s.split("]", 1)[1].split(":")[0].strip() for s in subjects] == ["ALERT", "CLEARED"]
    assert all(m["To"] == RECIPIENT for m in received)
    assert all(tank.name in m.get_body(("plain",)).get_content() for m in received)
    assert {n["status"] for n in _notes(client, site, viewer_headers)} == {"sent"}
    # A second pass finds nothing left to send.
    assert send_due(factory=factory, settings=mail_settings)["sent"] == 0
    assert len(mail_server.messages) == 2
