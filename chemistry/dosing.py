"""Alkaline treatments: what a dose does to the water, and the dose for a target.

Hatcheries raise the aragonite saturation of larval-tank water by adding
sodium carbonate (soda ash), sodium bicarbonate or sodium hydroxide. Each
adds total alkalinity and, for the carbonates, dissolved inorganic carbon
in a fixed ratio per mole; the new carbonate system follows from solving
with the raised alkalinity and DIC. Doses are given in mg of the solid per
litre of water and converted to umol/kg with the EOS-80 seawater density.

Every result is advice for a person: it carries :data:`DOSING_CAUTION`.

References
----------
Keys refer to ``chemistry/bibliography.md``: IUPAC2007
(molar masses), MilleroPoisson1981 (density), Moras2022 (abiotic
precipitation when alkalinity is raised).
"""

from __future__ import annotations

from dataclasses import dataclass
from types import MappingProxyType
from typing import Any

import numpy as np
from scipy.optimize import brentq

from chemistry.density import seawater_density
from chemistry.errors import ChemistryInputError, check_nonnegative
from chemistry.solver import CarbonateState, solve
from chemistry.transforms import at_temperature
from chemistry.units import ATOMIC_WEIGHT

DOSING_CAUTION = (
    "This advice supports and does not replace the operator's judgement. "
    "Dissolve the chemical into a stock solution and add it in a mixed header tank, "
    "never straight into a larval tank; measure the result before relying on it; "
    "follow the safety data sheet, local codes and licensed practice."
)


@dataclass(frozen=True)
class Chemical:
    """An alkaline treatment chemical.

    Attributes
    ----------
    formula : str
        Chemical formula of the solid as dosed (anhydrous).
    molar_mass : float
        g/mol, from IUPAC standard atomic weights IUPAC2007.
    alkalinity_per_mole : float
        Equivalents of total alkalinity added per mole dissolved.
    dic_per_mole : float
        Moles of dissolved inorganic carbon added per mole dissolved.
    """

    formula: str
    molar_mass: float
    alkalinity_per_mole: float
    dic_per_mole: float


_Na, _C, _O, _H = (ATOMIC_WEIGHT[e] for e in ("Na", "C", "O", "H"))

# Stoichiometry per mole: CO3 2- takes two protons and carries one carbon;
# HCO3- one proton and one carbon; OH- one proton and no carbon.
CHEMICALS: MappingProxyType[str, Chemical] = MappingProxyType(
    {
        "sodium_carbonate": Chemical("Na2CO3", 2 * _Na + _C + 3 * _O, 2.0, 1.0),  # 105.99 g/mol
        "sodium_bicarbonate": Chemical("NaHCO3", _Na + _H + _C + 3 * _O, 1.0, 1.0),  # 84.007
        "sodium_hydroxide": Chemical("NaOH", _Na + _O + _H, 1.0, 0.0),  # 39.997
    }
)

# Abiotic CaCO3 precipitation after alkalinity addition becomes likely as
# omega aragonite rises above about 5 (Moras2022); such a dose would lose
# the added alkalinity and can cloud the water.
MAX_RESULT_OMEGA_ARAGONITE = 5.0
# Design default of this package, not a published threshold: above pH_total
# 8.5 the dose moves the water well outside the range larvae meet at sea.
MAX_RESULT_PH_TOTAL = 8.5
# Design default of this package: one treatment may add at most 1000 umol/kg of
# alkalinity, about half of what seawater already holds. Beyond it the water is
# no longer the water that was measured (pCO2 and sodium far from natural, the
# salinity change ignored by the prediction), so the dose is refused instead.
MAX_ALKALINITY_ADDED = 1000.0  # umol/kg
# Doses are reported to 0.001 mg/L; solving tighter only costs time.
_DOSE_TOLERANCE_MG_PER_L = 1e-4


class DoseRefusedError(ChemistryInputError):
    """A dose that cannot or should not be advised; the message says why and what to do."""


@dataclass(frozen=True)
class DoseAdvice:
    """A dose for a target saturation, with the water it is predicted to give.

    Attributes
    ----------
    chemical : str
        Key in :data:`CHEMICALS`.
    mg_per_l : float
        Dose, mg of the solid per litre of water.
    grams_per_1000_l : float
        The same dose, grams per 1000 L (numerically equal to mg/L).
    alkalinity_added : float
        umol/kg.
    dic_added : float
        umol/kg.
    state : CarbonateState
        The predicted water after the dose, at the requested temperature.
    caution : str
        :data:`DOSING_CAUTION`.
    """

    chemical: str
    mg_per_l: float
    grams_per_1000_l: float
    alkalinity_added: float
    dic_added: float
    state: CarbonateState
    caution: str = DOSING_CAUTION


def _chemical(name: str) -> Chemical:
    try:
        return CHEMICALS[name]
    except KeyError:
        raise ChemistryInputError(
            f"chemical must be one of {', '.join(CHEMICALS)}; got {name!r}."
        ) from None


def dose_additions(
    chemical: str, mg_per_l: Any, temperature: Any, salinity: Any
) -> tuple[np.ndarray, np.ndarray]:
    """Alkalinity and DIC added by a dose.

    Parameters
    ----------
    chemical : str
        Key in :data:`CHEMICALS`.
    mg_per_l : array_like
        Dose, mg of the solid per litre of water (0 or more).
    temperature : array_like
        Water temperature, deg C (sets the density; -2 to 40).
    salinity : array_like
        Practical salinity (0 to 42).

    Returns
    -------
    alkalinity_added, dic_added : ndarray
        umol/kg: ``mg_per_l / molar_mass`` gives mmol/L; times 1000 umol/mmol
        and the per-mole stoichiometry, divided by the density in kg/L.

    References
    ----------
    IUPAC2007, MilleroPoisson1981.
    """
    spec = _chemical(chemical)
    dose = check_nonnegative("dose", mg_per_l, unit="mg/L")
    density_kg_per_l = seawater_density(temperature, salinity) / 1000.0
    umol_per_kg = dose / spec.molar_mass * 1000.0 / density_kg_per_l
    return umol_per_kg * spec.alkalinity_per_mole, umol_per_kg * spec.dic_per_mole


def add_chemical(state: CarbonateState, chemical: str, mg_per_l: Any) -> CarbonateState:
    """The water after dissolving a chemical into it.

    Parameters
    ----------
    state : CarbonateState
        The water before the dose; its temperature sets the density and
        its options (constants, nutrients, pressure) are kept.
    chemical : str
        One of ``"sodium_carbonate"`` (+2 alkalinity, +1 DIC per mole),
        ``"sodium_bicarbonate"`` (+1, +1) or ``"sodium_hydroxide"`` (+1, +0).
    mg_per_l : array_like
        Dose, mg of the solid per litre of water, broadcast with the state.

    Returns
    -------
    CarbonateState
        Solved from the raised alkalinity and DIC at the same temperature,
        salinity and pressure. The salinity change from the added sodium
        salt (about 0.01 per 10 mg/L) is ignored.

    Notes
    -----
    Closed system: no CO2 exchange with air after the dose. Aerated tanks
    move back towards air equilibrium; see
    :func:`chemistry.transforms.equilibrate_with_air`.

    References
    ----------
    IUPAC2007, MilleroPoisson1981.
    """
    alkalinity_added, dic_added = dose_additions(
        chemical, mg_per_l, state.temperature, state.salinity
    )
    return _resolve(state, state.alkalinity + alkalinity_added, state.dic + dic_added)


def _resolve(state: CarbonateState, alkalinity: Any, dic: Any) -> CarbonateState:
    return solve(
        temperature=state.temperature,
        salinity=state.salinity,
        alkalinity=alkalinity,
        dic=dic,
        **state.options,
    )


def _scalar(state: CarbonateState) -> None:
    if np.size(state.omega_aragonite) != 1:
        raise ChemistryInputError(
            "dose_for_target works on one water sample at a time; "
            f"got a state of shape {np.shape(state.omega_aragonite)}."
        )


def dose_for_target(
    state: CarbonateState,
    target_omega_aragonite: float,
    chemical: str = "sodium_carbonate",
    temperature: float | None = None,
) -> DoseAdvice:
    """The dose that brings the water to a target aragonite saturation.

    Parameters
    ----------
    state : CarbonateState
        The water before the dose (one sample, e.g. the intake).
    target_omega_aragonite : float
        Target aragonite saturation state, dimensionless, above 0 and at
        most 5.
    chemical : str, optional
        Key in :data:`CHEMICALS`; default ``"sodium_carbonate"``.
    temperature : float, optional
        Temperature (deg C) at which the target must hold, e.g. the larval
        tank's culture temperature: the water is carried there in a closed
        system (:func:`chemistry.transforms.at_temperature`) and dosed at
        that temperature. Default: the state's own temperature.

    Returns
    -------
    DoseAdvice
        mg/L, grams per 1000 L, the alkalinity and DIC added, the predicted
        water and :data:`DOSING_CAUTION`. The dose is 0 when the water is
        already at or above the target.

    Raises
    ------
    DoseRefusedError
        When the target is above omega aragonite 5 (abiotic precipitation
        risk rises above about 5, Moras2022); when the dose that reaches it
        would give pH_total above 8.5; or when a dose adding up to 1000 umol/kg
        of alkalinity cannot reach it (sodium bicarbonate raises omega slowly
        and often cannot). Each message says why and what to do.
    ChemistryInputError
        For an unknown chemical, a non-finite or non-positive target, or a
        state holding more than one sample.

    Notes
    -----
    The dose is the root, found with Brent's method between 0 and the dose
    that adds 1000 umol/kg of alkalinity, of
    omega_aragonite(dose) - target; omega rises monotonically with each of
    the three chemicals. The caps on omega (5, Moras2022) and pH_total
    (8.5) are safety limits of this package; the pH cap is a design default,
    not a published threshold, and so is the 1000 umol/kg limit on the
    alkalinity one treatment may add.

    References
    ----------
    Moras2022, IUPAC2007, MilleroPoisson1981.
    """
    _chemical(chemical)
    _scalar(state)
    target = float(target_omega_aragonite)
    if not np.isfinite(target) or target <= 0:
        raise ChemistryInputError(
            f"target_omega_aragonite must be a positive number; got {target_omega_aragonite!r}."
        )
    if target > MAX_RESULT_OMEGA_ARAGONITE:
        raise DoseRefusedError(
            f"A target omega aragonite of {target:g} is above {MAX_RESULT_OMEGA_ARAGONITE:g}, "
            "where calcium carbonate may precipitate in the tank and the added alkalinity be lost; "
            f"choose a target of {MAX_RESULT_OMEGA_ARAGONITE:g} or less."
        )
    water = state if temperature is None else at_temperature(state, temperature)
    start = float(water.omega_aragonite)
    if start >= target:
        return DoseAdvice(chemical, 0.0, 0.0, 0.0, 0.0, water)

    # The additions are proportional to the dose (one density for the water), so the
    # search scales them instead of working out the density again at every step.
    alkalinity_per_mg_per_l, dic_per_mg_per_l = dose_additions(
        chemical, 1.0, water.temperature, water.salinity
    )

    def shortfall(mg_per_l: float) -> float:
        dosed = _resolve(
            water,
            water.alkalinity + alkalinity_per_mg_per_l * mg_per_l,
            water.dic + dic_per_mg_per_l * mg_per_l,
        )
        return float(dosed.omega_aragonite) - target

    largest_dose = MAX_ALKALINITY_ADDED / float(alkalinity_per_mg_per_l)
    if shortfall(largest_dose) < 0:
        instead = (
            "lower the target and check the measurements"
            if chemical == "sodium_carbonate"
            else "use sodium carbonate, or lower the target"
        )
        raise DoseRefusedError(
            f"{chemical} cannot raise omega aragonite from {start:.2f} to {target:g} within "
            f"{largest_dose:.0f} mg/L (an alkalinity rise of {MAX_ALKALINITY_ADDED:g} umol/kg, "
            f"the most this tool advises in one treatment); {instead}."
        )
    dose = float(brentq(shortfall, 0.0, largest_dose, xtol=_DOSE_TOLERANCE_MG_PER_L))
    result = add_chemical(water, chemical, dose)
    ph_total = float(result.ph_total)
    if ph_total > MAX_RESULT_PH_TOTAL:
        richer_in_carbon = (
            "sodium carbonate or bicarbonate, which add carbon"
            if chemical == "sodium_hydroxide"
            else "sodium bicarbonate, which adds more carbon per unit of alkalinity"
        )
        raise DoseRefusedError(
            f"Reaching omega aragonite {target:g} with {chemical} ({dose:.1f} mg/L) would raise "
            f"pH_total to {ph_total:.2f}, above the {MAX_RESULT_PH_TOTAL:g} this tool allows; "
            f"lower the target, or use {richer_in_carbon} and so reach a given saturation at "
            "a lower pH."
        )
    alkalinity_added, dic_added = dose_additions(chemical, dose, water.temperature, water.salinity)
    return DoseAdvice(
        chemical=chemical,
        mg_per_l=dose,
        grams_per_1000_l=dose,  # 1 mg/L x 1000 L = 1 g
        alkalinity_added=float(alkalinity_added),
        dic_added=float(dic_added),
        state=result,
    )
