"""Conversions between laboratory alkalinity units and umol/kg.

Water laboratories and test kits often report total alkalinity as
"mg/L as CaCO3": the mass of calcium carbonate that would neutralise the
same amount of acid. The carbonate system is solved per kilogram of
seawater, so the conversion needs the equivalents per mole of CaCO3, its
molar mass and the seawater density.

Derivation (per litre of sample)::

    mmol CaCO3 / L  = value [mg/L] / 100.0869 [mg/mmol]
    meq / L         = 2 * mmol / L            (CO3 2- takes two protons)
    ueq / L         = 1000 * meq / L
    umol / kg       = (ueq / L) / (density [kg/m3] / 1000 [L/m3])
                    = 2e6 * value / (100.0869 * density)

Total alkalinity in umol/kg is, by convention, micro-equivalents per
kilogram (Dickson 1981 definition; the unit "umol/kg" counts protons).

References
----------
Keys refer to ``chemistry/bibliography.md``: IUPAC2007 for
the molar mass, MilleroPoisson1981 / UNESCO1981 for the density.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

from chemistry.density import seawater_density
from chemistry.errors import check_nonnegative

# Standard atomic weights, g/mol, IUPAC2007
# (Wieser & Berglund 2009). Kept here once; dosing builds its molar masses
# from the same values.
ATOMIC_WEIGHT = {
    "H": 1.00794,
    "C": 12.0107,
    "O": 15.9994,
    "Na": 22.98976928,
    "Ca": 40.078,
}

# CaCO3: 40.078 + 12.0107 + 3 * 15.9994 = 100.0869 g/mol.
CALCIUM_CARBONATE_MOLAR_MASS = ATOMIC_WEIGHT["Ca"] + ATOMIC_WEIGHT["C"] + 3 * ATOMIC_WEIGHT["O"]
# Carbonate ion accepts two protons when titrated to the carbonic-acid end point.
EQUIVALENTS_PER_MOLE_CALCIUM_CARBONATE = 2.0


def _umol_per_kg_per_mg_per_l(temperature: ArrayLike, salinity: ArrayLike) -> NDArray[np.float64]:
    density_kg_per_l = seawater_density(temperature, salinity) / 1000.0
    micro_equivalents_per_mg = (
        EQUIVALENTS_PER_MOLE_CALCIUM_CARBONATE * 1000.0 / (CALCIUM_CARBONATE_MOLAR_MASS)
    )
    return micro_equivalents_per_mg / density_kg_per_l


def alkalinity_from_mg_per_l_caco3(
    value: ArrayLike, temperature: ArrayLike, salinity: ArrayLike
) -> NDArray[np.float64]:
    """Total alkalinity in umol/kg from mg/L as CaCO3.

    Parameters
    ----------
    value : array_like
        Total alkalinity, mg/L as CaCO3 (0 or more).
    temperature : array_like
        Temperature of the sample when its volume was measured, deg C
        (-2 to 45).
    salinity : array_like
        Practical salinity, 0 to 50.

    Returns
    -------
    ndarray
        Total alkalinity, umol/kg (micro-equivalents per kg of seawater).

    Notes
    -----
    ``TA = 2e6 * value / (100.0869 * rho)``, rho in kg/m3 from
    :func:`chemistry.density.seawater_density`. 100 mg/L as CaCO3 in
    seawater of S = 35 at 25 deg C is about 1953 umol/kg.

    References
    ----------
    IUPAC2007, MilleroPoisson1981.
    """
    mg_per_l = check_nonnegative("alkalinity", value, unit="mg/L as CaCO3")
    return mg_per_l * _umol_per_kg_per_mg_per_l(temperature, salinity)


def mg_per_l_caco3_from_alkalinity(
    alkalinity: ArrayLike, temperature: ArrayLike, salinity: ArrayLike
) -> NDArray[np.float64]:
    """Total alkalinity in mg/L as CaCO3 from umol/kg.

    The inverse of :func:`alkalinity_from_mg_per_l_caco3`.

    Parameters
    ----------
    alkalinity : array_like
        Total alkalinity, umol/kg (0 or more).
    temperature : array_like
        Temperature, deg C (-2 to 45).
    salinity : array_like
        Practical salinity, 0 to 50.

    Returns
    -------
    ndarray
        Total alkalinity, mg/L as CaCO3.

    References
    ----------
    IUPAC2007, MilleroPoisson1981.
    """
    umol_per_kg = check_nonnegative("alkalinity", alkalinity, unit="umol/kg")
    return umol_per_kg / _umol_per_kg_per_mg_per_l(temperature, salinity)
