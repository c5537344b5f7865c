"""Stress and length units: names users may write and their factors to MPa and mm."""
from __future__ import annotations

from .errors import FlawmixError

# Exact by definition except psi/ksi (1 lbf/in^2 = 6894.757293168 Pa, NIST SP 811).
STRESS_UNITS_IN_MPA = {
    "Pa": 1e-6,
    "kPa": 1e-3,
    "MPa": 1.0,
    "GPa": 1e3,
    "psi": 6.894757293168e-3,
    "ksi": 6.894757293168,
}
LENGTH_UNITS_IN_MM = {"m": 1e3, "cm": 10.0, "mm": 1.0, "um": 1e-3, "µm": 1e-3, "in": 25.4}


def _lookup(name: str, table: dict[str, float], what: str) -> str:
    for key in table:
        if key.lower() == str(name).strip().lower():
            return key
    raise FlawmixError(
        f"unknown {what} unit '{name}'; use one of {', '.join(table)}"
    )


def stress_unit(name: str) -> str:
    """Return the canonical spelling of a stress unit, or raise FlawmixError."""
    return _lookup(name, STRESS_UNITS_IN_MPA, "stress")


def length_unit(name: str) -> str:
    """Return the canonical spelling of a length unit, or raise FlawmixError."""
    return _lookup(name, LENGTH_UNITS_IN_MM, "length")


def stress_factor(from_unit: str, to_unit: str) -> float:
    """Multiply a stress in ``from_unit`` by this to express it in ``to_unit``."""
    return STRESS_UNITS_IN_MPA[stress_unit(from_unit)] / STRESS_UNITS_IN_MPA[stress_unit(to_unit)]


def length_factor(from_unit: str, to_unit: str) -> float:
    """Multiply a length in ``from_unit`` by this to express it in ``to_unit``."""
    return LENGTH_UNITS_IN_MM[length_unit(from_unit)] / LENGTH_UNITS_IN_MM[length_unit(to_unit)]
