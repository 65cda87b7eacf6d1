"""An index on reading_rollups covering what the status reads of a week of quarters.

The minute masks of every station and the fill-window sums of the intake come from the
index alone instead of each quarter's wide row.

Revision ID: 0005
Revises: 0004
Create Date: 2026-12-02
"""

from __future__ import annotations

from collections.abc import Sequence

from alembic import op

revision: str = "0005"
down_revision: str | Sequence[str] | None = "0004"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

COLUMNS = (
    "station_pk",
    "quarter_start",
    "off_minute",
    "minute_mask",
    "good",
    "good_alkalinity_sum",
    "good_dic_sum",
    "good_salinity_sum",
)


def upgrade() -> None:
    op.create_index("ix_reading_rollups_week", "reading_rollups", list(COLUMNS))


def downgrade() -> None:
    op.drop_index("ix_reading_rollups_week", table_name="reading_rollups")
