"""Every alert mail and every dose answer carries the safety caution.

Project rule (and README "Caution"): the advice supports and does not replace the operator's
judgement; dissolve into a stock and dose in a mixed header tank; measure; follow the safety
data sheet and local rules. This test walks the outputs a person reads, on the demo hatchery
loaded into a scratch SQLite database (its upwelling raises and clears alerts, its tanks get
dose advice): alert mail (stored text and HTML, and the MIME message the sender builds),
the daily summary mail, the tank advice and status JSON, the web page, and the CLI's
carbonate answer with a dose (table and JSON).
"""

from __future__ import annotations

import datetime as dt
import html
import json
from zoneinfo import ZoneInfo

import pytest

import chemistry

pytestmark = pytest.mark.db

CAUTION = chemistry.DOSING_CAUTION


def _has_caution(text: str) -> bool:
    # HTML escapes the apostrophes; mail and pages may wrap lines.
    return " ".join(CAUTION.split()) in " ".join(html.unescape(text).split())


def test_every_alert_mail_and_dose_answer_carries_the_caution(
    tmp_path, monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]
) -> None:
    import httpx
    from anyio.from_thread import start_blocking_portal
    from sqlalchemy import select

    from app import migrate
    from app.alerts.models import OutboxMessage
    from app.alerts.sender import build_email
    from app.alerts.summary import write_daily_summaries
    from app.cli import demo as demo_command
    from app.cli import main
    from app.db import make_engine, make_sessionmaker
    from app.main import create_app
    from app.settings import Settings
    from demo import scenario
    from tests.conftest import BASE_URL, _PortalASGITransport

    monkeypatch.setenv("SPATLINE_DATABASE_URL", f"sqlite:///{tmp_path / 'caution.db'}")
    monkeypatch.setenv("SPATLINE_ENVIRONMENT", "development")
    monkeypatch.delenv("SPATLINE_SECRET_KEY", raising=False)
    settings = Settings(_env_file=None, run_worker_in_serve=False)
    migrate.upgrade(settings)
    printed = demo_command.load_demo(settings=settings)
    viewer_key = next(
        line.split(":", 1)[1].strip() for line in printed if "viewer key" in line
    )
    site_id = scenario.SITE["id"]

    engine = make_engine(settings)
    try:
        with make_sessionmaker(engine)() as session:
            zone = ZoneInfo(scenario.SITE["timezone"])
            local_now = dt.datetime.now(zone)
            if local_now.hour < 8:  # the summary hour has not come yet today
                local_now = (local_now - dt.timedelta(days=1)).replace(hour=23)
            assert write_daily_summaries(session=session, now=local_now) == 1
            session.commit()
            outbox = session.scalars(select(OutboxMessage).order_by(OutboxMessage.id)).all()
            kinds = {row.kind for row in outbox}
            assert {"raised", "cleared", "daily_summary"} <= kinds, kinds
            for row in outbox:
                assert _has_caution(row.body_text), (row.kind, row.subject)
                assert _has_caution(row.body_html), (row.kind, row.subject)
                message = build_email(row, settings, date=dt.datetime.now(dt.UTC))
                parts = [part.get_content() for part in message.iter_parts()]
                assert len(parts) == 2
                assert all(_has_caution(part) for part in parts), row.subject

        viewer = {"Authorization": f"Bearer {viewer_key}"}
        app = create_app(settings, engine=engine)
        with (
            start_blocking_portal() as portal,
            httpx.Client(
                transport=_PortalASGITransport(app, portal), base_url=BASE_URL
            ) as client,
        ):
            doses_seen = 0
            for tank in scenario.TANKS:
                advice = client.get(
                    f"/api/v1/sites/{site_id}/tanks/{tank['id']}/advice", headers=viewer
                ).json()
                assert _has_caution(advice["caution"]), tank["id"]
                dose = advice.get("dose")
                if dose:
                    doses_seen += 1
                    assert _has_caution(dose["caution"]), tank["id"]
            assert doses_seen >= 1

            status = client.get(f"/api/v1/sites/{site_id}/status", headers=viewer).json()
            assert _has_caution(status["caution"])
            status_doses = [tank["dose"] for tank in status["tanks"] if tank["dose"]]
            assert status_doses
            assert all(_has_caution(dose["caution"]) for dose in status_doses)
            assert all(_has_caution(alert["caution"]) for alert in status["open_alerts"])

            client.post("/sign-in", data={"key": viewer_key}, follow_redirects=False)
            yesterday = dt.datetime.now(ZoneInfo(scenario.SITE["timezone"])).date() - (
                dt.timedelta(days=1)
            )
            for path in ("/", f"/sites/{site_id}", f"/sites/{site_id}/days/{yesterday}"):
                page = client.get(path, follow_redirects=True)
                assert page.status_code == 200, (path, page.status_code)
                assert _has_caution(page.text), path
    finally:
        engine.dispose()

    capsys.readouterr()
    carbonate = [
        "carbonate", "--temperature", "12", "--salinity", "31", "--ph", "7.6",
        "--ph-scale", "nbs", "--alkalinity", "2150", "--tank-temperature", "24",
        "--dose", "sodium_carbonate:10", "--target-omega", "2.5",
    ]
    assert main(carbonate) == 0
    assert _has_caution(capsys.readouterr().out)
    assert main([*carbonate, "--json"]) == 0
    assert _has_caution(json.loads(capsys.readouterr().out)["caution"])
