"""The manager's pages in a real browser: sign in, tank table against the API, acknowledge.

Drives the system Chromium through Playwright's ``executable_path`` (Playwright never
downloads a browser here). The app is served by uvicorn on a free loopback port against
its own SQLite database in pytest's tmp dir, filled through the public API.

Without a Chromium the test skips with the reason, except in CI (``CI=true``), where a
missing browser is a failure: ``.ci/run`` installs Debian's ``chromium``.
"""

from __future__ import annotations

import datetime as dt
import os
import secrets
import shutil
import socket
import threading
import time
from collections.abc import Iterator
from pathlib import Path

import httpx
import pytest

CHROMIUM_CANDIDATES = ("/usr/bin/chromium", "/usr/bin/chromium-browser")
CHROMIUM_ARGS = [
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
]


def _missing(reason: str) -> None:
    if os.environ.get("CI") == "true":
        pytest.fail(f"{reason}; CI must run the browser test (.ci/run installs chromium)")
    pytest.skip(reason)


def _chromium() -> str:
    for candidate in (*CHROMIUM_CANDIDATES, shutil.which("chromium") or ""):
        if candidate and Path(candidate).is_file() and os.access(candidate, os.X_OK):
            return candidate
    _missing("no system Chromium found (looked for /usr/bin/chromium); "
             "install Debian's chromium package to run the browser test")
    raise AssertionError("unreachable")


def _free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as sock:
        sock.bind(("127.0.0.1", 0))
        return sock.getsockname()[1]


@pytest.fixture
def served_app(tmp_path: Path) -> Iterator[tuple[str, str, str]]:
    """Serve a fresh app; yield (base URL, admin key, viewer key)."""
    import uvicorn
    from sqlalchemy.orm import Session

    from app import migrate
    from app.auth.keys import create_key
    from app.db import make_engine
    from app.main import create_app
    from app.settings import Settings

    settings = Settings(
        _env_file=None,
        environment="test",
        database_url=f"sqlite:///{tmp_path / 'browser.db'}",
        secret_key=secrets.token_urlsafe(32),
        smtp_host=None,
        run_worker_in_serve=False,
    )
    migrate.upgrade(settings, "head")
    engine = make_engine(settings)
    with Session(engine) as session:
        _, admin_key = create_key(session=session, role="admin", label="browser admin")
        _, viewer_key = create_key(session=session, role="viewer", label="browser viewer")
        session.commit()
    engine.dispose()

    port = _free_port()
    config = uvicorn.Config(create_app(settings), host="127.0.0.1", port=port,
                            log_level="warning", ws="none", lifespan="on")
    server = uvicorn.Server(config)
    thread = threading.Thread(target=server.run, daemon=True)
    thread.start()
    deadline = time.monotonic() + 20
    while not server.started:
        if time.monotonic() > deadline or not thread.is_alive():
            raise RuntimeError("uvicorn did not start")
        time.sleep(0.05)
    try:
        yield f"http://127.0.0.1:{port}", admin_key, viewer_key
    finally:
        server.should_exit = True
        thread.join(timeout=10)


def _fill(base: str, admin_key: str) -> dict[str, str]:
    """An invented site with an intake feeding one larval tank, and an hour of acid water.

    Readings every 5 minutes for the past hour at pH 7.55 (total scale, 11 degC) carry
    tank omega at 25 degC below its 1.5 floor for longer than the default 15-minute hold,
    so the tank's default rule raises an alert on ingest.
    """
    admin = {"Authorization": f"Bearer {admin_key}"}
    with httpx.Client(base_url=base, timeout=30) as http:
        def post(path: str, body: dict) -> dict:
            response = http.post(path, json=body, headers=admin)
            assert response.status_code in (200, 201), response.text
            return response.json()

        post("/api/v1/sites", {"id": "cove", "name": "Test Cove Hatchery",
                               "timezone": "Etc/GMT+8"})
        post("/api/v1/sites/cove/stations", {"id": "intake", "name": "Intake",
                                             "role": "intake",
                                             "alkalinity": {"mode": "fixed", "value": 2050}})
        post("/api/v1/sites/cove/tanks", {"id": "larvae-1", "name": "Larval tank 1",
                                          "source_station_id": "intake", "stage": "larvae",
                                          "volume_l": 4000, "culture_temperature_c": 25})
        device = post("/api/v1/sites/cove/stations/intake/devices", {"label": "probe"})
        now = dt.datetime.now(dt.UTC).replace(second=0, microsecond=0)
        readings = [
            {"observed_at": (now - dt.timedelta(minutes=5 * k)).isoformat(),
             "temperature_c": 11.0, "salinity": 30.5, "ph": 7.55, "ph_scale": "total"}
            for k in range(12, -1, -1)
        ]
        response = http.post("/api/v1/readings", json={"readings": readings},
                             headers={"Authorization": f"Bearer {device['key']}"})
        assert response.status_code == 200, response.text
        assert response.json()["accepted"] == len(readings)
    return {"site": "cove", "tank": "larvae-1"}


def test_sign_in_tank_table_and_acknowledge(served_app, tmp_path: Path):
    executable = _chromium()
    try:
        from playwright.sync_api import sync_playwright
    except ImportError:  # pragma: no cover - the dev extra installs it
        _missing("the playwright package is not installed (pip install -e '.[dev]')")
    base, admin_key, viewer_key = served_app
    ids = _fill(base, admin_key)
    viewer = {"Authorization": f"Bearer {viewer_key}"}
    status = httpx.get(f"{base}/api/v1/sites/{ids['site']}/status", headers=viewer,
                       timeout=30).json()
    tank = next(t for t in status["tanks"] if t["tank_id"] == ids["tank"])
    alerts = httpx.get(f"{base}/api/v1/sites/{ids['site']}/alerts", params={"state": "active"},
                       headers=viewer, timeout=30).json()
    assert alerts, "the hour of acid water should have raised the tank's alert"

    with sync_playwright() as playwright:
        browser = playwright.chromium.launch(executable_path=executable, args=CHROMIUM_ARGS)
        try:
            page = browser.new_page(viewport={"width": 420, "height": 900})
            page.goto(f"{base}/")
            assert "/sign-in" in page.url
            page.fill("#key", viewer_key)
            page.click("button[type=submit]")
            page.wait_for_url(f"{base}/sites/{ids['site']}")
            assert "Caution." in page.inner_text(".caution")

            row = page.locator(f"tr[data-tank-id='{ids['tank']}']")
            shown = float(row.locator("td.omega").get_attribute("data-omega"))
            assert shown == pytest.approx(tank["predicted"]["omega_aragonite"], rel=1e-9)
            assert f"{tank['predicted']['omega_aragonite']:.2f}" in row.locator(
                "td.omega").inner_text()
            assert row.locator("td.floor").inner_text() == f"{tank['omega_floor']:.2f}"
            assert row.locator("td.alert-state").inner_text().strip() == "active"
            if tank["dose"] and not tank["dose"].get("total_refused"):
                assert f"{tank['dose']['total_mg_per_l']:.1f} mg/L" in row.locator(
                    "td.dose").inner_text()

            alert_id = alerts[0]["id"]
            page.click(f"li[data-alert-id='{alert_id}'] button")
            page.wait_for_url(f"{base}/sites/{ids['site']}#alerts")
            assert "acknowledged" in page.locator(
                f"li[data-alert-id='{alert_id}']").inner_text()
            page.screenshot(path=str(tmp_path / "site-overview.png"), full_page=True)
        finally:
            browser.close()

    acknowledged = httpx.get(f"{base}/api/v1/sites/{ids['site']}/alerts",
                             params={"state": "acknowledged"}, headers=viewer, timeout=30).json()
    assert [a["id"] for a in acknowledged] == [alert_id]
    assert "browser viewer" in acknowledged[0]["acknowledged_by"]
    assert (tmp_path / "site-overview.png").stat().st_size > 10_000
