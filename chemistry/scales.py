"""pH scale conversions: total, free, seawater and NBS.

Definitions (DSC2007 chapter 2 and 5; Zeebe and Wolf-Gladrow style notation):

* free:      [H+]_F
* total:     [H+]_T  = [H+]_F (1 + S_T / KS)
* seawater:  [H+]_SWS = [H+]_F (1 + S_T / KS + F_T / KF_free)

with KS on the free scale and KF_free = KF_total / (1 + S_T / KS). pH = -log10 [H+], with
[H+] in mol/kg-soln.

The NBS scale (a glass electrode calibrated with low-ionic-strength NBS/NIST buffers) is not a
scale of hydrogen-ion concentration in seawater: it is tied to the seawater scale through an
apparent activity coefficient f_H, pH_NBS = pH_SWS - log10(f_H), here that of Takahashi1982.
"""

from __future__ import annotations

import math

import numpy as np

from .constants import ZERO_CELSIUS_K, _num
from .errors import check_choice

__all__ = [
    "NBS_WARNING",
    "PH_SCALES",
    "hydrogen_activity_coefficient_takahashi1982",
    "ph_offsets_from_total",
]

PH_SCALES = ("total", "seawater", "free", "nbs")

NBS_WARNING = (
    "pH on the NBS scale (a glass electrode calibrated with NBS buffers) is tied to seawater "
    "only through an apparent activity coefficient (Takahashi1982) and is uncertain by several "
    "hundredths of a pH unit; that uncertainty dominates the error in the saturation states."
)


def hydrogen_activity_coefficient_takahashi1982(temperature, salinity):
    """Apparent activity coefficient of the hydrogen ion, f_H = a_H / [H+]_SWS.

    Parameters
    ----------
    temperature : float or array_like
        Temperature, deg C.
    salinity : float or array_like
        Practical salinity.

    Returns
    -------
    f_h : float or ndarray
        Dimensionless, about 0.71 at S = 35 and 25 deg C.

    Notes
    -----
    f_H = 1.2948 - 0.002036 T + (0.0004607 - 0.000001475 T) S^2, T in kelvin. From the GEOSECS
    Pacific data (Takahashi1982). Uncertain by several hundredths in pH (see NBS_WARNING).
    """
    tk = _num(temperature) + ZERO_CELSIUS_K
    s = _num(salinity)
    return 1.2948 - 0.002036 * tk + (0.0004607 - 0.000001475 * tk) * s * s


def ph_offsets_from_total(temperature, salinity, constants):
    """Offsets to add to pH_total to get pH on each other scale.

    Parameters
    ----------
    temperature : float or array_like
        Temperature, deg C.
    salinity : float or array_like
        Practical salinity.
    constants : mapping
        At least ``KS`` (free scale), ``KF`` (total scale), ``total_sulfate`` and
        ``total_fluoride`` (mol/kg), e.g. from :func:`chemistry.equilibrium_constants`.

    Returns
    -------
    offsets : dict
        ``{"total": 0, "free": ..., "seawater": ..., "nbs": ...}``, pH units, such that
        pH_scale = pH_total + offsets[scale].
    """
    total_over_free = 1.0 + constants["total_sulfate"] / constants["KS"]
    seawater_over_total = 1.0 + constants["total_fluoride"] / constants["KF"]
    f_h = hydrogen_activity_coefficient_takahashi1982(temperature, salinity)
    if type(total_over_free) is float:
        free = math.log10(total_over_free)
        seawater = -math.log10(seawater_over_total)
        nbs = seawater - math.log10(f_h)
    else:
        free = np.log10(total_over_free)
        seawater = -np.log10(seawater_over_total)
        nbs = seawater - np.log10(f_h)
    return {"total": 0.0, "free": free, "seawater": seawater, "nbs": nbs}


def convert_ph(ph, from_scale, to_scale, temperature, salinity, constants):
    """Convert pH between the total, free, seawater and NBS scales.

    Parameters
    ----------
    ph : float or array_like
        pH on ``from_scale``.
    from_scale, to_scale : {"total", "seawater", "free", "nbs"}
    temperature : float or array_like
        Temperature, deg C.
    salinity : float or array_like
        Practical salinity.
    constants : mapping
        As for :func:`ph_offsets_from_total`.

    Returns
    -------
    ph : float or ndarray
        pH on ``to_scale``.
    """
    check_choice("from_scale", from_scale, PH_SCALES)
    check_choice("to_scale", to_scale, PH_SCALES)
    offsets = ph_offsets_from_total(temperature, salinity, constants)
    return _num(ph) - offsets[from_scale] + offsets[to_scale]


__all__.append("convert_ph")
