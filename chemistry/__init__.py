"""Seawater CO2-system chemistry for shellfish-hatchery monitoring.

A pure numpy/scipy library: no web, database or file I/O imports. Sources are listed in
``chemistry/bibliography.md``; the reference keys in docstrings point there.
"""

from .constants import EquilibriumConstants, equilibrium_constants
from .errors import ChemistryInputError
from .scales import NBS_WARNING, PH_SCALES, convert_ph
from .solver import CarbonateState, alkalinity_contributions, solve
from .transforms import at_temperature, equilibrate_with_air, mix

# Stored with every derived reading so that a change of constants or method is traceable.
CHEMISTRY_VERSION = "2026.12.1"

__all__ = [
    "CHEMISTRY_VERSION",
    "NBS_WARNING",
    "PH_SCALES",
    "CarbonateState",
    "ChemistryInputError",
    "EquilibriumConstants",
    "alkalinity_contributions",
    "at_temperature",
    "convert_ph",
    "equilibrate_with_air",
    "equilibrium_constants",
    "mix",
    "solve",
]

# --- chem-applied exports (density, units, dosing, uncertainty, fitting) go below this line ---
from .density import seawater_density  # noqa: E402
from .dosing import (  # noqa: E402
    CHEMICALS,
    DOSING_CAUTION,
    DoseAdvice,
    DoseRefusedError,
    add_chemical,
    dose_for_target,
)
from .fitting import AlkalinitySalinityFit, fit_alkalinity_salinity  # noqa: E402
from .uncertainty import (  # noqa: E402
    ORR2018_CONSTANT_UNCERTAINTIES,
    probability_below,
    standard_uncertainty,
)
from .units import alkalinity_from_mg_per_l_caco3, mg_per_l_caco3_from_alkalinity  # noqa: E402

__all__ += [
    "CHEMICALS",
    "DOSING_CAUTION",
    "ORR2018_CONSTANT_UNCERTAINTIES",
    "AlkalinitySalinityFit",
    "DoseAdvice",
    "DoseRefusedError",
    "add_chemical",
    "alkalinity_from_mg_per_l_caco3",
    "dose_for_target",
    "fit_alkalinity_salinity",
    "mg_per_l_caco3_from_alkalinity",
    "probability_below",
    "seawater_density",
    "standard_uncertainty",
]
