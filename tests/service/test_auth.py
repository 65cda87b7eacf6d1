"""API keys and roles: the auth matrix over every endpoint of the sites API, revocation,
hash-only storage, and keys never reaching the logs."""

from __future__ import annotations

import hashlib
import logging

import pytest
from sqlalchemy import select

from app.auth.keys import create_key, revoke_key
from app.auth.models import ApiKey

pytestmark = pytest.mark.db

API = "/api/v1"

ADMIN_ONLY = "admin"
READERS = "readers"

# (method, path, json body, who may call it). Paths use the `layout` fixture's ids.
ENDPOINTS = [
    ("POST", "/sites", {"id": "new-site", "name": "N", "timezone": "UTC"}, ADMIN_ONLY),
    ("GET", "/sites", None, READERS),
    ("GET", "/sites/cove", None, READERS),
    ("PATCH", "/sites/cove", {"name": "Renamed"}, ADMIN_ONLY),
    ("POST", "/sites/cove/stations", {"id": "s2", "name": "S2", "role": "treated"}, ADMIN_ONLY),
    ("GET", "/sites/cove/stations", None, READERS),
    ("GET", "/sites/cove/stations/intake", None, READERS),
    ("PATCH", "/sites/cove/stations/intake", {"ph_uncertainty": 0.02}, ADMIN_ONLY),
    (
        "POST",
        "/sites/cove/tanks",
        {
            "id": "t2",
            "name": "T2",
            "source_station_id": "intake",
            "stage": "nursery",
            "volume_l": 500,
            "culture_temperature_c": 20,
        },
        ADMIN_ONLY,
    ),
    ("GET", "/sites/cove/tanks", None, READERS),
    ("GET", "/sites/cove/tanks/larvae-1", None, READERS),
    ("PATCH", "/sites/cove/tanks/larvae-1", {"volume_l": 2500}, ADMIN_ONLY),
    ("POST", "/sites/cove/stations/intake/devices", {"label": "spare"}, ADMIN_ONLY),
    ("DELETE", "/sites/cove/stations/intake/devices/{other_device}", None, ADMIN_ONLY),
]

ROLES = ("anonymous", "wrong", "revoked", "device", "viewer", "admin")


@pytest.fixture
def layout(session, make_site, make_station, make_tank, make_device):
    site = make_site(id="cove")
    station = make_station(site=site, id="intake")
    make_tank(site=site, station=station, id="larvae-1")
    device, device_key = make_device(station=station)
    other_device, _ = make_device(station=station)
    revoked, revoked_key = create_key(session=session, role="admin", label="old admin")
    revoke_key(session=session, key_id=revoked.id)
    session.commit()
    return {
        "device": device.id,
        "device_key": device_key,
        "revoked_key": revoked_key,
        "other_device": other_device.id,
    }


def _headers(role, layout, admin_key, viewer_key):
    key = {
        "anonymous": None,
        "wrong": "spl_" + "x" * 43,
        "revoked": layout["revoked_key"],
        "device": layout["device_key"],
        "viewer": viewer_key,
        "admin": admin_key,
    }[role]
    return {} if key is None else {"Authorization": f"Bearer {key}"}


def _expected(role, who):
    if role in ("anonymous", "wrong", "revoked"):
        return 401
    if role == "admin" or (role == "viewer" and who == READERS):
        return None  # any success
    return 403


@pytest.mark.parametrize("role", ROLES)
@pytest.mark.parametrize(
    ("method", "path", "body", "who"), ENDPOINTS, ids=[f"{e[0]} {e[1]}" for e in ENDPOINTS]
)
def test_auth_matrix(client, layout, admin_key, viewer_key, role, method, path, body, who):
    url = API + path.format(**layout)
    response = client.request(
        method, url, json=body, headers=_headers(role, layout, admin_key, viewer_key)
    )
    expected = _expected(role, who)
    if expected is None:
        assert 200 <= response.status_code < 300, response.text
    else:
        assert response.status_code == expected, response.text
        assert isinstance(response.json()["detail"], str)
    if expected == 401:
        assert response.headers["WWW-Authenticate"] == "Bearer"


def test_refused_writes_change_nothing(client, layout, viewer_key, session):
    from app.sites.models import Site

    headers = {"Authorization": f"Bearer {viewer_key}"}
    client.patch(f"{API}/sites/cove", json={"name": "Hijacked"}, headers=headers)
    client.post(f"{API}/sites", json={"id": "x", "name": "X", "timezone": "UTC"}, headers=headers)
    session.expire_all()
    assert session.get(Site, "cove").name != "Hijacked"
    assert session.get(Site, "x") is None


def test_malformed_authorization_headers_are_401(client, layout):
    for value in ("", "Bearer", "Bearer ", "Basic dXNlcjpwYXNz", "spl_abc"):
        response = client.get(f"{API}/sites", headers={"Authorization": value})
        assert response.status_code == 401, value


def test_revoked_device_key_is_401(client, layout, admin_key, session):
    device_headers = {"Authorization": f"Bearer {layout['device_key']}"}
    # Before revocation the device is known (403: a device may not read configuration).
    assert client.get(f"{API}/sites", headers=device_headers).status_code == 403
    response = client.delete(
        f"{API}/sites/cove/stations/intake/devices/{layout['device']}",
        headers={"Authorization": f"Bearer {admin_key}"},
    )
    assert response.status_code == 204
    after = client.get(f"{API}/sites", headers=device_headers)
    assert after.status_code == 401


def test_keys_are_stored_only_as_sha256(session):
    api_key, plaintext = create_key(session=session, role="viewer", label="hash check")
    session.commit()
    # 32 random bytes give 43 URL-safe base64 characters after the "spl_" prefix.
    assert plaintext.startswith("spl_")
    assert len(plaintext) >= 4 + 43
    assert api_key.key_hash == hashlib.sha256(plaintext.encode()).hexdigest()
    assert api_key.prefix == plaintext[:8]
    stored = session.execute(
        select(ApiKey.key_hash, ApiKey.prefix, ApiKey.label, ApiKey.role).where(
            ApiKey.id == api_key.id
        )
    ).one()
    assert plaintext not in stored


def test_two_keys_differ(session):
    _, first = create_key(session=session, role="viewer", label="a")
    _, second = create_key(session=session, role="viewer", label="b")
    assert first != second


def test_device_keys_need_a_device_and_people_keys_must_not_have_one(session):
    with pytest.raises(ValueError, match="device key needs a device_id"):
        create_key(session=session, role="device", label="no device")
    with pytest.raises(ValueError, match="role must be one of"):
        create_key(session=session, role="root", label="x")


def test_last_used_at_is_recorded(client, session):
    api_key, plaintext = create_key(session=session, role="viewer", label="usage")
    session.commit()
    assert api_key.last_used_at is None
    response = client.get(f"{API}/sites", headers={"Authorization": f"Bearer {plaintext}"})
    assert response.status_code == 200
    session.refresh(api_key)
    assert api_key.last_used_at is not None
    assert api_key.last_used_at.tzinfo is not None


def test_keys_never_reach_the_logs(client, caplog, session, layout, admin_key):
    """Every logger at DEBUG: the plaintext of a key never appears, whatever happens to it."""
    caplog.set_level(logging.DEBUG)
    admin = {"Authorization": f"Bearer {admin_key}"}
    created = client.post(
        f"{API}/sites/cove/stations/intake/devices", json={"label": "p"}, headers=admin
    ).json()
    client.get(f"{API}/sites", headers={"Authorization": f"Bearer {created['key']}"})
    client.get(f"{API}/sites", headers={"Authorization": f"Bearer {layout['revoked_key']}"})
    client.get(f"{API}/sites", headers=admin)
    _, cli_style_key = create_key(session=session, role="admin", label="logged?")
    session.commit()
    # The capture saw the auth decisions, so an absent key means it was never logged.
    messages = [record.getMessage() for record in caplog.records]
    assert any("refused" in m and "revoked" in m for m in messages), messages
    assert any("created" in m and "device" in m for m in messages), messages
    for secret in (created["key"], layout["revoked_key"], admin_key, cli_style_key):
        assert secret not in caplog.text
