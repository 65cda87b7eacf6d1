"""What happens to a water: heating or cooling, mixing, aeration.

Each function takes a solved :class:`~chemistry.solver.CarbonateState` and returns the new
state, solved with the same options (constants, nutrients, pressure, constant shifts).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from .constants import vapour_pressure_weiss_price1980
from .errors import ChemistryInputError, check_range, check_temperature
from .solver import CarbonateState, solve

__all__ = ["at_temperature", "equilibrate_with_air", "mix"]


def at_temperature(state: CarbonateState, temperature) -> CarbonateState:
    """The same water heated or cooled in a closed system.

    Alkalinity and DIC (per kg of seawater) do not change with temperature in a closed
    system; pH, pCO2, the species and the saturation states do. This is how intake water
    becomes larval-tank water.

    Parameters
    ----------
    state : CarbonateState
        The water as measured.
    temperature : float or array_like
        New temperature, deg C (-2 to 45); broadcasts with the state.

    Returns
    -------
    CarbonateState
        The water at ``temperature``, same salinity, pressure and options.
    """
    check_temperature(temperature)
    return solve(
        temperature=temperature,
        salinity=state.salinity,
        alkalinity=state.alkalinity,
        dic=state.dic,
        **state.options,
    )


def mix(states: Sequence[CarbonateState], fractions) -> CarbonateState:
    """Several waters mixed by mass.

    Alkalinity, DIC, salinity, nutrients and (to a good approximation) temperature mix
    linearly by mass; pH, pCO2 and the saturation states do not, so they are solved again
    from the mixed alkalinity and DIC.

    Parameters
    ----------
    states : sequence of CarbonateState
        The waters, each with the same constant options.
    fractions : sequence of float or array_like
        Mass fraction of each water, each 0 to 1, adding up to 1 (within 1e-9).

    Returns
    -------
    CarbonateState
        The mixed water, with the options of the first state and the pressure of the first.
    """
    states = list(states)
    if not states:
        raise ChemistryInputError("mix needs at least one water.", parameter="states")
    fraction_list = list(fractions)
    if len(fraction_list) != len(states):
        raise ChemistryInputError(
            f"fractions must give one mass fraction per water; got {len(fraction_list)} "
            f"fractions for {len(states)} waters.",
            parameter="fractions",
        )
    checked = [check_range("fractions", f, 0.0, 1.0) for f in fraction_list]
    total = sum(checked)
    if not np.all(np.abs(total - 1.0) <= 1e-9):
        raise ChemistryInputError(
            f"fractions must add up to 1; they add up to {np.asarray(total).ravel()[0]:g}.",
            parameter="fractions",
            allowed="a sum of 1",
        )
    first = states[0]
    for other in states[1:]:
        if (other.carbonic, other.boron) != (first.carbonic, first.boron):
            raise ChemistryInputError(
                "mix needs waters solved with the same constants (carbonic and boron); got "
                f"{first.carbonic}/{first.boron} and {other.carbonic}/{other.boron}.",
                parameter="states",
            )

    def mixed(name):
        return sum(f * np.asarray(getattr(st, name), dtype=np.float64)
                   for f, st in zip(checked, states, strict=True))

    options = first.options
    options["phosphate"] = mixed("phosphate")
    options["silicate"] = mixed("silicate")
    return solve(
        temperature=mixed("temperature"),
        salinity=mixed("salinity"),
        alkalinity=mixed("alkalinity"),
        dic=mixed("dic"),
        **options,
    )


def equilibrate_with_air(state: CarbonateState, xco2_ppm=420.0, pressure_atm=1.0):
    """The water after aeration to equilibrium with air, at constant alkalinity.

    Aeration exchanges CO2 only, so alkalinity is conserved and DIC follows the air. The
    pCO2 of water-saturated air is pCO2 = xCO2 (P - pH2O), with the water-vapour pressure
    of Weiss and Price (1980).

    Parameters
    ----------
    state : CarbonateState
        The water before aeration.
    xco2_ppm : float or array_like
        Mole fraction of CO2 in dry air, ppm (umol/mol), 0 to 100000.
    pressure_atm : float or array_like
        Barometric pressure, atm (0.5 to 1.5).

    Returns
    -------
    CarbonateState
        The aerated water. References: WeissPrice1980, Weiss1974, DSC2007.
    """
    xco2 = check_range("xco2_ppm", xco2_ppm, 0.0, 100000.0, unit="ppm")
    pressure = check_range("pressure_atm", pressure_atm, 0.5, 1.5, unit="atm")
    vapour = vapour_pressure_weiss_price1980(
        np.asarray(state.temperature, dtype=np.float64),
        np.asarray(state.salinity, dtype=np.float64),
    )
    pco2 = xco2 * (pressure - vapour)
    return solve(
        temperature=state.temperature,
        salinity=state.salinity,
        alkalinity=state.alkalinity,
        pco2=pco2,
        **state.options,
    )
