"""Typed settings, read from ``SPATLINE_*`` environment variables (or a ``.env`` file)."""

from __future__ import annotations

from pathlib import Path
from typing import Literal

from pydantic import Field, SecretStr, model_validator
from pydantic_settings import BaseSettings, SettingsConfigDict

# Placeholder shipped in the code so that a development checkout starts without set-up.
# Anything but a development instance must be given a real secret.
PLACEHOLDER_SECRET_KEY = "development-placeholder-secret-change-me"

DEFAULT_DATABASE_URL = f"sqlite:///{Path('var') / 'spatline.db'}"


class Settings(BaseSettings):
    """Everything the service can be told from outside; nothing here connects."""

    model_config = SettingsConfigDict(
        env_prefix="SPATLINE_",
        env_file=".env",
        env_file_encoding="utf-8",
        extra="ignore",
    )

    environment: Literal["development", "test", "production"] = "development"
    database_url: str = Field(
        default=DEFAULT_DATABASE_URL,
        description="SQLAlchemy URL: sqlite:///path/to/file.db or postgresql+psycopg://...",
    )
    secret_key: SecretStr = SecretStr(PLACEHOLDER_SECRET_KEY)
    public_url: str = Field(
        default="http://127.0.0.1:8000",
        description="Base URL used for links in mail.",
    )
    smtp_host: str | None = None
    smtp_port: int = Field(default=587, ge=1, le=65535)
    smtp_username: str | None = None
    smtp_password: SecretStr | None = None
    smtp_security: Literal["none", "starttls", "tls"] = "starttls"
    smtp_from: str = "spatline@localhost"
    run_worker_in_serve: bool = True
    body_limit_bytes: int = Field(default=2 * 1024 * 1024, ge=1024)
    # Per device and per server process (app/limits.py); 0 turns the limit off.
    device_requests_per_minute: float = Field(default=600.0, ge=0.0)
    device_request_burst: int = Field(default=120, ge=1)
    sqlite_busy_timeout_s: float = Field(default=15.0, ge=0.0, le=600.0)

    @model_validator(mode="after")
    def _refuse_placeholder_secret(self) -> Settings:
        if (
            self.environment != "development"
            and self.secret_key.get_secret_value() == PLACEHOLDER_SECRET_KEY
        ):
            raise ValueError(
                "SPATLINE_SECRET_KEY is still the development placeholder; set a random secret "
                f"(for example `python -c 'import secrets; print(secrets.token_urlsafe(48))'`) "
                f"when SPATLINE_ENVIRONMENT is {self.environment!r}."
            )
        if len(self.secret_key.get_secret_value()) < 16:
            raise ValueError("SPATLINE_SECRET_KEY must be at least 16 characters long.")
        return self
