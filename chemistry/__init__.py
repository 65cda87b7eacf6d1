"""Seawater CO2-system chemistry for shellfish-hatchery monitoring.

A pure numpy/scipy library: no web, database or file I/O imports. Sources are listed in
``chemistry/bibliography.md``; the reference keys in docstrings point there.
"""

from .constants import equilibrium_constants
from .errors import ChemistryInputError

# Stored with every derived reading so that a change of constants or method is traceable.
CHEMISTRY_VERSION = "2026.12.1"

__all__ = [
    "CHEMISTRY_VERSION",
    "ChemistryInputError",
    "equilibrium_constants",
]

# --- chem-applied exports (density, units, dosing, uncertainty, fitting) go below this line ---
