"""Alert rules, alerts and notifications over HTTP (CRUD, defaults, validation, roles)."""

from __future__ import annotations

import pytest

from app.alerts.models import OPEN_STATES_SQL
from app.alerts.state_machine import OPEN_ALERT_STATES

pytestmark = pytest.mark.db


def test_open_states_in_the_index_match_the_state_machine():
    for state in OPEN_ALERT_STATES:
        assert f"'{state.value}'" in OPEN_STATES_SQL
    assert OPEN_STATES_SQL.count("'") == 2 * len(OPEN_ALERT_STATES)


def test_a_new_tank_gets_the_two_default_rules(client, admin_headers, make_tank):
    tank = make_tank(omega_floor=1.6)
    response = client.get(f"/api/v1/sites/{tank.site_id}/alert-rules", headers=admin_headers)
    assert response.status_code == 200
    rules = {rule["metric"]: rule for rule in response.json()}
    assert set(rules) == {"tank_omega_aragonite", "no_data"}
    omega = rules["tank_omega_aragonite"]
    assert omega["tank_id"] == tank.id
    assert (omega["direction"], omega["level"], omega["hold_minutes"]) == ("below", 1.6, 15)
    assert omega["clear_level"] > omega["level"]
    assert omega["origin"] == "default" and omega["state"] == "watching"
    silence = rules["no_data"]
    assert (silence["level"], silence["station_id"]) == (30, tank.source_station.id)


def test_create_update_and_retire_a_rule(client, admin_headers, viewer_headers, make_station):
    station = make_station()
    site = station.site_id
    body = {
        "station_id": station.id,
        "metric": "pco2_uatm",
        "level": 1000,
        "clear_level": 900,
        "hold_minutes": 10,
        "recipients": ["manager@hatchery.example"],
        "repeat_minutes": 60,
    }
    created = client.post(f"/api/v1/sites/{site}/alert-rules", json=body, headers=admin_headers)
    assert created.status_code == 201, created.text
    rule = created.json()
    assert rule["direction"] == "above"  # pCO2 rules watch for high values by default
    assert rule["recipients"] == ["manager@hatchery.example"]

    refused = client.post(f"/api/v1/sites/{site}/alert-rules", json=body, headers=viewer_headers)
    assert refused.status_code == 403

    patched = client.patch(
        f"/api/v1/sites/{site}/alert-rules/{rule['id']}",
        json={"clear_level": 950, "repeat_minutes": 0},
        headers=admin_headers,
    )
    assert patched.status_code == 200, patched.text
    assert (patched.json()["clear_level"], patched.json()["repeat_minutes"]) == (950, 0)

    bad = client.patch(
        f"/api/v1/sites/{site}/alert-rules/{rule['id']}",
        json={"clear_level": 1100},
        headers=admin_headers,
    )
    assert bad.status_code == 422
    assert "clear_level" in bad.json()["detail"]
    unchanged = client.get(f"/api/v1/sites/{site}/alert-rules", headers=viewer_headers).json()
    assert [r["clear_level"] for r in unchanged if r["id"] == rule["id"]] == [950]

    deleted = client.delete(f"/api/v1/sites/{site}/alert-rules/{rule['id']}", headers=admin_headers)
    assert deleted.status_code == 204
    listed = client.get(f"/api/v1/sites/{site}/alert-rules", headers=admin_headers).json()
    assert rule["id"] not in [r["id"] for r in listed]
    again = client.delete(f"/api/v1/sites/{site}/alert-rules/{rule['id']}", headers=admin_headers)
    assert again.status_code == 404


@pytest.mark.parametrize(
    ("change", "field"),
    [
        ({"clear_level": 1.4}, "clear_level"),  # a 'below' rule clears above its level
        ({"level": 42.0, "clear_level": 43.0}, "level"),  # omega beyond 0..10
        ({"min_probability": 1.5}, "min_probability"),
        ({"hold_minutes": -5}, "hold_minutes"),
        ({"recipients": ["not-an-address"]}, "recipients"),
        ({"metric": "wind_speed"}, "metric"),
    ],
)
def test_bad_rules_are_refused_naming_the_field(client, admin_headers, make_tank, change, field):
    tank = make_tank()
    body = {
        "tank_id": tank.id,
        "metric": "tank_omega_aragonite",
        "level": 1.5,
        "clear_level": 1.7,
    } | change
    response = client.post(
        f"/api/v1/sites/{tank.site_id}/alert-rules", json=body, headers=admin_headers
    )
    assert response.status_code == 422
    assert field in response.text
    rules = client.get(f"/api/v1/sites/{tank.site_id}/alert-rules", headers=admin_headers).json()
    assert len(rules) == 2  # only the defaults: nothing was stored


def test_probability_only_for_omega_and_unknown_targets(client, admin_headers, make_station):
    station = make_station()
    site = station.site_id
    body = {
        "station_id": station.id,
        "metric": "ph_total",
        "level": 7.7,
        "clear_level": 7.8,
        "min_probability": 0.8,
    }
    response = client.post(f"/api/v1/sites/{site}/alert-rules", json=body, headers=admin_headers)
    assert response.status_code == 422 and "min_probability" in response.json()["detail"]
    body = {"station_id": "nowhere", "metric": "no_data"}
    response = client.post(f"/api/v1/sites/{site}/alert-rules", json=body, headers=admin_headers)
    assert response.status_code == 404 and "nowhere" in response.json()["detail"]


def test_alert_lists_need_a_key_and_a_known_site(client, viewer_headers, make_site):
    site = make_site()
    assert client.get(f"/api/v1/sites/{site.id}/alerts").status_code == 401
    assert client.get(f"/api/v1/sites/{site.id}/alerts", headers=viewer_headers).json() == []
    assert client.get("/api/v1/sites/nope/alerts", headers=viewer_headers).status_code == 404
    response = client.get(f"/api/v1/sites/{site.id}/notifications", headers=viewer_headers)
    assert response.status_code == 200 and response.json() == []
    response = client.post("/api/v1/alerts/999999/acknowledge", headers=viewer_headers)
    assert response.status_code == 404
