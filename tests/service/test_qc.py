"""QC tests against the test definitions of the IOOS QARTOD manuals (pure, no database).

Sources named beside the checks:
[QARTOD-TS] U.S. IOOS, Manual for Real-Time Quality Control of In-situ Temperature and
Salinity Data (version 2.1, 2020); [QARTOD-pH] U.S. IOOS, Manual for Real-Time Quality
Control of pH Data Observations (2019); [IOC-FLAGS] UNESCO-IOC Manuals and Guides 54(3),
2013. Test numbers and editions are from memory; the definitions checked are the
manuals' formulas as restated in app/readings/qc.py.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from app.readings.qc import (
    DEFAULT_QC_LIMIT_SOURCES,
    DEFAULT_QC_LIMITS,
    VARIABLES,
    QcFlag,
    QcLimits,
    combine_flags,
    flat_line_test,
    gross_range_test,
    limits_with_overrides,
    rate_of_change_test,
    run_qc,
    spike_test,
)

PASS, NOT_EVALUATED, SUSPECT, FAIL, MISSING = 1, 2, 3, 4, 9
FIVE_MINUTES = 300.0


def minutes(count: int, step: float = FIVE_MINUTES) -> np.ndarray:
    return np.arange(count) * step


def test_flag_values_are_the_ioc_primary_flags():
    # [IOC-FLAGS] primary level flags: 1 good/pass, 2 not evaluated, 3 suspect,
    # 4 bad/fail, 9 missing.
    assert [int(f) for f in QcFlag] == [PASS, NOT_EVALUATED, SUSPECT, FAIL, MISSING]


class TestGrossRange:
    # [QARTOD-TS] test 4 and [QARTOD-pH] test 4: fail when the value is below SENSOR_MIN
    # or above SENSOR_MAX; suspect when below USER_MIN or above USER_MAX.
    def test_sensor_span_fails_user_span_is_suspect(self):
        flags = gross_range_test(
            [5.9, 6.0, 7.0, 7.5, 8.0, 8.7, 9.5, 9.6],
            sensor_min=6.0,
            sensor_max=9.5,
            user_min=7.2,
            user_max=8.6,
        )
        assert flags.tolist() == [FAIL, SUSPECT, SUSPECT, PASS, PASS, SUSPECT, SUSPECT, FAIL]

    def test_the_bounds_themselves_pass(self):
        # The manuals' inequalities are strict (Tn < SENSOR_MIN, Tn > SENSOR_MAX).
        flags = gross_range_test(
            [6.0, 7.2, 8.6, 9.5], sensor_min=6.0, sensor_max=9.5, user_min=7.2, user_max=8.6
        )
        assert flags.tolist() == [SUSPECT, PASS, PASS, SUSPECT]
        assert gross_range_test([6.0, 9.5], sensor_min=6.0, sensor_max=9.5).tolist() == [PASS] * 2

    def test_missing_value_is_flagged_missing(self):
        # [IOC-FLAGS] flag 9: missing data.
        flags = gross_range_test([np.nan, 7.5], sensor_min=6.0, sensor_max=9.5)
        assert flags.tolist() == [MISSING, PASS]


class TestSpike:
    # [QARTOD-TS] test 6 and [QARTOD-pH] test 6: SPK_REF = (T[n-1] + T[n+1]) / 2;
    # fail when |T[n] - SPK_REF| > THRSHLD_HIGH, suspect when > THRSHLD_LOW.
    def test_spike_heights_against_thresholds(self):
        values = [10.0, 10.0, 12.0, 10.0, 10.0, 14.5, 10.0, 10.0]
        flags = spike_test(
            minutes(len(values)),
            values,
            suspect_threshold=1.0,
            fail_threshold=3.0,
            max_gap_s=3600,
        )
        # Index 2: height 2 (suspect); index 5: height 4.5 (fail). Ends lack a neighbour.
        assert flags.tolist() == [
            NOT_EVALUATED,
            PASS,
            SUSPECT,
            PASS,
            SUSPECT,
            FAIL,
            SUSPECT,
            NOT_EVALUATED,
        ]

    def test_reference_is_the_mean_of_the_neighbours(self):
        # A steady ramp has zero spike height under SPK_REF = mean of the neighbours,
        # although each step (1.0) exceeds the suspect threshold.
        flags = spike_test(
            minutes(5),
            [0.0, 1.0, 2.0, 3.0, 4.0],
            suspect_threshold=0.5,
            fail_threshold=2.0,
            max_gap_s=3600,
        )
        assert flags[1:-1].tolist() == [PASS, PASS, PASS]

    def test_neighbours_beyond_the_gap_are_not_compared(self):
        times = np.array([0.0, 300.0, 300.0 + 7200.0])
        flags = spike_test(
            times, [10.0, 14.0, 10.0], suspect_threshold=1.0, fail_threshold=3.0, max_gap_s=3600
        )
        assert flags[1] == NOT_EVALUATED

    def test_missing_neighbour_is_skipped(self):
        flags = spike_test(
            minutes(4),
            [10.0, np.nan, 14.0, 10.0],
            suspect_threshold=1.0,
            fail_threshold=3.0,
            max_gap_s=3600,
        )
        assert flags.tolist() == [NOT_EVALUATED, MISSING, FAIL, NOT_EVALUATED]


class TestRateOfChange:
    # [QARTOD-TS] test 7 and [QARTOD-pH] test 7: suspect when |T[n] - T[n-1]| > N * SD,
    # SD over the previous 25 hours; the test has no fail outcome.
    def series(self) -> tuple[np.ndarray, np.ndarray]:
        hours = 26
        times = minutes(hours * 12)
        rng = np.random.default_rng(7)
        values = 8.0 + 0.01 * rng.standard_normal(times.size)
        return times, values

    def test_jump_beyond_three_sd_is_suspect_never_fail(self):
        times, values = self.series()
        values[-1] = values[-2] + 0.2
        sd = np.std(values[(times >= times[-1] - 25 * 3600) & (times < times[-1])], ddof=1)
        assert 3 * sd < 0.2
        flags = rate_of_change_test(
            times,
            values,
            deviations=3.0,
            window_s=25 * 3600,
            min_points=10,
            min_step=0.0,
            max_gap_s=3600,
        )
        assert flags[-1] == SUSPECT
        assert FAIL not in flags.tolist()

    def test_step_within_three_sd_passes(self):
        times, values = self.series()
        window = (times >= times[-1] - 25 * 3600) & (times < times[-1])
        sd = np.std(values[window], ddof=1)
        values[-1] = values[-2] + 2.5 * sd
        flags = rate_of_change_test(
            times,
            values,
            deviations=3.0,
            window_s=25 * 3600,
            min_points=10,
            min_step=0.0,
            max_gap_s=3600,
        )
        assert flags[-1] == PASS

    def test_too_little_history_is_not_evaluated(self):
        flags = rate_of_change_test(
            minutes(5),
            [8.0, 8.0, 8.0, 8.0, 9.0],
            deviations=3.0,
            window_s=25 * 3600,
            min_points=10,
            min_step=0.0,
            max_gap_s=3600,
        )
        assert flags.tolist() == [NOT_EVALUATED] * 5

    def test_step_below_sensor_resolution_floor_passes(self):
        # Design default: a perfectly quiet series (SD 0) does not make every 0.01 step
        # suspect when min_step says such steps are noise.
        values = np.full(40, 8.0)
        values[-1] = 8.01
        flags = rate_of_change_test(
            minutes(40),
            values,
            deviations=3.0,
            window_s=25 * 3600,
            min_points=10,
            min_step=0.02,
            max_gap_s=3600,
        )
        assert flags[-1] == PASS


class TestFlatLine:
    # [QARTOD-TS] test 8 and [QARTOD-pH] test 8: fail when the present value equals
    # (within EPS) each of the previous REP_CNT_FAIL values, suspect for REP_CNT_SUSPECT.
    def test_repeats_count_up_to_suspect_then_fail(self):
        values = [7.0, 7.1, 7.2, 7.3, 7.3, 7.3, 7.3, 7.3, 7.3, 7.4]
        flags = flat_line_test(values, suspect_count=3, fail_count=5, tolerance=1e-6)
        # Index 6 repeats the three before it; index 8 the five before it.
        assert flags.tolist() == [
            NOT_EVALUATED,
            NOT_EVALUATED,
            NOT_EVALUATED,
            PASS,
            PASS,
            PASS,
            SUSPECT,
            SUSPECT,
            FAIL,
            PASS,
        ]

    def test_differences_inside_tolerance_count_as_the_same(self):
        values = [7.3, 7.30004, 7.29997, 7.30002]
        flags = flat_line_test(values, suspect_count=3, fail_count=5, tolerance=1e-4)
        assert flags[-1] == SUSPECT
        flags = flat_line_test(values, suspect_count=3, fail_count=5, tolerance=1e-5)
        assert flags[-1] == PASS


def test_combined_flag_is_the_worst():
    combined = combine_flags(
        [PASS, PASS, NOT_EVALUATED, PASS, SUSPECT, NOT_EVALUATED],
        [PASS, SUSPECT, NOT_EVALUATED, NOT_EVALUATED, FAIL, MISSING],
    )
    assert combined.tolist() == [PASS, SUSPECT, NOT_EVALUATED, PASS, FAIL, MISSING]


class TestRunQc:
    def steady(self, count: int = 30):
        times = minutes(count)
        rng = np.random.default_rng(3)
        return dict(
            times=times,
            temperature=12.0 + 0.05 * rng.standard_normal(count),
            salinity=31.0 + 0.02 * rng.standard_normal(count),
            ph=7.9 + 0.005 * rng.standard_normal(count),
        )

    def test_sensor_fault_fails_the_variable_the_derived_and_the_overall_flag(self):
        data = self.steady()
        data["ph"][15] = 5.0
        result = run_qc(**data, alkalinity_from_station=np.ones(30, bool))
        assert result.ph[15] == FAIL
        assert result.derived[15] == FAIL
        assert result.overall[15] == FAIL
        # The broken value is not a neighbour, so its neighbours show no spike.
        assert result.tests["ph"].spike[14] != SUSPECT
        assert result.tests["ph"].spike[16] != SUSPECT
        assert result.temperature[15] == PASS

    def test_derived_takes_the_worst_input(self):
        data = self.steady()
        data["salinity"] = data["salinity"] + 7.0  # about 38: outside the default user range
        result = run_qc(**data, alkalinity_from_station=np.ones(30, bool))
        assert result.salinity[20] == SUSPECT
        assert result.ph[20] == PASS
        assert result.derived[20] == SUSPECT

    def test_station_alkalinity_is_not_evaluated_measured_absence_is_missing(self):
        data = self.steady(5)
        from_station = run_qc(**data, alkalinity_from_station=np.ones(5, bool))
        assert from_station.alkalinity.tolist() == [NOT_EVALUATED] * 5
        none_given = run_qc(**data)
        assert none_given.alkalinity.tolist() == [MISSING] * 5
        assert none_given.derived.tolist() == [MISSING] * 5

    def test_underivable_chemistry_is_missing(self):
        data = self.steady(5)
        available = np.array([True, True, False, True, True])
        result = run_qc(
            **data, alkalinity_from_station=np.ones(5, bool), derived_available=available
        )
        assert result.derived[2] == MISSING
        assert result.overall[2] == MISSING
        assert result.derived[1] != MISSING

    def test_late_readings_are_tested_in_time_order(self):
        data = self.steady()
        data["temperature"][10] = 16.0  # a 4 degC spike: fail
        shuffled = np.random.default_rng(1).permutation(30)
        in_order = run_qc(**data, alkalinity_from_station=np.ones(30, bool))
        arrived = run_qc(
            times=data["times"][shuffled],
            temperature=data["temperature"][shuffled],
            salinity=data["salinity"][shuffled],
            ph=data["ph"][shuffled],
            alkalinity_from_station=np.ones(30, bool),
        )
        assert arrived.temperature.tolist() == in_order.temperature[shuffled].tolist()
        assert arrived.overall.tolist() == in_order.overall[shuffled].tolist()
        assert in_order.tests["temperature"].spike[10] == FAIL


class TestLimits:
    def test_every_variable_has_defaults_with_a_source_for_every_field(self):
        assert set(DEFAULT_QC_LIMITS) == set(VARIABLES) == set(DEFAULT_QC_LIMIT_SOURCES)
        for variable, limits in DEFAULT_QC_LIMITS.items():
            assert set(DEFAULT_QC_LIMIT_SOURCES[variable]) == set(QcLimits.model_fields)
            assert limits.sensor_min <= limits.user_min < limits.user_max <= limits.sensor_max

    def test_station_overrides_merge_onto_defaults(self):
        merged = limits_with_overrides({"ph": {"user_min": 7.5}})
        assert merged["ph"].user_min == 7.5
        assert merged["ph"].user_max == DEFAULT_QC_LIMITS["ph"].user_max
        assert merged["temperature"] == DEFAULT_QC_LIMITS["temperature"]

    def test_bad_overrides_name_the_field(self):
        with pytest.raises(ValueError, match="oxygen"):
            limits_with_overrides({"oxygen": {"user_min": 1}})
        with pytest.raises(ValueError, match="user_min"):
            limits_with_overrides({"ph": {"user_min": 5.0}})
        with pytest.raises(ValueError, match="spike_fail"):
            limits_with_overrides({"ph": {"spike_fail": -1}})
        with pytest.raises(ValueError, match="surprise"):
            limits_with_overrides({"ph": {"surprise": 1}})


@settings(max_examples=60, deadline=None)
@given(
    values=st.lists(
        st.one_of(st.floats(-5.0, 50.0, allow_nan=False), st.just(float("nan"))),
        min_size=1,
        max_size=60,
    ),
    seed=st.integers(0, 2**32 - 1),
)
def test_flags_are_valid_and_do_not_depend_on_arrival_order(values, seed):
    # [IOC-FLAGS]: every flag is one of 1, 2, 3, 4, 9; a missing value is 9. Arrival
    # order must not matter because the tests run in time order (design rule).
    temperature = np.array(values)
    times = minutes(temperature.size)
    salinity = np.full(temperature.size, 31.0)
    ph = np.full(temperature.size, 7.9) + 0.001 * np.arange(temperature.size)
    order = np.random.default_rng(seed).permutation(temperature.size)
    in_order = run_qc(times=times, temperature=temperature, salinity=salinity, ph=ph)
    shuffled = run_qc(
        times=times[order], temperature=temperature[order], salinity=salinity[order], ph=ph[order]
    )
    valid = {PASS, NOT_EVALUATED, SUSPECT, FAIL, MISSING}
    assert set(in_order.overall.tolist()) <= valid
    assert set(in_order.temperature.tolist()) <= valid
    assert (in_order.temperature[np.isnan(temperature)] == MISSING).all()
    assert shuffled.temperature.tolist() == in_order.temperature[order].tolist()
    assert shuffled.overall.tolist() == in_order.overall[order].tolist()
    # The overall flag is never better than any variable's (worst-of rule).
    rank = {NOT_EVALUATED: 0, PASS: 1, MISSING: 2, SUSPECT: 3, FAIL: 4}
    for overall, t in zip(in_order.overall.tolist(), in_order.temperature.tolist(), strict=True):
        assert rank[overall] >= rank[t]
