"""API keys: only the SHA-256 of each key is stored."""

from __future__ import annotations

import datetime as dt

from sqlalchemy import ForeignKey, Integer, String
from sqlalchemy.orm import Mapped, mapped_column

from app.db import Base, UtcDateTime, utcnow


class ApiKey(Base):
    __tablename__ = "api_keys"

    id: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    key_hash: Mapped[str] = mapped_column(String(64), unique=True)
    prefix: Mapped[str] = mapped_column(String(8))
    role: Mapped[str] = mapped_column(String(16))
    label: Mapped[str] = mapped_column(String(200), default="", server_default="")
    device_id: Mapped[str | None] = mapped_column(
        ForeignKey("devices.id"), nullable=True, index=True
    )
    created_at: Mapped[dt.datetime] = mapped_column(UtcDateTime, default=utcnow)
    revoked_at: Mapped[dt.datetime | None] = mapped_column(UtcDateTime, nullable=True)
    last_used_at: Mapped[dt.datetime | None] = mapped_column(UtcDateTime, nullable=True)
