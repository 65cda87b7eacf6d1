"""Every endpoint of the app, called with every kind of key, by walking the app's routes.

``POLICY`` says who may call each route. A route the walk finds that is not in the table
fails the test, so a new endpoint cannot ship without an auth rule; a table entry with no
route fails too, so the table cannot go stale. The calls are real requests: no key,
a malformed key, a revoked key (401), a role that may not (403), a role that may (anything
but 401 and 403; a 404 or 422 is fine, the request got past auth).
"""

from __future__ import annotations

import pytest
from fastapi.routing import APIRoute, iter_route_contexts

from app.auth.keys import create_key, revoke_key
from app.main import create_app

pytestmark = pytest.mark.db

ADMIN = frozenset({"admin"})
READERS = frozenset({"admin", "viewer"})
ANY_KEY = frozenset({"admin", "viewer", "device"})
DEVICE = frozenset({"device"})
PUBLIC = "public"  # no key needed
WEB = "web"  # the browser pages: a signed-in session cookie, never a bearer key

POLICY: dict[tuple[str, str], frozenset[str] | str] = {
    ("GET", "/healthz"): PUBLIC,
    ("POST", "/api/v1/sites"): ADMIN,
    ("GET", "/api/v1/sites"): READERS,
    ("GET", "/api/v1/sites/{site_id}"): READERS,
    ("PATCH", "/api/v1/sites/{site_id}"): ADMIN,
    ("POST", "/api/v1/sites/{site_id}/stations"): ADMIN,
    ("GET", "/api/v1/sites/{site_id}/stations"): READERS,
    ("GET", "/api/v1/sites/{site_id}/stations/{station_id}"): READERS,
    ("PATCH", "/api/v1/sites/{site_id}/stations/{station_id}"): ADMIN,
    ("POST", "/api/v1/sites/{site_id}/tanks"): ADMIN,
    ("GET", "/api/v1/sites/{site_id}/tanks"): READERS,
    ("GET", "/api/v1/sites/{site_id}/tanks/{tank_id}"): READERS,
    ("PATCH", "/api/v1/sites/{site_id}/tanks/{tank_id}"): ADMIN,
    ("POST", "/api/v1/sites/{site_id}/stations/{station_id}/devices"): ADMIN,
    ("DELETE", "/api/v1/sites/{site_id}/stations/{station_id}/devices/{device_id}"): ADMIN,
    ("POST", "/api/v1/readings"): DEVICE,
    ("GET", "/api/v1/sites/{site_id}/stations/{station_id}/readings"): READERS,
    ("POST", "/api/v1/chemistry/solve"): ANY_KEY,
    ("GET", "/api/v1/sites/{site_id}/tanks/{tank_id}/advice"): READERS,
    ("POST", "/api/v1/sites/{site_id}/alert-rules"): ADMIN,
    ("GET", "/api/v1/sites/{site_id}/alert-rules"): READERS,
    ("PATCH", "/api/v1/sites/{site_id}/alert-rules/{rule_id}"): ADMIN,
    ("DELETE", "/api/v1/sites/{site_id}/alert-rules/{rule_id}"): ADMIN,
    ("GET", "/api/v1/sites/{site_id}/alerts"): READERS,
    ("POST", "/api/v1/alerts/{alert_id}/acknowledge"): READERS,
    ("GET", "/api/v1/sites/{site_id}/notifications"): READERS,
    ("POST", "/api/v1/notifications/{notification_id}/resend"): ADMIN,
    ("GET", "/api/v1/sites/{site_id}/status"): READERS,
    ("POST", "/api/v1/sites/{site_id}/stations/{station_id}/lab-samples"): ADMIN,
    ("GET", "/api/v1/sites/{site_id}/stations/{station_id}/lab-samples"): READERS,
    ("GET", "/api/v1/sites/{site_id}/stations/{station_id}/alkalinity-line"): READERS,
    ("POST", "/api/v1/sites/{site_id}/stations/{station_id}/alkalinity-line/apply"): ADMIN,
    ("GET", "/api/v1/sites/{site_id}/stations/{station_id}/ph-check"): READERS,
    ("POST", "/api/v1/sites/{site_id}/batches"): ADMIN,
    ("GET", "/api/v1/sites/{site_id}/batches"): READERS,
    ("GET", "/api/v1/sites/{site_id}/batches/{batch_id}/exposure"): READERS,
    ("GET", "/sign-in"): PUBLIC,
    ("POST", "/sign-in"): PUBLIC,
    ("POST", "/sign-out"): PUBLIC,
    ("GET", "/"): WEB,
    ("GET", "/sites/{site_id}"): WEB,
    ("GET", "/sites/{site_id}/days/{day}"): WEB,
    ("POST", "/sites/{site_id}/alerts/{alert_id}/acknowledge"): WEB,
    ("GET", "/sites/{site_id}/stations/{station_id}/chart.svg"): WEB,
    ("GET", "/sites/{site_id}/stations/{station_id}/samples/new"): WEB,
    ("POST", "/sites/{site_id}/stations/{station_id}/samples/new"): WEB,
}

# The framework's own documentation routes; they show the schema, not data.
DOCS = {"/openapi.json", "/docs", "/docs/oauth2-redirect", "/redoc"}

CALLERS = ("no key", "malformed key", "unknown key", "revoked key", "device", "viewer", "admin")


def app_routes() -> set[tuple[str, str]]:
    from app.settings import Settings

    app = create_app(Settings(_env_file=None))
    found = set()
    for context in iter_route_contexts(app.routes):
        if not isinstance(context.route, APIRoute):
            continue
        for method in context.methods or ():
            if method != "HEAD":
                found.add((method, context.path))
    return found


ROUTES = sorted(app_routes())


def test_every_route_has_an_auth_rule_and_every_rule_a_route():
    assert ROUTES, "the walk found no routes"
    missing = [route for route in ROUTES if route not in POLICY]
    assert not missing, f"routes without an auth rule in POLICY: {missing}"
    stale = [route for route in POLICY if route not in ROUTES]
    assert not stale, f"auth rules for routes that do not exist: {stale}"
    assert not DOCS & {path for _, path in ROUTES}


@pytest.fixture
def layout(session, make_site, make_station, make_tank, make_device, admin_key, viewer_key):
    site = make_site(id="cove")
    station = make_station(site=site, id="intake", alkalinity={"mode": "fixed", "value": 2150.0})
    make_tank(site=site, station=station, id="larvae-1")
    _device, device_key = make_device(station=station)
    other_device, _ = make_device(station=station)
    revoked, revoked_key = create_key(session=session, role="admin", label="old admin")
    revoke_key(session=session, key_id=revoked.id)
    session.commit()
    from app.alerts.models import AlertRule

    rule_id = session.query(AlertRule.id).filter(AlertRule.site_id == "cove").limit(1).scalar()
    return {
        "keys": {
            "malformed key": "not-a-key",
            "unknown key": "spl_" + "x" * 43,
            "revoked key": revoked_key,
            "device": device_key,
            "viewer": viewer_key,
            "admin": admin_key,
        },
        "path": {
            "site_id": "cove",
            "station_id": "intake",
            "tank_id": "larvae-1",
            "device_id": other_device.id,
            "rule_id": rule_id if rule_id is not None else 999999,
            "alert_id": 999999,
            "notification_id": 999999,
            "batch_id": "no-such-batch",
            "day": "2026-03-01",
        },
    }


@pytest.mark.parametrize("caller", CALLERS)
@pytest.mark.parametrize(("method", "path"), ROUTES, ids=[f"{m} {p}" for m, p in ROUTES])
def test_route_by_caller(client, layout, method, path, caller):
    rule = POLICY[(method, path)]
    key = layout["keys"].get(caller)
    headers = {} if key is None else {"Authorization": f"Bearer {key}"}
    url = path.format(**layout["path"])
    if rule == WEB and method == "POST":
        # A form post with a forged form token: no session cookie behind it.
        response = client.post(
            url,
            data={"form_token": "forged", "key": "x"},
            headers=headers,
            follow_redirects=False,
        )
    else:
        body = {} if method in ("POST", "PATCH") else None
        response = client.request(method, url, json=body, headers=headers, follow_redirects=False)
    if rule == PUBLIC:
        assert response.status_code not in (401, 403), response.text[:300]
    elif rule == WEB:
        # A bearer key opens no page: without the signed-in cookie it is the sign-in page.
        assert response.status_code in (303, 401, 403), response.text[:300]
        if response.status_code == 303:
            assert response.headers["location"] == "/sign-in"
        assert "larvae-1" not in response.text
    elif key is None or caller in ("malformed key", "unknown key", "revoked key"):
        assert response.status_code == 401, response.text[:300]
        assert response.headers["WWW-Authenticate"] == "Bearer"
    elif caller in rule:
        assert response.status_code not in (401, 403), response.text[:300]
    else:
        assert response.status_code == 403, response.text[:300]
        assert caller in response.json()["detail"] or "device" in response.json()["detail"]
