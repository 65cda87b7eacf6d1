"""Alerts: alert rules, alerts, the mail outbox (with leases) and daily-summary bookkeeping.

Revision ID: 0002
Revises: 0001
Create Date: 2026-12-01
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0002"
down_revision: str | Sequence[str] | None = "0001"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

# Times are UTC; on SQLite the app's UtcDateTime type stores them naive.
UTC_DATETIME = sa.DateTime(timezone=True)
OPEN_STATES_SQL = "state IN ('pending', 'active', 'acknowledged')"


def upgrade() -> None:
    op.create_table(
        "alert_rules",
        sa.Column("id", sa.Integer(), autoincrement=True, nullable=False),
        sa.Column("site_id", sa.String(length=64), nullable=False),
        sa.Column("tank_pk", sa.Integer(), nullable=True),
        sa.Column("station_pk", sa.Integer(), nullable=True),
        sa.Column("metric", sa.String(length=32), nullable=False),
        sa.Column("direction", sa.String(length=8), nullable=False),
        sa.Column("level", sa.Float(), nullable=False),
        sa.Column("clear_level", sa.Float(), nullable=False),
        sa.Column("hold_minutes", sa.Float(), server_default="0", nullable=False),
        sa.Column("min_probability", sa.Float(), nullable=True),
        sa.Column("recipients", sa.JSON(), nullable=False),
        sa.Column("repeat_minutes", sa.Float(), server_default="0", nullable=False),
        sa.Column("enabled", sa.Boolean(), server_default=sa.true(), nullable=False),
        sa.Column("origin", sa.String(length=16), server_default="operator", nullable=False),
        sa.Column("last_observed_at", UTC_DATETIME, nullable=True),
        sa.Column("deleted_at", UTC_DATETIME, nullable=True),
        sa.Column("created_at", UTC_DATETIME, nullable=False),
        sa.Column("updated_at", UTC_DATETIME, nullable=False),
        sa.ForeignKeyConstraint(
            ["site_id"], ["sites.id"], name=op.f("fk_alert_rules_site_id_sites"), ondelete="CASCADE"
        ),
        sa.ForeignKeyConstraint(
            ["tank_pk"], ["tanks.pk"], name=op.f("fk_alert_rules_tank_pk_tanks"), ondelete="CASCADE"
        ),
        sa.ForeignKeyConstraint(
            ["station_pk"],
            ["stations.pk"],
            name=op.f("fk_alert_rules_station_pk_stations"),
            ondelete="CASCADE",
        ),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_alert_rules")),
    )
    op.create_index(op.f("ix_alert_rules_site_id"), "alert_rules", ["site_id"])
    op.create_index(op.f("ix_alert_rules_tank_pk"), "alert_rules", ["tank_pk"])
    op.create_index(op.f("ix_alert_rules_station_pk"), "alert_rules", ["station_pk"])

    op.create_table(
        "alerts",
        sa.Column("id", sa.Integer(), autoincrement=True, nullable=False),
        sa.Column("rule_id", sa.Integer(), nullable=False),
        sa.Column("site_id", sa.String(length=64), nullable=False),
        sa.Column("state", sa.String(length=16), nullable=False),
        sa.Column("since", UTC_DATETIME, nullable=False),
        sa.Column("raised_at", UTC_DATETIME, nullable=True),
        sa.Column("last_notified_at", UTC_DATETIME, nullable=True),
        sa.Column("acknowledged_at", UTC_DATETIME, nullable=True),
        sa.Column("acknowledged_by", sa.String(length=200), nullable=True),
        sa.Column("closed_at", UTC_DATETIME, nullable=True),
        sa.Column("closed_reason", sa.String(length=16), nullable=True),
        sa.Column("first_value", sa.Float(), nullable=True),
        sa.Column("worst_value", sa.Float(), nullable=True),
        sa.Column("last_value", sa.Float(), nullable=True),
        sa.Column("last_value_uncertainty", sa.Float(), nullable=True),
        sa.Column("last_probability", sa.Float(), nullable=True),
        sa.Column("last_value_at", UTC_DATETIME, nullable=True),
        sa.Column("created_at", UTC_DATETIME, nullable=False),
        sa.Column("updated_at", UTC_DATETIME, nullable=False),
        sa.ForeignKeyConstraint(
            ["rule_id"],
            ["alert_rules.id"],
            name=op.f("fk_alerts_rule_id_alert_rules"),
            ondelete="CASCADE",
        ),
        sa.ForeignKeyConstraint(
            ["site_id"], ["sites.id"], name=op.f("fk_alerts_site_id_sites"), ondelete="CASCADE"
        ),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_alerts")),
    )
    op.create_index(
        "uq_alerts_rule_id_open",
        "alerts",
        ["rule_id"],
        unique=True,
        sqlite_where=sa.text(OPEN_STATES_SQL),
        postgresql_where=sa.text(OPEN_STATES_SQL),
    )
    op.create_index("ix_alerts_site_id_state", "alerts", ["site_id", "state"])

    op.create_table(
        "outbox",
        sa.Column("id", sa.Integer(), autoincrement=True, nullable=False),
        sa.Column("site_id", sa.String(length=64), nullable=False),
        sa.Column("alert_id", sa.Integer(), nullable=True),
        sa.Column("kind", sa.String(length=16), nullable=False),
        sa.Column("recipients", sa.JSON(), nullable=False),
        sa.Column("subject", sa.String(length=300), nullable=False),
        sa.Column("body_text", sa.Text(), nullable=False),
        sa.Column("body_html", sa.Text(), nullable=False),
        sa.Column("message_id", sa.String(length=255), nullable=False),
        sa.Column("status", sa.String(length=16), server_default="pending", nullable=False),
        sa.Column("attempts", sa.Integer(), server_default="0", nullable=False),
        sa.Column("next_attempt_at", UTC_DATETIME, nullable=False),
        sa.Column("lease_owner", sa.String(length=100), nullable=True),
        sa.Column("lease_expires_at", UTC_DATETIME, nullable=True),
        sa.Column("sent_at", UTC_DATETIME, nullable=True),
        sa.Column("last_error", sa.Text(), nullable=True),
        sa.Column("created_at", UTC_DATETIME, nullable=False),
        sa.ForeignKeyConstraint(
            ["site_id"], ["sites.id"], name=op.f("fk_outbox_site_id_sites"), ondelete="CASCADE"
        ),
        sa.ForeignKeyConstraint(
            ["alert_id"], ["alerts.id"], name=op.f("fk_outbox_alert_id_alerts"), ondelete="SET NULL"
        ),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_outbox")),
        sa.UniqueConstraint("message_id", name=op.f("uq_outbox_message_id")),
    )
    op.create_index(op.f("ix_outbox_alert_id"), "outbox", ["alert_id"])
    op.create_index("ix_outbox_status_next_attempt_at", "outbox", ["status", "next_attempt_at"])
    op.create_index("ix_outbox_site_id_created_at", "outbox", ["site_id", "created_at"])

    op.create_table(
        "daily_summaries",
        sa.Column("id", sa.Integer(), autoincrement=True, nullable=False),
        sa.Column("site_id", sa.String(length=64), nullable=False),
        sa.Column("local_date", sa.Date(), nullable=False),
        sa.Column("outbox_id", sa.Integer(), nullable=True),
        sa.Column("details", sa.JSON(), nullable=True),
        sa.Column("created_at", UTC_DATETIME, nullable=False),
        sa.ForeignKeyConstraint(
            ["site_id"],
            ["sites.id"],
            name=op.f("fk_daily_summaries_site_id_sites"),
            ondelete="CASCADE",
        ),
        sa.ForeignKeyConstraint(
            ["outbox_id"],
            ["outbox.id"],
            name=op.f("fk_daily_summaries_outbox_id_outbox"),
            ondelete="SET NULL",
        ),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_daily_summaries")),
        sa.UniqueConstraint(
            "site_id", "local_date", name=op.f("uq_daily_summaries_site_id_local_date")
        ),
    )


def downgrade() -> None:
    op.drop_table("daily_summaries")
    op.drop_index("ix_outbox_site_id_created_at", table_name="outbox")
    op.drop_index("ix_outbox_status_next_attempt_at", table_name="outbox")
    op.drop_index(op.f("ix_outbox_alert_id"), table_name="outbox")
    op.drop_table("outbox")
    op.drop_index("ix_alerts_site_id_state", table_name="alerts")
    op.drop_index("uq_alerts_rule_id_open", table_name="alerts")
    op.drop_table("alerts")
    op.drop_index(op.f("ix_alert_rules_station_pk"), table_name="alert_rules")
    op.drop_index(op.f("ix_alert_rules_tank_pk"), table_name="alert_rules")
    op.drop_index(op.f("ix_alert_rules_site_id"), table_name="alert_rules")
    op.drop_table("alert_rules")
