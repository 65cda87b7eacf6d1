"""Standard uncertainty by linear propagation, and the probability helper."""

from __future__ import annotations

import math

import numpy as np
import pytest

from chemistry import (
    ORR2018_CONSTANT_UNCERTAINTIES,
    ChemistryInputError,
    at_temperature,
    probability_below,
    solve,
    standard_uncertainty,
)

# Cool, slightly undersaturated-looking intake water: omega aragonite about 1.1 at 12 deg C.
WATER = {"temperature": 12.0, "salinity": 31.0, "ph": 7.78, "alkalinity": 2150.0}


def test_orr2018_defaults():
    # Orr et al. 2018 (Marine Chemistry 207) table of standard uncertainties of the constants.
    assert dict(ORR2018_CONSTANT_UNCERTAINTIES) == {
        "pK0": 0.002,
        "pK1": 0.0075,
        "pK2": 0.015,
        "pKB": 0.01,
        "pKW": 0.01,
        "pKsp_aragonite": 0.02,
        "pKsp_calcite": 0.02,
        "total_boron": 0.02,
    }


def test_ph_uncertainty_gives_about_ten_to_twelve_percent_in_omega():
    # Issue 2 expectation: u(pH) = 0.05 near omega 1.1 at 12 deg C gives a
    # relative standard uncertainty of omega of about 10-12 %.
    state = solve(**WATER)
    assert float(state.omega_aragonite) == pytest.approx(1.1, abs=0.1)
    u = standard_uncertainty(**WATER, u_ph=0.05, constant_uncertainties=None)
    relative = float(u["omega_aragonite"] / state.omega_aragonite)
    assert 0.10 <= relative <= 0.12


def test_linear_propagation_agrees_with_monte_carlo():
    # Independent check: draw pH and alkalinity from normal distributions
    # (fixed seed) and take the sample standard deviation of the outputs.
    u = standard_uncertainty(**WATER, u_ph=0.02, u_alkalinity=5.0, constant_uncertainties=None)
    rng = np.random.default_rng(7)
    n = 20_000
    samples = solve(
        temperature=WATER["temperature"],
        salinity=WATER["salinity"],
        ph=rng.normal(WATER["ph"], 0.02, n),
        alkalinity=rng.normal(WATER["alkalinity"], 5.0, n),
    )
    for key in ("omega_aragonite", "dic", "pco2", "carbonate"):
        monte_carlo = float(np.std(getattr(samples, key), ddof=1))
        assert float(u[key]) == pytest.approx(monte_carlo, rel=0.03), key


@pytest.mark.parametrize(
    ("pair", "uncertainties"),
    [
        ({"alkalinity": 2150.0, "dic": 2075.0}, {"alkalinity": 4.0, "dic": 4.0}),
        ({"ph": 7.78, "pco2": 760.0}, {"ph": 0.01, "pco2": 20.0}),
    ],
)
def test_other_pairs_agree_with_monte_carlo(pair, uncertainties):
    # Same independent check for the implicit (alkalinity, DIC) pair and for (pH, pCO2),
    # with temperature and salinity uncertain too.
    conditions = {"temperature": 12.0, "salinity": 31.0}
    u = standard_uncertainty(
        **conditions,
        **pair,
        u_temperature=0.1,
        u_salinity=0.2,
        **{f"u_{name}": value for name, value in uncertainties.items()},
        constant_uncertainties=None,
    )
    rng = np.random.default_rng(11)
    n = 20_000
    samples = solve(
        temperature=rng.normal(12.0, 0.1, n),
        salinity=rng.normal(31.0, 0.2, n),
        **{name: rng.normal(value, uncertainties[name], n) for name, value in pair.items()},
    )
    for key in ("omega_aragonite", "ph_total", "carbonate"):
        monte_carlo = float(np.std(getattr(samples, key), ddof=1))
        assert float(u[key]) == pytest.approx(monte_carlo, rel=0.04), key


def test_ksp_uncertainty_scales_omega_by_ln10():
    # Omega = [Ca][CO3]/Ksp, so a pKsp uncertainty of 0.02 is a relative
    # omega uncertainty of ln(10) * 0.02 = 4.61 % and leaves carbonate alone.
    state = solve(**WATER)
    u = standard_uncertainty(**WATER, constant_uncertainties={"pKsp_aragonite": 0.02})
    assert float(u["omega_aragonite"] / state.omega_aragonite) == pytest.approx(
        math.log(10) * 0.02, rel=1e-3
    )
    assert float(u["carbonate"]) == pytest.approx(0.0, abs=1e-9)
    assert float(u["omega_calcite"]) == pytest.approx(0.0, abs=1e-9)


def test_constants_add_to_measurement_uncertainty():
    measured = standard_uncertainty(**WATER, u_ph=0.05, constant_uncertainties=None)
    total = standard_uncertainty(**WATER, u_ph=0.05)
    constants_only = standard_uncertainty(**WATER)
    # Independent parts add in quadrature.
    np.testing.assert_allclose(
        total["omega_aragonite"] ** 2,
        measured["omega_aragonite"] ** 2 + constants_only["omega_aragonite"] ** 2,
        rtol=1e-6,
    )
    assert constants_only["omega_aragonite"] > 0


def test_uncertainty_at_tank_temperature_and_array_shape():
    ph = np.array([7.7, 7.8, 7.9])
    u = standard_uncertainty(
        temperature=12.0,
        salinity=31.0,
        ph=ph,
        alkalinity=2150.0,
        u_ph=0.05,
        at_temperature=25.0,
        constant_uncertainties=None,
    )
    assert u["omega_aragonite"].shape == (3,)
    # Closed system: alkalinity is conserved and was not uncertain.
    np.testing.assert_allclose(u["alkalinity"], 0.0, atol=1e-9)
    # Cross-check one element by hand: difference the tank prediction in pH.
    step = 1e-4
    high = at_temperature(
        solve(temperature=12.0, salinity=31.0, ph=7.8 + step, alkalinity=2150.0), 25.0
    )
    low = at_temperature(
        solve(temperature=12.0, salinity=31.0, ph=7.8 - step, alkalinity=2150.0), 25.0
    )
    by_hand = abs(float(high.omega_aragonite - low.omega_aragonite)) / (2 * step) * 0.05
    assert float(u["omega_aragonite"][1]) == pytest.approx(by_hand, rel=1e-3)


def test_zero_uncertainty_gives_zero():
    u = standard_uncertainty(**WATER, constant_uncertainties=None)
    assert all(np.all(value == 0) for value in u.values())
    assert "omega_aragonite" in u


def test_uncertainty_for_a_parameter_that_is_not_an_input_is_refused():
    with pytest.raises(ChemistryInputError, match="u_dic"):
        standard_uncertainty(**WATER, u_dic=5.0)
    with pytest.raises(ChemistryInputError, match="u_ph"):
        standard_uncertainty(**WATER, u_ph=-0.01)
    with pytest.raises(ChemistryInputError, match="unknown key"):
        standard_uncertainty(**WATER, constant_uncertainties={"pK9": 0.1})


def test_probability_below():
    # Standard normal table: Phi(0) = 0.5, Phi(1) = 0.8413, Phi(-2) = 0.0228.
    np.testing.assert_allclose(
        probability_below([1.5, 1.0, 2.5], [0.1, 0.5, 0.5], 1.5),
        [0.5, 0.8413, 0.0228],
        atol=1e-4,
    )
    # No uncertainty: certain either way.
    np.testing.assert_array_equal(probability_below([1.2, 1.8], 0.0, 1.5), [1.0, 0.0])
    with pytest.raises(ChemistryInputError, match="standard_uncertainty"):
        probability_below(1.0, -0.1, 1.5)


def test_chunked_propagation_equals_one_pass(monkeypatch):
    # Long arrays are propagated in chunks; the chunk size must not change the answer.
    import chemistry.uncertainty as module

    ph = np.linspace(7.6, 8.1, 7).reshape(7, 1)
    kwargs = {
        "temperature": [10.0, 14.0],
        "salinity": 31.0,
        "ph": ph,
        "alkalinity": 2150.0,
        "u_ph": 0.03,
        "u_temperature": 0.2,
        "at_temperature": 24.0,
    }
    one_pass = standard_uncertainty(**kwargs)
    monkeypatch.setattr(module, "_STACKED_WATERS", 40)
    chunked = standard_uncertainty(**kwargs)
    assert one_pass["omega_aragonite"].shape == (7, 2)
    for key, value in one_pass.items():
        np.testing.assert_allclose(chunked[key], value, rtol=1e-12, atol=1e-12, err_msg=key)


def test_an_already_solved_base_gives_the_same_uncertainty_with_one_solve_fewer(monkeypatch):
    # The caller's own solve of the same inputs, carried to the tank temperature, stands in
    # for the unperturbed solve: the same numbers, and the base is not solved again.
    import chemistry.uncertainty as module

    kwargs = {**WATER, "u_ph": 0.05, "u_alkalinity": 10.0, "at_temperature": 25.0}
    without = standard_uncertainty(**kwargs)
    base = at_temperature(solve(**WATER), 25.0)
    calls = []
    real_solve = module.solve
    monkeypatch.setattr(module, "solve", lambda **kw: calls.append(kw) or real_solve(**kw))
    with_base = standard_uncertainty(**kwargs, base=base)
    assert len(calls) == 1  # the stacked perturbations only
    assert np.shape(calls[0]["ph"]) != ()  # and that one call is the stacked one
    assert without.keys() == with_base.keys()
    for key, value in without.items():
        np.testing.assert_array_equal(with_base[key], value, err_msg=key)
    assert float(with_base["omega_aragonite"]) > 0


def test_asking_for_some_outputs_gives_those_of_the_whole_budget():
    inputs = dict(
        temperature=np.array([8.0, 15.0, 22.0]),
        salinity=np.array([28.0, 31.0, 34.0]),
        ph=np.array([7.6, 7.8, 8.0]),
        alkalinity=2150.0,
        ph_scale="total",
    )
    whole = standard_uncertainty(**inputs, u_ph=0.02, u_alkalinity=10.0, at_temperature=24.0)
    some = standard_uncertainty(
        **inputs,
        u_ph=0.02,
        u_alkalinity=10.0,
        at_temperature=24.0,
        outputs=("omega_aragonite", "pco2"),
    )
    assert set(some) == {"omega_aragonite", "pco2"}
    for key, value in some.items():
        np.testing.assert_array_equal(value, whole[key])
    with pytest.raises(ChemistryInputError, match="outputs has unknown keys"):
        standard_uncertainty(**inputs, u_ph=0.02, outputs=("omega",))
