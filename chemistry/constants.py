"""Equilibrium constants and total concentrations of seawater, one function per relation.

Conventions for every function in this module:

* ``temperature`` in deg C (ITS-90 as published), ``salinity`` practical (PSS-78),
  ``pressure`` gauge pressure in dbar (0 at the sea surface or in an open tank).
* Concentrations in mol/kg of seawater; constants in mol/kg-soln units.
* pH scale as published: K1, K2, KB, KW, KF, K1P, K2P, K3P and KSi on the total scale,
  KS on the free scale, K0 in mol/(kg atm), solubility products in mol2/kg2.
* Scalars (Python floats) or numpy arrays, which broadcast together.

The reference keys in the docstrings (e.g. ``Lueker2000``) point into
``chemistry/bibliography.md``.

Notes
-----
Lueker et al. 2000 (the default K1, K2 set) reproduce measured fCO2 well at ordinary ocean
values, but by their own comparison the calculated fCO2 is about 3 % too low above about
500 uatm. Hatchery water is often there; treat pCO2 above 500 uatm as carrying that extra
bias (Lueker2000).
"""

from __future__ import annotations

import functools
import math
from collections.abc import Mapping
from functools import cached_property

import numpy as np

from .errors import (
    ChemistryInputError,
    check_choice,
    check_pressure,
    check_salinity,
    check_temperature,
)

__all__ = [
    "BORON_CHOICES",
    "CARBONIC_CHOICES",
    "ZERO_CELSIUS_K",
    "EquilibriumConstants",
    "calcium_riley_tongudai1967",
    "equilibrium_constants",
    "fugacity_factor_weiss1974",
    "k0_weiss1974",
    "k1_lueker2000",
    "k1_millero2010",
    "k1_millero2010_seawater_scale",
    "k1p_millero1995",
    "k2_lueker2000",
    "k2_millero2010",
    "k2_millero2010_seawater_scale",
    "k2p_millero1995",
    "k3p_millero1995",
    "kb_dickson1990",
    "kf_perez_fraga1987",
    "ks_dickson1990",
    "ksi_millero1995",
    "ksp_aragonite_mucci1983",
    "ksp_calcite_mucci1983",
    "kw_millero1995",
    "pressure_factor_millero1995",
    "total_boron_lee2010",
    "total_boron_uppstrom1974",
    "total_fluoride_riley1965",
    "total_sulfate_morris_riley1966",
    "validity_warnings",
    "vapour_pressure_weiss_price1980",
]

ZERO_CELSIUS_K = 273.15
# Gas constant in cm3 bar / (mol K), as used with the Millero 1995 partial molar volumes.
GAS_CONSTANT_CM3_BAR = 83.14472
# Gas constant in cm3 atm / (mol K), as used with the Weiss 1974 virial coefficients.
GAS_CONSTANT_CM3_ATM = 82.05736

CARBONIC_CHOICES = ("lueker2000", "millero2010")
BORON_CHOICES = ("lee2010", "uppstrom1974")


def _is_float(x: object) -> bool:
    return type(x) is float


def _ln(x):
    return math.log(x) if type(x) is float else np.log(x)


def _exp(x):
    return math.exp(x) if type(x) is float else np.exp(x)


def _sqrt(x):
    return math.sqrt(x) if type(x) is float else np.sqrt(x)


LN10 = math.log(10.0)


def _pow10(x):
    # exp is several times faster than numpy's power for arrays; the two agree to rounding.
    return math.exp(LN10 * x) if type(x) is float else np.exp(LN10 * x)


def _from_pk(pk):
    """K from pK = -log10 K, with the sign folded into the factor (one array pass fewer)."""
    return math.exp(-LN10 * pk) if type(pk) is float else np.exp(-LN10 * pk)


def _num(x):
    """Python float for scalars (fast path), float64 array otherwise."""
    if type(x) is float:
        return x
    if isinstance(x, int | np.floating | np.integer):
        return float(x)
    array = np.asarray(x, dtype=np.float64)
    return float(array) if array.ndim == 0 else array


class _Terms:
    """Temperature and salinity terms that several relations share.

    :func:`compute_constants` builds one of these per solve, so that T, 1/T, ln T and
    sqrt(S) are computed once rather than once per relation; the public relation functions
    build their own.
    """

    def __init__(self, temperature, salinity):
        self.t = _num(temperature)
        self.s = _num(salinity)
        self.tk = self.t + ZERO_CELSIUS_K
        self.inv_tk = 1.0 / self.tk
        self.ln_tk = _ln(self.tk)
        self.sqrt_s = _sqrt(self.s)

    @cached_property
    def ionic_strength(self):
        return _ionic_strength(self.s)

    @cached_property
    def sqrt_ionic_strength(self):
        return _sqrt(self.ionic_strength)

    @cached_property
    def ln_solution_to_water(self):
        # ln of kg H2O per kg of seawater, turning mol/kg-H2O into mol/kg-soln.
        return _ln(1.0 - 0.001005 * self.s)


# --- CO2 solubility and fugacity --------------------------------------------------------


def k0_weiss1974(temperature, salinity):
    """Solubility of CO2 in seawater, K0 = [CO2*]/fCO2.

    Parameters
    ----------
    temperature : float or array_like
        Temperature, deg C.
    salinity : float or array_like
        Practical salinity.

    Returns
    -------
    K0 : float or ndarray
        mol/(kg-soln atm).

    Notes
    -----
    Valid for t = -1 to 40 deg C and S = 0 to 40. Reference: Weiss1974 (equation 12 with the
    mol/kg coefficients of its table 1, as in DSC2007 chapter 5).
    """
    return _k0_weiss1974(_Terms(temperature, salinity))


def _k0_weiss1974(x):
    tk100 = 0.01 * x.tk
    ln_k0 = (
        -60.2409
        + 93.4517 * 100.0 * x.inv_tk
        + 23.3585 * (x.ln_tk - math.log(100.0))
        + x.s * (0.023517 + tk100 * (0.0047036 * tk100 - 0.023656))
    )
    return _exp(ln_k0)


def fugacity_factor_weiss1974(temperature, pressure_atm=1.0):
    """Ratio fCO2 / pCO2 for CO2 in moist air, from the virial equation of state.

    Parameters
    ----------
    temperature : float or array_like
        Temperature, deg C.
    pressure_atm : float or array_like
        Total pressure of the gas phase, atm (1 atm at the sea surface).

    Returns
    -------
    factor : float or ndarray
        Dimensionless, about 0.996 at 25 deg C and 1 atm.

    Notes
    -----
    B(T) and delta(T) (cm3/mol) from Weiss1974; the mole fraction of CO2 in the air is
    small enough that (1 - xCO2)^2 is taken as 1 (DSC2007 chapter 5, SOP 24).
    """
    tk = _num(temperature) + ZERO_CELSIUS_K
    virial_b = -1636.75 + tk * (12.0408 + tk * (-3.27957e-2 + tk * 3.16528e-5))
    cross_delta = 57.7 - 0.118 * tk
    return _exp((virial_b + 2.0 * cross_delta) * _num(pressure_atm) / (GAS_CONSTANT_CM3_ATM * tk))


def vapour_pressure_weiss_price1980(temperature, salinity):
    """Water-vapour pressure over seawater.

    Parameters
    ----------
    temperature : float or array_like
        Temperature, deg C.
    salinity : float or array_like
        Practical salinity.

    Returns
    -------
    p_h2o : float or ndarray
        atm.

    Notes
    -----
    Valid for t = 0 to 40 deg C and S = 0 to 40. Reference: WeissPrice1980 (equation 10).
    """
    tk100 = (_num(temperature) + ZERO_CELSIUS_K) / 100.0
    return _exp(24.4543 - 67.4509 / tk100 - 4.8489 * _ln(tk100) - 0.000544 * _num(salinity))


# --- Carbonic acid ----------------------------------------------------------------------


def k1_lueker2000(temperature, salinity):
    """First dissociation constant of carbonic acid, K1 = [H+][HCO3-]/[CO2*].

    Parameters
    ----------
    temperature : float or array_like
        Temperature, deg C.
    salinity : float or array_like
        Practical salinity.

    Returns
    -------
    K1 : float or ndarray
        mol/kg-soln, total pH scale.

    Notes
    -----
    Valid for S = 19 to 43 and t = 2 to 35 deg C. Fit by Lueker2000 to the measurements of
    Mehrbach et al. (1973). Calculated fCO2 is about 3 % low above about 500 uatm (Lueker2000).
    """
    return _k1_lueker2000(_Terms(temperature, salinity))


def _k1_lueker2000(x):
    s = x.s
    pk1 = 3633.86 * x.inv_tk - 61.2172 + 9.6777 * x.ln_tk + s * (0.0001152 * s - 0.011555)
    return _from_pk(pk1)


def k2_lueker2000(temperature, salinity):
    """Second dissociation constant of carbonic acid, K2 = [H+][CO3--]/[HCO3-].

    Parameters
    ----------
    temperature : float or array_like
        Temperature, deg C.
    salinity : float or array_like
        Practical salinity.

    Returns
    -------
    K2 : float or ndarray
        mol/kg-soln, total pH scale.

    Notes
    -----
    Valid for S = 19 to 43 and t = 2 to 35 deg C. Reference: Lueker2000.
    """
    return _k2_lueker2000(_Terms(temperature, salinity))


def _k2_lueker2000(x):
    s = x.s
    pk2 = 471.78 * x.inv_tk + 25.9290 - 3.16967 * x.ln_tk + s * (0.0001122 * s - 0.01781)
    return _from_pk(pk2)


def k1_millero2010_seawater_scale(temperature, salinity):
    """First carbonic-acid dissociation constant for estuarine and sea water, seawater scale.

    Parameters
    ----------
    temperature : float or array_like
        Temperature, deg C.
    salinity : float or array_like
        Practical salinity.

    Returns
    -------
    K1 : float or ndarray
        mol/kg-soln, seawater pH scale.

    Notes
    -----
    Valid for S = 1 to 50 and t = 0 to 50 deg C. Reference: Millero2010, seawater-scale
    coefficients (pK1 = pK1_0 + A1 + B1/T + C1 ln T, pK1_0 from Harned and Davis for pure
    water).
    """
    return _k1_millero2010_seawater_scale(_Terms(temperature, salinity))


def _k1_millero2010_seawater_scale(x):
    s, sqrt_s, ln_tk = x.s, x.sqrt_s, x.ln_tk
    pk1_pure = -126.34048 + 6320.813 * x.inv_tk + 19.568224 * ln_tk
    a1 = 13.4038 * sqrt_s + 0.03206 * s - 5.242e-5 * s * s
    b1 = -530.659 * sqrt_s - 5.8210 * s
    c1 = -2.0664 * sqrt_s
    return _from_pk(pk1_pure + a1 + b1 * x.inv_tk + c1 * ln_tk)


def k2_millero2010_seawater_scale(temperature, salinity):
    """Second carbonic-acid dissociation constant for estuarine and sea water, seawater scale.

    Parameters
    ----------
    temperature : float or array_like
        Temperature, deg C.
    salinity : float or array_like
        Practical salinity.

    Returns
    -------
    K2 : float or ndarray
        mol/kg-soln, seawater pH scale.

    Notes
    -----
    Valid for S = 1 to 50 and t = 0 to 50 deg C. Reference: Millero2010, seawater-scale
    coefficients.
    """
    return _k2_millero2010_seawater_scale(_Terms(temperature, salinity))


def _k2_millero2010_seawater_scale(x):
    s, sqrt_s, ln_tk = x.s, x.sqrt_s, x.ln_tk
    pk2_pure = -90.18333 + 5143.692 * x.inv_tk + 14.613358 * ln_tk
    a2 = 21.3728 * sqrt_s + 0.1218 * s - 3.688e-4 * s * s
    b2 = -788.289 * sqrt_s - 19.189 * s
    c2 = -3.374 * sqrt_s
    return _from_pk(pk2_pure + a2 + b2 * x.inv_tk + c2 * ln_tk)


def _seawater_to_total_factor(x, kf=None):
    """K_total / K_seawater for a constant with one hydrogen ion: 1 / (1 + F_T / KF_total)."""
    if kf is None:
        kf = _kf_perez_fraga1987(x)
    return 1.0 / (1.0 + total_fluoride_riley1965(x.s) / kf)


def k1_millero2010(temperature, salinity):
    """K1 of Millero2010 converted from the seawater to the total scale.

    Millero2010's printed total- and free-scale coefficient sets are not consistent with
    each other, so the seawater-scale set is converted with this package's own KS, KF and
    total fluoride: K_total = K_seawater / (1 + F_T / KF_total).

    Returns
    -------
    K1 : float or ndarray
        mol/kg-soln, total pH scale. Valid for S = 1 to 50 and t = 0 to 50 deg C.
    """
    x = _Terms(temperature, salinity)
    return _k1_millero2010_seawater_scale(x) * _seawater_to_total_factor(x)


def k2_millero2010(temperature, salinity):
    """K2 of Millero2010 converted from the seawater to the total scale (see k1_millero2010).

    Returns
    -------
    K2 : float or ndarray
        mol/kg-soln, total pH scale. Valid for S = 1 to 50 and t = 0 to 50 deg C.
    """
    x = _Terms(temperature, salinity)
    return _k2_millero2010_seawater_scale(x) * _seawater_to_total_factor(x)


# --- Boric acid -------------------------------------------------------------------------


def kb_dickson1990(temperature, salinity):
    """Dissociation constant of boric acid, KB = [H+][B(OH)4-]/[B(OH)3].

    Parameters
    ----------
    temperature : float or array_like
        Temperature, deg C.
    salinity : float or array_like
        Practical salinity.

    Returns
    -------
    KB : float or ndarray
        mol/kg-soln, total pH scale.

    Notes
    -----
    Valid for t = 0 to 45 deg C and S = 5 to 45. Reference: Dickson1990b (as in DSC2007).
    """
    return _kb_dickson1990(_Terms(temperature, salinity))


def _kb_dickson1990(x):
    s, sqrt_s = x.s, x.sqrt_s
    ln_kb = (
        (-8966.90 - 2890.53 * sqrt_s - 77.942 * s + 1.728 * s * sqrt_s - 0.0996 * s * s)
        * x.inv_tk
        + 148.0248
        + 137.1942 * sqrt_s
        + 1.62142 * s
        - (24.4344 + 25.085 * sqrt_s + 0.2474 * s) * x.ln_tk
        + 0.053105 * sqrt_s * x.tk
    )
    return _exp(ln_kb)


def total_boron_lee2010(salinity):
    """Total boron from salinity, 432.6 umol/kg at S = 35 (B/Cl ratio of Lee2010).

    Returns
    -------
    total_boron : float or ndarray
        mol/kg-soln.
    """
    return (0.0004326 / 35.0) * _num(salinity)


def total_boron_uppstrom1974(salinity):
    """Total boron from salinity, 416 umol/kg at S = 35 (Uppstrom1974, as in DSC2007).

    Returns
    -------
    total_boron : float or ndarray
        mol/kg-soln.
    """
    return (0.000416 / 35.0) * _num(salinity)


# --- Water, sulfate, fluoride -----------------------------------------------------------


def kw_millero1995(temperature, salinity):
    """Ion product of water, KW = [H+][OH-].

    Parameters
    ----------
    temperature : float or array_like
        Temperature, deg C.
    salinity : float or array_like
        Practical salinity.

    Returns
    -------
    KW : float or ndarray
        (mol/kg-soln)^2, total pH scale.

    Notes
    -----
    Valid for t = 0 to 45 deg C and S = 0 to 45. Reference: Millero1995 (as in DSC2007).
    """
    return _kw_millero1995(_Terms(temperature, salinity))


def _kw_millero1995(x):
    ln_tk = x.ln_tk
    ln_kw = (
        148.9652
        - 13847.26 * x.inv_tk
        - 23.6521 * ln_tk
        + (118.67 * x.inv_tk - 5.977 + 1.0495 * ln_tk) * x.sqrt_s
        - 0.01615 * x.s
    )
    return _exp(ln_kw)


def _ionic_strength(salinity):
    """Ionic strength of seawater, mol/kg-H2O (DSC2007 chapter 5)."""
    return 19.924 * salinity / (1000.0 - 1.005 * salinity)


def ks_dickson1990(temperature, salinity):
    """Dissociation constant of the bisulfate ion, KS = [H+]_F [SO4--]/[HSO4-].

    Parameters
    ----------
    temperature : float or array_like
        Temperature, deg C.
    salinity : float or array_like
        Practical salinity.

    Returns
    -------
    KS : float or ndarray
        mol/kg-soln, free pH scale.

    Notes
    -----
    Valid for t = 0 to 45 deg C and S = 5 to 45. Reference: Dickson1990a (as in DSC2007).
    """
    return _ks_dickson1990(_Terms(temperature, salinity))


def _ks_dickson1990(x):
    inv_tk, ln_tk = x.inv_tk, x.ln_tk
    ionic = x.ionic_strength
    sqrt_i = x.sqrt_ionic_strength
    ln_ks = (
        -4276.1 * inv_tk
        + 141.328
        - 23.093 * ln_tk
        + (-13856.0 * inv_tk + 324.57 - 47.986 * ln_tk) * sqrt_i
        + (35474.0 * inv_tk - 771.54 + 114.723 * ln_tk) * ionic
        + (-2698.0 * sqrt_i + 1776.0 * ionic) * inv_tk * ionic
        + x.ln_solution_to_water
    )
    return _exp(ln_ks)


def total_sulfate_morris_riley1966(salinity):
    """Total sulfate from salinity: (0.1400 / 96.062) (S / 1.80655) mol/kg.

    Returns
    -------
    total_sulfate : float or ndarray
        mol/kg-soln. Reference: MorrisRiley1966.
    """
    return (0.1400 / 96.062 / 1.80655) * _num(salinity)


def kf_perez_fraga1987(temperature, salinity):
    """Dissociation constant of hydrogen fluoride, KF = [H+]_T [F-]/[HF].

    Parameters
    ----------
    temperature : float or array_like
        Temperature, deg C.
    salinity : float or array_like
        Practical salinity.

    Returns
    -------
    KF : float or ndarray
        mol/kg-soln, total pH scale.

    Notes
    -----
    Valid for t = 9 to 33 deg C and S = 10 to 40. Reference: PerezFraga1987 (as in DSC2007).
    """
    return _kf_perez_fraga1987(_Terms(temperature, salinity))


def _kf_perez_fraga1987(x):
    return _exp(874.0 * x.inv_tk - 9.68 + 0.111 * x.sqrt_s)


def total_fluoride_riley1965(salinity):
    """Total fluoride from salinity: (0.000067 / 18.998) (S / 1.80655) mol/kg.

    Returns
    -------
    total_fluoride : float or ndarray
        mol/kg-soln. Reference: Riley1965.
    """
    return (0.000067 / 18.998 / 1.80655) * _num(salinity)


# --- Phosphoric and silicic acid --------------------------------------------------------


def k1p_millero1995(temperature, salinity):
    """First dissociation constant of phosphoric acid, [H+][H2PO4-]/[H3PO4].

    Returns
    -------
    K1P : float or ndarray
        mol/kg-soln, total pH scale. Valid for t = 0 to 45 deg C and S = 0 to 45 (fit range
        as given in DSC2007). Reference: Millero1995 (as in DSC2007).
    """
    return _k1p_millero1995(_Terms(temperature, salinity))


def _k1p_millero1995(x):
    inv_tk = x.inv_tk
    ln_k = (
        -4576.752 * inv_tk
        + 115.525
        - 18.453 * x.ln_tk
        + (-106.736 * inv_tk + 0.69171) * x.sqrt_s
        + (-0.65643 * inv_tk - 0.01844) * x.s
    )
    return _exp(ln_k)


def k2p_millero1995(temperature, salinity):
    """Second dissociation constant of phosphoric acid, [H+][HPO4--]/[H2PO4-].

    Returns
    -------
    K2P : float or ndarray
        mol/kg-soln, total pH scale. Valid for t = 0 to 45 deg C and S = 0 to 45.
        Reference: Millero1995 (as in DSC2007).
    """
    return _k2p_millero1995(_Terms(temperature, salinity))


def _k2p_millero1995(x):
    inv_tk = x.inv_tk
    ln_k = (
        -8814.715 * inv_tk
        + 172.0883
        - 27.927 * x.ln_tk
        + (-160.340 * inv_tk + 1.3566) * x.sqrt_s
        + (0.37335 * inv_tk - 0.05778) * x.s
    )
    return _exp(ln_k)


def k3p_millero1995(temperature, salinity):
    """Third dissociation constant of phosphoric acid, [H+][PO4---]/[HPO4--].

    Returns
    -------
    K3P : float or ndarray
        mol/kg-soln, total pH scale. Valid for t = 0 to 45 deg C and S = 0 to 45.
        Reference: Millero1995 (as in DSC2007).
    """
    return _k3p_millero1995(_Terms(temperature, salinity))


def _k3p_millero1995(x):
    inv_tk = x.inv_tk
    ln_k = (
        -3070.75 * inv_tk
        - 18.141
        + (17.27039 * inv_tk + 2.81197) * x.sqrt_s
        + (-44.99486 * inv_tk - 0.09984) * x.s
    )
    return _exp(ln_k)


def ksi_millero1995(temperature, salinity):
    """Dissociation constant of silicic acid, [H+][SiO(OH)3-]/[Si(OH)4].

    Returns
    -------
    KSi : float or ndarray
        mol/kg-soln, total pH scale. Valid for t = 0 to 45 deg C and S = 0 to 45.
        Reference: Millero1995 (as in DSC2007).
    """
    return _ksi_millero1995(_Terms(temperature, salinity))


def _ksi_millero1995(x):
    inv_tk = x.inv_tk
    ionic = x.ionic_strength
    ln_k = (
        -8904.2 * inv_tk
        + 117.385
        - 19.334 * x.ln_tk
        + (-458.79 * inv_tk + 3.5913) * x.sqrt_ionic_strength
        + (188.74 * inv_tk - 1.5998) * ionic
        + (-12.1652 * inv_tk + 0.07871) * ionic * ionic
        + x.ln_solution_to_water
    )
    return _exp(ln_k)


# --- Calcium carbonate ------------------------------------------------------------------


def calcium_riley_tongudai1967(salinity):
    """Total calcium from salinity: (0.02128 / 40.078) (S / 1.80655) mol/kg.

    Returns
    -------
    calcium : float or ndarray
        mol/kg-soln. Reference: RileyTongudai1967.
    """
    return (0.02128 / 40.078 / 1.80655) * _num(salinity)


def ksp_calcite_mucci1983(temperature, salinity):
    """Stoichiometric solubility product of calcite, [Ca++][CO3--] at saturation.

    Returns
    -------
    Ksp : float or ndarray
        (mol/kg-soln)^2. Valid for t = 5 to 40 deg C and S = 5 to 44. Reference: Mucci1983.
    """
    return _ksp_calcite_mucci1983(_Terms(temperature, salinity))


def _ksp_calcite_mucci1983(x):
    tk, inv_tk, s = x.tk, x.inv_tk, x.s
    log_ksp = (
        -171.9065
        - 0.077993 * tk
        + 2839.319 * inv_tk
        + 71.595 / LN10 * x.ln_tk
        + (-0.77712 + 0.0028426 * tk + 178.34 * inv_tk) * x.sqrt_s
        + s * (0.0041249 * x.sqrt_s - 0.07711)
    )
    return _pow10(log_ksp)


def ksp_aragonite_mucci1983(temperature, salinity):
    """Stoichiometric solubility product of aragonite, [Ca++][CO3--] at saturation.

    Returns
    -------
    Ksp : float or ndarray
        (mol/kg-soln)^2. Valid for t = 5 to 40 deg C and S = 5 to 44. Reference: Mucci1983.
    """
    return _ksp_aragonite_mucci1983(_Terms(temperature, salinity))


def _ksp_aragonite_mucci1983(x):
    tk, inv_tk, s = x.tk, x.inv_tk, x.s
    log_ksp = (
        -171.945
        - 0.077993 * tk
        + 2903.293 * inv_tk
        + 71.595 / LN10 * x.ln_tk
        + (-0.068393 + 0.0017276 * tk + 88.135 * inv_tk) * x.sqrt_s
        + s * (0.0059415 * x.sqrt_s - 0.10018)
    )
    return _pow10(log_ksp)


# --- Pressure ---------------------------------------------------------------------------

# Millero1995 partial molar volume and compressibility changes of the dissociation reactions:
# delta_V = a0 + a1 t + a2 t^2 (cm3/mol), delta_kappa = b0 + b1 t (cm3/(mol bar)), t in deg C.
# KSi is taken as for boric acid (Millero1995). Aragonite differs from calcite by +2.8 cm3/mol
# in a0 (Millero1995).
MILLERO1995_PRESSURE_COEFFICIENTS: dict[str, tuple[float, float, float, float, float]] = {
    "K1": (-25.50, 0.1271, 0.0, -3.08e-3, 0.0877e-3),
    "K2": (-15.82, -0.0219, 0.0, 1.13e-3, -0.1475e-3),
    "KB": (-29.48, 0.1622, -2.608e-3, -2.84e-3, 0.0),
    "KW": (-20.02, 0.1119, -1.409e-3, -5.13e-3, 0.0794e-3),
    "KS": (-18.03, 0.0466, 0.316e-3, -4.53e-3, 0.0900e-3),
    "KF": (-9.78, -0.0090, -0.942e-3, -3.91e-3, 0.054e-3),
    "K1P": (-14.51, 0.1211, -0.321e-3, -2.67e-3, 0.0427e-3),
    "K2P": (-23.12, 0.1758, -2.647e-3, -5.15e-3, 0.09e-3),
    "K3P": (-26.57, 0.2020, -3.042e-3, -4.08e-3, 0.0714e-3),
    "KSi": (-29.48, 0.1622, -2.608e-3, -2.84e-3, 0.0),
    "Ksp_calcite": (-48.76, 0.5304, 0.0, -11.76e-3, 0.3692e-3),
    "Ksp_aragonite": (-45.96, 0.5304, 0.0, -11.76e-3, 0.3692e-3),
}


def pressure_factor_millero1995(constant, temperature, pressure):
    """Ratio K(P) / K(0) of an equilibrium constant at gauge pressure P.

    ln(K_P / K_0) = -(delta_V / RT) P + (0.5 delta_kappa / RT) P^2, P in bar.

    Parameters
    ----------
    constant : str
        One of the keys of ``MILLERO1995_PRESSURE_COEFFICIENTS`` (K1, K2, KB, KW, KS, KF, K1P,
        K2P, K3P, KSi, Ksp_calcite, Ksp_aragonite).
    temperature : float or array_like
        Temperature, deg C.
    pressure : float or array_like
        Gauge pressure, dbar.

    Returns
    -------
    factor : float or ndarray
        Dimensionless; 1 at zero gauge pressure. Reference: Millero1995.
    """
    a0, a1, a2, b0, b1 = MILLERO1995_PRESSURE_COEFFICIENTS[constant]
    t = _num(temperature)
    p_bar = _num(pressure) / 10.0
    rt = GAS_CONSTANT_CM3_BAR * (t + ZERO_CELSIUS_K)
    delta_v = a0 + t * (a1 + a2 * t)
    delta_kappa = b0 + b1 * t
    return _exp((-delta_v + 0.5 * delta_kappa * p_bar) * p_bar / rt)


# --- The whole set ----------------------------------------------------------------------


class EquilibriumConstants(dict):
    """Mapping of constant name to value, with the validity warnings of the set.

    The keys are those of :func:`equilibrium_constants`; ``warnings`` is a tuple of plain
    sentences (temperature or salinity outside a relation's validity range).
    """

    warnings: tuple[str, ...] = ()


# Validity ranges: (label, reference key, t_min, t_max, S_min, S_max).
_VALIDITY = {
    "lueker2000": ("K1 and K2 of Lueker et al. 2000", "Lueker2000", 2.0, 35.0, 19.0, 43.0),
    "millero2010": ("K1 and K2 of Millero 2010", "Millero2010", 0.0, 50.0, 1.0, 50.0),
    "kb": ("KB of Dickson 1990", "Dickson1990b", 0.0, 45.0, 5.0, 45.0),
    "ks": ("KS of Dickson 1990", "Dickson1990a", 0.0, 45.0, 5.0, 45.0),
    "ksp": ("calcite and aragonite Ksp of Mucci 1983", "Mucci1983", 5.0, 40.0, 5.0, 44.0),
}


def _range_sentence(name, unit, shown, lo_allowed, hi_allowed, label, key, count, total):
    where = "" if total <= 1 else f" ({count} of {total} values)"
    unit_text = f" {unit}" if unit else ""
    return (
        f"{name.capitalize()} {shown}{unit_text}{where} is outside the range "
        f"{lo_allowed:g} to {hi_allowed:g}{unit_text} of the {label} ({key}); "
        f"the result there is an extrapolation."
    )


def validity_warnings(temperature, salinity, carbonic="lueker2000", extremes=None):
    """Sentences for every relation whose temperature or salinity range the inputs leave.

    Parameters
    ----------
    temperature : float or array_like
        Temperature, deg C.
    salinity : float or array_like
        Practical salinity.
    carbonic : str
        The K1, K2 set in use, "lueker2000" or "millero2010".
    extremes : tuple of float, optional
        Lowest and highest temperature, then salinity, when the caller already has them.

    Returns
    -------
    warnings : tuple of str
    """
    t = _num(temperature)
    s = _num(salinity)
    if np.size(t) == 0 or np.size(s) == 0:
        return ()
    if extremes is not None:
        t_min, t_max, s_min, s_max = extremes
    else:
        t_min, t_max = (t, t) if type(t) is float else (float(t.min()), float(t.max()))
        s_min, s_max = (s, s) if type(s) is float else (float(s.min()), float(s.max()))
    sentences = []
    for set_name in (carbonic, "kb", "ks", "ksp"):
        label, key, lo_t, hi_t, lo_s, hi_s = _VALIDITY[set_name]
        for name, unit, value, v_min, v_max, lo, hi in (
            ("temperature", "deg C", t, t_min, t_max, lo_t, hi_t),
            ("salinity", "", s, s_min, s_max, lo_s, hi_s),
        ):
            if v_min >= lo and v_max <= hi:
                continue
            if type(value) is float:
                count, total, shown = 1, 1, f"{value:g}"
            else:
                # Named by the overall extremes on the side(s) left: a count of a mask is cheap,
                # the extreme of the values inside it is not (a pass with a where= of its own).
                below = v_min < lo
                above = v_max > hi
                count = (int(np.count_nonzero(value < lo)) if below else 0) + (
                    int(np.count_nonzero(value > hi)) if above else 0
                )
                total = int(value.size)
                if below and above:
                    shown = f"from {v_min:g} to {v_max:g}"
                elif below:
                    shown = f"as low as {v_min:g}"
                else:
                    shown = f"as high as {v_max:g}"
            sentences.append(_range_sentence(name, unit, shown, lo, hi, label, key, count, total))
    return tuple(sentences)


def _total_scale_pressure_factor(name, temperature, pressure, free_to_total_0, free_to_total_p):
    # The Millero1995 corrections are applied on the free scale; a total-scale constant is
    # taken to the free scale with KS at 1 atm and back with KS at pressure.
    return (
        pressure_factor_millero1995(name, temperature, pressure)
        * free_to_total_p
        / free_to_total_0
    )


def compute_constants(temperature, salinity, pressure, carbonic, boron, with_nutrients=True):
    """Internal: the constant set without input checks (floats or broadcast arrays).

    ``with_nutrients=False`` skips the phosphate and silicate constants (returned as absent)
    when the caller knows both nutrients are zero. For one water (floats) the set is
    remembered: a dose search or an uncertainty budget solves the same water again and
    again, and the constants are a third of a scalar solve. The caller gets its own dict.
    """
    if (
        isinstance(temperature, float)
        and isinstance(salinity, float)
        and isinstance(pressure, float)
    ):
        return dict(
            _constants_of_one_water(
                float(temperature), float(salinity), float(pressure), carbonic, boron,
                with_nutrients,
            )
        )
    return _compute_constants(temperature, salinity, pressure, carbonic, boron, with_nutrients)


@functools.lru_cache(maxsize=512)
def _constants_of_one_water(temperature, salinity, pressure, carbonic, boron, with_nutrients):
    return _compute_constants(temperature, salinity, pressure, carbonic, boron, with_nutrients)


def _compute_constants(temperature, salinity, pressure, carbonic, boron, with_nutrients):
    x = _Terms(temperature, salinity)
    t = x.t
    s = x.s
    k = {}
    k["K0"] = _k0_weiss1974(x)
    kf = _kf_perez_fraga1987(x)
    if carbonic == "lueker2000":
        k1 = _k1_lueker2000(x)
        k2 = _k2_lueker2000(x)
    else:
        seawater_to_total = _seawater_to_total_factor(x, kf)
        k1 = _k1_millero2010_seawater_scale(x) * seawater_to_total
        k2 = _k2_millero2010_seawater_scale(x) * seawater_to_total
    kb = _kb_dickson1990(x)
    kw = _kw_millero1995(x)
    ks = _ks_dickson1990(x)
    total_sulfate = total_sulfate_morris_riley1966(s)
    ksp_c = _ksp_calcite_mucci1983(x)
    ksp_a = _ksp_aragonite_mucci1983(x)
    if with_nutrients:
        k1p = _k1p_millero1995(x)
        k2p = _k2p_millero1995(x)
        k3p = _k3p_millero1995(x)
        ksi = _ksi_millero1995(x)
    has_pressure = np.any(pressure != 0.0)
    if has_pressure:
        free_to_total_0 = 1.0 + total_sulfate / ks
        ks = ks * pressure_factor_millero1995("KS", t, pressure)
        free_to_total_p = 1.0 + total_sulfate / ks

        def corrected(name, value):
            return value * _total_scale_pressure_factor(
                name, t, pressure, free_to_total_0, free_to_total_p
            )

        k1 = corrected("K1", k1)
        k2 = corrected("K2", k2)
        kb = corrected("KB", kb)
        kw = corrected("KW", kw)
        kf = corrected("KF", kf)
        if with_nutrients:
            k1p = corrected("K1P", k1p)
            k2p = corrected("K2P", k2p)
            k3p = corrected("K3P", k3p)
            ksi = corrected("KSi", ksi)
        ksp_c = ksp_c * pressure_factor_millero1995("Ksp_calcite", t, pressure)
        ksp_a = ksp_a * pressure_factor_millero1995("Ksp_aragonite", t, pressure)
    k["K1"] = k1
    k["K2"] = k2
    k["KB"] = kb
    k["KW"] = kw
    k["KS"] = ks
    k["KF"] = kf
    if with_nutrients:
        k["K1P"] = k1p
        k["K2P"] = k2p
        k["K3P"] = k3p
        k["KSi"] = ksi
    k["Ksp_aragonite"] = ksp_a
    k["Ksp_calcite"] = ksp_c
    k["total_boron"] = (
        total_boron_lee2010(s) if boron == "lee2010" else total_boron_uppstrom1974(s)
    )
    k["total_sulfate"] = total_sulfate
    k["total_fluoride"] = total_fluoride_riley1965(s)
    k["calcium"] = calcium_riley_tongudai1967(s)
    return k


def equilibrium_constants(
    temperature, salinity, pressure=0.0, carbonic="lueker2000", boron="lee2010"
) -> Mapping[str, np.ndarray]:
    """Every equilibrium constant and total concentration the CO2 system needs.

    Parameters
    ----------
    temperature : float or array_like
        Temperature, deg C (-2 to 45).
    salinity : float or array_like
        Practical salinity (0 to 50).
    pressure : float or array_like
        Gauge pressure, dbar (0 at the surface or in a tank).
    carbonic : {"lueker2000", "millero2010"}
        K1, K2 set: Lueker2000 (default; S 19-43, t 2-35 deg C) or Millero2010 for estuarine
        water (S 1-50, t 0-50 deg C; its seawater-scale set converted to the total scale).
    boron : {"lee2010", "uppstrom1974"}
        Boron-to-salinity ratio.

    Returns
    -------
    constants : EquilibriumConstants
        Mapping of float64 arrays with keys K0 (mol/(kg atm)); K1, K2, KB, KW, KF, K1P, K2P,
        K3P, KSi (total scale); KS (free scale); Ksp_aragonite, Ksp_calcite (mol2/kg2);
        total_boron, total_sulfate, total_fluoride, calcium (mol/kg). Its ``warnings``
        attribute holds a sentence for each relation whose validity range is left.

    Raises
    ------
    ChemistryInputError
        For NaN or out-of-range temperature, salinity or pressure, or an unknown choice.
    """
    check_choice("carbonic", carbonic, CARBONIC_CHOICES)
    check_choice("boron", boron, BORON_CHOICES)
    t = check_temperature(temperature)
    s = check_salinity(salinity)
    p = check_pressure(pressure)
    try:
        t, s, p = np.broadcast_arrays(t, s, p)
    except ValueError as exc:
        raise ChemistryInputError(
            f"temperature, salinity and pressure must broadcast together; got shapes "
            f"{np.shape(t)}, {np.shape(s)} and {np.shape(p)}.",
            parameter="temperature",
        ) from exc
    values = compute_constants(_num(t), _num(s), _num(p), carbonic, boron)
    result = EquilibriumConstants(
        (name, np.broadcast_to(np.asarray(value, dtype=np.float64), t.shape).copy())
        for name, value in values.items()
    )
    result.warnings = validity_warnings(t, s, carbonic)
    return result
