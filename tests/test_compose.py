"""Structure of docker-compose.yml and the Dockerfile (Docker itself is not run here)."""

from __future__ import annotations

import re
from pathlib import Path

import pytest
import yaml

from app.settings import Settings

ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="module")
def compose() -> dict:
    return yaml.safe_load((ROOT / "docker-compose.yml").read_text(encoding="utf-8"))


def _environment(service: dict) -> dict[str, str]:
    environment = service.get("environment", {})
    if isinstance(environment, list):
        return dict(item.split("=", 1) for item in environment)
    return {key: str(value) for key, value in environment.items()}


def test_services_are_the_app_postgresql_and_a_mail_catcher(compose: dict) -> None:
    services = compose["services"]
    assert set(services) == {"app", "db", "mail"}
    assert services["db"]["image"].startswith("postgres:16")
    assert services["app"]["build"] == "."


def test_app_serves_on_port_8000_after_the_database_is_healthy(compose: dict) -> None:
    app = compose["services"]["app"]
    assert "8000:8000" in app["ports"]
    assert app["depends_on"]["db"]["condition"] == "service_healthy"
    assert "healthcheck" in compose["services"]["db"]


def test_app_connects_to_the_compose_database_and_mail_catcher(compose: dict) -> None:
    environment = _environment(compose["services"]["app"])
    database_url = environment["SPATLINE_DATABASE_URL"]
    assert database_url.startswith("postgresql+psycopg://")
    assert "@db:5432/" in database_url
    db_environment = _environment(compose["services"]["db"])
    assert database_url.endswith("/" + db_environment["POSTGRES_DB"])
    assert environment["SPATLINE_SMTP_HOST"] == "mail"


def test_every_spatline_variable_is_a_settings_field(compose: dict) -> None:
    fields = set(Settings.model_fields)
    names = [
        name
        for service in compose["services"].values()
        for name in _environment(service)
        if name.startswith("SPATLINE_")
    ]
    assert names, "the app service sets no SPATLINE_ variables"
    unknown = [name for name in names if name.removeprefix("SPATLINE_").lower() not in fields]
    assert unknown == []


def test_compose_values_are_accepted_by_the_settings(
    compose: dict, monkeypatch: pytest.MonkeyPatch
) -> None:
    environment = _environment(compose["services"]["app"])
    for name, value in environment.items():
        # "${NAME:-default}" is compose's substitution; the settings see the default.
        substituted = re.sub(r"\$\{[A-Z_]+:-([^}]*)\}", r"\1", value)
        monkeypatch.setenv(name, substituted)
    settings = Settings(_env_file=None)
    assert settings.database_url == environment["SPATLINE_DATABASE_URL"]
    assert settings.smtp_port == int(environment["SPATLINE_SMTP_PORT"])


def test_image_migrates_before_serving_on_all_interfaces() -> None:
    dockerfile = (ROOT / "Dockerfile").read_text(encoding="utf-8")
    assert re.search(r"^FROM python:3\.11-slim$", dockerfile, re.MULTILINE)
    # A plain install of the source, with a C compiler there for the chemistry kernel only while
    # it builds (common practice for a slim image).
    assert re.search(r"&& pip install \. \\$", dockerfile, re.MULTILINE)
    assert "apt-get install -y --no-install-recommends gcc" in dockerfile
    assert "apt-get purge -y --auto-remove gcc" in dockerfile
    # The installed wheel is complete (tests/test_packaging.py): no source tree on the path.
    assert "PYTHONPATH" not in dockerfile
    command = re.search(r"^CMD (.+)$", dockerfile, re.MULTILINE)
    assert command is not None
    assert re.search(r"spatline migrate && spatline serve --host 0\.0\.0\.0", command.group(1))
