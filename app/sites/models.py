"""Sites, stations, tanks and devices.

Rows carry internal integer keys; the API shows the slugs (``id``), unique within a site.
"""

from __future__ import annotations

import datetime as dt
from typing import Any

from sqlalchemy import JSON, Float, ForeignKey, Integer, String, UniqueConstraint
from sqlalchemy.orm import Mapped, mapped_column, relationship

from app.db import Base, UtcDateTime, utcnow

SLUG_LENGTH = 64


class Site(Base):
    __tablename__ = "sites"

    id: Mapped[str] = mapped_column(String(SLUG_LENGTH), primary_key=True)
    name: Mapped[str] = mapped_column(String(200))
    timezone: Mapped[str] = mapped_column(String(64))
    carbonic_constants: Mapped[str] = mapped_column(
        String(32), default="lueker2000", server_default="lueker2000"
    )
    atmospheric_xco2_ppm: Mapped[float] = mapped_column(Float, default=420.0, server_default="420")
    daily_summary_hour: Mapped[int] = mapped_column(Integer, default=7, server_default="7")
    created_at: Mapped[dt.datetime] = mapped_column(UtcDateTime, default=utcnow)
    updated_at: Mapped[dt.datetime] = mapped_column(UtcDateTime, default=utcnow, onupdate=utcnow)


class Station(Base):
    __tablename__ = "stations"
    # The unique (site_id, id) index also serves "stations of a site".
    __table_args__ = (UniqueConstraint("site_id", "id"),)

    pk: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    site_id: Mapped[str] = mapped_column(ForeignKey("sites.id", ondelete="CASCADE"))
    id: Mapped[str] = mapped_column(String(SLUG_LENGTH))
    name: Mapped[str] = mapped_column(String(200))
    role: Mapped[str] = mapped_column(String(16))
    alkalinity: Mapped[dict[str, Any]] = mapped_column(JSON)
    ph_uncertainty: Mapped[float] = mapped_column(Float, default=0.05, server_default="0.05")
    qc_limits: Mapped[dict[str, Any]] = mapped_column(JSON)
    created_at: Mapped[dt.datetime] = mapped_column(UtcDateTime, default=utcnow)
    updated_at: Mapped[dt.datetime] = mapped_column(UtcDateTime, default=utcnow, onupdate=utcnow)


class Tank(Base):
    __tablename__ = "tanks"
    __table_args__ = (UniqueConstraint("site_id", "id"),)

    pk: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    site_id: Mapped[str] = mapped_column(ForeignKey("sites.id", ondelete="CASCADE"))
    id: Mapped[str] = mapped_column(String(SLUG_LENGTH))
    name: Mapped[str] = mapped_column(String(200))
    source_station_pk: Mapped[int] = mapped_column(ForeignKey("stations.pk"), index=True)
    stage: Mapped[str] = mapped_column(String(16))
    volume_l: Mapped[float] = mapped_column(Float)
    culture_temperature_c: Mapped[float] = mapped_column(Float)
    omega_floor: Mapped[float] = mapped_column(Float, default=1.5, server_default="1.5")
    omega_target: Mapped[float] = mapped_column(Float, default=3.0, server_default="3")
    treatment: Mapped[dict[str, Any] | None] = mapped_column(JSON, nullable=True)
    created_at: Mapped[dt.datetime] = mapped_column(UtcDateTime, default=utcnow)
    updated_at: Mapped[dt.datetime] = mapped_column(UtcDateTime, default=utcnow, onupdate=utcnow)

    # Joined so that showing a tank (with its source station's slug) is one query.
    source_station: Mapped[Station] = relationship(lazy="joined", innerjoin=True)


class Device(Base):
    __tablename__ = "devices"

    id: Mapped[str] = mapped_column(String(SLUG_LENGTH), primary_key=True)
    station_pk: Mapped[int] = mapped_column(ForeignKey("stations.pk"), index=True)
    label: Mapped[str] = mapped_column(String(200), default="", server_default="")
    created_at: Mapped[dt.datetime] = mapped_column(UtcDateTime, default=utcnow)
    revoked_at: Mapped[dt.datetime | None] = mapped_column(UtcDateTime, nullable=True)
