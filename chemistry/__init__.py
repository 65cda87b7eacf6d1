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
