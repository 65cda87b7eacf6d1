"""Alert rules, alerts, the mail outbox and the daily-summary bookkeeping.

The rule keeps the state machine's memory of the newest observation it has seen; the
open alert (at most one per rule, enforced by a partial unique index) keeps the rest.
"""

from __future__ import annotations

import datetime as dt
from typing import Any

from sqlalchemy import (
    JSON,
    Boolean,
    Date,
    Float,
    ForeignKey,
    Index,
    Integer,
    String,
    Text,
    UniqueConstraint,
    text,
)
from sqlalchemy.orm import Mapped, mapped_column

from app.db import Base, UtcDateTime, utcnow

# Kept in step with app.alerts.state_machine.OPEN_ALERT_STATES (asserted in the tests).
OPEN_STATES_SQL = "state IN ('pending', 'active', 'acknowledged')"


class AlertRule(Base):
    __tablename__ = "alert_rules"

    id: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    site_id: Mapped[str] = mapped_column(ForeignKey("sites.id", ondelete="CASCADE"), index=True)
    tank_pk: Mapped[int | None] = mapped_column(
        ForeignKey("tanks.pk", ondelete="CASCADE"), nullable=True, index=True
    )
    station_pk: Mapped[int | None] = mapped_column(
        ForeignKey("stations.pk", ondelete="CASCADE"), nullable=True, index=True
    )
    metric: Mapped[str] = mapped_column(String(32))
    direction: Mapped[str] = mapped_column(String(8))
    level: Mapped[float] = mapped_column(Float)
    clear_level: Mapped[float] = mapped_column(Float)
    hold_minutes: Mapped[float] = mapped_column(Float, default=0.0)
    min_probability: Mapped[float | None] = mapped_column(Float, nullable=True)
    recipients: Mapped[list[str]] = mapped_column(JSON, default=list)
    repeat_minutes: Mapped[float] = mapped_column(Float, default=0.0)
    enabled: Mapped[bool] = mapped_column(Boolean, default=True)
    # "default": made with the tank; "operator": made through the API.
    origin: Mapped[str] = mapped_column(String(16), default="operator")
    # The state machine's memory: the newest observation time it has acted on.
    last_observed_at: Mapped[dt.datetime | None] = mapped_column(UtcDateTime, nullable=True)
    # Rules are retired, not deleted, so that their alerts and mail keep their meaning.
    deleted_at: Mapped[dt.datetime | None] = mapped_column(UtcDateTime, nullable=True)
    created_at: Mapped[dt.datetime] = mapped_column(UtcDateTime, default=utcnow)
    updated_at: Mapped[dt.datetime] = mapped_column(UtcDateTime, default=utcnow, onupdate=utcnow)


class Alert(Base):
    __tablename__ = "alerts"
    __table_args__ = (
        # One open alert per rule, whatever several processes do at the same time.
        Index(
            "uq_alerts_rule_id_open",
            "rule_id",
            unique=True,
            sqlite_where=text(OPEN_STATES_SQL),
            postgresql_where=text(OPEN_STATES_SQL),
        ),
        Index("ix_alerts_site_id_state", "site_id", "state"),
    )

    id: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    rule_id: Mapped[int] = mapped_column(ForeignKey("alert_rules.id", ondelete="CASCADE"))
    site_id: Mapped[str] = mapped_column(ForeignKey("sites.id", ondelete="CASCADE"))
    state: Mapped[str] = mapped_column(String(16))
    # When the condition began (the excursion's start; "since when" in the mail).
    since: Mapped[dt.datetime] = mapped_column(UtcDateTime)
    raised_at: Mapped[dt.datetime | None] = mapped_column(UtcDateTime, nullable=True)
    last_notified_at: Mapped[dt.datetime | None] = mapped_column(UtcDateTime, nullable=True)
    acknowledged_at: Mapped[dt.datetime | None] = mapped_column(UtcDateTime, nullable=True)
    acknowledged_by: Mapped[str | None] = mapped_column(String(200), nullable=True)
    closed_at: Mapped[dt.datetime | None] = mapped_column(UtcDateTime, nullable=True)
    # "recovered" (cleared), "did_not_hold" (lapsed) or "rule_retired".
    closed_reason: Mapped[str | None] = mapped_column(String(16), nullable=True)
    first_value: Mapped[float | None] = mapped_column(Float, nullable=True)
    worst_value: Mapped[float | None] = mapped_column(Float, nullable=True)
    last_value: Mapped[float | None] = mapped_column(Float, nullable=True)
    last_value_uncertainty: Mapped[float | None] = mapped_column(Float, nullable=True)
    last_probability: Mapped[float | None] = mapped_column(Float, nullable=True)
    last_value_at: Mapped[dt.datetime | None] = mapped_column(UtcDateTime, nullable=True)
    created_at: Mapped[dt.datetime] = mapped_column(UtcDateTime, default=utcnow)
    updated_at: Mapped[dt.datetime] = mapped_column(UtcDateTime, default=utcnow, onupdate=utcnow)


class OutboxMessage(Base):
    """One mail to send. Written in the same transaction as the change it reports.

    Senders claim rows with a lease (``lease_owner`` until ``lease_expires_at``); a sender
    that dies leaves a lease that expires and the row is claimed again. ``message_id`` is
    fixed when the row is written, so a retry carries the same Message-ID header.
    """

    __tablename__ = "outbox"
    __table_args__ = (
        UniqueConstraint("message_id"),
        Index("ix_outbox_status_next_attempt_at", "status", "next_attempt_at"),
        Index("ix_outbox_site_id_created_at", "site_id", "created_at"),
    )

    id: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    site_id: Mapped[str] = mapped_column(ForeignKey("sites.id", ondelete="CASCADE"))
    alert_id: Mapped[int | None] = mapped_column(
        ForeignKey("alerts.id", ondelete="SET NULL"), nullable=True, index=True
    )
    # "raised", "reminder", "cleared" or "daily_summary".
    kind: Mapped[str] = mapped_column(String(16))
    recipients: Mapped[list[str]] = mapped_column(JSON, default=list)
    subject: Mapped[str] = mapped_column(String(300))
    body_text: Mapped[str] = mapped_column(Text)
    body_html: Mapped[str] = mapped_column(Text)
    message_id: Mapped[str] = mapped_column(String(255))
    # "pending", "sent", "failed" (refused for good) or "unaddressed" (no recipients).
    status: Mapped[str] = mapped_column(String(16), default="pending")
    attempts: Mapped[int] = mapped_column(Integer, default=0)
    next_attempt_at: Mapped[dt.datetime] = mapped_column(UtcDateTime, default=utcnow)
    lease_owner: Mapped[str | None] = mapped_column(String(100), nullable=True)
    lease_expires_at: Mapped[dt.datetime | None] = mapped_column(UtcDateTime, nullable=True)
    sent_at: Mapped[dt.datetime | None] = mapped_column(UtcDateTime, nullable=True)
    last_error: Mapped[str | None] = mapped_column(Text, nullable=True)
    created_at: Mapped[dt.datetime] = mapped_column(UtcDateTime, default=utcnow)


class DailySummaryRecord(Base):
    """A site's daily summary for one local date has been written (at most once)."""

    __tablename__ = "daily_summaries"
    __table_args__ = (UniqueConstraint("site_id", "local_date"),)

    id: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    site_id: Mapped[str] = mapped_column(ForeignKey("sites.id", ondelete="CASCADE"))
    local_date: Mapped[dt.date] = mapped_column(Date)
    outbox_id: Mapped[int | None] = mapped_column(
        ForeignKey("outbox.id", ondelete="SET NULL"), nullable=True
    )
    details: Mapped[dict[str, Any] | None] = mapped_column(JSON, nullable=True)
    created_at: Mapped[dt.datetime] = mapped_column(UtcDateTime, default=utcnow)
