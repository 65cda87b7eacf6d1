"""Seawater CO2-system chemistry for shellfish-hatchery monitoring.

A pure numpy/scipy library: no web, database or file I/O imports. Sources are listed in
``chemistry/bibliography.md``; the reference keys in docstrings point there.
"""

from .constants import EquilibriumConstants, equilibrium_constants
from .density import seawater_density
from .dosing import (
    CHEMICALS,
    DOSING_CAUTION,
    DoseAdvice,
    DoseRefusedError,
    add_chemical,
    dose_for_target,
)
from .errors import ChemistryInputError
from .fitting import AlkalinitySalinityFit, fit_alkalinity_salinity
from .scales import NBS_WARNING, PH_SCALES, convert_ph
from .solver import CarbonateState, alkalinity_contributions, solve
from .transforms import at_temperature, equilibrate_with_air, mix
from .uncertainty import (
    ORR2018_CONSTANT_UNCERTAINTIES,
    probability_below,
    standard_uncertainty,
)
from .units import alkalinity_from_mg_per_l_caco3, mg_per_l_caco3_from_alkalinity

# Stored with every derived reading so that a change of constants or method is traceable.
CHEMISTRY_VERSION = "2026.12.1"

__all__ = [
    "CHEMICALS",
    "CHEMISTRY_VERSION",
    "DOSING_CAUTION",
    "NBS_WARNING",
    "ORR2018_CONSTANT_UNCERTAINTIES",
    "PH_SCALES",
    "AlkalinitySalinityFit",
    "CarbonateState",
    "ChemistryInputError",
    "DoseAdvice",
    "DoseRefusedError",
    "EquilibriumConstants",
    "add_chemical",
    "alkalinity_contributions",
    "alkalinity_from_mg_per_l_caco3",
    "at_temperature",
    "convert_ph",
    "dose_for_target",
    "equilibrate_with_air",
    "equilibrium_constants",
    "fit_alkalinity_salinity",
    "mg_per_l_caco3_from_alkalinity",
    "mix",
    "probability_below",
    "seawater_density",
    "solve",
    "standard_uncertainty",
]
