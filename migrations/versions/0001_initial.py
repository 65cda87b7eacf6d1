"""Initial schema: sites, stations, tanks, devices, API keys and readings.

Revision ID: 0001
Revises:
Create Date: 2026-12-01
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0001"
down_revision: str | Sequence[str] | None = None
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

# Times are UTC; on SQLite the app's UtcDateTime type stores them naive.
UTC_DATETIME = sa.DateTime(timezone=True)
READING_ID = sa.BigInteger().with_variant(sa.Integer(), "sqlite")


def upgrade() -> None:
    op.create_table(
        "sites",
        sa.Column("id", sa.String(length=64), nullable=False),
        sa.Column("name", sa.String(length=200), nullable=False),
        sa.Column("timezone", sa.String(length=64), nullable=False),
        sa.Column(
            "carbonic_constants", sa.String(length=32), server_default="lueker2000", nullable=False
        ),
        sa.Column("atmospheric_xco2_ppm", sa.Float(), server_default="420", nullable=False),
        sa.Column("daily_summary_hour", sa.Integer(), server_default="7", nullable=False),
        sa.Column("created_at", UTC_DATETIME, nullable=False),
        sa.Column("updated_at", UTC_DATETIME, nullable=False),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_sites")),
    )
    op.create_table(
        "stations",
        sa.Column("pk", sa.Integer(), autoincrement=True, nullable=False),
        sa.Column("site_id", sa.String(length=64), nullable=False),
        sa.Column("id", sa.String(length=64), nullable=False),
        sa.Column("name", sa.String(length=200), nullable=False),
        sa.Column("role", sa.String(length=16), nullable=False),
        sa.Column("alkalinity", sa.JSON(), nullable=False),
        sa.Column("ph_uncertainty", sa.Float(), server_default="0.05", nullable=False),
        sa.Column("qc_limits", sa.JSON(), nullable=False),
        sa.Column("created_at", UTC_DATETIME, nullable=False),
        sa.Column("updated_at", UTC_DATETIME, nullable=False),
        sa.ForeignKeyConstraint(
            ["site_id"], ["sites.id"], name=op.f("fk_stations_site_id_sites"), ondelete="CASCADE"
        ),
        sa.PrimaryKeyConstraint("pk", name=op.f("pk_stations")),
        sa.UniqueConstraint("site_id", "id", name=op.f("uq_stations_site_id_id")),
    )
    op.create_table(
        "devices",
        sa.Column("id", sa.String(length=64), nullable=False),
        sa.Column("station_pk", sa.Integer(), nullable=False),
        sa.Column("label", sa.String(length=200), server_default="", nullable=False),
        sa.Column("created_at", UTC_DATETIME, nullable=False),
        sa.Column("revoked_at", UTC_DATETIME, nullable=True),
        sa.ForeignKeyConstraint(
            ["station_pk"], ["stations.pk"], name=op.f("fk_devices_station_pk_stations")
        ),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_devices")),
    )
    op.create_index(op.f("ix_devices_station_pk"), "devices", ["station_pk"])
    op.create_table(
        "tanks",
        sa.Column("pk", sa.Integer(), autoincrement=True, nullable=False),
        sa.Column("site_id", sa.String(length=64), nullable=False),
        sa.Column("id", sa.String(length=64), nullable=False),
        sa.Column("name", sa.String(length=200), nullable=False),
        sa.Column("source_station_pk", sa.Integer(), nullable=False),
        sa.Column("stage", sa.String(length=16), nullable=False),
        sa.Column("volume_l", sa.Float(), nullable=False),
        sa.Column("culture_temperature_c", sa.Float(), nullable=False),
        sa.Column("omega_floor", sa.Float(), server_default="1.5", nullable=False),
        sa.Column("omega_target", sa.Float(), server_default="3", nullable=False),
        sa.Column("treatment", sa.JSON(), nullable=True),
        sa.Column("created_at", UTC_DATETIME, nullable=False),
        sa.Column("updated_at", UTC_DATETIME, nullable=False),
        sa.ForeignKeyConstraint(
            ["site_id"], ["sites.id"], name=op.f("fk_tanks_site_id_sites"), ondelete="CASCADE"
        ),
        sa.ForeignKeyConstraint(
            ["source_station_pk"], ["stations.pk"], name=op.f("fk_tanks_source_station_pk_stations")
        ),
        sa.PrimaryKeyConstraint("pk", name=op.f("pk_tanks")),
        sa.UniqueConstraint("site_id", "id", name=op.f("uq_tanks_site_id_id")),
    )
    op.create_index(op.f("ix_tanks_source_station_pk"), "tanks", ["source_station_pk"])
    op.create_table(
        "api_keys",
        sa.Column("id", sa.Integer(), autoincrement=True, nullable=False),
        sa.Column("key_hash", sa.String(length=64), nullable=False),
        sa.Column("prefix", sa.String(length=8), nullable=False),
        sa.Column("role", sa.String(length=16), nullable=False),
        sa.Column("label", sa.String(length=200), server_default="", nullable=False),
        sa.Column("device_id", sa.String(length=64), nullable=True),
        sa.Column("created_at", UTC_DATETIME, nullable=False),
        sa.Column("revoked_at", UTC_DATETIME, nullable=True),
        sa.Column("last_used_at", UTC_DATETIME, nullable=True),
        sa.ForeignKeyConstraint(
            ["device_id"], ["devices.id"], name=op.f("fk_api_keys_device_id_devices")
        ),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_api_keys")),
        sa.UniqueConstraint("key_hash", name=op.f("uq_api_keys_key_hash")),
    )
    op.create_index(op.f("ix_api_keys_device_id"), "api_keys", ["device_id"])
    op.create_table(
        "readings",
        sa.Column("id", READING_ID, autoincrement=True, nullable=False),
        sa.Column("station_pk", sa.Integer(), nullable=False),
        sa.Column("source", sa.String(length=64), nullable=False),
        sa.Column("reading_id", sa.String(length=128), nullable=True),
        sa.Column("observed_at", UTC_DATETIME, nullable=False),
        sa.Column("received_at", UTC_DATETIME, nullable=False),
        sa.Column("temperature_c", sa.Float(), nullable=True),
        sa.Column("salinity", sa.Float(), nullable=True),
        sa.Column("ph", sa.Float(), nullable=True),
        sa.Column("ph_scale", sa.String(length=16), nullable=True),
        sa.Column("alkalinity_input_umol_kg", sa.Float(), nullable=True),
        sa.Column("alkalinity_used_umol_kg", sa.Float(), nullable=True),
        sa.Column("alkalinity_source", sa.String(length=16), nullable=True),
        sa.Column("ph_total", sa.Float(), nullable=True),
        sa.Column("dic_umol_kg", sa.Float(), nullable=True),
        sa.Column("pco2_uatm", sa.Float(), nullable=True),
        sa.Column("carbonate_umol_kg", sa.Float(), nullable=True),
        sa.Column("omega_aragonite", sa.Float(), nullable=True),
        sa.Column("omega_calcite", sa.Float(), nullable=True),
        sa.Column("omega_aragonite_uncertainty", sa.Float(), nullable=True),
        sa.Column("qc_temperature", sa.SmallInteger(), server_default="2", nullable=False),
        sa.Column("qc_salinity", sa.SmallInteger(), server_default="2", nullable=False),
        sa.Column("qc_ph", sa.SmallInteger(), server_default="2", nullable=False),
        sa.Column("qc_alkalinity", sa.SmallInteger(), server_default="2", nullable=False),
        sa.Column("qc_derived", sa.SmallInteger(), server_default="2", nullable=False),
        sa.Column("qc_overall", sa.SmallInteger(), server_default="2", nullable=False),
        sa.Column("chemistry_version", sa.String(length=32), nullable=True),
        sa.ForeignKeyConstraint(
            ["station_pk"],
            ["stations.pk"],
            name=op.f("fk_readings_station_pk_stations"),
            ondelete="CASCADE",
        ),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_readings")),
        sa.UniqueConstraint(
            "station_pk",
            "source",
            "observed_at",
            name=op.f("uq_readings_station_pk_source_observed_at"),
        ),
        sa.UniqueConstraint(
            "station_pk",
            "source",
            "reading_id",
            name=op.f("uq_readings_station_pk_source_reading_id"),
        ),
    )
    # Per-station time-range queries over a year of minute data walk this index.
    op.create_index("ix_readings_station_pk_observed_at", "readings", ["station_pk", "observed_at"])


def downgrade() -> None:
    op.drop_index("ix_readings_station_pk_observed_at", table_name="readings")
    op.drop_table("readings")
    op.drop_index(op.f("ix_api_keys_device_id"), table_name="api_keys")
    op.drop_table("api_keys")
    op.drop_index(op.f("ix_tanks_source_station_pk"), table_name="tanks")
    op.drop_table("tanks")
    op.drop_index(op.f("ix_devices_station_pk"), table_name="devices")
    op.drop_table("devices")
    op.drop_table("stations")
    op.drop_table("sites")
