"""The seawater CO2 system from any two of pH, total alkalinity, DIC and pCO2.

:func:`solve` takes two of the four measurable quantities with temperature and salinity
(and optionally pressure and nutrients) and returns a :class:`CarbonateState` with the pH on
every scale, the carbonate species, pCO2 and fCO2, the saturation states of aragonite and
calcite and the Revelle factor.

Total alkalinity follows Dickson1981:

    TA = [HCO3-] + 2[CO3--] + [B(OH)4-] + [OH-] + [HPO4--] + 2[PO4---] + [SiO(OH)3-]
         - [H+]_F - [HSO4-] - [HF] - [H3PO4]

Pairs with pH, and DIC with pCO2, are explicit. Alkalinity with DIC and alkalinity with pCO2
are solved for [H+] by a safeguarded Newton iteration kept inside a bracket that is guaranteed
to hold the root (after Munhoven2013): every step that would leave the bracket is replaced by
a geometric bisection, so the iteration converges for every finite physical input; it is
vectorised over arrays. Inputs that no water can have (a DIC below the dissolved CO2 implied by
pCO2, an alkalinity too low for the pH) raise :class:`ChemistryInputError` instead of giving NaN.

Constants: see :mod:`chemistry.constants`. With the default Lueker2000 K1 and K2, calculated
fCO2 is about 3 % too low above about 500 uatm (their own comparison); hatchery water is often
there. fCO2 and pCO2 are related by the virial equation of Weiss1974 at 1 atm.

Units: alkalinity, DIC, species and nutrients in umol/kg; pCO2 and fCO2 in uatm; pH total
scale unless named otherwise; temperature deg C; pressure dbar (gauge).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from . import kernel
from .constants import (
    BORON_CHOICES,
    CARBONIC_CHOICES,
    compute_constants,
    fugacity_factor_weiss1974,
    validity_warnings,
)
from .errors import (
    PH_RANGE,
    PRESSURE_RANGE_DBAR,
    SALINITY_RANGE,
    TEMPERATURE_RANGE_C,
    ChemistryInputError,
    check_choice,
    check_nonnegative,
    check_ph,
    check_pressure,
    check_salinity,
    check_temperature,
)
from .scales import NBS_WARNING, PH_SCALES, ph_offsets_from_total

__all__ = ["CONSTANT_SHIFT_KEYS", "CarbonateState", "alkalinity_contributions", "solve"]

MICRO = 1e-6  # umol/kg per mol/kg, uatm per atm

# Keys of ``constant_shifts``: pK shifts (K times 10**-shift) and a relative boron change.
CONSTANT_SHIFT_KEYS = (
    "pK0",
    "pK1",
    "pK2",
    "pKB",
    "pKW",
    "pKsp_aragonite",
    "pKsp_calcite",
    "total_boron",
)

_OUTPUT_NAMES = (
    "ph_total",
    "ph_free",
    "ph_seawater",
    "ph_nbs",
    "alkalinity",
    "dic",
    "co2",
    "bicarbonate",
    "carbonate",
    "pco2",
    "fco2",
    "omega_aragonite",
    "omega_calcite",
    "revelle_factor",
)

# Newton stops when the relative change of [H+] is below this (1e-10 is 4e-11 in pH).
_RELATIVE_TOLERANCE = 1e-10
# Enough for a full bisection of the widest bracket (about 30 decades of [H+]) to 1e-10.
_MAX_ITERATIONS = 200
# A computed DIC this far below zero (mol/kg, 1e-6 umol/kg) is rounding, not a bad input.
_DIC_ROUNDING = 1e-12


@dataclass(eq=False)
class CarbonateState:
    """The CO2 system of one water sample or an array of samples.

    Attributes
    ----------
    ph_total, ph_free, ph_seawater, ph_nbs : ndarray
        pH on the total, free, seawater and NBS scales.
    alkalinity, dic : ndarray
        Total alkalinity and dissolved inorganic carbon, umol/kg.
    co2, bicarbonate, carbonate : ndarray
        [CO2*], [HCO3-], [CO3--], umol/kg.
    pco2, fco2 : ndarray
        Partial pressure and fugacity of CO2, uatm.
    omega_aragonite, omega_calcite : ndarray
        Saturation states [Ca++][CO3--]/Ksp, dimensionless.
    revelle_factor : ndarray
        (d ln pCO2 / d ln DIC) at constant alkalinity, dimensionless (Revelle1957).
    temperature, salinity, pressure : ndarray
        The inputs, deg C, practical, dbar, in the broadcast shape.
    warnings : tuple of str
        Plain sentences: a constant set used outside its validity range, the NBS caveat.
    phosphate, silicate : float or ndarray
        Total phosphate and silicate used, umol/kg.
    carbonic, boron : str
        The K1, K2 set and the boron ratio used.
    constant_shifts : mapping or None
        The constant shifts used (see :func:`solve`).
    """

    ph_total: Any
    ph_free: Any
    ph_seawater: Any
    ph_nbs: Any
    alkalinity: Any
    dic: Any
    co2: Any
    bicarbonate: Any
    carbonate: Any
    pco2: Any
    fco2: Any
    omega_aragonite: Any
    omega_calcite: Any
    revelle_factor: Any
    temperature: Any
    salinity: Any
    pressure: Any
    warnings: tuple[str, ...] = ()
    phosphate: Any = 0.0
    silicate: Any = 0.0
    carbonic: str = "lueker2000"
    boron: str = "lee2010"
    constant_shifts: Any = field(default=None, repr=False)

    @property
    def options(self) -> dict[str, Any]:
        """Keyword arguments of :func:`solve` that describe this water besides its two inputs.

        Transforms (heating, mixing, aeration, dosing) pass these on so that a derived water
        uses the same constants, nutrients, pressure and constant shifts.
        """
        return {
            "pressure": self.pressure,
            "phosphate": self.phosphate,
            "silicate": self.silicate,
            "carbonic": self.carbonic,
            "boron": self.boron,
            "constant_shifts": self.constant_shifts,
        }

    def as_dict(self) -> dict[str, np.ndarray]:
        """The numeric outputs by attribute name, as float64 arrays."""
        return {name: np.asarray(getattr(self, name), dtype=np.float64) for name in _OUTPUT_NAMES}


# --- Alkalinity as a function of [H+] ---------------------------------------------------


class _Water:
    """Constants and totals of one solve, in mol/kg, with the combinations the iteration uses.

    Works on Python floats (one sample) or on 1-D arrays of equal length.
    """

    __slots__ = (
        "b_kb",
        "f_kf",
        "free_fraction",
        "k1",
        "k1k2",
        "k1p",
        "k1p_k2p",
        "k1p_k2p_k3p",
        "kb",
        "kf",
        "ks",
        "ksi",
        "kw",
        "nutrients",
        "phosphate",
        "s_free_ks",
        "silicate",
        "total_boron",
        "total_fluoride",
        "total_sulfate",
    )

    def __init__(self, k, phosphate, silicate, nutrients):
        self.k1 = k["K1"]
        self.k1k2 = k["K1"] * k["K2"]
        self.kb = k["KB"]
        self.kw = k["KW"]
        self.ks = k["KS"]
        self.kf = k["KF"]
        self.total_boron = k["total_boron"]
        self.total_sulfate = k["total_sulfate"]
        self.total_fluoride = k["total_fluoride"]
        self.b_kb = self.total_boron * self.kb
        self.f_kf = self.total_fluoride * self.kf
        # [H+]_F = free_fraction * [H+]_T
        self.free_fraction = 1.0 / (1.0 + self.total_sulfate / self.ks)
        self.s_free_ks = self.total_sulfate * self.free_fraction * self.ks
        self.nutrients = nutrients
        if nutrients:
            self.phosphate = phosphate
            self.silicate = silicate
            self.k1p = k["K1P"]
            self.k1p_k2p = k["K1P"] * k["K2P"]
            self.k1p_k2p_k3p = self.k1p_k2p * k["K3P"]
            self.ksi = k["KSi"]

    def take(self, index):
        """The same water restricted to ``index`` (array path only)."""
        other = _Water.__new__(_Water)
        for name in _Water.__slots__:
            if name == "nutrients":
                other.nutrients = self.nutrients
                continue
            if not self.nutrients and name in ("k1p", "k1p_k2p", "k1p_k2p_k3p", "ksi",
                                               "phosphate", "silicate"):
                continue
            value = getattr(self, name)
            setattr(other, name, value[index] if type(value) is not float else value)
        return other

    def noncarbonate(self, h, derivative=True):
        """Alkalinity from everything but the carbonate system and its d/dh, at [H+]_T = h.

        With ``derivative=False`` only the alkalinity, without the pair.
        """
        borate_den = self.kb + h
        h_free = self.free_fraction * h
        sulfate_den = h_free + self.ks
        fluoride_den = h + self.kf
        borate = self.b_kb / borate_den
        hydroxide = self.kw / h
        alk = (
            borate
            + hydroxide
            - h_free
            - self.total_sulfate * h_free / sulfate_den
            - self.total_fluoride * h / fluoride_den
        )
        if not derivative:
            if self.nutrients:
                alk = alk + self._nutrient_alkalinity(h)[0]
            return alk
        dalk = (
            -borate / borate_den
            - hydroxide / h
            - self.free_fraction
            - self.s_free_ks / (sulfate_den * sulfate_den)
            - self.f_kf / (fluoride_den * fluoride_den)
        )
        if self.nutrients:
            nutrient_alk, nutrient_dalk = self._nutrient_alkalinity(h)
            alk = alk + nutrient_alk
            dalk = dalk + nutrient_dalk
        return alk, dalk

    def _nutrient_alkalinity(self, h):
        """Phosphate and silicate alkalinity and its d/dh."""
        h2 = h * h
        h3 = h2 * h
        p_den = h3 + self.k1p * h2 + self.k1p_k2p * h + self.k1p_k2p_k3p
        p_num = self.k1p_k2p * h + 2.0 * self.k1p_k2p_k3p - h3
        si_den = self.ksi + h
        alk = self.phosphate * p_num / p_den + self.silicate * self.ksi / si_den
        dp_num = self.k1p_k2p - 3.0 * h2
        dp_den = 3.0 * h2 + 2.0 * self.k1p * h + self.k1p_k2p
        dalk = self.phosphate * (dp_num * p_den - p_num * dp_den) / (
            p_den * p_den
        ) - self.silicate * self.ksi / (si_den * si_den)
        return alk, dalk

    def bounds(self):
        """Lower and upper bounds of the non-carbonate, non-water alkalinity (Munhoven2013)."""
        low = -self.total_sulfate - self.total_fluoride
        high = self.total_boron
        if self.nutrients:
            low = low - self.phosphate
            high = high + 2.0 * self.phosphate + self.silicate
        return low, high

    def water_root(self, level, extra_kw=0.0):
        """[H+]_T where (KW + extra_kw)/h - free_fraction h = level (decreasing in h)."""
        kw = self.kw + extra_kw
        c = self.free_fraction
        if type(level) is float and type(c) is float:
            root = math.sqrt(level * level + 4.0 * c * kw)
            return 2.0 * kw / (level + root) if level >= 0.0 else (root - level) / (2.0 * c)
        root = np.sqrt(level * level + 4.0 * c * kw)
        # Two forms of the same root, each free of cancellation on its side of zero.
        positive = 2.0 * kw / np.where(level >= 0.0, level + root, 1.0)
        negative = (root - level) / (2.0 * c)
        return np.where(level >= 0.0, positive, negative)


def _carbonate_fraction(h, water):
    """(alpha1 + 2 alpha2) and its d/dh: carbonate alkalinity per unit DIC."""
    k1 = water.k1
    k1k2 = water.k1k2
    k1h = k1 * h
    den = h * h + k1h + k1k2
    num = k1h + 2.0 * k1k2
    frac = num / den
    dfrac = (k1 - frac * (2.0 * h + k1)) / den
    return frac, dfrac, den


# --- Safeguarded Newton -----------------------------------------------------------------


def _newton_scalar(evaluate, target, h, low, high):
    """Root of evaluate(h)[0] = target for a decreasing function, inside [low, high]."""
    if not low <= h <= high:
        h = math.sqrt(low * high)
    for _ in range(_MAX_ITERATIONS):
        value, slope = evaluate(h)
        residual = value - target
        if residual > 0.0:
            low = h
        else:
            high = h
        step = residual / slope if slope < 0.0 else math.inf
        new = h - step
        if not low <= new <= high:
            new = math.sqrt(low * high)
        if abs(new - h) <= _RELATIVE_TOLERANCE * new or high - low <= _RELATIVE_TOLERANCE * low:
            return new
        h = new
    return h


def _newton_array(evaluate, target, h, low, high, water, extra):
    """Vectorised :func:`_newton_scalar`; ``extra`` holds per-element arrays evaluate needs.

    Elements that have converged are dropped from the working set, so the cost follows the
    slowest elements only while they remain. Each element's iterates depend on its own
    values only, so a water gives the same bits whatever array it is solved in (finite-
    difference uncertainties rely on that).
    """
    result = h.copy()
    active = np.arange(h.size)
    h = np.where((h >= low) & (h <= high), h, np.sqrt(low * high))
    sub_water = water
    sub_extra = extra
    sub_target = target
    for _ in range(_MAX_ITERATIONS):
        value, slope = evaluate(h, sub_water, *sub_extra)
        residual = value - sub_target
        above = residual > 0.0
        low = np.where(above, h, low)
        high = np.where(above, high, h)
        with np.errstate(divide="ignore", invalid="ignore"):
            step = residual / slope
        new = h - step
        outside = ~((new >= low) & (new <= high))
        done = np.abs(step) <= _RELATIVE_TOLERANCE * new
        if outside.any():
            new = np.where(outside, np.sqrt(low * high), new)
            # A bisection step says nothing about convergence; the bracket width does.
            done = (done & ~outside) | (high - low <= _RELATIVE_TOLERANCE * low)
        if done.all():
            result[active] = new
            return result
        if done.any():
            result[active[done]] = new[done]
            keep = ~done
            active = active[keep]
            h = new[keep]
            low = low[keep]
            high = high[keep]
            sub_water = sub_water.take(keep)
            sub_extra = tuple(e[keep] for e in sub_extra)
            sub_target = sub_target[keep]
        else:
            h = new
    result[active] = h
    return result


def _alkalinity_at_dic(h, water, dic):
    frac, dfrac, _ = _carbonate_fraction(h, water)
    alk, dalk = water.noncarbonate(h)
    return dic * frac + alk, dic * dfrac + dalk


def _alkalinity_at_co2(h, water, co2):
    k1 = water.k1
    k1k2 = water.k1k2
    h2 = h * h
    carb = co2 * (k1 * h + 2.0 * k1k2) / h2
    dcarb = -co2 * (k1 * h + 4.0 * k1k2) / (h2 * h)
    alk, dalk = water.noncarbonate(h)
    return carb + alk, dcarb + dalk


def _h_from_alkalinity_dic(alkalinity, dic, water, scalar):
    low_bound, high_bound = water.bounds()
    h_low = water.water_root(alkalinity - low_bound)
    h_high = water.water_root(alkalinity - (high_bound + 2.0 * dic))
    # Starting value: carbonate alkalinity with borate at pH 8 and the quadratic of the
    # carbonate system alone; the bracket catches a poor start.
    carbonate_alk = alkalinity - water.b_kb / (water.kb + 1e-8)
    k1 = water.k1
    b = (dic - carbonate_alk) * k1
    disc = b * b - 4.0 * carbonate_alk * (carbonate_alk - 2.0 * dic) * water.k1k2
    if scalar:
        h0 = (b + math.sqrt(disc)) / (2.0 * carbonate_alk) if disc >= 0 and carbonate_alk > 0 \
            else math.sqrt(h_low * h_high)
        return _newton_scalar(
            lambda h: _alkalinity_at_dic(h, water, dic), alkalinity, h0, h_low, h_high
        )
    with np.errstate(divide="ignore", invalid="ignore"):
        h0 = (b + np.sqrt(disc)) / (2.0 * carbonate_alk)
        # One refinement: borate and water at the first estimate instead of at pH 8. (More
        # refinements cost as much as the Newton steps they save.)
        noncarb = water.noncarbonate(np.where(h0 > 0, h0, 1e-8), derivative=False)
        carbonate_alk = alkalinity - noncarb
        b = (dic - carbonate_alk) * k1
        disc = b * b - 4.0 * carbonate_alk * (carbonate_alk - 2.0 * dic) * water.k1k2
        h0 = np.where(h0 > 0, (b + np.sqrt(disc)) / (2.0 * carbonate_alk), h0)
    return _newton_array(_alkalinity_at_dic, alkalinity, h0, h_low, h_high, water, (dic,))


def _h_from_alkalinity_co2(alkalinity, co2, water, scalar):
    low_bound, high_bound = water.bounds()
    k1 = water.k1
    h_low = water.water_root(alkalinity - low_bound, co2 * k1)
    # For h >= h_low, 2 CO2 K1 K2 / h^2 <= 2 CO2 K1 K2 / h_low^2 bounds the CO3 term.
    h_high = water.water_root(
        alkalinity - high_bound - 2.0 * co2 * water.k1k2 / (h_low * h_low), co2 * k1
    )
    carbonate_alk = alkalinity - water.b_kb / (water.kb + 1e-8)
    b = co2 * k1
    disc = b * b + 8.0 * carbonate_alk * co2 * water.k1k2
    if scalar:
        h0 = (b + math.sqrt(disc)) / (2.0 * carbonate_alk) if carbonate_alk > 0 \
            else math.sqrt(h_low * h_high)
        return _newton_scalar(
            lambda h: _alkalinity_at_co2(h, water, co2), alkalinity, h0, h_low, h_high
        )
    with np.errstate(divide="ignore", invalid="ignore"):
        h0 = (b + np.sqrt(disc)) / (2.0 * carbonate_alk)
    return _newton_array(_alkalinity_at_co2, alkalinity, h0, h_low, h_high, water, (co2,))


# --- Input handling ---------------------------------------------------------------------

_INPUT_RULES = {
    # name: (kind, unit)
    "ph": ("ph", ""),
    "alkalinity": ("concentration", "umol/kg"),
    "dic": ("concentration", "umol/kg"),
    "pco2": ("concentration", "uatm"),
}


def _as_scalar(value):
    """Python float for a scalar input (int, float, numpy scalar, 0-d array), else None."""
    kind = type(value)
    if kind is float:
        return value
    if kind is int or isinstance(value, np.floating | np.integer):
        return float(value)
    if isinstance(value, np.ndarray) and value.ndim == 0:
        return float(value)
    return None


# Inputs no water can have: (sentence, parameter), shared by the numpy and compiled paths.
_NEGATIVE_DIC = (
    "alkalinity is too low for this pH: the water would need a negative DIC; "
    "check the alkalinity, the pH and its scale",
    "alkalinity",
)
_CO2_ABOVE_DIC = (
    "pco2 implies more dissolved CO2 than the dic holds; no water has that pair",
    "pco2",
)
_PH_UNDEFINED = ("pco2 and dic are both zero or pco2 is zero: the pH is undefined", "pco2")
_KERNEL_ERRORS = {
    kernel.NEGATIVE_DIC: _NEGATIVE_DIC,
    kernel.CO2_ABOVE_DIC: _CO2_ABOVE_DIC,
    kernel.PH_UNDEFINED: _PH_UNDEFINED,
}


def _inconsistent(message, parameter, mask=None, shape=None, offset=0):
    """Raise for inputs no water can have; ``mask`` is flat, ``offset`` its start in ``shape``."""
    index = None
    if mask is not None and shape:
        flat = offset + int(np.flatnonzero(mask)[0])
        index = tuple(int(i) for i in np.unravel_index(flat, shape))
        where = index[0] if len(index) == 1 else index
        message = f"{message} (first at index {where})"
    raise ChemistryInputError(message + ".", parameter=parameter, index=index)


def _check_scalar_fast(name, value, low, high, unit, checker):
    # Plain comparisons first: the full checker (with its message) runs only on failure.
    if not low <= value <= high:
        checker(value) if unit is None else checker(name, value, unit)
    return value


def _validate_scalar_inputs(temperature, salinity, pressure, given, phosphate, silicate):
    _check_scalar_fast("temperature", temperature, *TEMPERATURE_RANGE_C, None, check_temperature)
    _check_scalar_fast("salinity", salinity, *SALINITY_RANGE, None, check_salinity)
    _check_scalar_fast("pressure", pressure, *PRESSURE_RANGE_DBAR, None, check_pressure)
    for name, value in given.items():
        kind, unit = _INPUT_RULES[name]
        if kind == "ph":
            _check_scalar_fast(name, value, *PH_RANGE, None, check_ph)
        else:
            _check_scalar_fast(name, value, 0.0, math.inf, unit, check_nonnegative)
            if value == math.inf:
                check_nonnegative(name, value, unit)
    for name, value in (("phosphate", phosphate), ("silicate", silicate)):
        if not 0.0 <= value < math.inf:
            check_nonnegative(name, value, "umol/kg")


def _within(value, low, high):
    """``value`` as a float64 array if every element lies in [low, high] (NaN fails), else None.

    Two reductions instead of the element masks of the full checks, which then run only to
    name the first bad element.
    """
    if not isinstance(value, np.ndarray) or value.dtype != np.float64 or value.size == 0:
        return None
    return value if low <= value.min() and value.max() <= high else None


def _validate_array_inputs(temperature, salinity, pressure, given, phosphate, silicate):
    def checked_range(value, low, high, check):
        array = _within(value, low, high)
        return check(value) if array is None else array

    def checked_concentration(name, value, unit):
        array = _within(value, 0.0, np.finfo(np.float64).max)
        return check_nonnegative(name, value, unit) if array is None else array

    checked = {
        "temperature": checked_range(temperature, *TEMPERATURE_RANGE_C, check_temperature),
        "salinity": checked_range(salinity, *SALINITY_RANGE, check_salinity),
        "pressure": checked_range(pressure, *PRESSURE_RANGE_DBAR, check_pressure),
        "phosphate": checked_concentration("phosphate", phosphate, "umol/kg"),
        "silicate": checked_concentration("silicate", silicate, "umol/kg"),
    }
    for name, value in given.items():
        kind, unit = _INPUT_RULES[name]
        checked[name] = (
            checked_range(value, *PH_RANGE, check_ph)
            if kind == "ph"
            else checked_concentration(name, value, unit)
        )
    return checked


def _shifted(k, constant_shifts):
    for key, shift in constant_shifts.items():
        if key not in CONSTANT_SHIFT_KEYS:
            raise ChemistryInputError(
                f"constant_shifts key {key!r} is not known; allowed keys are "
                f"{', '.join(CONSTANT_SHIFT_KEYS)}.",
                parameter="constant_shifts",
                value=key,
                allowed=", ".join(CONSTANT_SHIFT_KEYS),
            )
        if key == "total_boron":
            k["total_boron"] = k["total_boron"] * (1.0 + shift)
        else:
            name = key[1:]
            k[name] = k[name] * 10.0 ** (-shift)
    return k


# --- solve ------------------------------------------------------------------------------


def _read_only(value: Any, size: int, shape: tuple[int, ...]) -> np.ndarray:
    """``value`` spread to ``size`` and shaped ``shape``, as a read-only view (as
    ``np.broadcast_to`` gives, at a tenth of its cost when the size is already right): a
    state's arrays may be the caller's own inputs, and must not be written through."""
    if np.shape(value) != (size,):
        return np.broadcast_to(value, (size,)).reshape(shape)
    view = np.asarray(value).reshape(shape).view()
    view.flags.writeable = False
    return view


def solve(
    *,
    temperature,
    salinity,
    ph=None,
    alkalinity=None,
    dic=None,
    pco2=None,
    ph_scale="total",
    pressure=0.0,
    phosphate=0.0,
    silicate=0.0,
    carbonic="lueker2000",
    boron="lee2010",
    constant_shifts=None,
) -> CarbonateState:
    """Solve the seawater CO2 system from two of pH, alkalinity, DIC and pCO2.

    Parameters
    ----------
    temperature : float or array_like
        Temperature, deg C (-2 to 45).
    salinity : float or array_like
        Practical salinity (0 to 50).
    ph : float or array_like, optional
        pH on ``ph_scale`` (0 to 14).
    alkalinity : float or array_like, optional
        Total alkalinity, umol/kg (0 or more).
    dic : float or array_like, optional
        Dissolved inorganic carbon, umol/kg (0 or more).
    pco2 : float or array_like, optional
        Partial pressure of CO2 at 1 atm total pressure, uatm (0 or more).
    ph_scale : {"total", "seawater", "free", "nbs"}
        Scale of ``ph``. "nbs" adds the NBS caveat to the warnings.
    pressure : float or array_like
        Gauge pressure, dbar (0 in a tank).
    phosphate, silicate : float or array_like
        Total phosphate and silicate, umol/kg.
    carbonic : {"lueker2000", "millero2010"}
        K1, K2 set (see :func:`chemistry.equilibrium_constants`).
    boron : {"lee2010", "uppstrom1974"}
        Boron-to-salinity ratio.
    constant_shifts : mapping, optional
        For uncertainty propagation: keys "pK0", "pK1", "pK2", "pKB", "pKW",
        "pKsp_aragonite", "pKsp_calcite" add to the pK (K times 10**-shift); "total_boron" is
        a relative change (0.02 is +2 %). Values broadcast with the inputs.

    Returns
    -------
    CarbonateState
        Outputs in the broadcast shape of all inputs.

    Raises
    ------
    ChemistryInputError
        Not exactly two of ph, alkalinity, dic, pco2; NaN or out-of-range input (the message
        names the parameter, value, allowed range and index); inputs that no water can have.

    Notes
    -----
    Exactly two of ``ph``, ``alkalinity``, ``dic`` and ``pco2`` must be given; all six pairs
    work. The pCO2 (and fCO2) calculated with Lueker2000 is about 3 % too low above about
    500 uatm (their own comparison). References: DSC2007, Dickson1981, Munhoven2013,
    Weiss1974, Revelle1957.
    """
    given = {
        name: value
        for name, value in (("ph", ph), ("alkalinity", alkalinity), ("dic", dic), ("pco2", pco2))
        if value is not None
    }
    if len(given) != 2:
        named = ", ".join(given) if given else "none"
        raise ChemistryInputError(
            f"give exactly two of ph, alkalinity, dic and pco2; got {named}.",
            parameter="ph, alkalinity, dic, pco2",
            allowed="exactly two",
        )
    check_choice("ph_scale", ph_scale, PH_SCALES)
    check_choice("carbonic", carbonic, CARBONIC_CHOICES)
    check_choice("boron", boron, BORON_CHOICES)

    scalars = [_as_scalar(v) for v in (temperature, salinity, pressure, phosphate, silicate)]
    given_scalars = {name: _as_scalar(value) for name, value in given.items()}
    shifts_scalar = constant_shifts is None or all(
        _as_scalar(v) is not None for v in constant_shifts.values()
    )
    if (
        all(v is not None for v in scalars)
        and all(v is not None for v in given_scalars.values())
        and shifts_scalar
    ):
        t, s, p, po4, si = scalars
        _validate_scalar_inputs(t, s, p, given_scalars, po4, si)
        shifts = (
            None
            if constant_shifts is None
            else {key: _as_scalar(v) for key, v in constant_shifts.items()}
        )
        return _solve_core(
            t, s, p, given_scalars, po4, si, ph_scale, carbonic, boron, shifts, None,
            constant_shifts,
        )

    def validate():
        return _validate_array_inputs(temperature, salinity, pressure, given, phosphate, silicate)

    # The compiled kernel checks the ranges as it solves; the checks here run only when it finds
    # a value outside them, to name it. Without the kernel they run first.
    checked = _plain_arrays(temperature, salinity, pressure, given, phosphate, silicate) \
        if kernel.enabled() else None
    revalidate = validate
    if checked is None:
        checked = validate()
        revalidate = None
    shift_arrays = {}
    if constant_shifts is not None:
        for key, value in constant_shifts.items():
            array = np.asarray(value, dtype=np.float64)
            if not np.all(np.isfinite(array)):
                raise ChemistryInputError(
                    f"constant_shifts[{key!r}] must be finite.", parameter="constant_shifts"
                )
            shift_arrays[key] = array
    try:
        shape = np.broadcast_shapes(
            *(np.shape(v) for v in checked.values()), *(np.shape(v) for v in shift_arrays.values())
        )
    except ValueError as exc:
        shapes = ", ".join(f"{name} {np.shape(v)}" for name, v in checked.items())
        raise ChemistryInputError(
            f"the inputs must broadcast to one shape; got {shapes}.", parameter="shape"
        ) from exc
    size = math.prod(shape)

    def flat(value):
        if not size:
            return np.empty(0)
        # np.broadcast_to costs ~10 us a call; most inputs already have the shape.
        if np.shape(value) == shape:
            return np.asarray(value).reshape(size)
        return np.broadcast_to(value, shape).reshape(size)

    t = flat(checked["temperature"])
    s = flat(checked["salinity"])
    p = flat(checked["pressure"])
    po4 = flat(checked["phosphate"])
    si = flat(checked["silicate"])
    given_flat = {name: flat(checked[name]) for name in given}
    shifts = {key: flat(value) for key, value in shift_arrays.items()} or None
    flags = (
        bool(checked["phosphate"].any() or checked["silicate"].any()),
        not checked["pressure"].any(),
    )
    return _solve_core(
        t, s, p, given_flat, po4, si, ph_scale, carbonic, boron, shifts, shape, constant_shifts,
        flags=flags, revalidate=revalidate,
    )


def _plain_arrays(temperature, salinity, pressure, given, phosphate, silicate):
    """The inputs as float64 arrays, unchecked, for the kernel path; None if one is not numeric
    or the pressure is not zero (the numpy path then runs, with the full checks)."""
    try:
        arrays = {
            "temperature": np.asarray(temperature, dtype=np.float64),
            "salinity": np.asarray(salinity, dtype=np.float64),
            "pressure": np.asarray(pressure, dtype=np.float64),
            "phosphate": np.asarray(phosphate, dtype=np.float64),
            "silicate": np.asarray(silicate, dtype=np.float64),
        }
        arrays.update({name: np.asarray(value, dtype=np.float64) for name, value in given.items()})
    except (TypeError, ValueError):
        return None
    return arrays if not arrays["pressure"].any() else None


def _kernel_limits(given):
    """Allowed (low, high) of temperature, salinity and the two given quantities."""
    concentration = (0.0, float(np.finfo(np.float64).max))
    return (
        TEMPERATURE_RANGE_C,
        SALINITY_RANGE,
        *(PH_RANGE if name == "ph" else concentration for name in given),
    )


# Arrays are solved in slices of this many elements: the temporaries then stay in the
# processor cache and the allocator reuses their memory, which is several times faster than
# whole-array temporaries of a million readings. With slices of 6000 elements or more the
# C allocator (glibc, at its default thresholds) hands the freed temporaries back to the
# system after each slice and every new one page-faults again: about 100,000 faults per
# million readings. 4096 stays clear of that whatever the process allocated before.
_CHUNK = 4096


def _solve_core(t, s, p, given, po4, si, ph_scale, carbonic, boron, shifts, shape,
                constant_shifts, flags=None, revalidate=None):
    """Solve flat arrays (or floats when ``shape`` is None).

    ``flags``: (nutrients, no_pressure) when the caller knows them; ``revalidate``: the full
    input checks, when they have not run yet (the kernel path).
    """
    scalar = shape is None
    extremes = None
    if scalar:
        nutrients = po4 != 0.0 or si != 0.0
        no_pressure = p == 0.0
        values = _solve_numeric(t, s, p, given, po4, si, ph_scale, carbonic, boron, shifts,
                                nutrients, no_pressure, None, 0)
    else:
        nutrients, no_pressure = flags or (bool(po4.any() or si.any()), not p.any())
        size = t.size
        if no_pressure and kernel.enabled() and size:
            values, extremes = _solve_compiled(
                t, s, given, po4, si, ph_scale, carbonic, boron, shifts, nutrients, shape,
                revalidate,
            )
        elif size <= _CHUNK:
            values = _solve_numeric(t, s, p, given, po4, si, ph_scale, carbonic, boron, shifts,
                                    nutrients, no_pressure, shape, 0)
        else:
            # One block for all outputs: a single large allocation is mapped with huge pages,
            # where fourteen separate ones cost a page fault every 4 KiB when first written.
            values = np.empty((len(_OUTPUT_NAMES), size))

            def solve_slice(start):
                part = slice(start, start + _CHUNK)
                chunk = _solve_numeric(
                    t[part], s[part], p[part], {n: v[part] for n, v in given.items()},
                    po4[part], si[part], ph_scale, carbonic, boron,
                    None if not shifts else {n: v[part] for n, v in shifts.items()},
                    nutrients, no_pressure, shape, start,
                )
                for out, value in zip(values, chunk, strict=True):
                    out[part] = value

            for start in range(0, size, _CHUNK):
                solve_slice(start)
    warnings = list(validity_warnings(t, s, carbonic, extremes=extremes))
    if ph_scale == "nbs":
        warnings.append(NBS_WARNING)
    if scalar:
        outputs = [np.float64(v) for v in values]
        inputs = (np.float64(t), np.float64(s), np.float64(p))
        nutrient_values = (po4, si)
    else:
        outputs = [_read_only(v, t.size, shape) for v in values]
        # Read-only too: flat() may have reshaped the caller's own arrays.
        inputs = tuple(_read_only(v, t.size, shape) for v in (t, s, p))
        nutrient_values = (_read_only(po4, t.size, shape), _read_only(si, t.size, shape))
    return CarbonateState(
        *outputs,
        *inputs,
        warnings=tuple(warnings),
        phosphate=nutrient_values[0],
        silicate=nutrient_values[1],
        carbonic=carbonic,
        boron=boron,
        constant_shifts=constant_shifts,
    )


def _solve_compiled(t, s, given, po4, si, ph_scale, carbonic, boron, shifts, nutrients, shape,
                    revalidate):
    """The outputs of :func:`_solve_numeric` for flat arrays from the compiled kernel, and the
    lowest and highest temperature and salinity."""
    (first_name, first), (second_name, second) = given.items()
    values, extremes, bad = kernel.solve_flat(
        pair=(first_name, second_name), first=first, second=second, temperature=t, salinity=s,
        phosphate=po4, silicate=si, ph_scale=ph_scale, carbonic=carbonic, boron=boron,
        nutrients=nutrients, shifts=shifts, limits=_kernel_limits(given),
    )
    if extremes is not None:
        return values, (float(extremes[0]), float(extremes[1]), float(extremes[2]),
                        float(extremes[3]))
    # A bad input takes precedence over an inconsistent pair, as on the numpy path.
    if revalidate is not None:
        revalidate()
    if values == kernel.OUT_OF_RANGE:
        raise ChemistryInputError(
            "an input is NaN or outside its allowed range.", parameter="inputs"
        )
    mask = np.zeros(t.size, dtype=bool)
    mask[bad] = True
    _inconsistent(*_KERNEL_ERRORS[values], mask, shape)


def _solve_numeric(t, s, p, given, po4, si, ph_scale, carbonic, boron, shifts, nutrients,
                   no_pressure, shape, offset):
    """The outputs (in the order of _OUTPUT_NAMES) for floats or for one flat slice."""
    scalar = shape is None
    k = compute_constants(t, s, 0.0 if no_pressure else p, carbonic, boron, nutrients)
    if shifts:
        k = _shifted(k, shifts)
    water = _Water(k, po4 * MICRO, si * MICRO, nutrients)
    offsets = ph_offsets_from_total(t, s, k)

    ln10 = math.log(10.0)
    exp = math.exp if scalar else np.exp
    fugacity = fugacity_factor_weiss1974(t)
    alk_in = given.get("alkalinity")
    dic_in = given.get("dic")
    pco2_in = given.get("pco2")
    alkalinity = None if alk_in is None else alk_in * MICRO
    dic = None if dic_in is None else dic_in * MICRO
    co2_from_pco2 = None if pco2_in is None else pco2_in * MICRO * fugacity * k["K0"]

    # Carbonate fraction and non-carbonate alkalinity at the final [H+], with d/dh.
    frac = noncarb = None
    if "ph" in given:
        ph_total = given["ph"] if ph_scale == "total" else given["ph"] - offsets[ph_scale]
        h = exp(-ln10 * ph_total)
        frac, dfrac, den = _carbonate_fraction(h, water)
        noncarb, dnoncarb = water.noncarbonate(h)
        if alkalinity is not None:
            dic = (alkalinity - noncarb) / frac
            # Rounding leaves about 1e-16 mol/kg of DIC where the water has none.
            bad = dic < -_DIC_ROUNDING
            if np.any(bad):
                _inconsistent(
                    *_NEGATIVE_DIC,
                    None if scalar else bad,
                    shape,
                    offset,
                )
            dic = max(dic, 0.0) if scalar else np.maximum(dic, 0.0)
        elif pco2_in is not None:
            dic = co2_from_pco2 * den / (h * h)
    elif alkalinity is not None:
        if dic is not None:
            h = _h_from_alkalinity_dic(alkalinity, dic, water, scalar)
        else:
            h = _h_from_alkalinity_co2(alkalinity, co2_from_pco2, water, scalar)
            frac, dfrac, den = _carbonate_fraction(h, water)
            dic = co2_from_pco2 * den / (h * h)
    else:
        # DIC and pCO2: alpha0 = CO2/DIC gives a quadratic in h.
        # A DIC of zero (or one that underflows to zero in mol/kg) holds no CO2 at all.
        if scalar:
            alpha0 = co2_from_pco2 / dic if dic > 0.0 else math.inf
        else:
            alpha0 = _safe_ratio(co2_from_pco2, dic)
        bad = alpha0 >= 1.0
        if np.any(bad):
            _inconsistent(
                *_CO2_ABOVE_DIC,
                None if scalar else bad,
                shape,
                offset,
            )
        k1 = water.k1
        b = alpha0 * k1
        sqrt = math.sqrt if scalar else np.sqrt
        root = sqrt(b * b + 4.0 * (1.0 - alpha0) * alpha0 * water.k1k2)
        h = (b + root) / (2.0 * (1.0 - alpha0))
        bad = h <= 0.0
        if np.any(bad):
            _inconsistent(
                *_PH_UNDEFINED,
                None if scalar else bad,
                shape,
                offset,
            )
    if "ph" not in given:
        ph_total = -(math.log10(h) if scalar else np.log10(h))

    if frac is None:
        frac, dfrac, den = _carbonate_fraction(h, water)
    if noncarb is None:
        noncarb, dnoncarb = water.noncarbonate(h)
    if alkalinity is None:
        alkalinity = dic * frac + noncarb
    dic_den = dic / den
    co2 = dic_den * (h * h)
    bicarbonate = dic_den * (water.k1 * h)
    carbonate = dic_den * water.k1k2
    fco2 = co2 / k["K0"]
    pco2 = fco2 / fugacity if pco2_in is None else pco2_in * MICRO
    calcium_carbonate = k["calcium"] * carbonate
    omega_aragonite = calcium_carbonate / k["Ksp_aragonite"]
    omega_calcite = calcium_carbonate / k["Ksp_calcite"]
    # Revelle factor: d ln CO2 / d ln DIC along constant alkalinity.
    dalk_dh = dic * dfrac + dnoncarb
    dlnco2_dh = 2.0 / h - (2.0 * h + water.k1) / den
    revelle = 1.0 - dic * dlnco2_dh * frac / dalk_dh

    return (
        ph_total,
        ph_total + offsets["free"],
        ph_total + offsets["seawater"],
        ph_total + offsets["nbs"],
        alkalinity / MICRO,
        dic / MICRO,
        co2 / MICRO,
        bicarbonate / MICRO,
        carbonate / MICRO,
        pco2 / MICRO,
        fco2 / MICRO,
        omega_aragonite,
        omega_calcite,
        revelle,
    )


def _safe_ratio(numerator, denominator):
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = numerator / denominator
    return np.where(denominator > 0.0, ratio, np.inf)


def alkalinity_contributions(state: CarbonateState) -> dict[str, np.ndarray]:
    """Each term of total alkalinity (Dickson1981) in a solved water, umol/kg.

    Negative terms ([H+]_F, [HSO4-], [HF], [H3PO4]) are returned with their minus sign, so the
    values add up to the total alkalinity.

    Parameters
    ----------
    state : CarbonateState
        A solved water.

    Returns
    -------
    contributions : dict of str to ndarray
        Keys bicarbonate, carbonate (counted twice), borate, hydroxide, phosphate (HPO4 +
        2 PO4 - H3PO4), silicate, free_hydrogen, bisulfate, hydrogen_fluoride.
    """
    t = np.asarray(state.temperature, dtype=np.float64)
    s = np.asarray(state.salinity, dtype=np.float64)
    p = np.asarray(state.pressure, dtype=np.float64)
    k = compute_constants(t, s, p, state.carbonic, state.boron, True)
    if state.constant_shifts:
        k = _shifted(k, {key: np.asarray(v) for key, v in state.constant_shifts.items()})
    h = 10.0 ** (-np.asarray(state.ph_total, dtype=np.float64))
    free_fraction = 1.0 / (1.0 + k["total_sulfate"] / k["KS"])
    h_free = free_fraction * h
    po4 = np.asarray(state.phosphate, dtype=np.float64) * MICRO
    si = np.asarray(state.silicate, dtype=np.float64) * MICRO
    k1p, k2p, k3p = k["K1P"], k["K2P"], k["K3P"]
    p_den = h**3 + k1p * h**2 + k1p * k2p * h + k1p * k2p * k3p
    terms = {
        "bicarbonate": state.bicarbonate * MICRO,
        "carbonate": 2.0 * state.carbonate * MICRO,
        "borate": k["total_boron"] * k["KB"] / (k["KB"] + h),
        "hydroxide": k["KW"] / h,
        "phosphate": po4 * (k1p * k2p * h + 2.0 * k1p * k2p * k3p - h**3) / p_den,
        "silicate": si * k["KSi"] / (k["KSi"] + h),
        "free_hydrogen": -h_free,
        "bisulfate": -k["total_sulfate"] * h_free / (h_free + k["KS"]),
        "hydrogen_fluoride": -k["total_fluoride"] * h / (h + k["KF"]),
    }
    return {name: np.asarray(value) / MICRO for name, value in terms.items()}
