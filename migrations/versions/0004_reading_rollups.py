"""Quarter-hour rollups of each station's readings (reading_rollups), backfilled.

The daily status reads these instead of a week of readings per station; see
app/status/rollups.py for what each column holds. The backfill below is frozen SQL (the
app's aggregate may change later; this migration must keep doing what it did), and
tests/service/test_rollups.py checks that it gives what the app's own refresh gives.

Revision ID: 0004
Revises: 0003
Create Date: 2026-12-02
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0004"
down_revision: str | Sequence[str] | None = "0003"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

SUMMARISED = ("omega_aragonite", "ph_total", "pco2_uatm", "temperature_c", "salinity")
GOOD_SUMS = {
    "good_alkalinity_sum": "alkalinity_used_umol_kg",
    "good_dic_sum": "dic_umol_kg",
    "good_salinity_sum": "salinity",
}
GOOD_INPUTS = ("ph_total", "alkalinity_used_umol_kg", "temperature_c", "salinity", "dic_umol_kg")


def _columns() -> list[sa.Column]:
    columns = [
        sa.Column("station_pk", sa.Integer(), nullable=False),
        sa.Column("quarter_start", sa.BigInteger(), autoincrement=False, nullable=False),
        sa.Column("readings", sa.Integer(), nullable=False),
        sa.Column("off_minute", sa.Integer(), nullable=False),
        sa.Column("minute_mask", sa.Integer(), nullable=False),
        *(sa.Column(f"qc_{flag}", sa.Integer(), nullable=False) for flag in (1, 2, 3, 4, 9)),
    ]
    for name in SUMMARISED:
        columns += [
            sa.Column(f"{name}_n", sa.Integer(), nullable=False),
            sa.Column(f"{name}_min", sa.Float(), nullable=True),
            sa.Column(f"{name}_max", sa.Float(), nullable=True),
            sa.Column(f"{name}_sum", sa.Float(), nullable=True),
        ]
    columns.append(sa.Column("good", sa.Integer(), nullable=False))
    columns += [sa.Column(name, sa.Float(), nullable=True) for name in GOOD_SUMS]
    return columns


def _backfill_sql(dialect: str) -> str:
    if dialect == "sqlite":
        seconds = "CAST(strftime('%s', observed_at) AS INTEGER)"
        off_minute = "CAST(substr(observed_at, 18) AS FLOAT) != 0"
    else:
        seconds = "CAST(floor(extract(epoch FROM observed_at)) AS BIGINT)"
        off_minute = "extract(microseconds FROM observed_at) != 0"
    quarter = f"({seconds} - {seconds} % 900)"
    usable = "qc_overall != 4"
    good = " AND ".join([usable, *(f"{name} IS NOT NULL" for name in GOOD_INPUTS)])

    def count_if(condition: str) -> str:
        return f"CAST(coalesce(sum(CASE WHEN {condition} THEN 1 ELSE 0 END), 0) AS INTEGER)"

    values = {
        "station_pk": "station_pk",
        "quarter_start": quarter,
        "readings": "CAST(count(*) AS INTEGER)",
        "off_minute": count_if(off_minute),
        # The sum of the distinct bits is their OR.
        "minute_mask": f"CAST(sum(DISTINCT 1 << CAST(({seconds} % 900) / 60 AS INTEGER)) AS INTEGER)",
        **{f"qc_{flag}": count_if(f"qc_overall = {flag}") for flag in (1, 2, 3, 4, 9)},
    }
    for name in SUMMARISED:
        value = f"CASE WHEN {usable} THEN {name} END"
        values[f"{name}_n"] = f"CAST(count({value}) AS INTEGER)"
        values[f"{name}_min"] = f"min({value})"
        values[f"{name}_max"] = f"max({value})"
        values[f"{name}_sum"] = f"sum({value})"
    values["good"] = count_if(good)
    for column, name in GOOD_SUMS.items():
        values[column] = f"sum(CASE WHEN {good} THEN {name} END)"
    return (
        f"INSERT INTO reading_rollups ({', '.join(values)}) "
        f"SELECT {', '.join(values.values())} FROM readings GROUP BY station_pk, {quarter}"
    )


def upgrade() -> None:
    op.create_table(
        "reading_rollups",
        *_columns(),
        sa.ForeignKeyConstraint(["station_pk"], ["stations.pk"], name=op.f("fk_reading_rollups_station_pk_stations"), ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("station_pk", "quarter_start", name=op.f("pk_reading_rollups")),
    )
    op.execute(_backfill_sql(op.get_bind().dialect.name))


def downgrade() -> None:
    op.drop_table("reading_rollups")
