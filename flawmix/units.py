"""Stress and length units: names users may write and their factors to MPa and mm."""
from __future__ import annotations

import re

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


_HEADER_UNIT = (re.compile(r"^(?P<name>.*?)\s*[\(\[]\s*(?P<unit>[^\)\]]*?)\s*[\)\]]\s*$"),   # strength (MPa), [ksi]
                re.compile(r"^(?P<name>.*?\S)\s*/\s*(?P<unit>[^/\s]+)\s*$"),                  # σf / MPa
                re.compile(r"^(?P<name>.*?\S)\s*,\s*(?P<unit>[^,\s]+)\s*$"))                   # strength, MPa


def split_header_unit(header: str) -> tuple[str, str | None]:
    """Split a column header into its name and the unit written with it: 'Strength (MPa)',
    'strength [ksi]', 'σf / MPa' and 'strength, MPa' give ('Strength', 'MPa') and so on;
    a header without a unit gives (header, None)."""
    text = str(header).strip()
    for pattern in _HEADER_UNIT:
        match = pattern.match(text)
        if match and match.group("name").strip():
            return match.group("name").strip(), match.group("unit").strip()
    return text, None


# Median strengths outside this range (MPa) are unlike any brittle material tested in bulk:
# glasses and ceramics lie between a few MPa (porous refractories) and about 3 GPa (the
# strongest silicon nitrides and zirconias); common practice, figures from memory.
PLAUSIBLE_MEDIAN_MPA = (1.0, 3000.0)


def plausibility_warning(strength, unit: str, source: str | None = None) -> list[str]:
    """A warning when the median strength, read in ``unit``, is implausible for a brittle
    material, naming the unit that would make it ordinary."""
    import numpy as np

    if len(strength) == 0:
        return []
    median = float(np.median(strength))
    in_mpa = median * STRESS_UNITS_IN_MPA[unit]
    low, high = PLAUSIBLE_MEDIAN_MPA
    if low <= in_mpa <= high:
        return []
    fits = [u for u, f in STRESS_UNITS_IN_MPA.items() if 20.0 <= median * f <= 2000.0 and u != unit]
    side = "above the ~3 GPa that bulk ceramics and glasses reach" if in_mpa > high else \
        "below the ~1 MPa of even porous ceramics"
    hint = f"; if the numbers are in {' or '.join(fits)}, give --unit {fits[0]} (or unit in the study file)" if fits \
        else "; check the unit and the numbers"
    return [f"{source + ': ' if source else ''}median strength {median:.4g} {unit} = {in_mpa:.4g} MPa is {side}"
            f"{hint}"]
