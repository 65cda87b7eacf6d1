"""Mail server down for a long while, then back: every pending notification is delivered
exactly once.

Extends tests/service/test_alert_mail.py (one message, one failed attempt) to several
sites' alerts waiting through an outage of many attempts with growing back-off, then a
server that comes back: each message arrives once, under its own Message-ID, and later
sender runs send nothing more.
"""

from __future__ import annotations

import datetime as dt

import pytest
from sqlalchemy import select

from app.alerts.models import AlertRule, OutboxMessage
from app.alerts.sender import MAX_RETRY_SECONDS, retry_delay
from tests.mailserver import MailServer
from tests.service.test_alert_mail import (
    PH_BAD,
    RECIPIENT,
    T0,
    _ingest,
    _send,
)

pytestmark = pytest.mark.db

SITES = 3
OUTAGE_ATTEMPTS = 6


@pytest.fixture
def alerting_sites(session, make_site, make_station, make_tank):
    sites = []
    for _ in range(SITES):
        site = make_site(timezone="UTC")
        station = make_station(
            site=site, role="intake", alkalinity={"mode": "fixed", "value": 2200}
        )
        tank = make_tank(site=site, station=station, culture_temperature_c=24.0)
        for rule in session.scalars(select(AlertRule).where(AlertRule.tank_pk == tank.pk)):
            rule.recipients = [RECIPIENT]
        session.commit()
        sites.append((site, station))
    return sites


def test_every_pending_mail_is_delivered_once_after_a_long_outage(
    session,
    factory,
    mail_settings,
    alerting_sites,
):
    down = MailServer()  # a port nobody listens on, until started
    settings = mail_settings.model_copy(update={"smtp_port": down.port})
    for _site, station in alerting_sites:
        _ingest(session, station, [PH_BAD] * 4)
    site_ids = [site.id for site, _ in alerting_sites]
    pending = session.scalars(
        select(OutboxMessage).where(OutboxMessage.site_id.in_(site_ids))
    ).all()
    assert len(pending) >= SITES

    now = T0 + dt.timedelta(minutes=16)
    for attempt in range(1, OUTAGE_ATTEMPTS + 1):
        counts = _send(factory, settings, now)
        assert counts == {"sent": 0, "retry": len(pending), "failed": 0}, attempt
        now += retry_delay(attempt)
    assert retry_delay(OUTAGE_ATTEMPTS) == dt.timedelta(seconds=MAX_RETRY_SECONDS)

    down.start()
    try:
        sent = 0
        for _ in range(5):  # bounded: the back-off caps at MAX_RETRY_SECONDS
            sent += _send(factory, settings, now)["sent"]
            now += dt.timedelta(seconds=MAX_RETRY_SECONDS)
        assert sent == len(pending)
        assert _send(factory, settings, now + dt.timedelta(days=1))["sent"] == 0
        received = [m["Message-ID"] for m in down.messages]
    finally:
        down.stop()

    for row in pending:
        session.refresh(row)
    assert sorted(received) == sorted(row.message_id for row in pending)
    assert len(set(received)) == len(received)
    assert {(row.status, row.attempts) for row in pending} == {("sent", OUTAGE_ATTEMPTS + 1)}
