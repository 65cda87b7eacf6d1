"""Input validation for the chemistry package.

Every public function checks its inputs with these helpers, so that a bad value
raises :class:`ChemistryInputError` naming the parameter, the offending value, the
allowed range and, for arrays, the index of the first offending element.
"""

from __future__ import annotations

import math

import numpy as np

__all__ = [
    "PH_RANGE",
    "PRESSURE_RANGE_DBAR",
    "SALINITY_RANGE",
    "TEMPERATURE_RANGE_C",
    "ChemistryInputError",
    "as_float_array",
    "check_choice",
    "check_nonnegative",
    "check_ph",
    "check_pressure",
    "check_range",
    "check_salinity",
    "check_temperature",
]

# Ranges accepted by the package as a whole (issue 2). A constant set may be valid over a
# narrower range; that is reported as a warning sentence, not an error.
TEMPERATURE_RANGE_C = (-2.0, 45.0)
SALINITY_RANGE = (0.0, 50.0)
PH_RANGE = (0.0, 14.0)
# Gauge pressure; the Millero 1995 pressure corrections are fitted for the ocean column.
PRESSURE_RANGE_DBAR = (0.0, 11000.0)


class ChemistryInputError(ValueError):
    """An input to the chemistry package is missing, not finite or out of range.

    Attributes
    ----------
    parameter : str
        Name of the offending parameter as the caller spelled it.
    value : object
        The offending value (the first offending element for arrays).
    allowed : str
        The allowed range or choices in words, e.g. ``"0 to 14"``.
    index : tuple of int or None
        Index of the first offending element for array inputs, else None.
    """

    def __init__(
        self,
        message: str,
        *,
        parameter: str | None = None,
        value: object = None,
        allowed: str | None = None,
        index: tuple[int, ...] | None = None,
    ) -> None:
        super().__init__(message)
        self.parameter = parameter
        self.value = value
        self.allowed = allowed
        self.index = index


def _format_number(value: float) -> str:
    return f"{value:g}" if math.isfinite(value) else str(value)


def _raise_for(
    name: str, array: np.ndarray, bad: np.ndarray | bool, allowed: str, unit: str
) -> None:
    unit_text = f" {unit}" if unit else ""
    if np.ndim(array) == 0:
        value = float(array)
        index = None
        where = ""
    else:
        index = tuple(int(i) for i in np.argwhere(bad)[0])
        value = float(array[index])
        where = f" at index {index[0] if len(index) == 1 else index}"
    got = "not a number (NaN)" if math.isnan(value) else _format_number(value) + unit_text
    raise ChemistryInputError(
        f"{name} must be {allowed}{unit_text}; got {got}{where}.",
        parameter=name,
        value=value,
        allowed=allowed + unit_text,
        index=index,
    )


def as_float_array(name: str, value: object) -> np.ndarray:
    """Return ``value`` as a float64 array, or raise naming ``name`` if it is not numeric."""
    try:
        array = np.asarray(value, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise ChemistryInputError(
            f"{name} must be a number or an array of numbers; got {value!r}.",
            parameter=name,
            value=value,
            allowed="a number",
        ) from exc
    return array


def check_range(
    name: str, value: object, low: float, high: float, unit: str = ""
) -> np.ndarray:
    """Check that every element of ``value`` is finite and within ``[low, high]``.

    Returns the value as a float64 array. NaN and infinities fail the check.
    """
    array = as_float_array(name, value)
    if array.ndim == 0:
        scalar = float(array)
        if not low <= scalar <= high:
            _raise_for(name, array, True, f"between {_format_number(low)} and "
                       f"{_format_number(high)}", unit)
        return array
    bad = ~((array >= low) & (array <= high))
    if bad.any():
        _raise_for(name, array, bad, f"between {_format_number(low)} and "
                   f"{_format_number(high)}", unit)
    return array


def check_nonnegative(name: str, value: object, unit: str = "") -> np.ndarray:
    """Check that every element of ``value`` is finite and not negative (a concentration)."""
    array = as_float_array(name, value)
    if array.ndim == 0:
        scalar = float(array)
        if not 0.0 <= scalar < math.inf:
            _raise_for(name, array, True, "a finite concentration of 0 or more", unit)
        return array
    bad = ~((array >= 0.0) & (array < np.inf))
    if bad.any():
        _raise_for(name, array, bad, "a finite concentration of 0 or more", unit)
    return array


def check_temperature(value: object, name: str = "temperature") -> np.ndarray:
    """Temperature in deg C within the package range (-2 to 45 deg C)."""
    return check_range(name, value, *TEMPERATURE_RANGE_C, unit="deg C")


def check_salinity(value: object, name: str = "salinity") -> np.ndarray:
    """Practical salinity within the package range (0 to 50)."""
    return check_range(name, value, *SALINITY_RANGE)


def check_ph(value: object, name: str = "ph") -> np.ndarray:
    """pH within 0 to 14 (any scale)."""
    return check_range(name, value, *PH_RANGE)


def check_pressure(value: object, name: str = "pressure") -> np.ndarray:
    """Gauge pressure in dbar within 0 to 11000 dbar."""
    return check_range(name, value, *PRESSURE_RANGE_DBAR, unit="dbar")


def check_choice(name: str, value: object, choices: tuple[str, ...]) -> str:
    """Check that ``value`` is one of ``choices`` (strings)."""
    if value not in choices:
        allowed = ", ".join(repr(c) for c in choices)
        raise ChemistryInputError(
            f"{name} must be one of {allowed}; got {value!r}.",
            parameter=name,
            value=value,
            allowed=allowed,
        )
    return value  # type: ignore[return-value]
