"""A site's alkalinity-salinity line from bottle samples.

Where alkalinity is not measured continuously, hatcheries estimate it from
salinity with a straight line fitted to their own bottle samples: in most
coastal water alkalinity mixes conservatively between a river end member
and the sea, so it is close to linear in salinity (common practice). The
fit here is ordinary least squares; the residual standard deviation is
what the service carries forward as the uncertainty of the estimate.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike
from scipy import stats

from chemistry.errors import ChemistryInputError, check_nonnegative, check_salinity

# Two points always fit exactly and leave no residual to estimate the
# scatter from; three is the least that gives a residual standard deviation.
MINIMUM_SAMPLES = 3


@dataclass(frozen=True)
class AlkalinitySalinityFit:
    """Alkalinity = slope * salinity + intercept, from n bottle samples.

    Attributes
    ----------
    slope : float
        umol/kg per unit of practical salinity.
    intercept : float
        umol/kg (alkalinity at salinity 0, the river end member if mixing
        is conservative).
    residual_sd : float
        Residual standard deviation, umol/kg, with n - 2 degrees of freedom.
    n : int
        Number of samples used.
    salinity_min, salinity_max : float
        Salinity range of the samples; estimates outside it extrapolate.
    """

    slope: float
    intercept: float
    residual_sd: float
    n: int
    salinity_min: float
    salinity_max: float

    def predict(self, salinity: ArrayLike) -> np.ndarray:
        """Alkalinity estimate, umol/kg, at the given practical salinity."""
        return self.slope * np.asarray(salinity, dtype=np.float64) + self.intercept


def fit_alkalinity_salinity(salinity: ArrayLike, alkalinity: ArrayLike) -> AlkalinitySalinityFit:
    """Fit alkalinity against salinity by ordinary least squares.

    Parameters
    ----------
    salinity : array_like
        Practical salinity of each bottle sample, 0 to 50.
    alkalinity : array_like
        Total alkalinity of each sample, umol/kg (0 or more), same length.

    Returns
    -------
    AlkalinitySalinityFit
        Slope, intercept, residual standard deviation, n and salinity range.

    Raises
    ------
    ChemistryInputError
        With fewer than 3 samples, arrays of different lengths, values that
        are not finite or out of range, or no spread in salinity (every
        sample at one salinity gives no slope).
    """
    s = check_salinity(np.ravel(salinity))
    ta = check_nonnegative("alkalinity", np.ravel(alkalinity), unit="umol/kg")
    if s.size != ta.size:
        raise ChemistryInputError(
            f"salinity and alkalinity must have the same number of samples; "
            f"got {s.size} and {ta.size}."
        )
    if s.size < MINIMUM_SAMPLES:
        raise ChemistryInputError(
            f"an alkalinity-salinity line needs at least {MINIMUM_SAMPLES} bottle samples; "
            f"got {s.size}."
        )
    if np.ptp(s) == 0:
        raise ChemistryInputError(
            f"salinity has no spread (every sample is at {s[0]:g}); "
            "a line needs samples at two or more salinities."
        )
    result = stats.linregress(s, ta)
    residuals = ta - (result.slope * s + result.intercept)
    residual_sd = float(np.sqrt(np.sum(residuals**2) / (s.size - 2)))
    return AlkalinitySalinityFit(
        slope=float(result.slope),
        intercept=float(result.intercept),
        residual_sd=residual_sd,
        n=int(s.size),
        salinity_min=float(s.min()),
        salinity_max=float(s.max()),
    )
