"""Property-based checks of the solver over the ranges hatchery water can take."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from chemistry import ChemistryInputError, equilibrium_constants, solve

salinity = st.floats(1.0, 45.0)
temperature = st.floats(-1.0, 40.0)
ph = st.floats(6.8, 9.2)
alkalinity = st.floats(300.0, 4000.0)
PROPERTY_SETTINGS = settings(max_examples=60, deadline=None)


@PROPERTY_SETTINGS
@given(t=temperature, s=salinity, ph=ph, alk=alkalinity)
def test_ph_alkalinity_results_are_finite_or_refused_for_a_reason(t, s, ph, alk):
    # The non-carbonate alkalinity at this pH (DIC = 0) is the least alkalinity any water of
    # this pH can have; below it the pair is refused, above it every output is finite.
    floor = float(solve(temperature=t, salinity=s, ph=ph, dic=0.0).alkalinity)
    if alk >= floor + 1e-6:
        state = solve(temperature=t, salinity=s, ph=ph, alkalinity=alk, carbonic="millero2010")
        assert all(np.all(np.isfinite(v)) for v in state.as_dict().values())
        assert state.dic >= 0 and state.omega_aragonite >= 0
    elif alk < floor - 1e-6:
        with pytest.raises(ChemistryInputError, match="negative DIC"):
            solve(temperature=t, salinity=s, ph=ph, alkalinity=alk, carbonic="millero2010")


@PROPERTY_SETTINGS
@given(t=temperature, s=salinity, alk=alkalinity, ratio=st.floats(0.0, 1.5))
def test_alkalinity_dic_round_trips_through_ph(t, s, alk, ratio):
    state = solve(temperature=t, salinity=s, alkalinity=alk, dic=ratio * alk)
    assert all(np.all(np.isfinite(v)) for v in state.as_dict().values())
    back = solve(temperature=t, salinity=s, ph=state.ph_total, alkalinity=alk)
    assert float(back.dic) == pytest.approx(ratio * alk, rel=1e-7, abs=1e-6)


@PROPERTY_SETTINGS
@given(t=temperature, s=salinity, alk=alkalinity, pco2=st.floats(100.0, 5000.0),
       factor=st.floats(1.05, 4.0))
def test_more_co2_at_constant_alkalinity_lowers_ph_and_saturation(t, s, alk, pco2, factor):
    # Le Chatelier: adding CO2 at constant alkalinity acidifies (common knowledge, no source).
    before = solve(temperature=t, salinity=s, alkalinity=alk, pco2=pco2)
    after = solve(temperature=t, salinity=s, alkalinity=alk, pco2=pco2 * factor)
    assert after.ph_total < before.ph_total
    assert after.omega_aragonite < before.omega_aragonite
    assert after.dic > before.dic


@PROPERTY_SETTINGS
@given(t=st.floats(-1.0, 39.0), warming=st.floats(0.1, 10.0), s=salinity)
def test_co2_solubility_falls_as_temperature_rises(t, warming, s):
    # Gas solubility falls with warming (common knowledge).
    cold = equilibrium_constants(t, s)["K0"]
    warm = equilibrium_constants(min(t + warming, 40.0), s)["K0"]
    assert warm < cold
