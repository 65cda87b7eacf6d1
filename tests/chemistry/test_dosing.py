"""Alkaline treatments: stoichiometry, dose for a target, refusals."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from chemistry import (
    CHEMICALS,
    DOSING_CAUTION,
    ChemistryInputError,
    DoseRefusedError,
    add_chemical,
    at_temperature,
    dose_for_target,
    solve,
)
from chemistry.dosing import MAX_RESULT_PH_TOTAL, dose_additions


def intake_water(**overrides):
    # Invented demo-like intake water: cool, slightly brackish, low pH.
    inputs = {"temperature": 12.0, "salinity": 31.0, "ph": 7.75, "alkalinity": 2150.0}
    inputs.update(overrides)
    return solve(**inputs)


@pytest.mark.parametrize(
    ("name", "molar_mass", "alkalinity", "dic"),
    [
        # Molar masses from IUPAC 2007 standard atomic weights (Na 22.98976928,
        # C 12.0107, O 15.9994, H 1.00794); stoichiometry per mole: carbonate
        # takes two protons, bicarbonate and hydroxide one (common practice).
        ("sodium_carbonate", 105.988, 2, 1),  # 105.99 to two decimals
        ("sodium_bicarbonate", 84.007, 1, 1),
        ("sodium_hydroxide", 39.997, 1, 0),
    ],
)
def test_chemicals_table(name, molar_mass, alkalinity, dic):
    chemical = CHEMICALS[name]
    assert chemical.molar_mass == pytest.approx(molar_mass, abs=0.001)
    assert (chemical.alkalinity_per_mole, chemical.dic_per_mole) == (alkalinity, dic)


def test_one_mg_per_l_soda_ash_stoichiometry():
    # Issue 2: 1 mg/L Na2CO3 at S = 35, 25 deg C adds about 18.4 umol/kg
    # alkalinity and 9.2 umol/kg DIC. Derivation: 1 mg/L / 105.99 mg/mmol =
    # 9.4349e-3 mmol/L = 9.4349 umol/L; divided by the EOS-80 density
    # 1.02334 kg/L (Fofonoff & Millard 1983 check value 1023.343 kg/m3):
    # 9.2197 umol/kg of Na2CO3, i.e. 9.22 umol/kg DIC and 2 x 9.22 = 18.44
    # umol/kg alkalinity.
    expected_dic = 1.0 / 105.99 * 1000.0 / 1.023343
    assert expected_dic == pytest.approx(9.2197, abs=1e-4)
    alkalinity_added, dic_added = dose_additions("sodium_carbonate", 1.0, 25.0, 35.0)
    assert dic_added == pytest.approx(expected_dic, rel=1e-4)
    assert alkalinity_added == pytest.approx(2 * expected_dic, rel=1e-4)
    assert alkalinity_added == pytest.approx(18.4, abs=0.05)


def test_add_chemical_raises_alkalinity_dic_and_omega():
    water = intake_water(temperature=25.0, salinity=35.0)
    dosed = add_chemical(water, "sodium_carbonate", 10.0)
    assert float(dosed.alkalinity - water.alkalinity) == pytest.approx(184.4, abs=0.2)
    assert float(dosed.dic - water.dic) == pytest.approx(92.2, abs=0.1)
    assert dosed.omega_aragonite > water.omega_aragonite
    assert dosed.ph_total > water.ph_total
    # Hydroxide adds no carbon: DIC unchanged.
    with_hydroxide = add_chemical(water, "sodium_hydroxide", 5.0)
    assert float(with_hydroxide.dic) == pytest.approx(float(water.dic), abs=1e-6)


def test_add_chemical_broadcasts_over_doses():
    water = intake_water()
    dosed = add_chemical(water, "sodium_bicarbonate", np.array([0.0, 20.0, 40.0]))
    assert np.shape(dosed.omega_aragonite) == (3,)
    assert float(dosed.omega_aragonite[0]) == pytest.approx(float(water.omega_aragonite))
    assert np.all(np.diff(dosed.omega_aragonite) > 0)


@pytest.mark.parametrize("chemical", ["sodium_carbonate", "sodium_hydroxide"])
def test_dose_reaches_target_when_resolved(chemical):
    water = intake_water()
    advice = dose_for_target(water, 2.5, chemical, temperature=25.0)
    assert advice.mg_per_l > 0
    assert advice.grams_per_1000_l == advice.mg_per_l
    assert advice.caution == DOSING_CAUTION
    assert float(advice.state.temperature) == pytest.approx(25.0)
    # Re-solve independently: carry to 25 deg C, add the advised dose.
    check = add_chemical(at_temperature(water, 25.0), chemical, advice.mg_per_l)
    assert float(check.omega_aragonite) == pytest.approx(2.5, abs=1e-3)
    assert float(advice.state.omega_aragonite) == pytest.approx(2.5, abs=1e-3)
    added_alkalinity, added_dic = dose_additions(chemical, advice.mg_per_l, 25.0, 31.0)
    assert advice.alkalinity_added == pytest.approx(float(added_alkalinity))
    assert advice.dic_added == pytest.approx(float(added_dic))


def test_no_dose_when_already_at_target():
    water = intake_water(ph=8.1, temperature=25.0)
    assert water.omega_aragonite > 2.0
    advice = dose_for_target(water, 2.0)
    assert advice.mg_per_l == 0.0
    assert advice.alkalinity_added == 0.0
    assert advice.caution == DOSING_CAUTION


def test_refuses_target_above_precipitation_limit():
    # Moras et al. 2022: abiotic precipitation risk rises above omega aragonite about 5.
    with pytest.raises(DoseRefusedError, match="above 5"):
        dose_for_target(intake_water(), 5.5)


def test_refuses_dose_that_pushes_ph_above_cap():
    # Cold water needs a high pH to reach omega 4.5 with hydroxide (no carbon added).
    water = intake_water(temperature=5.0)
    with pytest.raises(DoseRefusedError, match="pH_total") as refusal:
        dose_for_target(water, 4.5, "sodium_hydroxide")
    assert str(MAX_RESULT_PH_TOTAL) in str(refusal.value)


def test_refuses_target_bicarbonate_cannot_reach():
    with pytest.raises(DoseRefusedError, match="sodium_bicarbonate cannot raise"):
        dose_for_target(intake_water(), 4.0, "sodium_bicarbonate")


def test_refusal_is_a_chemistry_input_error():
    assert issubclass(DoseRefusedError, ChemistryInputError)


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [
        ({"target_omega_aragonite": -1.0}, "target_omega_aragonite"),
        ({"target_omega_aragonite": float("nan")}, "target_omega_aragonite"),
        ({"target_omega_aragonite": 2.0, "chemical": "lime"}, "chemical must be one of"),
    ],
)
def test_bad_dose_requests(kwargs, message):
    with pytest.raises(ChemistryInputError, match=message):
        dose_for_target(intake_water(), **kwargs)


def test_dose_for_target_takes_one_sample():
    waters = intake_water(ph=np.array([7.7, 7.8]))
    with pytest.raises(ChemistryInputError, match="one water sample"):
        dose_for_target(waters, 2.0)


def test_negative_dose_is_refused():
    with pytest.raises(ChemistryInputError, match="dose"):
        add_chemical(intake_water(), "sodium_carbonate", -1.0)


def test_caution_says_what_the_rules_require():
    text = DOSING_CAUTION.lower()
    for phrase in (
        "does not replace",
        "stock solution",
        "header tank",
        "never straight",
        "measure",
        "safety data sheet",
        "local codes",
    ):
        assert phrase in text


@settings(max_examples=40, deadline=None)
@given(
    temperature=st.floats(2.0, 30.0),
    salinity=st.floats(20.0, 36.0),
    ph=st.floats(7.3, 8.1),
    alkalinity=st.floats(1600.0, 2500.0),
    target=st.floats(1.0, 4.0),
)
def test_dose_advice_property(temperature, salinity, ph, alkalinity, target):
    # For any plausible intake, soda-ash advice either reaches the target
    # (checked by an independent re-solve), says none is needed, or refuses.
    water = solve(temperature=temperature, salinity=salinity, ph=ph, alkalinity=alkalinity)
    try:
        advice = dose_for_target(water, target, "sodium_carbonate")
    except DoseRefusedError as refusal:
        assert "pH_total" in str(refusal) or "cannot raise" in str(refusal)
        return
    if advice.mg_per_l == 0:
        assert float(water.omega_aragonite) >= target
        return
    check = add_chemical(water, "sodium_carbonate", advice.mg_per_l)
    assert float(check.omega_aragonite) == pytest.approx(target, abs=1e-3)
    assert float(check.ph_total) <= MAX_RESULT_PH_TOTAL
