"""The compiled array path (chemistry/_kernel.c) against the numpy reference path.

The numpy code is the one checked against the published values (check_values.csv and the
other chemistry tests, which run on the kernel for arrays when it is built); these tests hold
the kernel to it over the whole input domain: every pair, pH scale, constant set, boron ratio,
with and without nutrients and constant shifts, and the same errors for bad inputs.
"""

from __future__ import annotations

import os

import numpy as np
import pytest

from chemistry import ChemistryInputError, kernel, solve
from chemistry.solver import _OUTPUT_NAMES

pytestmark = pytest.mark.skipif(
    not kernel.available() and not os.environ.get("CI"),
    reason="the compiled chemistry kernel was not built here (no C compiler at install); "
    "CI builds it and runs these tests",
)

# Both paths converge [H+] to 1e-10 relative and then round differently (the kernel uses
# reciprocals and glibc's vector exp/log): agreement to 1e-11 relative is far below any
# published uncertainty (omega is known to a few per cent).
RELATIVE = 1e-11
ABSOLUTE = {"ph_total": 1e-12, "ph_free": 1e-12, "ph_seawater": 1e-12, "ph_nbs": 1e-12}

PAIR_VALUES = {
    "ph": lambda rng, n: rng.uniform(7.0, 8.6, n),
    "alkalinity": lambda rng, n: rng.uniform(1500.0, 2600.0, n),
    "dic": lambda rng, n: rng.uniform(1400.0, 2300.0, n),
    "pco2": lambda rng, n: rng.uniform(150.0, 2500.0, n),
}


def test_kernel_is_built_in_ci():
    # A broken build falls back to numpy silently; CI must notice (common practice: a
    # compiled accelerator is proven present where it is meant to be).
    assert kernel.available(), "chemistry._kernel did not build or load"
    assert kernel.enabled()


@pytest.mark.parametrize(
    "setting, size, expected",
    [("", 10_000, 1), ("1", 10_000_000, 1), ("3", 10_000_000, 3), ("many", 65_536 * 2, None),
     ("0", 65_536 * 2, None)],
)
def test_threads_follow_the_size_and_the_setting(monkeypatch, setting, size, expected):
    # A small solve (a sensor batch) stays on the calling thread; a bad setting is ignored.
    monkeypatch.setenv("SPATLINE_CHEMISTRY_THREADS", setting)
    threads = kernel.threads_for(size)
    if expected is None:
        assert threads == min(kernel._processors(), 2)
    else:
        assert threads == expected


def _waters(seed, n=3000):
    """Waters from the (pH, alkalinity) pair, so that every other pair is consistent."""
    rng = np.random.default_rng(seed)
    temperature = rng.uniform(-1.0, 40.0, n)
    salinity = rng.uniform(2.0, 45.0, n)
    with kernel.use_kernel(False):
        base = solve(
            temperature=temperature,
            salinity=salinity,
            ph=rng.uniform(7.3, 8.4, n),
            alkalinity=rng.uniform(1600.0, 2600.0, n),
        )
    return base


def _assert_same(reference, compiled):
    for name in _OUTPUT_NAMES:
        expected = np.asarray(getattr(reference, name))
        actual = np.asarray(getattr(compiled, name))
        assert actual.shape == expected.shape, name
        np.testing.assert_allclose(
            actual, expected, rtol=RELATIVE, atol=ABSOLUTE.get(name, 0.0), err_msg=name
        )
    assert compiled.warnings == reference.warnings


def _both(**inputs):
    with kernel.use_kernel(False):
        reference = solve(**inputs)
    with kernel.use_kernel(True):
        compiled = solve(**inputs)
    return reference, compiled


@pytest.mark.parametrize("pair", kernel.PAIRS, ids=lambda pair: "-".join(pair))
@pytest.mark.parametrize("carbonic", ["lueker2000", "millero2010"])
def test_every_pair_matches_the_numpy_path(pair, carbonic):
    base = _waters(seed=len(pair[0]) * 7 + len(pair[1]))
    inputs = {name: getattr(base, name if name != "ph" else "ph_total") for name in pair}
    reference, compiled = _both(
        temperature=base.temperature, salinity=base.salinity, carbonic=carbonic, **inputs
    )
    _assert_same(reference, compiled)


@pytest.mark.parametrize("ph_scale", ["total", "seawater", "free", "nbs"])
@pytest.mark.parametrize("boron", ["lee2010", "uppstrom1974"])
def test_every_ph_scale_and_boron_ratio(ph_scale, boron):
    rng = np.random.default_rng(5)
    reference, compiled = _both(
        temperature=rng.uniform(0.0, 35.0, 500),
        salinity=rng.uniform(10.0, 40.0, 500),
        ph=rng.uniform(7.2, 8.4, 500),
        alkalinity=rng.uniform(1800.0, 2500.0, 500),
        ph_scale=ph_scale,
        boron=boron,
    )
    _assert_same(reference, compiled)


@pytest.mark.parametrize(
    "pair", [("alkalinity", "dic"), ("alkalinity", "pco2"), ("ph", "alkalinity")]
)
def test_nutrients_and_constant_shifts(pair):
    base = _waters(seed=11, n=800)
    rng = np.random.default_rng(12)
    inputs = {name: getattr(base, name if name != "ph" else "ph_total") for name in pair}
    shifts = {"pK1": 0.0075, "pK2": rng.normal(0.0, 0.015, 800), "pKB": -0.01,
              "pKsp_aragonite": 0.02, "total_boron": 0.02}
    reference, compiled = _both(
        temperature=base.temperature,
        salinity=base.salinity,
        phosphate=rng.uniform(0.0, 5.0, 800),
        silicate=rng.uniform(0.0, 80.0, 800),
        constant_shifts=shifts,
        **inputs,
    )
    _assert_same(reference, compiled)


def test_shapes_broadcast_as_on_the_numpy_path():
    # 2-D readings with a scalar salinity and a per-column temperature.
    ph = np.linspace(7.4, 8.3, 12).reshape(3, 4)
    reference, compiled = _both(
        temperature=np.array([5.0, 12.0, 20.0, 28.0]), salinity=31.0, ph=ph, alkalinity=2150.0
    )
    assert compiled.omega_aragonite.shape == (3, 4)
    _assert_same(reference, compiled)


def test_more_readings_than_one_block():
    # 1000 is not a multiple of the kernel's block of 128: the last, short block counts too.
    base = _waters(seed=3, n=1000)
    reference, compiled = _both(
        temperature=base.temperature, salinity=base.salinity,
        alkalinity=base.alkalinity, dic=base.dic,
    )
    _assert_same(reference, compiled)


def _refusals(inputs):
    """The refusal sentence of the numpy path and of the kernel for the same inputs."""
    messages = []
    for on in (False, True):
        with kernel.use_kernel(on), pytest.raises(ChemistryInputError) as caught:
            solve(**inputs)
        messages.append(str(caught.value))
    return messages


@pytest.mark.parametrize(
    "bad",
    [
        {"temperature": np.array([10.0, 60.0, 12.0])},
        {"salinity": np.array([30.0, np.nan, 30.0])},
        {"ph": np.array([8.0, 8.1, 99.0])},
        {"alkalinity": np.array([2100.0, -5.0, 2100.0])},
        {"alkalinity": np.array([2100.0, np.inf, 2100.0])},
    ],
    ids=["temperature", "salinity-nan", "ph", "alkalinity-negative", "alkalinity-inf"],
)
def test_bad_inputs_give_the_same_sentence(bad):
    inputs = {
        "temperature": np.array([10.0, 11.0, 12.0]),
        "salinity": 30.0,
        "ph": np.array([8.0, 8.1, 7.9]),
        "alkalinity": 2100.0,
        **bad,
    }
    numpy_message, kernel_message = _refusals(inputs)
    assert kernel_message == numpy_message
    assert "index" in kernel_message


def test_inconsistent_pair_names_the_same_index():
    # Alkalinity 50 umol/kg at pH 8.1 would need a negative DIC (the borate alone is more).
    inputs = {
        "temperature": np.full(300, 15.0),
        "salinity": 33.0,
        "ph": np.full(300, 8.1),
        "alkalinity": np.where(np.arange(300) == 217, 50.0, 2200.0),
    }
    numpy_message, kernel_message = _refusals(inputs)
    assert kernel_message == numpy_message
    assert "index 217" in kernel_message


def test_pco2_above_what_the_dic_holds():
    inputs = {"temperature": np.array([15.0, 15.0]), "salinity": 33.0,
              "dic": np.array([2000.0, 10.0]), "pco2": np.array([400.0, 5000.0])}
    for on in (False, True):
        with kernel.use_kernel(on), pytest.raises(ChemistryInputError, match="index 1"):
            solve(**inputs)
