"""API keys never reach the server's log: the real uvicorn process's whole output (access
log and the app's own records) is read after requests that carry keys in the header, in a
query string, in a body field and in a revoked or unknown form."""

from __future__ import annotations

import time

import httpx

from app.logredact import REDACTED, redact


def test_redact_replaces_key_shaped_text_only():
    key = "spl_" + "A1b2_C3-d4" * 4 + "xyz"
    assert redact(f"GET /x?key={key}&b=1") == f"GET /x?key={REDACTED}&b=1"
    assert redact("the spl_ prefix alone") == "the spl_ prefix alone"
    assert redact(7) == 7


def test_keys_are_not_in_the_uvicorn_log(served):
    server, keys = served
    admin = keys["admin"]
    device = keys["device"]
    unknown = "spl_" + "Q" * 43
    base = server.base_url
    with httpx.Client(base_url=base, timeout=10) as http:
        assert http.get("/api/v1/sites", headers={"Authorization": f"Bearer {admin}"}).is_success
        # Keys where they do not belong: the query string is in every access-log line.
        assert http.get(f"/api/v1/sites?key={admin}").status_code == 401
        assert http.get(f"/no-such-page?token={device}").status_code == 404
        assert (
            http.get("/api/v1/sites", headers={"Authorization": f"Bearer {unknown}"}).status_code
            == 401
        )
        # A key pasted into a body field is echoed to the caller, never to the log.
        refused = http.post(
            "/api/v1/sites",
            json={"id": device, "name": admin, "timezone": "UTC"},
            headers={"Authorization": f"Bearer {admin}"},
        )
        assert refused.status_code == 422
        posted = http.post(
            "/api/v1/readings",
            json={"observed_at": "2026-03-01T08:00:00Z", "ph": 7.9, "ph_scale": "total"},
            headers={"Authorization": f"Bearer {device}"},
        )
        assert posted.status_code == 200, posted.text
    time.sleep(0.5)  # let the server flush its last access-log lines
    log = server.log_text()
    # The log saw these requests (so an absent key means it was never written) ...
    assert "GET /api/v1/sites?key=" in log
    assert "POST /api/v1/readings" in log
    assert REDACTED in log
    # ... and no key, nor any 12-character piece of one.
    for secret in (admin, device, unknown):
        assert secret not in log
        assert secret[4:16] not in log
