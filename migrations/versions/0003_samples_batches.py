"""Bottle samples analysed in a lab, and larval batches.

Revision ID: 0003
Revises: 0002
Create Date: 2026-12-01
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0003"
down_revision: str | Sequence[str] | None = "0002"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

# Times are UTC; on SQLite the app's UtcDateTime type stores them naive.
UTC_DATETIME = sa.DateTime(timezone=True)


def upgrade() -> None:
    op.create_table(
        "lab_samples",
        sa.Column("id", sa.Integer(), autoincrement=True, nullable=False),
        sa.Column("station_pk", sa.Integer(), nullable=False),
        sa.Column("collected_at", UTC_DATETIME, nullable=False),
        sa.Column("salinity", sa.Float(), nullable=False),
        sa.Column("temperature_c", sa.Float(), nullable=False),
        sa.Column("alkalinity_umol_kg", sa.Float(), nullable=True),
        sa.Column("dic_umol_kg", sa.Float(), nullable=True),
        sa.Column("ph", sa.Float(), nullable=True),
        sa.Column("ph_scale", sa.String(length=16), nullable=True),
        sa.Column("method", sa.String(length=200), nullable=True),
        sa.Column("notes", sa.Text(), nullable=True),
        sa.Column("created_at", UTC_DATETIME, nullable=False),
        sa.ForeignKeyConstraint(["station_pk"], ["stations.pk"], name=op.f("fk_lab_samples_station_pk_stations"), ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_lab_samples")),
        sa.UniqueConstraint("station_pk", "collected_at", name=op.f("uq_lab_samples_station_pk_collected_at")),
    )
    op.create_table(
        "larval_batches",
        sa.Column("pk", sa.Integer(), autoincrement=True, nullable=False),
        sa.Column("site_id", sa.String(length=64), nullable=False),
        sa.Column("id", sa.String(length=64), nullable=False),
        sa.Column("species", sa.String(length=200), nullable=False),
        sa.Column("tank_pk", sa.Integer(), nullable=False),
        sa.Column("started_at", UTC_DATETIME, nullable=False),
        sa.Column("ended_at", UTC_DATETIME, nullable=True),
        sa.Column("count_start", sa.Integer(), nullable=True),
        sa.Column("count_end", sa.Integer(), nullable=True),
        sa.Column("notes", sa.Text(), nullable=True),
        sa.Column("created_at", UTC_DATETIME, nullable=False),
        sa.Column("updated_at", UTC_DATETIME, nullable=False),
        sa.ForeignKeyConstraint(["site_id"], ["sites.id"], name=op.f("fk_larval_batches_site_id_sites"), ondelete="CASCADE"),
        sa.ForeignKeyConstraint(["tank_pk"], ["tanks.pk"], name=op.f("fk_larval_batches_tank_pk_tanks")),
        sa.PrimaryKeyConstraint("pk", name=op.f("pk_larval_batches")),
        sa.UniqueConstraint("site_id", "id", name=op.f("uq_larval_batches_site_id_id")),
    )
    op.create_index(op.f("ix_larval_batches_tank_pk"), "larval_batches", ["tank_pk"], unique=False)


def downgrade() -> None:
    op.drop_index(op.f("ix_larval_batches_tank_pk"), table_name="larval_batches")
    op.drop_table("larval_batches")
    op.drop_table("lab_samples")
