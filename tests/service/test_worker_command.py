"""``spatline worker --once`` as the real command, against its own SQLite file.

The database is a fresh file in the test's tmp dir, made by the migrations, holding a
station silent for two hours with a no-data rule, a site whose summary hour (00 UTC) has
passed, and one mail already waiting. The command is the installed console script run as a
child process with only ``SPATLINE_*`` variables for settings: without SMTP it sweeps,
writes the summary, leaves mail waiting and exits 0; with SMTP pointing at a loopback
aiosmtpd server it delivers every waiting mail once.
"""

from __future__ import annotations

import datetime as dt
import os
import secrets
import shutil
import subprocess
import sys
from pathlib import Path

import pytest
from sqlalchemy import select
from sqlalchemy.orm import Session

from app import migrate
from app.alerts.models import Alert, AlertRule, DailySummaryRecord, OutboxMessage
from app.db import make_engine
from app.settings import Settings
from app.sites import service as sites_service
from app.sites.schemas import SiteCreate, StationCreate
from tests.mailserver import MailServer

pytestmark = pytest.mark.db

RECIPIENT = "night-shift@hatchery.example"


def _command() -> list[str]:
    script = Path(sys.executable).parent / "spatline"
    if script.exists():
        return [str(script)]
    found = shutil.which("spatline")
    if found is None:
        pytest.fail("the spatline console script is not installed (pip install -e .)")
    return [found]


@pytest.fixture
def worker_database(tmp_path):
    url = f"sqlite:///{tmp_path / 'worker.db'}"
    settings = Settings(
        _env_file=None,
        environment="test",
        database_url=url,
        secret_key=secrets.token_urlsafe(32),
        smtp_host=None,
    )
    migrate.upgrade(settings, "head")
    engine = make_engine(settings)
    two_hours_ago = dt.datetime.now(dt.UTC) - dt.timedelta(hours=2)
    with Session(engine) as session:
        site = sites_service.create_site(
            session=session,
            data=SiteCreate(id="quiet-bay", name="Quiet Bay", timezone="UTC", daily_summary_hour=0),
        )
        station = sites_service.create_station(
            session=session,
            site=site,
            data=StationCreate(id="intake-north", name="Intake north", role="intake"),
        )
        session.add(
            AlertRule(
                site_id=site.id,
                station_pk=station.pk,
                metric="no_data",
                direction="above",
                level=30.0,
                clear_level=30.0,
                hold_minutes=0.0,
                recipients=[RECIPIENT],
                repeat_minutes=0.0,
                enabled=True,
                origin="operator",
                created_at=two_hours_ago,
                updated_at=two_hours_ago,
            )
        )
        session.add(
            OutboxMessage(
                site_id=site.id,
                kind="reminder",
                recipients=[RECIPIENT],
                subject="Waiting since before the worker started",
                body_text="text",
                body_html="<p>text</p>",
                message_id="<waiting.1.quiet-bay@spatline.invalid>",
                status="pending",
                attempts=0,
                next_attempt_at=two_hours_ago,
                created_at=two_hours_ago,
            )
        )
        session.commit()
    yield url, engine
    engine.dispose()


def _run_worker(url: str, cwd: Path, **extra: str) -> subprocess.CompletedProcess[str]:
    env = {k: v for k, v in os.environ.items() if not k.startswith("SPATLINE_")}
    env |= {
        "SPATLINE_DATABASE_URL": url,
        "SPATLINE_ENVIRONMENT": "test",
        "SPATLINE_SECRET_KEY": secrets.token_urlsafe(32),
    } | extra
    return subprocess.run(
        [*_command(), "worker", "--once"],
        # Not the repository: a developer's .env there must not add settings.
        cwd=cwd,
        env=env,
        capture_output=True,
        text=True,
        timeout=120,
    )


def _counts(stdout: str) -> dict[str, int]:
    last = stdout.strip().splitlines()[-1]
    return {name: int(value) for name, value in (part.split(": ") for part in last.split(", "))}


def test_worker_once_sweeps_and_keeps_mail_without_smtp_then_delivers_it(worker_database, tmp_path):
    url, engine = worker_database

    without_smtp = _run_worker(url, tmp_path)
    assert without_smtp.returncode == 0, without_smtp.stderr
    assert _counts(without_smtp.stdout) == {
        "rules_swept": 1,
        "summaries": 1,
        "sent": 0,
        "retry": 0,
        "failed": 0,
    }
    with Session(engine) as session:
        [alert] = session.scalars(select(Alert)).all()
        assert alert.state == "active"  # silent for 2 hours, level 30 minutes, no hold
        assert session.scalars(select(DailySummaryRecord)).one().site_id == "quiet-bay"
        waiting = session.scalars(select(OutboxMessage).order_by(OutboxMessage.id)).all()
        assert sorted(row.kind for row in waiting) == ["daily_summary", "raised", "reminder"]
        assert {(row.status, row.attempts) for row in waiting} == {("pending", 0)}
        message_ids = {row.message_id for row in waiting}

    server = MailServer()
    server.start()
    try:
        with_smtp = _run_worker(
            url,
            tmp_path,
            SPATLINE_SMTP_HOST="127.0.0.1",
            SPATLINE_SMTP_PORT=str(server.port),
            SPATLINE_SMTP_SECURITY="none",
            SPATLINE_SMTP_FROM="alerts@hatchery.example",
        )
        assert with_smtp.returncode == 0, with_smtp.stderr
        # The alert is already active and today's summary written: only the sending is new.
        assert _counts(with_smtp.stdout) == {
            "rules_swept": 1,
            "summaries": 0,
            "sent": 3,
            "retry": 0,
            "failed": 0,
        }
        again = _run_worker(
            url,
            tmp_path,
            SPATLINE_SMTP_HOST="127.0.0.1",
            SPATLINE_SMTP_PORT=str(server.port),
            SPATLINE_SMTP_SECURITY="none",
        )
        assert again.returncode == 0, again.stderr
        assert _counts(again.stdout)["sent"] == 0
    finally:
        server.stop()
    assert sorted(str(m["Message-ID"]) for m in server.messages) == sorted(message_ids)
    assert all(m["From"] == "alerts@hatchery.example" for m in server.messages[:3])
    with Session(engine) as session:
        rows = session.scalars(select(OutboxMessage)).all()
        assert {(row.status, row.attempts) for row in rows} == {("sent", 1)}
        assert len(session.scalars(select(Alert)).all()) == 1
