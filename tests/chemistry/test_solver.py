"""The CO2-system solver, its transforms and its input checks."""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest

from chemistry import (
    NBS_WARNING,
    ChemistryInputError,
    alkalinity_contributions,
    at_temperature,
    equilibrate_with_air,
    equilibrium_constants,
    mix,
    solve,
)
from chemistry.constants import vapour_pressure_weiss_price1980
from chemistry.pairs import INPUT_PAIRS

PAIRS = list(INPUT_PAIRS)


def test_the_pairs_are_every_pair_of_the_four_quantities():
    # The "all six pairs": each two of ph, alkalinity, dic and pco2, once.
    expected = itertools.combinations(("ph", "alkalinity", "dic", "pco2"), 2)
    assert sorted(map(sorted, PAIRS)) == sorted(map(sorted, expected))
    assert len(set(PAIRS)) == 6

# A spread of hatchery-like waters (invented test conditions, not data): cold estuarine to
# warm oceanic, low to high pH.
TEMPERATURE = np.array([2.0, 8.0, 12.0, 18.0, 25.0, 30.0, 35.0])
SALINITY = np.array([5.0, 15.0, 31.0, 28.0, 35.0, 38.0, 42.0])
PH = np.array([7.3, 7.6, 7.78, 8.0, 8.1, 7.9, 8.4])
ALKALINITY = np.array([900.0, 1400.0, 2150.0, 2000.0, 2300.0, 2450.0, 2600.0])


def _reference(**options):
    return solve(
        temperature=TEMPERATURE, salinity=SALINITY, ph=PH, alkalinity=ALKALINITY, **options
    )


@pytest.mark.parametrize("options", [
    {},
    {"carbonic": "millero2010"},
    {"boron": "uppstrom1974", "phosphate": 2.0, "silicate": 40.0},
    {"pressure": 2000.0, "phosphate": 1.0, "silicate": 10.0},
], ids=["lueker", "millero2010", "nutrients", "pressure"])
@pytest.mark.parametrize("pair", PAIRS, ids=["-".join(p) for p in PAIRS])
def test_round_trip_between_every_pair(pair, options):
    reference = _reference(**options)
    inputs = {
        "ph": reference.ph_total,
        "alkalinity": reference.alkalinity,
        "dic": reference.dic,
        "pco2": reference.pco2,
    }
    state = solve(
        temperature=TEMPERATURE, salinity=SALINITY, **{n: inputs[n] for n in pair}, **options
    )
    np.testing.assert_allclose(state.ph_total, reference.ph_total, rtol=0, atol=1e-6)
    for name in ("alkalinity", "dic", "pco2", "omega_aragonite", "revelle_factor"):
        np.testing.assert_allclose(getattr(state, name), getattr(reference, name), rtol=1e-7)


@pytest.mark.parametrize("pair", PAIRS, ids=["-".join(p) for p in PAIRS])
def test_scalar_path_matches_array_path(pair):
    reference = _reference(phosphate=1.5, silicate=20.0)
    arrays = {"ph": reference.ph_total, "alkalinity": reference.alkalinity,
              "dic": reference.dic, "pco2": reference.pco2}
    for i in range(TEMPERATURE.size):
        one = solve(temperature=float(TEMPERATURE[i]), salinity=float(SALINITY[i]),
                    phosphate=1.5, silicate=20.0, **{n: float(arrays[n][i]) for n in pair})
        assert np.shape(one.ph_total) == ()
        for name, value in one.as_dict().items():
            assert value == pytest.approx(reference.as_dict()[name][i], rel=1e-9, abs=1e-9), name


def test_alkalinity_closure_species_add_up_to_the_input():
    # Dickson 1981 definition: the contributions add up to the alkalinity that was given.
    state = solve(temperature=TEMPERATURE, salinity=SALINITY, ph=PH, alkalinity=ALKALINITY,
                  phosphate=2.0, silicate=30.0, pressure=100.0)
    parts = alkalinity_contributions(state)
    np.testing.assert_allclose(sum(parts.values()), ALKALINITY, rtol=1e-12)
    assert np.all(parts["borate"] > 0) and np.all(parts["bisulfate"] <= 0)
    np.testing.assert_allclose(state.co2 + state.bicarbonate + state.carbonate, state.dic,
                               rtol=1e-12)


def test_alkalinity_closure_after_implicit_solve():
    state = solve(temperature=TEMPERATURE, salinity=SALINITY, alkalinity=ALKALINITY,
                  dic=ALKALINITY * 0.9, phosphate=1.0, silicate=5.0)
    np.testing.assert_allclose(sum(alkalinity_contributions(state).values()), ALKALINITY,
                               rtol=1e-9)


def test_shapes_scalar_one_and_two_dimensional():
    scalar = solve(temperature=12.0, salinity=31.0, ph=7.9, alkalinity=2150.0)
    assert all(np.shape(v) == () for v in scalar.as_dict().values())
    assert isinstance(scalar.omega_aragonite, float | np.floating | np.ndarray)

    one_d = solve(temperature=[10.0, 12.0, 14.0], salinity=31.0, ph=7.9, alkalinity=2150.0)
    assert one_d.omega_aragonite.shape == (3,)
    assert one_d.salinity.shape == (3,)

    temperatures = np.array([[5.0], [15.0], [25.0]])
    salinities = np.array([20.0, 30.0, 35.0, 40.0])
    grid = solve(temperature=temperatures, salinity=salinities, alkalinity=2200.0, dic=2000.0)
    assert grid.ph_total.shape == (3, 4)
    single = solve(temperature=15.0, salinity=35.0, alkalinity=2200.0, dic=2000.0)
    assert grid.ph_total[1, 2] == pytest.approx(float(single.ph_total), abs=1e-10)
    assert set(grid.as_dict()) >= {"ph_total", "omega_aragonite", "revelle_factor", "fco2"}


def test_empty_arrays_give_empty_results():
    state = solve(temperature=np.array([]), salinity=35.0, alkalinity=2300.0, dic=2000.0)
    assert state.ph_total.shape == (0,)


@pytest.mark.parametrize(
    ("kwargs", "parameter", "words"),
    [
        ({"temperature": [10.0, np.nan, 12.0]}, "temperature", ["NaN", "index 1", "-2", "45"]),
        ({"temperature": 50.0}, "temperature", ["50", "-2", "45", "deg C"]),
        ({"salinity": [[30.0, 31.0], [60.0, 32.0]]}, "salinity", ["60", "(1, 0)", "0", "50"]),
        ({"ph": 15.0}, "ph", ["15", "0", "14"]),
        ({"alkalinity": [2100.0, -5.0]}, "alkalinity", ["-5", "index 1", "0 or more"]),
        ({"phosphate": -1.0}, "phosphate", ["-1", "0 or more"]),
        ({"pressure": -3.0}, "pressure", ["-3", "dbar"]),
    ],
)
def test_bad_input_names_field_value_range_and_index(kwargs, parameter, words):
    arguments = {"temperature": 12.0, "salinity": 31.0, "ph": 7.9, "alkalinity": 2150.0}
    arguments.update(kwargs)
    with pytest.raises(ChemistryInputError) as caught:
        solve(**arguments)
    assert caught.value.parameter == parameter
    message = str(caught.value)
    assert message.startswith(parameter)
    for word in words:
        assert word in message, message
    assert isinstance(caught.value, ValueError)


def test_wrong_number_of_inputs_and_unknown_options():
    with pytest.raises(ChemistryInputError, match="exactly two"):
        solve(temperature=12.0, salinity=31.0, ph=7.9)
    with pytest.raises(ChemistryInputError, match="exactly two"):
        solve(temperature=12.0, salinity=31.0, ph=7.9, dic=2000.0, alkalinity=2100.0)
    with pytest.raises(ChemistryInputError, match="ph_scale"):
        solve(temperature=12.0, salinity=31.0, ph=7.9, dic=2000.0, ph_scale="mv")
    with pytest.raises(ChemistryInputError, match="carbonic"):
        solve(temperature=12.0, salinity=31.0, ph=7.9, dic=2000.0, carbonic="other")
    with pytest.raises(ChemistryInputError, match="constant_shifts"):
        solve(temperature=12.0, salinity=31.0, ph=7.9, dic=2000.0, constant_shifts={"pKX": 1})
    with pytest.raises(ChemistryInputError, match="broadcast"):
        solve(temperature=[1.0, 2.0], salinity=[30.0, 31.0, 32.0], ph=7.9, dic=2000.0)


def test_inputs_no_water_can_have_raise_instead_of_nan():
    with pytest.raises(ChemistryInputError, match="more dissolved CO2") as caught:
        solve(temperature=[12.0, 12.0], salinity=31.0, dic=[2000.0, 10.0], pco2=1000.0)
    assert caught.value.index == (1,)
    with pytest.raises(ChemistryInputError, match="negative DIC"):
        solve(temperature=25.0, salinity=35.0, ph=9.0, alkalinity=50.0)
    # A single water with no DIC (or one too small to survive the unit change: schemathesis
    # posted 5e-324 umol/kg) is refused like the array case, not divided by zero.
    for dic in (0.0, 5e-324):
        with pytest.raises(ChemistryInputError, match="more dissolved CO2"):
            solve(temperature=0.0, salinity=0.0, dic=dic, pco2=1.0)


def test_extreme_but_valid_implicit_inputs_converge_to_finite_values():
    # Near-zero and very large alkalinity and DIC: the bracketed iteration must not give NaN.
    alkalinity = np.array([0.0, 1.0, 100.0, 2300.0, 2300.0, 10000.0, 2300.0])
    dic = np.array([0.0, 2000.0, 0.0, 1.0, 5000.0, 2000.0, 2300.0])
    state = solve(temperature=20.0, salinity=35.0, alkalinity=alkalinity, dic=dic)
    assert np.all(np.isfinite(state.ph_total))
    np.testing.assert_allclose(
        sum(alkalinity_contributions(state).values()), alkalinity, atol=1e-6
    )
    by_pco2 = solve(temperature=20.0, salinity=35.0, alkalinity=[1.0, 2300.0, 8000.0],
                    pco2=[1.0, 100000.0, 5.0])
    assert np.all(np.isfinite(by_pco2.ph_total)) and np.all(by_pco2.dic >= 0)


def test_a_fall_of_one_tenth_in_ph_is_about_26_percent_more_hydrogen_ion():
    # Common practice: pH 8.2 -> 8.1 is "about a 26 % rise" in [H+] (10**0.1 = 1.2589).
    high = solve(temperature=15.0, salinity=33.0, ph=8.2, alkalinity=2250.0)
    low = solve(temperature=15.0, salinity=33.0, ph=8.1, alkalinity=2250.0)
    rise = 10.0 ** (-low.ph_free) / 10.0 ** (-high.ph_free) - 1.0
    assert rise == pytest.approx(0.26, abs=0.005)


def test_closed_system_heating_raises_pco2_and_saturation():
    # Heating in a closed system moves CO2 out of the carbonate ion less than Ksp falls:
    # pCO2 rises by roughly 4 %/deg C (Takahashi et al. 1993, 0.0423 per deg C for ocean
    # water; from memory) and omega aragonite rises, pH total falls.
    intake = solve(temperature=12.0, salinity=33.0, alkalinity=2250.0, dic=2050.0)
    tank = at_temperature(intake, 25.0)
    assert float(tank.alkalinity) == pytest.approx(2250.0)
    assert float(tank.dic) == pytest.approx(2050.0)
    ratio = float(tank.pco2 / intake.pco2)
    assert ratio == pytest.approx(math.exp(0.0423 * 13.0), rel=0.08)
    assert tank.omega_aragonite > intake.omega_aragonite
    assert tank.ph_total < intake.ph_total
    back = at_temperature(tank, 12.0)
    assert float(back.ph_total) == pytest.approx(float(intake.ph_total), abs=1e-9)


def test_revelle_factor_matches_a_finite_difference():
    state = solve(temperature=TEMPERATURE, salinity=SALINITY, ph=PH, alkalinity=ALKALINITY)
    step = 1e-4
    up = solve(temperature=TEMPERATURE, salinity=SALINITY, alkalinity=state.alkalinity,
               dic=state.dic * (1 + step))
    down = solve(temperature=TEMPERATURE, salinity=SALINITY, alkalinity=state.alkalinity,
                 dic=state.dic * (1 - step))
    numeric = (np.log(up.pco2) - np.log(down.pco2)) / (np.log1p(step) - np.log1p(-step))
    np.testing.assert_allclose(state.revelle_factor, numeric, rtol=1e-5)
    # Surface seawater has a Revelle factor of about 8 to 15 (Revelle and Suess 1957; Sabine
    # et al. 2004, from memory).
    ocean = solve(temperature=20.0, salinity=35.0, alkalinity=2300.0, pco2=400.0)
    assert 8.0 < float(ocean.revelle_factor) < 15.0


def test_fugacity_is_slightly_below_partial_pressure():
    # Weiss 1974: fCO2 is about 0.3 % below pCO2 at 1 atm (DSC 2007 chapter 5).
    state = solve(temperature=25.0, salinity=35.0, alkalinity=2300.0, dic=2000.0)
    assert float(state.fco2 / state.pco2) == pytest.approx(0.9968, abs=0.0005)


def test_ph_scales_are_ordered_and_nbs_warns():
    state = solve(temperature=25.0, salinity=35.0, ph=8.0, alkalinity=2300.0)
    # DSC 2007 chapter 2: pH_free - pH_total is about 0.11 at S = 35, 25 deg C; the seawater
    # scale lies about 0.01 below the total scale.
    assert float(state.ph_free - state.ph_total) == pytest.approx(0.11, abs=0.01)
    assert -0.02 < float(state.ph_seawater - state.ph_total) < 0.0
    assert state.warnings == ()
    nbs = solve(temperature=25.0, salinity=35.0, ph=float(state.ph_nbs), ph_scale="nbs",
                alkalinity=2300.0)
    assert float(nbs.ph_total) == pytest.approx(8.0, abs=1e-12)
    assert NBS_WARNING in nbs.warnings
    # Takahashi et al. 1982: NBS pH reads about 0.12-0.15 above the seawater scale at S = 35.
    assert 0.10 < float(state.ph_nbs - state.ph_seawater) < 0.17


def test_out_of_range_constants_give_warning_sentences_not_errors():
    low_salinity = solve(temperature=12.0, salinity=[10.0, 30.0], ph=7.9, alkalinity=1200.0)
    assert any("Lueker2000" in w and "1 of 2 values" in w for w in low_salinity.warnings)
    estuarine = solve(temperature=12.0, salinity=10.0, ph=7.9, alkalinity=1200.0,
                      carbonic="millero2010")
    assert not any("Millero2010" in w for w in estuarine.warnings)
    assert any("Mucci1983" not in w for w in estuarine.warnings) or estuarine.warnings == ()
    assert equilibrium_constants(1.0, 35.0).warnings  # below the 2 deg C of Lueker 2000


def test_millero2010_and_lueker2000_agree_in_ocean_water():
    # Both sets fit seawater at S = 35, 25 deg C; their pK1 and pK2 agree to about 0.01
    # (from memory, Orr et al. 2015 comparisons).
    lueker = equilibrium_constants(25.0, 35.0)
    millero = equilibrium_constants(25.0, 35.0, carbonic="millero2010")
    for name in ("K1", "K2"):
        assert math.log10(millero[name] / lueker[name]) == pytest.approx(0.0, abs=0.012)


def test_pressure_raises_solubility_and_lowers_saturation():
    # Millero 1995: CaCO3 solubility rises with pressure (negative reaction volume).
    surface = equilibrium_constants(2.0, 35.0, 0.0)
    deep = equilibrium_constants(2.0, 35.0, 4000.0)
    assert deep["Ksp_aragonite"] > 1.5 * surface["Ksp_aragonite"]
    assert deep["K1"] > surface["K1"]


def test_constant_shifts_move_the_constants_as_defined():
    base = solve(temperature=18.0, salinity=34.0, ph=7.95, alkalinity=2200.0)
    shifted = solve(temperature=18.0, salinity=34.0, ph=7.95, alkalinity=2200.0,
                    constant_shifts={"pK0": 0.01})
    # Same CO2, K0 times 10**-0.01: pCO2 rises by 10**0.01.
    assert float(shifted.pco2 / base.pco2) == pytest.approx(10 ** 0.01, rel=1e-12)
    assert float(shifted.dic) == pytest.approx(float(base.dic), rel=1e-12)
    boron = solve(temperature=18.0, salinity=34.0, ph=7.95, alkalinity=2200.0,
                  constant_shifts={"total_boron": 0.02})
    borate = alkalinity_contributions(base)["borate"]
    assert float(alkalinity_contributions(boron)["borate"]) == pytest.approx(1.02 * borate)
    arrays = solve(temperature=18.0, salinity=34.0, ph=7.95, alkalinity=2200.0,
                   constant_shifts={"pKsp_aragonite": np.array([[0.0], [0.02]])})
    assert arrays.omega_aragonite.shape == (2, 1)
    assert float(arrays.omega_aragonite[1, 0] / arrays.omega_aragonite[0, 0]) == pytest.approx(
        10 ** 0.02
    )
    assert arrays.options["constant_shifts"]["pKsp_aragonite"].shape == (2, 1)


def test_equilibrate_with_air_reaches_the_air_pco2():
    water = solve(temperature=15.0, salinity=32.0, ph=7.6, alkalinity=2100.0)
    aerated = equilibrate_with_air(water, xco2_ppm=420.0)
    expected = 420.0 * (1.0 - vapour_pressure_weiss_price1980(15.0, 32.0))
    assert float(aerated.pco2) == pytest.approx(expected, rel=1e-9)
    assert float(aerated.alkalinity) == pytest.approx(2100.0)
    assert aerated.ph_total > water.ph_total and aerated.dic < water.dic
    # Weiss & Price 1980: water-vapour pressure near 0.017 atm at 15 deg C over seawater
    # (pure water 1.705 kPa, lowered about 2 % by salt; from memory).
    assert vapour_pressure_weiss_price1980(15.0, 32.0) == pytest.approx(0.0165, abs=0.0005)


def test_mix_is_linear_in_alkalinity_and_dic_not_in_saturation():
    river = solve(temperature=8.0, salinity=5.0, alkalinity=800.0, dic=850.0,
                  carbonic="millero2010")
    sea = solve(temperature=14.0, salinity=34.0, alkalinity=2300.0, dic=2050.0,
                carbonic="millero2010")
    mixed = mix([river, sea], [0.3, 0.7])
    assert float(mixed.alkalinity) == pytest.approx(0.3 * 800 + 0.7 * 2300)
    assert float(mixed.dic) == pytest.approx(0.3 * 850 + 0.7 * 2050)
    assert float(mixed.salinity) == pytest.approx(0.3 * 5 + 0.7 * 34)
    linear_omega = 0.3 * river.omega_aragonite + 0.7 * sea.omega_aragonite
    assert abs(float(mixed.omega_aragonite - linear_omega)) > 0.01
    same = mix([sea, sea], [0.5, 0.5])
    assert float(same.ph_total) == pytest.approx(float(sea.ph_total), abs=1e-9)
    assert mixed.carbonic == "millero2010"
    with pytest.raises(ChemistryInputError, match="add up to 1"):
        mix([river, sea], [0.5, 0.6])
    with pytest.raises(ChemistryInputError, match="same constants"):
        mix([river, solve(temperature=14.0, salinity=34.0, alkalinity=2300.0, dic=2050.0)],
            [0.5, 0.5])


def test_long_arrays_are_solved_in_slices_with_global_indices():
    # Arrays longer than one internal slice: results equal single solves and an error names
    # the index in the caller's array, not in the slice.
    temperatures = np.linspace(0.0, 40.0, 20000)
    many = solve(temperature=temperatures, salinity=35.0, alkalinity=2300.0, dic=2000.0)
    one = solve(temperature=float(temperatures[12345]), salinity=35.0, alkalinity=2300.0,
                dic=2000.0)
    assert float(many.ph_total[12345]) == pytest.approx(float(one.ph_total), abs=1e-12)
    dic = np.full((2, 10000), 2000.0)
    dic[1, 5000] = 5.0
    with pytest.raises(ChemistryInputError, match=r"index \(1, 5000\)") as caught:
        solve(temperature=12.0, salinity=31.0, dic=dic, pco2=1000.0)
    assert caught.value.index == (1, 5000)


def test_remembered_constants_of_one_water_equal_the_array_ones_and_are_not_shared():
    """compute_constants keeps the set of one water (floats); each caller gets a copy, and
    the values are the ones the array path gives for the same water."""
    from chemistry.constants import _constants_of_one_water, compute_constants

    first = compute_constants(12.0, 31.0, 0.0, "lueker2000", "lee2010")
    hits = _constants_of_one_water.cache_info().hits
    first["K1"] = -1.0  # a caller changing its own set
    again = compute_constants(12.0, 31.0, 0.0, "lueker2000", "lee2010")
    arrays = compute_constants(
        np.array([12.0, 20.0]), np.array([31.0, 33.0]), np.zeros(2), "lueker2000", "lee2010"
    )
    assert again["K1"] > 0
    assert _constants_of_one_water.cache_info().hits == hits + 1  # remembered, not redone
    for name, value in again.items():
        assert value == pytest.approx(float(np.asarray(arrays[name])[0]), rel=1e-13), name


def test_a_states_arrays_cannot_be_written_through():
    """The solver may hand back the caller's own arrays (reshaped): they come read-only, so
    neither side can change the other's numbers."""
    temperature = np.array([10.0, 20.0])
    alkalinity = np.array([2100.0, 2200.0])
    state = solve(temperature=temperature, salinity=31.0, ph=7.8, alkalinity=alkalinity)
    for name in ("temperature", "salinity", "alkalinity", "omega_aragonite", "phosphate"):
        with pytest.raises(ValueError, match="read-only"):
            np.asarray(getattr(state, name))[0] = 0.0
    assert temperature.flags.writeable and temperature[0] == 10.0
