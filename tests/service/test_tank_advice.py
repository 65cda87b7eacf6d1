"""Tank advice endpoint: the water at culture temperature, the dose, aeration, the caution.

Dose checks are hand stoichiometry: Na2CO3 dissolves to 2 Na+ + CO3 2-, which takes two
protons (2 equivalents of total alkalinity) and carries one carbon (1 mol DIC) per mole;
NaOH adds 1 equivalent and no carbon. Molar masses from the IUPAC standard atomic weights
(Wieser & Coplen 2011, Pure Appl. Chem. 83, 359): Na 22.98977, C 12.0107, O 15.9994,
H 1.00794 g/mol (abridged values, from memory).
"""

from __future__ import annotations

import datetime as dt

import pytest

import chemistry
from app.readings.models import Reading

pytestmark = pytest.mark.db

SODIUM, CARBON, OXYGEN, HYDROGEN = 22.98977, 12.0107, 15.9994, 1.00794
SODA_ASH_G_PER_MOL = 2 * SODIUM + CARBON + 3 * OXYGEN  # 105.99
CAUSTIC_SODA_G_PER_MOL = SODIUM + OXYGEN + HYDROGEN  # 40.00

T_IN, S, TA, PH = 12.0, 32.0, 2200.0, 7.8


@pytest.fixture
def advised_tank(session, make_site, make_station, make_tank):
    site = make_site(atmospheric_xco2_ppm=420.0)
    station = make_station(site=site, alkalinity={"mode": "fixed", "value": TA})
    tank = make_tank(
        site=site,
        station=station,
        culture_temperature_c=24.0,
        volume_l=1500.0,
        omega_floor=1.5,
        omega_target=3.0,
        treatment={"chemical": "sodium_carbonate", "dose_mg_per_l": 10.0},
    )
    observed = dt.datetime(2026, 6, 1, 12, 0, tzinfo=dt.UTC)
    common = dict(
        station_pk=station.pk,
        source="dev_test",
        received_at=observed,
        temperature_c=T_IN,
        salinity=S,
        ph_scale="total",
        alkalinity_used_umol_kg=TA,
        alkalinity_source="fixed",
        qc_temperature=1,
        qc_salinity=1,
        qc_ph=1,
        qc_alkalinity=2,
        qc_derived=1,
    )
    session.add(Reading(observed_at=observed, ph=PH, ph_total=PH, qc_overall=1, **common))
    # A newer reading that failed QC must not be used.
    session.add(
        Reading(
            observed_at=observed + dt.timedelta(minutes=5),
            ph=6.1,
            ph_total=6.1,
            qc_overall=4,
            **common,
        )
    )
    session.commit()
    return site, station, tank


def _advice(client, headers, tank, **params):
    response = client.get(
        f"/api/v1/sites/{tank.site_id}/tanks/{tank.id}/advice", params=params, headers=headers
    )
    assert response.status_code == 200, response.text
    return response.json()


def test_advice_predicts_the_tank_water_from_the_latest_good_reading(
    client, viewer_headers, advised_tank
):
    _site, _station, tank = advised_tank
    advice = _advice(client, viewer_headers, tank)
    assert advice["reading"]["ph_total"] == PH  # the failed, newer reading is skipped
    expected = chemistry.at_temperature(
        chemistry.solve(temperature=T_IN, salinity=S, ph=PH, alkalinity=TA), 24.0
    )
    water = advice["untreated"]
    assert water["temperature_c"] == 24.0
    assert water["omega_aragonite"] == pytest.approx(float(expected.omega_aragonite), rel=1e-9)
    # Closed-system heating keeps alkalinity and DIC and raises pCO2 (common practice).
    assert water["alkalinity_umol_kg"] == pytest.approx(TA, rel=1e-9)
    assert water["pco2_uatm"] > float(
        chemistry.solve(temperature=T_IN, salinity=S, ph=PH, alkalinity=TA).pco2
    )
    assert water["omega_aragonite_uncertainty"] > 0
    assert 0.0 <= water["probability_below_floor"] <= 1.0
    assert water["omega_aragonite"] < 1.5 and water["probability_below_floor"] > 0.5

    treated = advice["after_treatment"]
    added = 10.0 / SODA_ASH_G_PER_MOL * 1000.0  # umol per litre
    assert treated["alkalinity_umol_kg"] - TA == pytest.approx(
        2 * added / (float(chemistry.seawater_density(24.0, S)) / 1000.0), rel=1e-3
    )
    assert treated["omega_aragonite"] > water["omega_aragonite"]
    # The tank's one prediction is the water the larvae get: after the current treatment.
    assert advice["in_tank"] == treated
    assert advice["in_tank_basis"] == "after_current_treatment"
    assert advice["caution"] == chemistry.DOSING_CAUTION


def test_soda_ash_dose_matches_hand_stoichiometry(client, viewer_headers, advised_tank):
    _site, _station, tank = advised_tank
    dose = _advice(client, viewer_headers, tank)["dose"]
    assert dose["chemical"] == "sodium_carbonate" and dose["total_refused"] is None
    density_kg_per_l = float(chemistry.seawater_density(24.0, S)) / 1000.0
    moles_umol_per_kg = dose["total_mg_per_l"] / SODA_ASH_G_PER_MOL * 1000.0 / density_kg_per_l
    assert dose["total_alkalinity_added_umol_kg"] == pytest.approx(2 * moles_umol_per_kg, rel=1e-3)
    assert dose["total_dic_added_umol_kg"] == pytest.approx(moles_umol_per_kg, rel=1e-3)
    # mg/L times litres / 1000 = grams for the tank.
    assert dose["total_grams_for_tank"] == pytest.approx(dose["total_mg_per_l"] * 1500.0 / 1000.0)
    # The dosed water, solved independently from the raised alkalinity and DIC, hits the target.
    base = chemistry.at_temperature(
        chemistry.solve(temperature=T_IN, salinity=S, ph=PH, alkalinity=TA), 24.0
    )
    dosed = chemistry.solve(
        temperature=24.0,
        salinity=S,
        alkalinity=float(base.alkalinity) + dose["total_alkalinity_added_umol_kg"],
        dic=float(base.dic) + dose["total_dic_added_umol_kg"],
    )
    assert float(dosed.omega_aragonite) == pytest.approx(3.0, abs=0.01)
    assert dose["total_result"]["omega_aragonite"] == pytest.approx(3.0, abs=0.01)
    assert dose["caution"] == chemistry.DOSING_CAUTION


def test_caustic_soda_adds_alkalinity_without_carbon(client, viewer_headers, advised_tank):
    _site, _station, tank = advised_tank
    dose = _advice(client, viewer_headers, tank, chemical="sodium_hydroxide")["dose"]
    assert dose["total_refused"] is None
    density_kg_per_l = float(chemistry.seawater_density(24.0, S)) / 1000.0
    equivalents = dose["total_mg_per_l"] / CAUSTIC_SODA_G_PER_MOL * 1000.0 / density_kg_per_l
    assert dose["total_alkalinity_added_umol_kg"] == pytest.approx(equivalents, rel=1e-3)
    assert dose["total_dic_added_umol_kg"] == 0.0


def test_aeration_moves_the_tank_water_to_air_pco2(client, viewer_headers, advised_tank):
    _site, _station, tank = advised_tank
    advice = _advice(client, viewer_headers, tank)
    aerated = advice["aeration"]["result"]
    # At equilibrium pCO2 is xCO2 times the dry-air pressure: a little below 420 uatm.
    assert 390.0 < aerated["pco2_uatm"] < 420.0
    assert aerated["alkalinity_umol_kg"] == pytest.approx(TA, rel=1e-9)
    assert aerated["omega_aragonite"] > advice["in_tank"]["omega_aragonite"]


def test_advice_errors_name_the_problem(client, viewer_headers, make_tank, advised_tank):
    _site, _station, tank = advised_tank
    response = client.get(
        f"/api/v1/sites/{tank.site_id}/tanks/{tank.id}/advice",
        params={"chemical": "lime"},
        headers=viewer_headers,
    )
    assert response.status_code == 422 and "chemical" in response.text
    empty = make_tank()
    response = client.get(
        f"/api/v1/sites/{empty.site_id}/tanks/{empty.id}/advice", headers=viewer_headers
    )
    assert response.status_code == 404 and "no reading" in response.json()["detail"]
    response = client.get(f"/api/v1/sites/{tank.site_id}/tanks/nope/advice", headers=viewer_headers)
    assert response.status_code == 404
    assert client.get(f"/api/v1/sites/{tank.site_id}/tanks/{tank.id}/advice").status_code == 401
