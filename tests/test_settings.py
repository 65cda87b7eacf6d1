"""Settings: SPATLINE_* variables, and the placeholder secret refused outside development."""

from __future__ import annotations

import pytest
from pydantic import ValidationError

from app.settings import PLACEHOLDER_SECRET_KEY, Settings


@pytest.fixture(autouse=True)
def _clean_environment(monkeypatch):
    import os

    for name in list(os.environ):
        if name.startswith("SPATLINE_"):
            monkeypatch.delenv(name)


@pytest.mark.parametrize("environment", ["production", "test"])
def test_placeholder_secret_is_refused_outside_development(environment):
    with pytest.raises(ValidationError, match="SPATLINE_SECRET_KEY is still the development"):
        Settings(_env_file=None, environment=environment)


def test_placeholder_secret_is_refused_from_the_environment(monkeypatch):
    monkeypatch.setenv("SPATLINE_ENVIRONMENT", "production")
    with pytest.raises(ValidationError, match="SPATLINE_SECRET_KEY"):
        Settings(_env_file=None)


def test_development_runs_with_the_placeholder():
    settings = Settings(_env_file=None)
    assert settings.environment == "development"
    assert settings.secret_key.get_secret_value() == PLACEHOLDER_SECRET_KEY


def test_a_real_secret_is_accepted_in_production(monkeypatch):
    monkeypatch.setenv("SPATLINE_ENVIRONMENT", "production")
    monkeypatch.setenv("SPATLINE_SECRET_KEY", "k" * 40)
    settings = Settings(_env_file=None)
    assert settings.environment == "production"
    # The secret is kept out of reprs (and so out of logs and tracebacks).
    assert "k" * 40 not in repr(settings)


def test_short_secret_is_refused():
    with pytest.raises(ValidationError, match="at least 16 characters"):
        Settings(_env_file=None, environment="production", secret_key="short")


def test_variables_use_the_spatline_prefix(monkeypatch):
    monkeypatch.setenv("SPATLINE_DATABASE_URL", "postgresql+psycopg://db.example/spatline")
    monkeypatch.setenv("SPATLINE_SMTP_SECURITY", "tls")
    monkeypatch.setenv("SPATLINE_RUN_WORKER_IN_SERVE", "false")
    settings = Settings(_env_file=None)
    assert settings.database_url == "postgresql+psycopg://db.example/spatline"
    assert settings.smtp_security == "tls"
    assert settings.run_worker_in_serve is False


def test_defaults():
    settings = Settings(_env_file=None)
    assert settings.database_url.startswith("sqlite:///var/")
    assert settings.public_url == "http://127.0.0.1:8000"
    assert settings.body_limit_bytes == 2 * 1024 * 1024


def test_smtp_security_choices():
    with pytest.raises(ValidationError, match="smtp_security"):
        Settings(_env_file=None, smtp_security="ssl")
