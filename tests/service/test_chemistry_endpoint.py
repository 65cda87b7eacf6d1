"""POST /api/v1/chemistry/solve: the engine as a stateless calculation, for any key."""

from __future__ import annotations

import numpy as np
import pytest

from chemistry import (
    CHEMISTRY_VERSION,
    alkalinity_from_mg_per_l_caco3,
    at_temperature,
    solve,
    standard_uncertainty,
)

pytestmark = pytest.mark.db

URL = "/api/v1/chemistry/solve"
SAMPLE = {
    "temperature": 12.0,
    "salinity": 31.0,
    "ph": 7.78,
    "ph_scale": "nbs",
    "alkalinity": 2150.0,
    "u_ph": 0.05,
    "u_alkalinity": 10.0,
}


def auth(key: str) -> dict[str, str]:
    return {"Authorization": f"Bearer {key}"}


def test_any_key_may_calculate(client, admin_key, viewer_key, make_device):
    device_key = make_device()[1]
    for key in (admin_key, viewer_key, device_key):
        assert client.post(URL, json=SAMPLE, headers=auth(key)).status_code == 200
    assert client.post(URL, json=SAMPLE).status_code == 401


def test_values_and_uncertainties_are_the_engines(client, viewer_key):
    body = client.post(URL, json=SAMPLE | {"tank_temperature": 25.0}, headers=auth(viewer_key))
    assert body.status_code == 200, body.text
    result = body.json()
    inputs = dict(temperature=12.0, salinity=31.0, ph=7.78, alkalinity=2150.0, ph_scale="nbs")
    state = solve(**inputs)
    u = standard_uncertainty(**inputs, u_ph=0.05, u_alkalinity=10.0)
    for name, value in state.as_dict().items():
        assert result["in_situ"]["values"][name] == pytest.approx(float(value), rel=1e-12)
        assert result["in_situ"]["uncertainty"][name] == pytest.approx(float(u[name]), rel=1e-9)
    tank = at_temperature(state, 25.0)
    u_tank = standard_uncertainty(**inputs, u_ph=0.05, u_alkalinity=10.0, at_temperature=25.0)
    assert result["at_tank_temperature"]["temperature"] == 25.0
    for name, value in tank.as_dict().items():
        assert result["at_tank_temperature"]["values"][name] == pytest.approx(
            float(value), rel=1e-12
        )
        assert result["at_tank_temperature"]["uncertainty"][name] == pytest.approx(
            float(u_tank[name]), rel=1e-9
        )
    # Closed system: alkalinity and DIC carry over; warming raises omega (common practice).
    tank_values = result["at_tank_temperature"]["values"]
    assert tank_values["dic"] == pytest.approx(result["in_situ"]["values"]["dic"], rel=1e-9)
    assert tank_values["omega_aragonite"] > result["in_situ"]["values"]["omega_aragonite"]
    assert result["chemistry_version"] == CHEMISTRY_VERSION
    assert "do not replace" in result["caution"]


def test_omega_is_calcium_times_carbonate_over_the_published_solubility_product(client, viewer_key):
    sample = {"temperature": 25.0, "salinity": 35.0, "alkalinity": 2300.0, "dic": 2000.0}
    values = client.post(URL, json=sample, headers=auth(viewer_key)).json()["in_situ"]["values"]
    # Ksp aragonite at S = 35, 25 degC: 6.48e-7 mol2/kg2 (Mucci 1983, as in the issue's
    # check values). Calcium 0.02128 / 40.078 * S / 1.80655 mol/kg (Riley & Tongudai 1967;
    # formula from memory).
    calcium = 0.02128 / 40.078 * 35.0 / 1.80655
    carbonate = values["carbonate"] * 1e-6
    assert values["omega_aragonite"] == pytest.approx(calcium * carbonate / 6.48e-7, rel=2e-3)
    # The alkalinity given comes back (alkalinity closure).
    assert values["alkalinity"] == pytest.approx(2300.0, rel=1e-9)


def test_alkalinity_in_mg_per_l(client, viewer_key):
    sample = dict(SAMPLE)
    del sample["alkalinity"]
    sample["alkalinity_mg_l_caco3"] = 107.0
    result = client.post(URL, json=sample, headers=auth(viewer_key)).json()
    expected = float(alkalinity_from_mg_per_l_caco3(107.0, 12.0, 31.0))
    assert result["alkalinity_umol_kg"] == pytest.approx(expected, rel=1e-12)


def test_constant_uncertainty_can_be_left_out(client, viewer_key):
    with_constants = client.post(URL, json=SAMPLE, headers=auth(viewer_key)).json()
    without = client.post(
        URL, json=SAMPLE | {"include_constant_uncertainty": False}, headers=auth(viewer_key)
    ).json()
    u_with = with_constants["in_situ"]["uncertainty"]["omega_aragonite"]
    u_without = without["in_situ"]["uncertainty"]["omega_aragonite"]
    assert u_without < u_with
    expected = standard_uncertainty(
        temperature=12.0,
        salinity=31.0,
        ph=7.78,
        alkalinity=2150.0,
        ph_scale="nbs",
        u_ph=0.05,
        u_alkalinity=10.0,
        constant_uncertainties=None,
    )["omega_aragonite"]
    assert u_without == pytest.approx(float(np.asarray(expected)), rel=1e-9)


@pytest.mark.parametrize(
    ("change", "phrase"),
    [
        ({"dic": 2000.0}, "give exactly two of ph, alkalinity"),
        ({"alkalinity": None}, "got 1: ph"),
        ({"temperature": 60.0}, "temperature"),
        ({"salinity": -1.0}, "salinity"),
        ({"alkalinity_mg_l_caco3": 100.0}, "not both"),
        ({"ph_scale": "mystery"}, "ph_scale"),
    ],
)
def test_bad_input_is_refused_with_the_field_named(client, viewer_key, change, phrase):
    response = client.post(URL, json=SAMPLE | change, headers=auth(viewer_key))
    assert response.status_code == 422
    assert phrase in response.text


def test_nan_is_refused(client, viewer_key):
    response = client.post(
        URL,
        content='{"temperature": NaN, "salinity": 31, "ph": 7.8, "alkalinity": 2150}',
        headers=auth(viewer_key) | {"Content-Type": "application/json"},
    )
    assert response.status_code == 422
    assert "temperature" in response.text


def test_nbs_ph_without_u_ph_gets_the_glass_electrode_default_and_says_so(client, viewer_key):
    """The review's sample: without u_ph the answer used to carry the constants' part only
    (omega 0.867 +- 0.049) although NBS pH error dominates. 0.05 for a glass electrode is
    common practice (and the station default)."""
    sample = {"temperature": 12, "salinity": 31, "ph": 7.78, "ph_scale": "nbs",
              "alkalinity": 2150}
    answer = client.post(URL, json=sample, headers=auth(viewer_key))
    assert answer.status_code == 200, answer.text
    body = answer.json()
    inputs = dict(temperature=12.0, salinity=31.0, ph=7.78, alkalinity=2150.0, ph_scale="nbs")
    with_ph = float(standard_uncertainty(**inputs, u_ph=0.05)["omega_aragonite"])
    without_ph = float(standard_uncertainty(**inputs, u_ph=0.0)["omega_aragonite"])
    assert with_ph > 1.5 * without_ph  # the pH part is what the old default left out
    assert body["in_situ"]["uncertainty"]["omega_aragonite"] == pytest.approx(with_ph, rel=1e-9)
    assert "pH uncertainty 0.05 assumed" in body["uncertainty_basis"][0]
    assert "NBS" in body["uncertainty_basis"][0]
    given = client.post(URL, json=sample | {"u_ph": 0.01}, headers=auth(viewer_key)).json()
    assert given["uncertainty_basis"][0] == "pH uncertainty 0.01 as given (u_ph)."
    assert given["in_situ"]["uncertainty"]["omega_aragonite"] == pytest.approx(
        float(standard_uncertainty(**inputs, u_ph=0.01)["omega_aragonite"]), rel=1e-9)


def test_total_scale_ph_without_u_ph_says_no_ph_uncertainty_is_included(client, viewer_key):
    sample = {"temperature": 12, "salinity": 31, "ph": 7.78, "ph_scale": "total",
              "alkalinity": 2150}
    body = client.post(URL, json=sample, headers=auth(viewer_key)).json()
    assert body["uncertainty_basis"][0].startswith("No pH uncertainty included")
    inputs = dict(temperature=12.0, salinity=31.0, ph=7.78, alkalinity=2150.0,
                  ph_scale="total")
    assert body["in_situ"]["uncertainty"]["omega_aragonite"] == pytest.approx(
        float(standard_uncertainty(**inputs, u_ph=0.0)["omega_aragonite"]), rel=1e-9)
    no_ph = client.post(URL, json={"temperature": 12, "salinity": 31, "alkalinity": 2150,
                                   "dic": 2000, "u_dic": 2}, headers=auth(viewer_key)).json()
    assert not any("pH uncertainty" in line for line in no_ph["uncertainty_basis"])
    assert "u_dic 2" in " ".join(no_ph["uncertainty_basis"])
