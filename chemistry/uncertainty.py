"""Standard uncertainty of the carbonate system by linear propagation.

Each output y of :func:`chemistry.solver.solve` depends on the inputs
(temperature, salinity and the two measured carbonate parameters) and on the
equilibrium constants. With independent standard uncertainties u(x_i), the
first-order (linear) propagation law of the GUM (JCGM2008) gives::

    u(y)**2 = sum_i (dy/dx_i * u(x_i))**2

The derivatives are central finite differences. All perturbed inputs are
stacked along a new leading axis and solved in one vectorised call, so an
array of a million readings costs one solve of (1 + 2 * n_parameters)
million. The default constant uncertainties are those proposed by Orr et al.
2018 (Orr2018), who show that for saturation states the constants (pK2,
pKsp) contribute as much as good measurements do.

References
----------
Keys refer to ``chemistry/bibliography.md``.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from types import MappingProxyType
from typing import Any

import numpy as np
from scipy.special import ndtr

from chemistry.errors import ChemistryInputError, check_nonnegative
from chemistry.solver import CarbonateState, solve
from chemistry.transforms import at_temperature as _carry_to_temperature

# Standard uncertainties of the constants, Orr2018, table 1
# ("pK units"; total boron relative): pK0 0.002, pK1 0.0075, pK2 0.015,
# pKB 0.01, pKW 0.01, pKsp (aragonite and calcite) 0.02, total boron 2 %.
ORR2018_CONSTANT_UNCERTAINTIES: Mapping[str, float] = MappingProxyType(
    {
        "pK0": 0.002,
        "pK1": 0.0075,
        "pK2": 0.015,
        "pKB": 0.01,
        "pKW": 0.01,
        "pKsp_aragonite": 0.02,
        "pKsp_calcite": 0.02,
        "total_boron": 0.02,
    }
)

# Finite-difference steps. Small enough that the curvature term (of order
# step**2) is negligible against the first derivative, large enough that the
# solver's convergence tolerance does not show in the difference.
_INPUT_STEPS = {
    "temperature": 1e-3,  # deg C
    "salinity": 1e-3,
    "ph": 1e-5,
    "alkalinity": 1e-2,  # umol/kg
    "dic": 1e-2,  # umol/kg
}
_PCO2_RELATIVE_STEP = 1e-5
_CONSTANT_STEP = 1e-5  # pK units, and relative for total boron

# Perturbed waters solved per call: bounds the memory of the stacked problem
# (about 1 GB of temporaries at most) for arrays of any length.
_STACKED_WATERS = 1_000_000


def _perturbation_plan(
    inputs: Mapping[str, Any],
    input_uncertainties: Mapping[str, Any],
    constant_uncertainties: Mapping[str, float] | None,
) -> list[tuple[str, str, np.ndarray, np.ndarray]]:
    """(kind, name, step, standard uncertainty) for each parameter that has one."""
    plan: list[tuple[str, str, np.ndarray, np.ndarray]] = []
    for name, uncertainty in input_uncertainties.items():
        u = check_nonnegative(f"u_{name}", uncertainty)
        if not np.any(u > 0):
            continue
        if inputs.get(name) is None:
            raise ChemistryInputError(
                f"u_{name} is given but {name} is not one of the inputs; "
                f"give {name} or leave u_{name} at 0.",
                parameter=f"u_{name}",
                value=uncertainty,
                allowed="0 when the parameter is not an input",
            )
        if name == "pco2":
            # Relative step, with a floor so that a pCO2 of 0 still gets a difference.
            pco2 = np.asarray(inputs["pco2"], dtype=np.float64)
            step = np.maximum(pco2 * _PCO2_RELATIVE_STEP, _PCO2_RELATIVE_STEP)
        else:
            step = np.asarray(_INPUT_STEPS[name])
        plan.append(("input", name, step, u))
    if constant_uncertainties is ORR2018_CONSTANT_UNCERTAINTIES:
        # The default set is checked once (every tank advice and ingest uses it).
        plan.extend(_ORR2018_PLAN)
    else:
        plan.extend(_constant_plan(constant_uncertainties))
    return plan


def _constant_plan(
    constant_uncertainties: Mapping[str, float] | None,
) -> list[tuple[str, str, np.ndarray, np.ndarray]]:
    plan = []
    for name, uncertainty in (constant_uncertainties or {}).items():
        if name not in ORR2018_CONSTANT_UNCERTAINTIES:
            raise ChemistryInputError(
                f"constant_uncertainties has an unknown key {name!r}; "
                f"allowed: {', '.join(ORR2018_CONSTANT_UNCERTAINTIES)}.",
                parameter="constant_uncertainties",
                value=name,
                allowed=", ".join(ORR2018_CONSTANT_UNCERTAINTIES),
            )
        u = check_nonnegative(f"constant_uncertainties[{name!r}]", uncertainty)
        if np.any(u > 0):
            plan.append(("constant", name, np.asarray(_CONSTANT_STEP), u))
    return plan


def _frozen(plan: list[tuple[str, str, np.ndarray, np.ndarray]]) -> tuple[Any, ...]:
    for _kind, _name, step, u in plan:
        step.flags.writeable = False
        u.flags.writeable = False
    return tuple(plan)


_ORR2018_PLAN = _frozen(_constant_plan(ORR2018_CONSTANT_UNCERTAINTIES))


def standard_uncertainty(
    *,
    temperature: Any,
    salinity: Any,
    ph: Any = None,
    alkalinity: Any = None,
    dic: Any = None,
    pco2: Any = None,
    ph_scale: str = "total",
    pressure: Any = 0.0,
    phosphate: Any = 0.0,
    silicate: Any = 0.0,
    carbonic: str = "lueker2000",
    boron: str = "lee2010",
    u_temperature: Any = 0.0,
    u_salinity: Any = 0.0,
    u_ph: Any = 0.0,
    u_alkalinity: Any = 0.0,
    u_dic: Any = 0.0,
    u_pco2: Any = 0.0,
    constant_uncertainties: Mapping[str, float] | None = ORR2018_CONSTANT_UNCERTAINTIES,
    at_temperature: Any = None,
    base: CarbonateState | None = None,
    outputs: Sequence[str] | None = None,
) -> dict[str, np.ndarray]:
    """Standard uncertainty of every numeric output of :func:`~chemistry.solver.solve`.

    Parameters
    ----------
    temperature, salinity, ph, alkalinity, dic, pco2 : array_like
        As for :func:`chemistry.solver.solve` (exactly two of ph, alkalinity,
        dic, pco2). Arrays broadcast together.
    ph_scale, pressure, phosphate, silicate, carbonic, boron
        As for :func:`chemistry.solver.solve`.
    u_temperature : array_like, optional
        Standard uncertainty of temperature, deg C.
    u_salinity : array_like, optional
        Standard uncertainty of practical salinity.
    u_ph : array_like, optional
        Standard uncertainty of pH on ``ph_scale``.
    u_alkalinity, u_dic : array_like, optional
        Standard uncertainties, umol/kg.
    u_pco2 : array_like, optional
        Standard uncertainty of pCO2, uatm.
    constant_uncertainties : mapping or None, optional
        Standard uncertainties of the constants, keys as in
        :data:`ORR2018_CONSTANT_UNCERTAINTIES` (pK units; ``total_boron``
        relative). Default: Orr et al. 2018. ``None`` leaves the constants out.
    at_temperature : array_like, optional
        Temperature (deg C) to which the water is carried in a closed system
        before the outputs are taken (the tank prediction); default none.
    base : CarbonateState, optional
        The unperturbed water when the caller has already solved it: what
        :func:`~chemistry.solver.solve` gives for these inputs and options,
        carried with :func:`chemistry.transforms.at_temperature` to
        ``at_temperature`` when that is given. It is used as it is (one
        solve fewer, the same numbers); the inputs are then validated by
        the caller's own solve, not again here.
    outputs : sequence of str, optional
        Keys of ``CarbonateState.as_dict()`` to return (default: all); a
        caller that needs one output skips the others' arithmetic.

    Returns
    -------
    dict of str to ndarray
        For each key of ``CarbonateState.as_dict()`` (or of ``outputs``),
        the standard uncertainty in that output's unit, in the broadcast
        shape.

    Raises
    ------
    ChemistryInputError
        For invalid inputs (as :func:`~chemistry.solver.solve`), a negative
        uncertainty, an uncertainty for a parameter that is not an input, or
        an unknown constant key.

    Notes
    -----
    Linear propagation assumes the inputs are independent and the outputs
    nearly linear over +-u; for pH uncertainties of a few hundredths the
    error of the linear approximation in omega is a few per cent of u.
    Forward differences from the unperturbed solve (half the solves of central
    ones; with these steps the truncation error is of order 1e-5 of each
    sensitivity, far below the uncertainties themselves): step 1e-5 in pH and
    pK, 1e-3 deg C and salinity, 0.01 umol/kg, relative 1e-5 in pCO2.

    References
    ----------
    Orr2018, JCGM2008.
    """
    inputs = {
        "temperature": temperature,
        "salinity": salinity,
        "ph": ph,
        "alkalinity": alkalinity,
        "dic": dic,
        "pco2": pco2,
    }
    options = {
        "ph_scale": ph_scale,
        "pressure": pressure,
        "phosphate": phosphate,
        "silicate": silicate,
        "carbonic": carbonic,
        "boron": boron,
    }
    plan = _perturbation_plan(
        inputs,
        {
            "temperature": u_temperature,
            "salinity": u_salinity,
            "ph": u_ph,
            "alkalinity": u_alkalinity,
            "dic": u_dic,
            "pco2": u_pco2,
        },
        constant_uncertainties,
    )
    given = {
        name: np.asarray(value, dtype=np.float64)
        for name, value in inputs.items()
        if value is not None
    }
    # Solving the unperturbed water first validates the inputs with their
    # own names and indices, before any stacking.
    if base is None:
        base = solve(**{name: inputs[name] for name in given}, **options)
        if at_temperature is not None:
            base = _carry_to_temperature(base, at_temperature)
    base_outputs = base.as_dict()
    if outputs is not None:
        unknown = [key for key in outputs if key not in base_outputs]
        if unknown:
            raise ChemistryInputError(
                f"outputs has unknown keys {unknown}; allowed: {', '.join(base_outputs)}.",
                parameter="outputs",
                value=unknown,
                allowed=", ".join(base_outputs),
            )
        base_outputs = {key: base_outputs[key] for key in outputs}
    if not plan:
        return {key: np.zeros(np.shape(value)) for key, value in base_outputs.items()}

    rows = len(plan)  # one +step row per parameter: forward differences from the base
    shape = np.broadcast_shapes(
        np.shape(base.omega_aragonite),
        *(np.shape(value) for value in given.values()),
        *(np.shape(step) for _, _, step, _ in plan),
        *(np.shape(u) for _, _, _, u in plan),
    )
    size = int(np.prod(shape))

    def flat(value: Any) -> np.ndarray:
        array = np.asarray(value, dtype=np.float64)
        if array.shape == shape:  # np.broadcast_to costs ~10 us a call; most need none
            return array.reshape(size)
        return np.broadcast_to(array, shape).reshape(size)

    flat_given = {name: flat(value) for name, value in given.items()}
    flat_options = {
        name: flat(value) if name in ("pressure", "phosphate", "silicate") else value
        for name, value in options.items()
    }
    flat_plan = [(kind, name, flat(step), flat(u)) for kind, name, step, u in plan]
    flat_tank = None if at_temperature is None else flat(at_temperature)
    flat_base = {key: flat(value) for key, value in base_outputs.items()}

    keys = list(base_outputs)
    # One row per output: the loop below works on all outputs at once, row by row in the
    # same order as before (so the same sums), instead of one small array per output.
    variance = np.zeros((len(keys), size))
    base_stack = np.stack([flat_base[key] for key in keys])
    # Chunks keep the stacked problem near a million waters whatever the input size.
    chunk = max(1, _STACKED_WATERS // rows)
    for start in range(0, size, chunk):
        part = slice(start, min(start + chunk, size))
        stacked = {name: np.tile(value[part], (rows, 1)) for name, value in flat_given.items()}
        constant_shifts: dict[str, np.ndarray] = {}
        for row, (kind, name, step, _) in enumerate(flat_plan):
            if kind == "input":
                stacked[name][row] += step[part]
            else:
                shift = np.zeros((rows, 1))
                shift[row] = step[0]
                constant_shifts[name] = shift
        part_options = {
            name: value[part] if isinstance(value, np.ndarray) else value
            for name, value in flat_options.items()
        }
        perturbed = solve(**stacked, **part_options, constant_shifts=constant_shifts or None)
        if flat_tank is not None:
            perturbed = _carry_to_temperature(perturbed, flat_tank[part])
        solved = perturbed.as_dict()
        stacked_outputs = np.stack([np.broadcast_to(solved[key], (rows, part.stop - part.start))
                                    for key in keys])
        for row, (_, _, step, u) in enumerate(flat_plan):
            derivative = (stacked_outputs[:, row] - base_stack[:, part]) / step[part]
            variance[:, part] += (derivative * u[part]) ** 2
    return {key: np.sqrt(variance[number]).reshape(shape) for number, key in enumerate(keys)}


def probability_below(value: Any, standard_uncertainty: Any, level: Any) -> np.ndarray:
    """Probability that the true value lies below ``level``.

    Parameters
    ----------
    value : array_like
        Best estimate (e.g. omega aragonite).
    standard_uncertainty : array_like
        Its standard uncertainty, same unit, 0 or more.
    level : array_like
        The level, same unit (e.g. 1.5).

    Returns
    -------
    ndarray
        Probability in [0, 1], normal approximation:
        ``Phi((level - value) / standard_uncertainty)``. With zero
        uncertainty, 1 where value < level and 0 elsewhere.

    References
    ----------
    JCGM2008 (normal approximation for a coverage probability).
    """
    estimate = np.asarray(value, dtype=np.float64)
    u = check_nonnegative("standard_uncertainty", standard_uncertainty)
    threshold = np.asarray(level, dtype=np.float64)
    estimate, u, threshold = np.broadcast_arrays(estimate, u, threshold)
    with np.errstate(divide="ignore", invalid="ignore"):
        z = (threshold - estimate) / u
    certain = np.where(estimate < threshold, 1.0, 0.0)
    return np.where(u > 0, ndtr(z), certain)
