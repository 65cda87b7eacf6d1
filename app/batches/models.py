"""The ``larval_batches`` table: one cohort of larvae raised in one tank."""

from __future__ import annotations

import datetime as dt

from sqlalchemy import ForeignKey, Integer, String, Text, UniqueConstraint
from sqlalchemy.orm import Mapped, mapped_column, relationship

from app.db import Base, UtcDateTime, utcnow
from app.sites.models import SLUG_LENGTH, Tank


class LarvalBatch(Base):
    __tablename__ = "larval_batches"
    __table_args__ = (UniqueConstraint("site_id", "id"),)

    pk: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    site_id: Mapped[str] = mapped_column(ForeignKey("sites.id", ondelete="CASCADE"))
    id: Mapped[str] = mapped_column(String(SLUG_LENGTH))
    species: Mapped[str] = mapped_column(String(200))
    tank_pk: Mapped[int] = mapped_column(ForeignKey("tanks.pk"), index=True)
    # Spawning or stocking.
    started_at: Mapped[dt.datetime] = mapped_column(UtcDateTime)
    ended_at: Mapped[dt.datetime | None] = mapped_column(UtcDateTime, nullable=True)
    count_start: Mapped[int | None] = mapped_column(Integer, nullable=True)
    count_end: Mapped[int | None] = mapped_column(Integer, nullable=True)
    notes: Mapped[str | None] = mapped_column(Text, nullable=True)
    created_at: Mapped[dt.datetime] = mapped_column(UtcDateTime, default=utcnow)
    updated_at: Mapped[dt.datetime] = mapped_column(UtcDateTime, default=utcnow, onupdate=utcnow)

    tank: Mapped[Tank] = relationship(lazy="joined", innerjoin=True)
