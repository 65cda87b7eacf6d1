"""Sites, stations, tanks and devices over HTTP: defaults, validation, 404/409, and that a
refused request changes nothing stored."""

from __future__ import annotations

import pytest

from app.readings.qc import DEFAULT_QC_LIMITS

pytestmark = pytest.mark.db

API = "/api/v1"

SITE = {"id": "north-cove", "name": "North Cove hatchery", "timezone": "America/Vancouver"}


def _error_text(response) -> str:
    """The answer's sentences, and for a 422 each problem's location with its message."""
    answer = response.json()
    assert isinstance(answer["detail"], str), answer  # one error format everywhere
    problems = answer.get("problems") or []
    return " | ".join(
        [answer["detail"]]
        + [f"{'.'.join(map(str, e['loc']))}: {e['msg']} ({e['sentence']})" for e in problems]
    )


@pytest.fixture
def site(client, admin_headers):
    response = client.post(f"{API}/sites", json=SITE, headers=admin_headers)
    assert response.status_code == 201, response.text
    return response.json()


@pytest.fixture
def station(client, admin_headers, site):
    body = {"id": "intake", "name": "Intake", "role": "intake"}
    response = client.post(f"{API}/sites/{site['id']}/stations", json=body, headers=admin_headers)
    assert response.status_code == 201, response.text
    return response.json()


def _tank_body(**changes):
    return {
        "id": "larvae-1",
        "name": "Larval tank 1",
        "source_station_id": "intake",
        "stage": "larvae",
        "volume_l": 3000,
        "culture_temperature_c": 25,
    } | changes


# --- sites -----------------------------------------------------------------------------


def test_site_create_applies_documented_defaults(site):
    assert site["id"] == "north-cove"
    assert site["carbonic_constants"] == "lueker2000"
    assert site["atmospheric_xco2_ppm"] == 420
    assert site["daily_summary_hour"] == 7
    assert site["created_at"].endswith(("Z", "+00:00"))


def test_site_list_get_and_patch(client, admin_headers, viewer_headers, site):
    listed = client.get(f"{API}/sites", headers=viewer_headers).json()
    assert [s["id"] for s in listed] == ["north-cove"]
    patched = client.patch(
        f"{API}/sites/north-cove",
        json={"name": "North Cove", "carbonic_constants": "millero2010"},
        headers=admin_headers,
    )
    assert patched.status_code == 200, patched.text
    fetched = client.get(f"{API}/sites/north-cove", headers=viewer_headers).json()
    assert fetched["name"] == "North Cove"
    assert fetched["carbonic_constants"] == "millero2010"
    assert fetched["timezone"] == "America/Vancouver"  # untouched by the patch


def test_duplicate_site_is_409(client, admin_headers, site):
    response = client.post(f"{API}/sites", json=SITE | {"name": "Other"}, headers=admin_headers)
    assert response.status_code == 409
    assert "north-cove" in response.json()["detail"]
    fetched = client.get(f"{API}/sites/north-cove", headers=admin_headers).json()
    assert fetched["name"] == SITE["name"]


def test_unknown_site_is_404_with_a_sentence(client, viewer_headers):
    response = client.get(f"{API}/sites/nowhere", headers=viewer_headers)
    assert response.status_code == 404
    assert response.json()["detail"] == "There is no site with id 'nowhere'."


@pytest.mark.parametrize(
    ("changes", "field", "words"),
    [
        ({"id": "North Cove"}, "id", "lowercase letters"),
        ({"id": "-cove"}, "id", "starting and ending"),
        ({"id": "x" * 65}, "id", "1 to 64"),
        ({"timezone": "Mars/Olympus"}, "timezone", "IANA time zone"),
        ({"timezone": "PST"}, "timezone", "IANA time zone"),
        ({"carbonic_constants": "other"}, "carbonic_constants", "lueker2000"),
        ({"atmospheric_xco2_ppm": 0.042}, "atmospheric_xco2_ppm", "100"),
        ({"daily_summary_hour": 24}, "daily_summary_hour", "23"),
        ({"colour": "blue"}, "colour", "not permitted"),
    ],
)
def test_bad_site_fields_name_the_field_and_range(client, admin_headers, changes, field, words):
    response = client.post(f"{API}/sites", json=SITE | changes, headers=admin_headers)
    assert response.status_code == 422
    text = _error_text(response)
    assert f"body.{field}" in text
    assert words in text
    assert client.get(f"{API}/sites", headers=admin_headers).json() == []


def test_nan_and_infinity_are_refused(client, admin_headers):
    for literal in ("NaN", "Infinity", "-Infinity"):
        raw = (
            '{"id": "cove", "name": "Cove", "timezone": "UTC", '
            f'"atmospheric_xco2_ppm": {literal}}}'
        )
        response = client.post(
            f"{API}/sites",
            content=raw,
            headers=admin_headers | {"Content-Type": "application/json"},
        )
        assert response.status_code == 422, literal
        assert "atmospheric_xco2_ppm" in _error_text(response)


def test_patch_null_on_required_field_is_refused_and_keeps_value(client, admin_headers, site):
    response = client.patch(
        f"{API}/sites/north-cove", json={"timezone": None}, headers=admin_headers
    )
    assert response.status_code == 422
    assert "body.timezone" in _error_text(response)
    assert client.get(f"{API}/sites/north-cove", headers=admin_headers).json()["timezone"] == (
        "America/Vancouver"
    )


def test_patch_cannot_rename_site_id(client, admin_headers, site):
    response = client.patch(f"{API}/sites/north-cove", json={"id": "south"}, headers=admin_headers)
    assert response.status_code == 422
    assert client.get(f"{API}/sites/north-cove", headers=admin_headers).status_code == 200


# --- stations --------------------------------------------------------------------------


def test_station_defaults(station):
    assert station["site_id"] == "north-cove"
    assert station["alkalinity"] == {"mode": "reading"}
    assert station["ph_uncertainty"] == 0.05
    # With no overrides the limits in force are the documented defaults of app/readings/qc.py.
    assert station["qc_limits"] == {
        variable: limits.model_dump() for variable, limits in DEFAULT_QC_LIMITS.items()
    }


@pytest.mark.parametrize(
    "alkalinity",
    [
        {"mode": "reading"},
        {"mode": "fixed", "value": 2150},
        {"mode": "fixed", "value": 2150, "uncertainty": 10},
        {"mode": "salinity_line", "slope": 47.7, "intercept": 647},
        {"mode": "salinity_line", "slope": 47.7, "intercept": 647, "residual_sd": 12},
    ],
)
def test_station_alkalinity_modes_round_trip(client, admin_headers, site, alkalinity):
    body = {"id": "treated", "name": "Treated", "role": "treated", "alkalinity": alkalinity}
    created = client.post(f"{API}/sites/north-cove/stations", json=body, headers=admin_headers)
    assert created.status_code == 201, created.text
    assert created.json()["alkalinity"] == alkalinity
    fetched = client.get(f"{API}/sites/north-cove/stations/treated", headers=admin_headers)
    assert fetched.json()["alkalinity"] == alkalinity


@pytest.mark.parametrize(
    ("alkalinity", "words"),
    [
        ({"mode": "fixed"}, "value"),
        ({"mode": "fixed", "value": 21.5}, "greater than or equal to 100"),
        ({"mode": "fixed", "value": 2150, "uncertainty": -1}, "uncertainty"),
        ({"mode": "salinity_line", "slope": 47.7}, "intercept"),
        ({"mode": "salinity_line", "slope": 470, "intercept": 647}, "less than or equal to 200"),
        ({"mode": "guess"}, "reading"),
        ({"mode": "reading", "value": 2150}, "not permitted"),
    ],
)
def test_bad_alkalinity_mode_is_refused(client, admin_headers, site, alkalinity, words):
    body = {"id": "treated", "name": "Treated", "role": "treated", "alkalinity": alkalinity}
    response = client.post(f"{API}/sites/north-cove/stations", json=body, headers=admin_headers)
    assert response.status_code == 422
    text = _error_text(response)
    assert "alkalinity" in text
    assert words in text


def test_station_role_must_be_known(client, admin_headers, site):
    body = {"id": "s", "name": "S", "role": "header"}
    response = client.post(f"{API}/sites/north-cove/stations", json=body, headers=admin_headers)
    assert response.status_code == 422
    assert "body.role" in _error_text(response)


def test_station_qc_overrides_merge_and_reset(client, admin_headers, station):
    url = f"{API}/sites/north-cove/stations/intake"
    first = client.patch(url, json={"qc_limits": {"ph": {"user_min": 7.4}}}, headers=admin_headers)
    assert first.status_code == 200, first.text
    assert first.json()["qc_limits"]["ph"]["user_min"] == 7.4
    second = client.patch(url, json={"qc_limits": {"ph": {"user_max": 8.4}}}, headers=admin_headers)
    limits = second.json()["qc_limits"]["ph"]
    assert (limits["user_min"], limits["user_max"]) == (7.4, 8.4)
    assert limits["sensor_min"] == DEFAULT_QC_LIMITS["ph"].sensor_min
    reset = client.patch(url, json={"qc_limits": None}, headers=admin_headers)
    assert reset.json()["qc_limits"]["ph"] == DEFAULT_QC_LIMITS["ph"].model_dump()


@pytest.mark.parametrize(
    ("qc_limits", "words"),
    [
        ({"oxygen": {"user_min": 1}}, "unknown variable 'oxygen'"),
        ({"ph": {"user_min": 9.9}}, "within the sensor range"),
        ({"ph": {"colour": 1}}, "colour"),
    ],
)
def test_bad_qc_override_is_refused_and_keeps_stored_limits(
    client, admin_headers, station, qc_limits, words
):
    url = f"{API}/sites/north-cove/stations/intake"
    client.patch(url, json={"qc_limits": {"ph": {"user_min": 7.4}}}, headers=admin_headers)
    response = client.patch(
        url, json={"qc_limits": qc_limits, "name": "Renamed"}, headers=admin_headers
    )
    assert response.status_code == 422
    assert "qc_limits" in _error_text(response)
    assert words in _error_text(response)
    stored = client.get(url, headers=admin_headers).json()
    assert stored["qc_limits"]["ph"]["user_min"] == 7.4
    assert stored["name"] == "Intake"


def test_duplicate_station_is_409_but_same_id_in_another_site_is_fine(
    client, admin_headers, station
):
    body = {"id": "intake", "name": "Intake again", "role": "intake"}
    response = client.post(f"{API}/sites/north-cove/stations", json=body, headers=admin_headers)
    assert response.status_code == 409
    client.post(f"{API}/sites", json=SITE | {"id": "south-cove"}, headers=admin_headers)
    other = client.post(f"{API}/sites/south-cove/stations", json=body, headers=admin_headers)
    assert other.status_code == 201, other.text


def test_station_404s(client, admin_headers, site):
    missing_site = client.get(f"{API}/sites/nowhere/stations", headers=admin_headers)
    assert missing_site.status_code == 404
    assert "nowhere" in missing_site.json()["detail"]
    missing = client.get(f"{API}/sites/north-cove/stations/outfall", headers=admin_headers)
    assert missing.status_code == 404
    assert missing.json()["detail"] == "Site 'north-cove' has no station with id 'outfall'."


def test_station_list_is_per_site(client, admin_headers, station):
    client.post(f"{API}/sites", json=SITE | {"id": "south-cove"}, headers=admin_headers)
    assert client.get(f"{API}/sites/south-cove/stations", headers=admin_headers).json() == []
    ids = [
        s["id"]
        for s in client.get(f"{API}/sites/north-cove/stations", headers=admin_headers).json()
    ]
    assert ids == ["intake"]


# --- tanks -----------------------------------------------------------------------------


def test_tank_create_with_defaults_and_treatment(client, admin_headers, station):
    body = _tank_body(treatment={"chemical": "sodium_carbonate", "dose_mg_per_l": 12})
    response = client.post(f"{API}/sites/north-cove/tanks", json=body, headers=admin_headers)
    assert response.status_code == 201, response.text
    tank = response.json()
    assert tank["source_station_id"] == "intake"
    assert (tank["omega_floor"], tank["omega_target"]) == (1.5, 3.0)
    assert tank["treatment"] == {"chemical": "sodium_carbonate", "dose_mg_per_l": 12}
    listed = client.get(f"{API}/sites/north-cove/tanks", headers=admin_headers).json()
    assert [t["id"] for t in listed] == ["larvae-1"]


def test_treatment_chemicals_are_the_dose_calculators():
    from app.sites.schemas import TREATMENT_CHEMICALS
    from chemistry import CHEMICALS

    assert set(TREATMENT_CHEMICALS) == set(CHEMICALS)


@pytest.mark.parametrize(
    ("changes", "field", "words"),
    [
        ({"volume_l": 0}, "volume_l", "greater than 0"),
        ({"volume_l": -5}, "volume_l", "greater than 0"),
        ({"culture_temperature_c": 77}, "culture_temperature_c", "less than or equal to 45"),
        ({"culture_temperature_c": -3}, "culture_temperature_c", "greater than or equal to -2"),
        ({"omega_floor": 3.0, "omega_target": 3.0}, "omega_floor", "must be below omega_target"),
        ({"omega_floor": 2.0, "omega_target": 1.8}, "omega_floor", "must be below omega_target"),
        ({"omega_floor": 0}, "omega_floor", "greater than 0"),
        ({"stage": "adult"}, "stage", "broodstock"),
        ({"treatment": {"chemical": "lime", "dose_mg_per_l": 5}}, "chemical", "sodium_carbonate"),
        (
            {"treatment": {"chemical": "sodium_carbonate", "dose_mg_per_l": -1}},
            "dose_mg_per_l",
            "greater than or equal to 0",
        ),
        (
            {"treatment": {"chemical": "sodium_carbonate", "dose_mg_per_l": 900}},
            "dose_mg_per_l",
            "less than or equal to 100",
        ),
        ({"source_station_id": "outfall"}, "source_station_id", "not a station of site"),
    ],
)
def test_bad_tank_fields_are_refused(client, admin_headers, station, changes, field, words):
    response = client.post(
        f"{API}/sites/north-cove/tanks", json=_tank_body(**changes), headers=admin_headers
    )
    assert response.status_code == 422
    text = _error_text(response)
    assert field in text
    assert words in text
    assert client.get(f"{API}/sites/north-cove/tanks", headers=admin_headers).json() == []


def test_tank_patch_checks_floor_against_stored_target(client, admin_headers, station):
    client.post(f"{API}/sites/north-cove/tanks", json=_tank_body(), headers=admin_headers)
    url = f"{API}/sites/north-cove/tanks/larvae-1"
    refused = client.patch(url, json={"omega_floor": 3.5}, headers=admin_headers)
    assert refused.status_code == 422
    assert "omega_floor (3.5) must be below omega_target (3.0)" in _error_text(refused)
    assert client.get(url, headers=admin_headers).json()["omega_floor"] == 1.5
    accepted = client.patch(
        url, json={"omega_floor": 3.5, "omega_target": 4.0}, headers=admin_headers
    )
    assert accepted.status_code == 200, accepted.text
    assert (accepted.json()["omega_floor"], accepted.json()["omega_target"]) == (3.5, 4.0)


def test_tank_patch_source_station_and_clear_treatment(client, admin_headers, station):
    body = _tank_body(treatment={"chemical": "sodium_hydroxide", "dose_mg_per_l": 2})
    client.post(f"{API}/sites/north-cove/tanks", json=body, headers=admin_headers)
    client.post(
        f"{API}/sites/north-cove/stations",
        json={"id": "treated", "name": "Treated", "role": "treated"},
        headers=admin_headers,
    )
    url = f"{API}/sites/north-cove/tanks/larvae-1"
    response = client.patch(
        url, json={"source_station_id": "treated", "treatment": None}, headers=admin_headers
    )
    assert response.status_code == 200, response.text
    assert response.json()["source_station_id"] == "treated"
    assert response.json()["treatment"] is None
    refused = client.patch(url, json={"source_station_id": "outfall"}, headers=admin_headers)
    assert refused.status_code == 422
    assert client.get(url, headers=admin_headers).json()["source_station_id"] == "treated"


def test_tank_source_station_must_be_in_the_same_site(client, admin_headers, station):
    client.post(f"{API}/sites", json=SITE | {"id": "south-cove"}, headers=admin_headers)
    response = client.post(
        f"{API}/sites/south-cove/tanks", json=_tank_body(), headers=admin_headers
    )
    assert response.status_code == 422
    assert "not a station of site 'south-cove'" in _error_text(response)


def test_duplicate_and_unknown_tank(client, admin_headers, station):
    client.post(f"{API}/sites/north-cove/tanks", json=_tank_body(), headers=admin_headers)
    again = client.post(f"{API}/sites/north-cove/tanks", json=_tank_body(), headers=admin_headers)
    assert again.status_code == 409
    missing = client.get(f"{API}/sites/north-cove/tanks/larvae-9", headers=admin_headers)
    assert missing.status_code == 404
    assert missing.json()["detail"] == "Site 'north-cove' has no tank with id 'larvae-9'."


# --- devices ---------------------------------------------------------------------------


def test_device_key_is_shown_once_and_revocable(client, admin_headers, station, session):
    from app.auth.models import ApiKey
    from app.sites.models import Device

    url = f"{API}/sites/north-cove/stations/intake/devices"
    response = client.post(url, json={"label": "probe SN-0042"}, headers=admin_headers)
    assert response.status_code == 201, response.text
    created = response.json()
    assert set(created) == {"id", "key"}
    assert created["id"].startswith("dev_")
    device = session.get(Device, created["id"])
    assert device.label == "probe SN-0042"
    stored = session.query(ApiKey).filter_by(device_id=created["id"]).one()
    assert stored.role == "device"
    assert created["key"] not in {stored.key_hash, stored.prefix, stored.label}

    revoked = client.delete(f"{url}/{created['id']}", headers=admin_headers)
    assert revoked.status_code == 204
    session.expire_all()
    assert session.get(Device, created["id"]).revoked_at is not None
    assert session.get(ApiKey, stored.id).revoked_at is not None
    # Revoking again is harmless.
    assert client.delete(f"{url}/{created['id']}", headers=admin_headers).status_code == 204


def test_device_post_without_body_is_accepted(client, admin_headers, station):
    response = client.post(f"{API}/sites/north-cove/stations/intake/devices", headers=admin_headers)
    assert response.status_code == 201, response.text


def test_device_delete_404s(client, admin_headers, station, make_device, session):
    url = f"{API}/sites/north-cove/stations/intake/devices"
    assert client.delete(f"{url}/dev_unknown", headers=admin_headers).status_code == 404
    # A device of another station is not found through this station's path.
    other_device, _ = make_device()
    response = client.delete(f"{url}/{other_device.id}", headers=admin_headers)
    assert response.status_code == 404
    assert other_device.id in response.json()["detail"]
    session.refresh(other_device)
    assert other_device.revoked_at is None
    missing_station = client.post(
        f"{API}/sites/north-cove/stations/outfall/devices", headers=admin_headers
    )
    assert missing_station.status_code == 404
