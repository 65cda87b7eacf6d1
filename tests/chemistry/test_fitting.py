"""Alkalinity-salinity line from bottle samples."""

from __future__ import annotations

import numpy as np
import pytest

from chemistry.errors import ChemistryInputError
from chemistry.fitting import fit_alkalinity_salinity

# Anscombe 1973, "Graphs in statistical analysis", The American Statistician
# 27(1):17-21, data set I. Printed results: y = 3.00 + 0.500 x, residual sum
# of squares 13.75 on 9 degrees of freedom (so residual SD sqrt(13.75/9)).
ANSCOMBE_X = [10, 8, 13, 9, 11, 14, 6, 4, 12, 7, 5]
ANSCOMBE_Y = [8.04, 6.95, 7.58, 8.81, 8.33, 9.96, 7.24, 4.26, 10.84, 4.82, 5.68]


def test_fit_reproduces_anscombe_data_set_one():
    fit = fit_alkalinity_salinity(ANSCOMBE_X, ANSCOMBE_Y)
    assert fit.slope == pytest.approx(0.500, abs=0.0005)
    assert fit.intercept == pytest.approx(3.00, abs=0.005)
    assert fit.residual_sd == pytest.approx(np.sqrt(13.75 / 9), abs=0.002)
    assert fit.n == 11
    assert (fit.salinity_min, fit.salinity_max) == (4.0, 14.0)


def test_exact_line_is_recovered_with_no_residual():
    # Exact by construction: points on a line must give that line back.
    salinity = np.array([22.0, 26.5, 29.0, 31.2, 33.8])
    alkalinity = 46.5 * salinity + 640.0
    fit = fit_alkalinity_salinity(salinity, alkalinity)
    assert fit.slope == pytest.approx(46.5)
    assert fit.intercept == pytest.approx(640.0)
    assert fit.residual_sd == pytest.approx(0.0, abs=1e-9)
    np.testing.assert_allclose(fit.predict([25.0, 30.0]), [1802.5, 2035.0])


def test_fit_refuses_fewer_than_three_samples():
    with pytest.raises(ChemistryInputError, match="at least 3"):
        fit_alkalinity_salinity([30.0, 31.0], [2100.0, 2150.0])


def test_fit_refuses_samples_without_salinity_spread():
    with pytest.raises(ChemistryInputError, match="no spread"):
        fit_alkalinity_salinity([31.0, 31.0, 31.0], [2100.0, 2150.0, 2120.0])


@pytest.mark.parametrize(
    ("salinity", "alkalinity", "message"),
    [
        ([30.0, 31.0, 32.0], [2100.0, 2150.0], "same number"),
        ([30.0, np.nan, 32.0], [2100.0, 2150.0, 2200.0], "salinity"),
        ([30.0, 31.0, 62.0], [2100.0, 2150.0, 2200.0], "between 0 and 50"),
        ([30.0, 31.0, 32.0], [2100.0, -2150.0, 2200.0], "alkalinity"),
    ],
)
def test_fit_refuses_bad_samples(salinity, alkalinity, message):
    with pytest.raises(ChemistryInputError, match=message):
        fit_alkalinity_salinity(salinity, alkalinity)
