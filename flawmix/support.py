"""How far the data support a population and the numbers it drives: populations with fewer
than FEW_FAILURES certain failures, predictions driven by them, extrapolation below the lowest
tested failure probability. The one source of these words for the fit table, JSON, predict,
what-if and report.
"""
from __future__ import annotations

import numpy as np

from .specimens import FEW_FAILURES   # fewer certain failures: unsupported (the reader's warning says so too)
DRIVING_SHARE = 0.5    # a population whose risk share exceeds this drives the number quoted
UNSUPPORTED = "unsupported"


def is_weak(n_certain: int) -> bool:
    return int(n_certain) < FEW_FAILURES


def support_words(n_certain: int, n_possible: int | None = None) -> str:
    """A population's support in words (the JSON ``support`` field)."""
    n = int(n_certain)
    extra = "" if n_possible is None or n_possible <= n else f" (and {int(n_possible) - n} possible)"
    failures = f"{n} certain failure{'s' if n != 1 else ''}{extra}"
    if not is_weak(n):
        return f"supported: {failures}"
    return f"{UNSUPPORTED}: only {failures}, fewer than {FEW_FAILURES}; its estimates and what they drive are weak"


def weak_populations(result) -> dict[str, int]:
    """{name: certain failures} of the fit's populations with fewer than FEW_FAILURES."""
    return {p.name: int(p.n_failures) for p in result.populations if is_weak(p.n_failures)}


def lowest_tested_probability(result) -> float:
    """The lowest failure probability the specimens resolve: the first Hazen position 0.5/N
    (the bottom line's rule)."""
    return 0.5 / max(1, int(result.n_specimens))


def driver_note(weak: dict[str, int], shares: dict[str, float]) -> str:
    """``driven by 'x' (3 certain failures, fewer than 5): unsupported`` when the population
    with more than DRIVING_SHARE of the risk is weak, else empty."""
    if not shares:
        return ""
    name = max(shares, key=shares.get)
    if shares[name] <= DRIVING_SHARE or name not in weak:
        return ""
    return (f"driven by '{name}' ({weak[name]} certain failures, fewer than {FEW_FAILURES}, "
            f"{100 * shares[name]:.0f} % of the risk): {UNSUPPORTED}")


def extrapolation_note(probability: float, lowest: float) -> str:
    if not probability < lowest:
        return ""
    return f"extrapolated below the lowest tested failure probability {lowest:.2g}"


def number_note(weak: dict[str, int], shares: dict[str, float], probability: float | None, lowest: float) -> str:
    """Everything to say next to one quoted number, joined by '; ' (empty when nothing)."""
    parts = [driver_note(weak, shares)]
    if probability is not None:
        parts.append(extrapolation_note(probability, lowest))
    return "; ".join(p for p in parts if p)


def risk_shares_at(moduli, scales, names, stress: float) -> dict[str, float]:
    """Share of each population in the cumulative risk Σ_j (σ/σθj)^mj at ``stress``, computed
    in logs so that extreme stresses never overflow."""
    log_risk = np.asarray(moduli, float) * (np.log(stress) - np.log(np.asarray(scales, float)))
    w = np.exp(log_risk - np.max(log_risk))
    return dict(zip(names, (w / w.sum()).tolist()))


def notes_at(result, body_scales, stresses) -> list[str]:
    """For a concurrent fit: what to say next to a number quoted at each stress of a body
    whose characteristic strengths are ``body_scales`` (the specimens' or a component's):
    the weak population driving it, and extrapolation when the test specimens' failure
    probability at that stress lies below the lowest tested one."""
    weak = weak_populations(result)
    names = [p.name for p in result.populations]
    m = np.asarray(result.moduli, float)
    spec = np.asarray(result.characteristic_strengths, float)
    lowest = lowest_tested_probability(result)
    out = []
    for s in np.atleast_1d(np.asarray(stresses, float)):
        if not (np.isfinite(s) and s > 0):
            out.append("")
            continue
        specimen_probability = -np.expm1(-np.sum(np.exp(m * (np.log(s) - np.log(spec)))))
        out.append(number_note(weak, risk_shares_at(m, body_scales, names, s), specimen_probability, lowest))
    return out


def join_notes(*notes: str) -> str:
    return "; ".join(dict.fromkeys(n for part in notes for n in part.split("; ") if n))


def short_note(note) -> str:
    """A note cut to its marker for a table cell: ``unsupported ('x')``, ``extrapolated``
    (a marker passes through unchanged)."""
    if not isinstance(note, str) or not note:
        return ""
    if "driven by '" not in note and "extrapolated below" not in note:
        return note
    parts = []
    if "driven by '" in note:
        parts.append(f"{UNSUPPORTED} ('{note.split('driven by ', 1)[1].split(chr(39))[1]}')")
    if "extrapolated below" in note:
        parts.append("extrapolated")
    return ", ".join(parts)


def marker_legend(notes) -> list[str]:
    """The full sentences behind the markers of a table, once each."""
    out = []
    for note in notes:
        for part in (note or "").split("; "):
            if part.startswith("driven by '"):
                name = part.split("'")[1]
                count = part.split("(", 1)[1].split(",")[0]
                out.append(f"numbers marked {UNSUPPORTED} ('{name}') are driven by '{name}' ({count}, fewer than "
                           f"{FEW_FAILURES}; over half of the risk there): they are not supported by the data")
            elif part.startswith("extrapolated below"):
                out.append(f"numbers marked extrapolated lie {part[len('extrapolated '):]}")
    return list(dict.fromkeys(out))


def sentence_note(note) -> str:
    """A note for running text (the bottom line): ``unsupported: 'x' has only 3 certain
    failures; extrapolated below the lowest tested failure probability 0.013``."""
    out = []
    for part in (note or "").split("; "):
        if part.startswith("driven by '"):
            out.append(f"{UNSUPPORTED}: '{part.split(chr(39))[1]}' has only {part.split('(', 1)[1].split(',')[0]}")
        elif part:
            out.append(part)
    return "; ".join(out)
