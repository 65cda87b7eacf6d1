"""The ``readings`` table: one sensor reading with the chemistry derived from it.

Derived columns are null when the reading could not be derived (for example a failed
input). Flags follow QARTOD: 1 pass, 2 not evaluated, 3 suspect, 4 fail, 9 missing.
"""

from __future__ import annotations

import datetime as dt

from sqlalchemy import (
    BigInteger,
    Float,
    ForeignKey,
    Index,
    Integer,
    SmallInteger,
    String,
    UniqueConstraint,
)
from sqlalchemy.orm import Mapped, mapped_column

from app.db import Base, UtcDateTime, utcnow

# SQLite only makes an auto-incrementing rowid alias out of a plain INTEGER primary key.
ReadingPrimaryKey = BigInteger().with_variant(Integer(), "sqlite")


class Reading(Base):
    __tablename__ = "readings"
    __table_args__ = (
        UniqueConstraint("station_pk", "source", "observed_at"),
        UniqueConstraint("station_pk", "source", "reading_id"),
        # Per-station time-range queries (charts, status, aggregation) walk this index.
        Index("ix_readings_station_pk_observed_at", "station_pk", "observed_at"),
    )

    id: Mapped[int] = mapped_column(ReadingPrimaryKey, primary_key=True, autoincrement=True)
    station_pk: Mapped[int] = mapped_column(ForeignKey("stations.pk", ondelete="CASCADE"))
    source: Mapped[str] = mapped_column(String(64))
    reading_id: Mapped[str | None] = mapped_column(String(128), nullable=True)
    observed_at: Mapped[dt.datetime] = mapped_column(UtcDateTime)
    received_at: Mapped[dt.datetime] = mapped_column(UtcDateTime, default=utcnow)

    temperature_c: Mapped[float | None] = mapped_column(Float, nullable=True)
    salinity: Mapped[float | None] = mapped_column(Float, nullable=True)
    ph: Mapped[float | None] = mapped_column(Float, nullable=True)
    ph_scale: Mapped[str | None] = mapped_column(String(16), nullable=True)
    alkalinity_input_umol_kg: Mapped[float | None] = mapped_column(Float, nullable=True)
    alkalinity_used_umol_kg: Mapped[float | None] = mapped_column(Float, nullable=True)
    alkalinity_source: Mapped[str | None] = mapped_column(String(16), nullable=True)

    ph_total: Mapped[float | None] = mapped_column(Float, nullable=True)
    dic_umol_kg: Mapped[float | None] = mapped_column(Float, nullable=True)
    pco2_uatm: Mapped[float | None] = mapped_column(Float, nullable=True)
    carbonate_umol_kg: Mapped[float | None] = mapped_column(Float, nullable=True)
    omega_aragonite: Mapped[float | None] = mapped_column(Float, nullable=True)
    omega_calcite: Mapped[float | None] = mapped_column(Float, nullable=True)
    omega_aragonite_uncertainty: Mapped[float | None] = mapped_column(Float, nullable=True)

    qc_temperature: Mapped[int] = mapped_column(SmallInteger, default=2, server_default="2")
    qc_salinity: Mapped[int] = mapped_column(SmallInteger, default=2, server_default="2")
    qc_ph: Mapped[int] = mapped_column(SmallInteger, default=2, server_default="2")
    qc_alkalinity: Mapped[int] = mapped_column(SmallInteger, default=2, server_default="2")
    qc_derived: Mapped[int] = mapped_column(SmallInteger, default=2, server_default="2")
    qc_overall: Mapped[int] = mapped_column(SmallInteger, default=2, server_default="2")
    chemistry_version: Mapped[str | None] = mapped_column(String(32), nullable=True)
