"""The compiled array path of :func:`chemistry.solve`, when the install built it.

``chemistry/_kernel.c`` holds the same relations and Newton iteration as the numpy code,
fused into one pass per block of 128 readings; on large arrays it is several times faster,
because numpy spends its time writing and reading one temporary array per operation. It is
optional: an install without a C compiler leaves it out and :func:`chemistry.solve` uses
numpy throughout. The numpy code stays the reference; ``tests/chemistry/test_kernel.py``
holds the two together.

It covers arrays at zero gauge pressure (tanks and intakes); scalars and pressures go the
numpy way. Large arrays are split over the processors (see :func:`threads_for`); the GIL is
released while the kernel runs (ctypes does that). ``SPATLINE_CHEMISTRY_KERNEL=0`` in the
environment, or :func:`use_kernel`, turns it off (to compare the two paths).
"""

from __future__ import annotations

import ctypes
import os
from contextlib import contextmanager

import numpy as np

from .pairs import INPUT_PAIRS
from .scales import PH_SCALES

try:
    from . import _kernel
except ImportError:  # built without a C compiler
    _kernel = None

__all__ = ["PAIRS", "available", "enabled", "solve_flat", "threads_for", "use_kernel"]

# The pair and pH-scale codes of _kernel.c are positions in these tuples.
PAIRS = INPUT_PAIRS
_SCALES = PH_SCALES
_CARBONIC = ("lueker2000", "millero2010")
OUTPUT_COUNT = 14

# Return codes of spatline_solve (0 is success): waters that cannot exist, and an input outside
# its limits (the caller's own checks then name it).
NEGATIVE_DIC = 1
CO2_ABOVE_DIC = 2
PH_UNDEFINED = 3
OUT_OF_RANGE = 4


class _Column(ctypes.Structure):
    _fields_ = [("data", ctypes.c_void_p), ("stride", ctypes.c_ssize_t)]


def _load():
    if _kernel is None:
        return None
    library = ctypes.CDLL(_kernel.__file__)
    function = library.spatline_solve
    function.restype = ctypes.c_int
    function.argtypes = [
        ctypes.c_ssize_t,
        ctypes.POINTER(_Column),
        ctypes.POINTER(_Column),
        ctypes.c_int,
        ctypes.c_int,
        ctypes.c_int,
        ctypes.c_int,
        ctypes.c_int,
        ctypes.c_void_p,
        ctypes.c_void_p,
        ctypes.c_void_p,
        ctypes.POINTER(ctypes.c_ssize_t),
        ctypes.c_int,
    ]
    return function


_solve = _load()
_enabled = os.environ.get("SPATLINE_CHEMISTRY_KERNEL", "1") != "0"

# A thread is worth starting for this many readings or more; smaller solves (a batch of sensor
# readings) stay on the calling thread.
READINGS_PER_THREAD = 65_536


def _processors() -> int:
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:  # not on Linux
        return os.cpu_count() or 1


def threads_for(size: int) -> int:
    """Threads for a solve of ``size`` readings: one per processor this process may use, at
    most one per READINGS_PER_THREAD readings, at most ``SPATLINE_CHEMISTRY_THREADS`` (a
    positive whole number; anything else is ignored)."""
    setting = os.environ.get("SPATLINE_CHEMISTRY_THREADS", "").strip()
    limit = int(setting) if setting.isdigit() and int(setting) > 0 else _processors()
    return max(1, min(limit, size // READINGS_PER_THREAD))


def available() -> bool:
    """Whether the compiled kernel was built and loaded."""
    return _solve is not None


def enabled() -> bool:
    """Whether :func:`chemistry.solve` uses the kernel for arrays now."""
    return _enabled and _solve is not None


@contextmanager
def use_kernel(on: bool):
    """Turn the kernel on or off inside a ``with`` block (the numpy path when off)."""
    global _enabled
    before = _enabled
    _enabled = on
    try:
        yield
    finally:
        _enabled = before


def _column(array: np.ndarray | None, keep: list) -> _Column:
    if array is None:
        return _Column(None, 0)
    if array.dtype != np.float64 or array.ndim != 1 or array.strides[0] % 8:
        array = np.ascontiguousarray(array, dtype=np.float64).reshape(-1)
    keep.append(array)
    return _Column(array.ctypes.data, array.strides[0] // 8)


def solve_flat(
    *, pair, first, second, temperature, salinity, phosphate, silicate, ph_scale, carbonic,
    boron, nutrients, shifts, limits,
):
    """Outputs (solver._OUTPUT_NAMES order, one row each) for flat float64 arrays of one size.

    ``limits`` holds the allowed (low, high) of temperature, salinity, ``first`` and
    ``second``; the kernel checks every value against them (NaN fails) as it goes.

    Returns ``(values, extremes, None)`` with the lowest and highest temperature and salinity
    in ``extremes``; or ``(code, None, index)`` with one of the codes above and, for a water
    that cannot exist, the index of the first one.
    """
    size = temperature.size
    keep: list = []
    columns = (_Column * 6)(
        *(_column(a, keep) for a in (temperature, salinity, phosphate, silicate, first, second))
    )
    shift_columns = None
    if shifts:
        from .solver import CONSTANT_SHIFT_KEYS

        shift_columns = (_Column * len(CONSTANT_SHIFT_KEYS))(
            *(_column(shifts.get(key), keep) for key in CONSTANT_SHIFT_KEYS)
        )
    bounds = np.array(limits, dtype=np.float64).reshape(-1)
    values = np.empty((OUTPUT_COUNT, size))
    extremes = np.empty(4)
    bad = ctypes.c_ssize_t(-1)
    code = _solve(
        size, columns, shift_columns, PAIRS.index(pair), _SCALES.index(ph_scale),
        _CARBONIC.index(carbonic), boron == "lee2010", bool(nutrients), bounds.ctypes.data,
        values.ctypes.data, extremes.ctypes.data, ctypes.byref(bad), threads_for(size),
    )
    if code < 0:
        raise MemoryError("the chemistry kernel could not allocate its working block")
    if code:
        return code, None, bad.value
    return values, extremes, None
