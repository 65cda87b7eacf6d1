"""Two worker processes on one PostgreSQL database raise and send every alert once.

The workers are real processes started together; each runs several sweep + summary +
send cycles against the same rules and outbox. Row locks with SKIP LOCKED, the one-open-
alert-per-rule index, outbox leases and the one-summary-per-day constraint must leave
exactly one alert per silent station and exactly one mail per notification.

This test commits (other processes cannot see the test session's transaction), so it
removes its own site at the end; the cascade takes the rules, alerts and mail with it.
"""

from __future__ import annotations

import datetime as dt
import os
import subprocess
import sys
import time
from pathlib import Path

import pytest
from sqlalchemy import delete, func, select
from sqlalchemy.orm import Session

from app.alerts.models import Alert, AlertRule, DailySummaryRecord, OutboxMessage
from app.sites import service as sites_service
from app.sites.models import Site
from app.sites.schemas import SiteCreate, StationCreate
from tests.mailserver import MailServer

pytestmark = [
    pytest.mark.postgres,
    pytest.mark.db,
    pytest.mark.skipif(
        not os.environ.get("SPATLINE_TEST_DATABASE_URL", "").startswith("postgresql"),
        reason="needs PostgreSQL: set SPATLINE_TEST_DATABASE_URL to a scratch database",
    ),
]

REPO = Path(__file__).resolve().parents[2]
SILENT_STATIONS = 12
WAITING_MAILS = 60
WORKER_SCRIPT = """
import sys, time
from app.alerts.sender import send_due
from app.cli.worker import run_cycle
from app.db import make_engine, make_sessionmaker
from app.settings import Settings

settings = Settings()
factory = make_sessionmaker(make_engine(settings))
start = float(sys.argv[1])
while time.time() < start:
    time.sleep(0.001)
for _ in range(3):
    send_due(factory=factory, settings=settings)
for _ in range(4):
    run_cycle(factory=factory, settings=settings)
"""


@pytest.fixture
def silent_site(engine):
    site_id = f"two-workers-{os.getpid()}"
    two_hours_ago = dt.datetime.now(dt.UTC) - dt.timedelta(hours=2)
    with Session(engine) as session:
        site = sites_service.create_site(
            session=session,
            data=SiteCreate(id=site_id, name="Two workers", timezone="UTC", daily_summary_hour=0),
        )
        for i in range(SILENT_STATIONS):
            station = sites_service.create_station(
                session=session,
                site=site,
                data=StationCreate(id=f"silent-{i}", name=f"Silent {i}", role="intake"),
            )
            session.add(
                AlertRule(
                    site_id=site_id,
                    station_pk=station.pk,
                    metric="no_data",
                    direction="above",
                    level=30.0,
                    clear_level=30.0,
                    hold_minutes=0.0,
                    recipients=["night-shift@hatchery.example"],
                    repeat_minutes=0.0,
                    enabled=True,
                    origin="operator",
                    created_at=two_hours_ago,
                    updated_at=two_hours_ago,
                )
            )
        # Mail already waiting when both workers start: they race for the same rows.
        for i in range(WAITING_MAILS):
            session.add(
                OutboxMessage(
                    site_id=site_id,
                    kind="reminder",
                    recipients=["night-shift@hatchery.example"],
                    subject=f"Waiting mail {i}",
                    body_text="text",
                    body_html="<p>text</p>",
                    message_id=f"<waiting.{i}.{site_id}@spatline.invalid>",
                    status="pending",
                    attempts=0,
                    next_attempt_at=two_hours_ago,
                    created_at=two_hours_ago,
                )
            )
        session.commit()
    yield site_id
    with Session(engine) as session:
        session.execute(delete(Site).where(Site.id == site_id))
        session.commit()


def test_two_workers_raise_and_send_each_alert_once(engine, settings, silent_site):
    server = MailServer()
    server.start()
    try:
        env = os.environ | {
            "SPATLINE_DATABASE_URL": settings.database_url,
            "SPATLINE_ENVIRONMENT": "development",
            "SPATLINE_SMTP_HOST": "127.0.0.1",
            "SPATLINE_SMTP_PORT": str(server.port),
            "SPATLINE_SMTP_SECURITY": "none",
            "SPATLINE_SMTP_FROM": "alerts@hatchery.example",
        }
        start = f"{time.time() + 6.0:.3f}"  # after both have imported
        workers = [
            subprocess.Popen(
                [sys.executable, "-c", WORKER_SCRIPT, start],
                cwd=REPO,
                env=env,
                stdout=subprocess.PIPE,
                stderr=subprocess.PIPE,
                text=True,
            )
            for _ in range(2)
        ]
        for worker in workers:
            _out, err = worker.communicate(timeout=120)
            assert worker.returncode == 0, err
    finally:
        server.stop()

    with Session(engine) as session:
        per_rule = session.execute(
            select(Alert.rule_id, func.count(Alert.id))
            .where(Alert.site_id == silent_site)
            .group_by(Alert.rule_id)
        ).all()
        assert len(per_rule) == SILENT_STATIONS
        assert {count for _rule, count in per_rule} == {1}
        outbox = session.scalars(
            select(OutboxMessage).where(OutboxMessage.site_id == silent_site)
        ).all()
        assert sorted(row.kind for row in outbox).count("raised") == SILENT_STATIONS
        assert [row.kind for row in outbox].count("daily_summary") == 1
        assert [row.kind for row in outbox].count("reminder") == WAITING_MAILS
        assert {row.status for row in outbox} == {"sent"}
        summaries = session.scalar(
            select(func.count(DailySummaryRecord.id)).where(
                DailySummaryRecord.site_id == silent_site
            )
        )
        assert summaries == 1
        sent_ids = [str(m["Message-ID"]).strip() for m in server.messages]
        assert len(sent_ids) == len(set(sent_ids)) == SILENT_STATIONS + 1 + WAITING_MAILS
        assert set(sent_ids) == {row.message_id for row in outbox}
