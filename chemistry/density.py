"""Seawater density at one standard atmosphere (EOS-80).

The one-atmosphere International Equation of State of Seawater (EOS-80),
Millero & Poisson 1981, adopted in UNESCO 1981 (MilleroPoisson1981,
UNESCO1981). It turns the hatchery's volumetric doses (mg/L) and
laboratory alkalinity (mg/L as CaCO3) into the per-kilogram units the
carbonate system is solved in. Tanks are at the surface, so the pressure
terms of the full equation are not needed.

References
----------
Keys refer to ``chemistry/bibliography.md``.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

from chemistry.errors import check_salinity, check_temperature

# Fitted range of the EOS-80 one-atmosphere equation, UNESCO1981:
# practical salinity 0-42, temperature -2 to 40 deg C. Inputs are accepted over
# the package range (salinity 0-50, -2 to 45 deg C) so that every water the
# carbonate solver accepts can be dosed; beyond the fitted range the polynomial
# extrapolates smoothly, which is ample for converting doses.
DENSITY_FITTED_SALINITY_RANGE = (0.0, 42.0)
DENSITY_FITTED_TEMPERATURE_RANGE = (-2.0, 40.0)

# Density of Standard Mean Ocean Water (pure water), Bigg 1967 as adopted in
# UNESCO1981; coefficients a0..a5 in kg/m3 per (deg C)**i.
_SMOW_COEFFICIENTS = (
    999.842594,
    6.793952e-2,
    -9.095290e-3,
    1.001685e-4,
    -1.120083e-6,
    6.536332e-9,
)
# Salinity terms of the one-atmosphere equation, MilleroPoisson1981:
# B (times S), C (times S**1.5) and d0 (times S**2).
_B_COEFFICIENTS = (8.24493e-1, -4.0899e-3, 7.6438e-5, -8.2467e-7, 5.3875e-9)
_C_COEFFICIENTS = (-5.72466e-3, 1.0227e-4, -1.6546e-6)
_D0 = 4.8314e-4


def _polynomial(coefficients: tuple[float, ...], x: NDArray[np.float64]) -> NDArray[np.float64]:
    result = np.zeros_like(x)
    for coefficient in reversed(coefficients):
        result = result * x + coefficient
    return result


def pure_water_density(temperature: ArrayLike) -> NDArray[np.float64]:
    """Density of Standard Mean Ocean Water at one atmosphere.

    Parameters
    ----------
    temperature : array_like
        Temperature, deg C (the equation was fitted on IPTS-68; the
        difference from ITS-90, under 0.01 deg C here, is below the
        equation's own uncertainty for dosing work). Fitted -2 to 40 deg C;
        accepted -2 to 45 deg C.

    Returns
    -------
    ndarray
        Density, kg/m3.

    References
    ----------
    UNESCO1981 (SMOW polynomial of Bigg 1967).
    """
    t = check_temperature(temperature)
    return _polynomial(_SMOW_COEFFICIENTS, t)


def seawater_density(temperature: ArrayLike, salinity: ArrayLike) -> NDArray[np.float64]:
    """Density of seawater at one standard atmosphere (EOS-80).

    Parameters
    ----------
    temperature : array_like
        Temperature, deg C. Fitted -2 to 40 deg C; accepted -2 to 45.
    salinity : array_like
        Practical salinity (PSS-78), dimensionless. Fitted 0 to 42;
        accepted 0 to 50 (extrapolated above 42).

    Returns
    -------
    ndarray
        Density, kg/m3, in the broadcast shape of the inputs.

    Raises
    ------
    ChemistryInputError
        If a value is NaN or outside the accepted range.

    Notes
    -----
    rho(S, t, 0) = rho_w(t) + B(t) S + C(t) S**1.5 + d0 S**2, with rho_w the
    SMOW density. Standard error of the fit about 3.6e-3 kg/m3
    MilleroPoisson1981.

    References
    ----------
    MilleroPoisson1981, UNESCO1981.
    """
    t = check_temperature(temperature)
    s = check_salinity(salinity)
    t, s = np.broadcast_arrays(t, s)
    return (
        _polynomial(_SMOW_COEFFICIENTS, t)
        + _polynomial(_B_COEFFICIENTS, t) * s
        + _polynomial(_C_COEFFICIENTS, t) * s**1.5
        + _D0 * s**2
    )
