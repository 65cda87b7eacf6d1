"""The ``lab_samples`` table: one bottle sample taken at a station and analysed in a lab."""

from __future__ import annotations

import datetime as dt

from sqlalchemy import Float, ForeignKey, Integer, String, Text, UniqueConstraint
from sqlalchemy.orm import Mapped, mapped_column

from app.db import Base, UtcDateTime, utcnow


class LabSample(Base):
    __tablename__ = "lab_samples"
    __table_args__ = (
        # One sample per station and collection time: a retried POST is refused, not doubled.
        # The constraint's index also serves "samples of a station in time order".
        UniqueConstraint("station_pk", "collected_at"),
    )

    id: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    station_pk: Mapped[int] = mapped_column(ForeignKey("stations.pk", ondelete="CASCADE"))
    collected_at: Mapped[dt.datetime] = mapped_column(UtcDateTime)
    salinity: Mapped[float] = mapped_column(Float)
    # The temperature at which the sample's pH was measured (the water's at collection when
    # no pH was measured); the sample's chemistry is carried from it to the sensor's.
    temperature_c: Mapped[float] = mapped_column(Float)
    alkalinity_umol_kg: Mapped[float | None] = mapped_column(Float, nullable=True)
    dic_umol_kg: Mapped[float | None] = mapped_column(Float, nullable=True)
    ph: Mapped[float | None] = mapped_column(Float, nullable=True)
    ph_scale: Mapped[str | None] = mapped_column(String(16), nullable=True)
    method: Mapped[str | None] = mapped_column(String(200), nullable=True)
    notes: Mapped[str | None] = mapped_column(Text, nullable=True)
    created_at: Mapped[dt.datetime] = mapped_column(UtcDateTime, default=utcnow)
