"""The server-rendered pages through the ASGI client: sign-in, cookie, forms, no outside assets."""

from __future__ import annotations

import re

import pytest

import chemistry
from app.alerts.models import Alert, AlertRule

pytestmark = pytest.mark.db


def _sign_in(client, key):
    return client.post("/sign-in", data={"key": key}, follow_redirects=False)


def _token(html: str) -> str:
    match = re.search(r'name="form_token" value="([^"]+)"', html)
    assert match, "page has no form token"
    return match.group(1)


def test_sign_in_sets_an_httponly_cookie_and_refuses_bad_keys(client, viewer_key, make_site):
    make_site()
    assert client.get("/", follow_redirects=False).headers["location"] == "/sign-in"
    bad = _sign_in(client, "spl_not-a-key")
    assert bad.status_code == 401
    assert "unknown" in bad.text
    good = _sign_in(client, viewer_key)
    assert good.status_code == 303
    cookie = good.headers["set-cookie"].lower()
    assert "spatline_session=" in cookie and "httponly" in cookie and "samesite=lax" in cookie
    assert viewer_key not in good.headers["set-cookie"]  # the key itself is never in the cookie


def test_overview_shows_caution_no_scripts_or_outside_assets(client, viewer_key, make_tank):
    tank = make_tank()
    _sign_in(client, viewer_key)
    page = client.get(f"/sites/{tank.site_id}")
    assert page.status_code == 200
    assert chemistry.DOSING_CAUTION in page.text.replace("&#39;", "'")
    assert f'data-tank-id="{tank.id}"' in page.text
    assert "<script" not in page.text
    assert not re.search(r'(src|href)="(https?:)?//', page.text)
    day = client.get(f"/sites/{tank.site_id}/days/2026-06-01")
    assert day.status_code == 200 and "2026-06-01" in day.text


def test_acknowledge_form_needs_its_token(client, session, viewer_key, make_tank):
    tank = make_tank()
    rule = session.query(AlertRule).filter(AlertRule.tank_pk == tank.pk).first()
    alert = Alert(rule_id=rule.id, site_id=tank.site_id, state="active",
                  since=tank.created_at, raised_at=tank.created_at, last_value=1.1)
    session.add(alert)
    session.commit()
    _sign_in(client, viewer_key)
    page = client.get(f"/sites/{tank.site_id}")
    assert f'data-alert-id="{alert.id}"' in page.text
    url = f"/sites/{tank.site_id}/alerts/{alert.id}/acknowledge"
    assert client.post(url, data={"form_token": "forged"}).status_code == 403
    session.refresh(alert)
    assert alert.state == "active"
    done = client.post(url, data={"form_token": _token(page.text)}, follow_redirects=False)
    assert done.status_code == 303
    session.refresh(alert)
    assert alert.state == "acknowledged"
    assert "test viewer" in alert.acknowledged_by


def test_sample_form_saves_for_admins_and_names_bad_fields(client, session, admin_key,
                                                           viewer_key, make_station, make_tank):
    station = make_station()
    url = f"/sites/{station.site_id}/stations/{station.id}/samples/new"
    _sign_in(client, admin_key)
    token = _token(client.get(url).text)
    fields = {"form_token": token, "collected_at": "2026-05-04T09:30", "salinity": "31.2",
              "temperature_c": "20", "alkalinity_umol_kg": "2110", "ph": "", "ph_scale": ""}
    saved = client.post(url, data=fields)
    assert saved.status_code == 200 and "Sample saved" in saved.text
    api = client.get(f"/api/v1/sites/{station.site_id}/stations/{station.id}/lab-samples",
                     headers={"Authorization": f"Bearer {admin_key}"}).json()
    assert api[0]["alkalinity_umol_kg"] == 2110.0
    wrong = client.post(url, data=fields | {"collected_at": "2026-05-05T09:30",
                                            "salinity": "75"})
    assert wrong.status_code == 422 and "salinity must be a finite number from 0 to" in wrong.text
    client.post("/sign-out", follow_redirects=False)
    _sign_in(client, viewer_key)
    viewer_page = client.get(url)
    # A viewer is told who may record samples instead of being offered a form to fill in.
    assert 'name="salinity"' not in viewer_page.text
    assert "Only someone signed in with an admin key may record bottle samples" in (
        viewer_page.text)
    # The acknowledge form of an open alert carries this session's token: a viewer with a
    # valid token is still refused by role, not by the token check.
    tank = make_tank(station=station)
    rule = session.query(AlertRule).filter(AlertRule.tank_pk == tank.pk).first()
    session.add(Alert(rule_id=rule.id, site_id=tank.site_id, state="active",
                      since=tank.created_at, raised_at=tank.created_at, last_value=1.1))
    session.commit()
    token = _token(client.get(f"/sites/{station.site_id}").text)
    refused = client.post(url, data=fields | {"form_token": token,
                                              "collected_at": "2026-05-06T09:30"})
    assert refused.status_code == 403
    assert "nothing was saved" in refused.text


def test_chart_is_svg_for_signed_in_users_only(client, viewer_key, make_tank):
    tank = make_tank()
    station_id = tank.source_station.id
    url = f"/sites/{tank.site_id}/stations/{station_id}/chart.svg"
    assert client.get(url).status_code == 401
    _sign_in(client, viewer_key)
    chart = client.get(url)
    assert chart.status_code == 200
    assert chart.headers["content-type"].startswith("image/svg+xml")
    assert "<svg" in chart.text
