"""The mail sender: claims due outbox rows with a lease, sends them over SMTP, records the outcome.

Claiming happens in a short transaction (``FOR UPDATE SKIP LOCKED`` on PostgreSQL, so
several senders never take the same row; on SQLite the write lock serialises the claim).
The lease lets a row be claimed again if its sender dies before recording the outcome;
the mail is sent outside any transaction. A mail that the server accepted but whose
outcome was not recorded can be sent again after the lease expires: the Message-ID stays
the same, so mail clients show it once.
"""

from __future__ import annotations

import datetime as dt
import logging
import smtplib
import socket
import ssl
import uuid
from email import policy as email_policy
from email.message import EmailMessage
from email.utils import format_datetime

from sqlalchemy import or_, select, update
from sqlalchemy.orm import Session, sessionmaker

from app.alerts.mail import fill_public_url
from app.alerts.models import OutboxMessage
from app.db import utcnow
from app.settings import Settings

logger = logging.getLogger(__name__)

# Design defaults: a claim outlives any single SMTP exchange; retries back off from 30 s,
# doubling up to 15 minutes, so a mail server that is down for hours is not hammered and
# a short outage delays mail by about a minute.
LEASE_SECONDS = 300
FIRST_RETRY_SECONDS = 30
MAX_RETRY_SECONDS = 900
SMTP_TIMEOUT_SECONDS = 20
# CRLF line ends as SMTP wants, and no folding of headers under the 998-character limit of
# RFC 5322, so a long subject or Message-ID reaches the reader on one line.
MAIL_POLICY = email_policy.SMTP.clone(max_line_length=998)
BATCH_SIZE = 20
# Design defaults: a server that refuses a mail (5xx, or every recipient refused) may be
# misconfigured for a while (a full mailbox, a relay rule being fixed), so a refused mail is
# tried again from 5 minutes on, doubling up to 6 hours, and only marked "failed" after
# MAX_REFUSED_ATTEMPTS attempts, which span about a day (5+10+20+40+80+160+320+360+360 min).
# A failed mail can be queued again (POST /api/v1/notifications/{id}/resend).
REFUSED_FIRST_RETRY_SECONDS = 300
REFUSED_MAX_RETRY_SECONDS = 6 * 3600
MAX_REFUSED_ATTEMPTS = 10


def retry_delay(attempts: int) -> dt.timedelta:
    """Wait before the next attempt after ``attempts`` failed ones (1, 2, ...)."""
    seconds = FIRST_RETRY_SECONDS * 2 ** max(attempts - 1, 0)
    return dt.timedelta(seconds=min(seconds, MAX_RETRY_SECONDS))


def refused_retry_delay(attempts: int) -> dt.timedelta:
    """Wait before the next attempt after ``attempts`` attempts the server refused."""
    seconds = REFUSED_FIRST_RETRY_SECONDS * 2 ** max(attempts - 1, 0)
    return dt.timedelta(seconds=min(seconds, REFUSED_MAX_RETRY_SECONDS))


def build_email(row: OutboxMessage, settings: Settings, *, date: dt.datetime) -> EmailMessage:
    message = EmailMessage(policy=MAIL_POLICY)
    message["Subject"] = row.subject
    message["From"] = settings.smtp_from
    message["To"] = ", ".join(row.recipients)
    message["Message-ID"] = row.message_id
    message["Date"] = format_datetime(date)
    message["Auto-Submitted"] = "auto-generated"
    message.set_content(fill_public_url(row.body_text, settings.public_url))
    message.add_alternative(fill_public_url(row.body_html, settings.public_url), subtype="html")
    return message


def _connect(settings: Settings) -> smtplib.SMTP:
    assert settings.smtp_host
    if settings.smtp_security == "tls":
        client: smtplib.SMTP = smtplib.SMTP_SSL(
            settings.smtp_host,
            settings.smtp_port,
            timeout=SMTP_TIMEOUT_SECONDS,
            context=ssl.create_default_context(),
        )
    else:
        client = smtplib.SMTP(settings.smtp_host, settings.smtp_port, timeout=SMTP_TIMEOUT_SECONDS)
        if settings.smtp_security == "starttls":
            client.starttls(context=ssl.create_default_context())
    if settings.smtp_username:
        password = settings.smtp_password.get_secret_value() if settings.smtp_password else ""
        client.login(settings.smtp_username, password)
    return client


def claim(
    *, factory: sessionmaker[Session], owner: str, now: dt.datetime, limit: int = BATCH_SIZE
) -> list[OutboxMessage]:
    """Lease up to ``limit`` due rows to ``owner``; returns detached copies of them."""
    with factory() as session, session.begin():
        rows = list(
            session.scalars(
                select(OutboxMessage)
                .where(
                    OutboxMessage.status == "pending",
                    OutboxMessage.next_attempt_at <= now,
                    or_(
                        OutboxMessage.lease_expires_at.is_(None),
                        OutboxMessage.lease_expires_at < now,
                    ),
                )
                .order_by(OutboxMessage.id)
                .limit(limit)
                .with_for_update(skip_locked=True)
            )
        )
        for row in rows:
            row.lease_owner = owner
            row.lease_expires_at = now + dt.timedelta(seconds=LEASE_SECONDS)
            row.attempts += 1
        session.flush()
        session.expunge_all()
    return rows


def _record(
    factory: sessionmaker[Session], row: OutboxMessage, owner: str, **values: object
) -> bool:
    with factory() as session, session.begin():
        result = session.execute(
            update(OutboxMessage)
            .where(OutboxMessage.id == row.id, OutboxMessage.lease_owner == owner)
            .values(lease_owner=None, lease_expires_at=None, **values)
        )
        return result.rowcount == 1


def send_due(
    *,
    factory: sessionmaker[Session],
    settings: Settings,
    now: dt.datetime | None = None,
    owner: str | None = None,
) -> dict[str, int]:
    """Send every due outbox row once; returns counts of sent, retried and failed rows.

    A refused mail (5xx) is retried on :func:`refused_retry_delay`'s schedule and marked
    "failed" only after :data:`MAX_REFUSED_ATTEMPTS` attempts; anything else (server down,
    timeouts, 4xx) is retried on :func:`retry_delay`'s without a bound.

    Without ``settings.smtp_host`` nothing is sent: rows wait in the outbox.
    """
    counts = {"sent": 0, "retry": 0, "failed": 0}
    if not settings.smtp_host:
        return counts
    now = now or utcnow()
    owner = owner or f"{socket.gethostname()}:{uuid.uuid4().hex[:12]}"
    rows = claim(factory=factory, owner=owner, now=now)
    if not rows:
        return counts
    client: smtplib.SMTP | None = None
    try:
        for row in rows:
            try:
                if client is None:
                    client = _connect(settings)
                refused = client.send_message(build_email(row, settings, date=now))
            except (smtplib.SMTPException, OSError) as error:
                values: dict[str, object] = {"last_error": _describe(error)}
                if not _is_refusal(error):
                    values["next_attempt_at"] = now + retry_delay(row.attempts)
                    counts["retry"] += 1
                elif row.attempts >= MAX_REFUSED_ATTEMPTS:
                    values["status"] = "failed"
                    counts["failed"] += 1
                else:
                    values["next_attempt_at"] = now + refused_retry_delay(row.attempts)
                    counts["retry"] += 1
                _record(factory, row, owner, **values)
                logger.warning("mail %s not sent (attempt %d): %s", row.id, row.attempts, error)
                # The connection may be broken; open a fresh one for the next row.
                _close(client)
                client = None
                continue
            note = f"refused by the server for: {', '.join(refused)}" if refused else None
            _record(factory, row, owner, status="sent", sent_at=now, last_error=note)
            counts["sent"] += 1
    finally:
        _close(client)
    return counts


def _is_refusal(error: BaseException) -> bool:
    """A 5xx answer or all recipients refused: retried on the slow, bounded schedule."""
    if isinstance(error, smtplib.SMTPRecipientsRefused):
        return True
    code = getattr(error, "smtp_code", None)
    if isinstance(error, smtplib.SMTPAuthenticationError):
        return False  # a configuration problem an admin can fix; keep retrying quickly
    return (
        isinstance(code, int)
        and 500 <= code < 600
        and not isinstance(error, smtplib.SMTPServerDisconnected)
    )


def _describe(error: BaseException) -> str:
    return f"{type(error).__name__}: {error}"[:2000]


def _close(client: smtplib.SMTP | None) -> None:
    if client is None:
        return
    try:
        client.quit()
    except (smtplib.SMTPException, OSError):
        client.close()
