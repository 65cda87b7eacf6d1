"""A mail server that refuses mail (5xx) does not lose it: bounded retries over about a day,
then "failed", listed, shown on the web page and queued again by an admin.

The refusal comes from a real SMTP server on loopback (aiosmtpd) answering 554 to DATA, the
"transaction failed" reply of RFC 5321 section 4.2.3.
"""

from __future__ import annotations

import datetime as dt

import pytest
from sqlalchemy import select

from app.alerts.mail import write_outbox
from app.alerts.models import OutboxMessage
from app.alerts.sender import MAX_REFUSED_ATTEMPTS, refused_retry_delay, send_due
from tests.mailserver import MailCollector, MailServer

pytestmark = pytest.mark.db

T0 = dt.datetime(2026, 6, 1, 12, 0, tzinfo=dt.UTC)


class _Refusing(MailCollector):
    refuse = True

    async def handle_DATA(self, server, session, envelope):
        if self.refuse:
            return "554 Transaction failed: relay rule under repair"
        return await super().handle_DATA(server, session, envelope)


@pytest.fixture
def refusing_server():
    server = MailServer()
    server.collector = _Refusing()
    server.start()
    yield server
    server.stop()


@pytest.fixture
def outbox_row(session, make_site):
    site = make_site()
    row = write_outbox(
        session=session, site_id=site.id, alert_id=None, kind="raised",
        recipients=["manager@hatchery.example"], subject="test", body_text="body",
        body_html="<p>body</p>", message_key="refusal-test", now=T0,
    )
    session.commit()
    return site, row


def test_refused_schedule_spans_about_a_day():
    total = sum(
        (refused_retry_delay(n) for n in range(1, MAX_REFUSED_ATTEMPTS)), dt.timedelta()
    )
    assert dt.timedelta(hours=18) <= total <= dt.timedelta(hours=30)


def test_refused_mail_is_retried_then_failed_then_resent(
    session, factory, settings, refusing_server, outbox_row, client, admin_headers,
    viewer_headers,
):
    site, row = outbox_row
    mail_settings = settings.model_copy(
        update={"smtp_host": "127.0.0.1", "smtp_port": refusing_server.port,
                "smtp_security": "none", "smtp_from": "alerts@hatchery.example"}
    )
    now = T0
    for attempt in range(1, MAX_REFUSED_ATTEMPTS + 1):
        counts = send_due(factory=factory, settings=mail_settings, now=now)
        session.refresh(row)
        assert row.attempts == attempt and "554" in row.last_error
        if attempt < MAX_REFUSED_ATTEMPTS:
            assert counts == {"sent": 0, "retry": 1, "failed": 0}
            assert row.status == "pending"
            assert row.next_attempt_at == now + refused_retry_delay(attempt)
            now = row.next_attempt_at
        else:
            assert counts == {"sent": 0, "retry": 0, "failed": 1}
            assert row.status == "failed"
    assert now - T0 > dt.timedelta(hours=18)  # not given up within the first hours

    listed = client.get(
        f"/api/v1/sites/{site.id}/notifications", params={"status": "failed"},
        headers=viewer_headers,
    ).json()
    assert [n["id"] for n in listed] == [row.id]
    assert client.post(f"/api/v1/notifications/{row.id}/resend",
                       headers=viewer_headers).status_code == 403

    response = client.post(f"/api/v1/notifications/{row.id}/resend", headers=admin_headers)
    assert response.status_code == 200, response.text
    assert (response.json()["status"], response.json()["attempts"]) == ("pending", 0)
    again = client.post(f"/api/v1/notifications/{row.id}/resend", headers=admin_headers)
    assert again.status_code == 409 and "only a 'failed'" in again.json()["detail"]

    refusing_server.collector.refuse = False
    later = dt.datetime.now(dt.UTC) + dt.timedelta(minutes=1)  # resend queues it for now
    assert send_due(factory=factory, settings=mail_settings, now=later)["sent"] == 1
    assert len(refusing_server.messages) == 1
    assert session.scalars(
        select(OutboxMessage.status).where(OutboxMessage.id == row.id)
    ).one() == "sent"


def test_web_page_shows_failed_mail(session, client, outbox_row, viewer_key):
    site, row = outbox_row
    row.status = "failed"
    session.commit()
    signed = client.post("/sign-in", data={"key": viewer_key}, follow_redirects=False)
    assert signed.status_code in (302, 303), signed.text
    page = client.get(f"/sites/{site.id}")
    assert page.status_code == 200
    assert 'id="failed-mail"' in page.text and "1 alert mail could not be delivered" in page.text
