"""Seawater density (EOS-80, one atmosphere) and alkalinity unit conversions."""

from __future__ import annotations

import numpy as np
import pytest

from chemistry.density import pure_water_density, seawater_density
from chemistry.errors import ChemistryInputError
from chemistry.units import (
    CALCIUM_CARBONATE_MOLAR_MASS,
    alkalinity_from_mg_per_l_caco3,
    mg_per_l_caco3_from_alkalinity,
)

# Check values of the EOS-80 one-atmosphere equation printed with the
# algorithms in Fofonoff & Millard 1983, UNESCO Technical Papers in Marine
# Science 44 (from memory; kg/m3 at 0 dbar, IPTS-68 temperature).
EOS80_CHECK_VALUES = [
    # (salinity, temperature deg C, density kg/m3)
    (0.0, 5.0, 999.96675),
    (35.0, 5.0, 1027.67547),
    (35.0, 25.0, 1023.34306),
]


@pytest.mark.parametrize(("salinity", "temperature", "expected"), EOS80_CHECK_VALUES)
def test_density_matches_eos80_check_values(salinity, temperature, expected):
    assert seawater_density(temperature, salinity) == pytest.approx(expected, abs=1e-5)


def test_pure_water_density_peaks_near_4_degrees():
    # Pure water is densest near 3.98 deg C at 999.975 kg/m3 (from memory; SMOW,
    # UNESCO 1981); the SMOW polynomial must reproduce both.
    temperatures = np.linspace(0.0, 10.0, 10001)
    densities = pure_water_density(temperatures)
    assert temperatures[np.argmax(densities)] == pytest.approx(3.98, abs=0.02)
    assert densities.max() == pytest.approx(999.975, abs=0.001)


def test_density_broadcasts_and_equals_pure_water_at_zero_salinity():
    temperatures = np.array([[2.0], [12.0], [30.0]])
    salinities = np.array([0.0, 20.0, 35.0])
    densities = seawater_density(temperatures, salinities)
    assert densities.shape == (3, 3)
    np.testing.assert_allclose(densities[:, 0], pure_water_density(temperatures[:, 0]))
    # Saltier is denser, warmer is lighter (over this range): common knowledge.
    assert np.all(np.diff(densities, axis=1) > 0)
    assert np.all(np.diff(densities, axis=0) < 0)


@pytest.mark.parametrize(
    ("temperature", "salinity", "field"),
    [
        (46.0, 35.0, "temperature"),
        (-3.0, 35.0, "temperature"),
        (20.0, 51.0, "salinity"),
        (20.0, float("nan"), "salinity"),
        (20.0, -1.0, "salinity"),
    ],
)
def test_density_refuses_values_outside_its_range(temperature, salinity, field):
    with pytest.raises(ChemistryInputError, match=field):
        seawater_density(temperature, salinity)


def test_density_error_names_the_array_index():
    with pytest.raises(ChemistryInputError, match="at index 2"):
        seawater_density([10.0, 11.0, 99.0], 30.0)


def test_calcium_carbonate_molar_mass_from_standard_atomic_weights():
    # IUPAC 2007 standard atomic weights: Ca 40.078, C 12.0107, O 15.9994.
    assert pytest.approx(100.0869, abs=1e-4) == CALCIUM_CARBONATE_MOLAR_MASS


def test_mg_per_l_caco3_to_umol_per_kg_derivation():
    # 100 mg/L as CaCO3 = 100 / 100.0869 mmol/L CaCO3 = 1.998264 meq/L
    # (2 equivalents per mole) = 1998.264 ueq/L; per kilogram divide by the
    # density in kg/L, 1.0233431 at S = 35, 25 deg C (EOS-80 check value above):
    # 1998.264 / 1.0233431 = 1952.68 umol/kg.
    expected = 100.0 / 100.0869 * 2.0 * 1000.0 / (1023.34306 / 1000.0)
    assert expected == pytest.approx(1952.68, abs=0.01)
    assert alkalinity_from_mg_per_l_caco3(100.0, 25.0, 35.0) == pytest.approx(expected, rel=1e-7)


def test_fresh_water_conversion_is_close_to_the_textbook_factor():
    # In fresh water 1 mg/L as CaCO3 = 0.01998 meq/L, i.e. 50.04 mg CaCO3 per meq
    # (common practice); the density of pure water near 20 deg C is 0.9982 kg/L.
    umol_per_kg = alkalinity_from_mg_per_l_caco3(50.0435, 20.0, 0.0)
    assert umol_per_kg == pytest.approx(1000.0 / 0.998206, rel=1e-5)


def test_alkalinity_unit_round_trip_broadcasts():
    values = np.array([[80.0, 110.0], [95.0, 120.0]])
    umol_per_kg = alkalinity_from_mg_per_l_caco3(values, np.array([12.0, 25.0]), 31.0)
    assert umol_per_kg.shape == (2, 2)
    np.testing.assert_allclose(
        mg_per_l_caco3_from_alkalinity(umol_per_kg, np.array([12.0, 25.0]), 31.0), values
    )


def test_alkalinity_conversion_refuses_negative_values():
    with pytest.raises(ChemistryInputError, match="alkalinity"):
        alkalinity_from_mg_per_l_caco3(-5.0, 20.0, 30.0)
    with pytest.raises(ChemistryInputError, match="alkalinity"):
        mg_per_l_caco3_from_alkalinity([2100.0, np.nan], 20.0, 30.0)
