"""How flawmix writes numbers for people: one set of rules shared by the CLI, the report and
the result objects' text, so a stress, a probability or a gain reads the same everywhere.

Rules (common practice of the trade, chosen for this project): stresses to 4 significant
digits (0.1 MPa for typical ceramic strengths); moduli to 3; failure probabilities in
scientific form below 1e-3, else 3 significant digits; percent gains to 0.1 %; p-values
2 significant digits, scientific below 1e-3.
"""
from __future__ import annotations

import math
from typing import Callable, Mapping

import pandas as pd

MISSING = "—"


def _finite(x) -> float | None:
    if x is None:
        return None
    try:
        x = float(x)
    except (TypeError, ValueError):
        return None
    return x if math.isfinite(x) else (x if math.isinf(x) else None)


def significant(x, digits: int = 4) -> str:
    """``digits`` significant digits in plain (not scientific) notation: 458.9, 73.52, 12345."""
    x = _finite(x)
    if x is None:
        return MISSING
    if math.isinf(x):
        return "unbounded"
    if x == 0:
        return "0"
    if abs(x) < 1e-3 or abs(x) >= 1e7:
        return f"{x:.{digits - 1}e}"
    decimals = max(0, digits - 1 - math.floor(math.log10(abs(x))))
    return f"{x:.{decimals}f}"


def stress(x) -> str:
    """A stress or characteristic strength: 4 significant digits, at most one decimal from 10
    up (458.9 MPa, 73.5 MPa, 1.628 GPa)."""
    x = _finite(x)
    if x is not None and math.isfinite(x) and abs(x) >= 10:
        return significant(x, 4) if abs(x) >= 1000 else f"{x:.1f}"
    return significant(x, 4)


def modulus(x) -> str:
    """A Weibull modulus: 3 significant digits (6.08, 15.7)."""
    return significant(x, 3)


def probability(p) -> str:
    """A failure probability: scientific below 1e-3 (6.0e-06), else 3 significant digits."""
    p = _finite(p)
    if p is None:
        return MISSING
    if p <= 0:
        return "0"
    if p < 1e-3:
        return f"{p:.1e}"
    if p >= 0.9995 and p < 1:
        return "> 0.999"
    if p >= 1:
        return "1"
    return f"{p:.3g}"


def percent(x) -> str:
    """A percent change or share, to 0.1 % (83.4)."""
    x = _finite(x)
    if x is None:
        return MISSING
    if math.isinf(x):
        return "unbounded"
    text = f"{x:.1f}"
    return "0.0" if text == "-0.0" else text


def p_value(p) -> str:
    """A test's p-value: 2 significant digits, scientific below 1e-3 (7.7e-04, 0.032)."""
    p = _finite(p)
    if p is None:
        return MISSING
    if p < 1e-3:
        return f"{p:.1e}"
    return significant(p, 2)


def score(x) -> str:
    """Log-likelihoods, AIC, BIC, elpd: differences matter to about 0.1."""
    x = _finite(x)
    if x is None:
        return MISSING
    return f"{x:.1f}"


def level(confidence: float, what: str = "interval") -> str:
    """The heading of an interval column: ``90 % interval``."""
    return f"{100 * confidence:.0f}\u00a0% {what}"   # no line break inside "90 %"


def interval(lo, hi, kind: Callable = stress) -> str:
    """``[4.01, 8.67]`` with both ends in the given kind's rule."""
    return f"[{kind(lo)}, {kind(hi)}]"


KINDS: dict[str, Callable] = {"stress": stress, "modulus": modulus, "probability": probability,
                              "percent": percent, "p_value": p_value, "score": score,
                              "count": lambda x: MISSING if _finite(x) is None else f"{float(x):.0f}",
                              "number": significant}


def column_kind(name) -> str:
    """Guess how to write a column from its name (explicit kinds override this)."""
    text = str(name).lower()
    if "(%)" in text or "gain" in text or "share" in text:
        return "percent"
    if "expected" in text or "fraction" in text:
        return "number"
    if "probability" in text or text.startswith("p_f"):
        return "probability"
    if "p-value" in text or text == "p":
        return "p_value"
    if "modulus" in text or text == "m":
        return "modulus"
    if any(w in text for w in ("log_likelihood", "log-likelihood", "aic", "bic", "elpd")):
        return "score"
    if any(w in text for w in ("failures", "specimens", "n_parameters", "replicates")):
        return "count"
    if any(w in text for w in ("stress", "strength", "σθ", "before", "after", "mpa")):
        return "stress"
    return "number"


def format_frame(frame: pd.DataFrame, kinds: Mapping[str, str] | None = None,
                 index_kind: str | None = None) -> pd.DataFrame:
    """A copy of ``frame`` with every number written as text by the rule of its column.

    kinds: {column: kind} overriding :func:`column_kind`; ``index_kind`` formats a numeric index."""
    kinds = dict(kinds or {})
    out = pd.DataFrame(index=frame.index)
    for c in frame.columns:
        f = KINDS[kinds.get(c, column_kind(c))]
        out[c] = [f(v) if _is_number(v) else ("" if v is None else str(v)) for v in frame[c]]
    if index_kind is not None:
        f = KINDS[index_kind]
        if isinstance(out.index, pd.MultiIndex):
            out.index = pd.MultiIndex.from_tuples(
                [tuple(f(v) if _is_number(v) else v for v in t) for t in out.index], names=out.index.names)
        else:
            out.index = pd.Index([f(v) if _is_number(v) else v for v in out.index], name=out.index.name)
    return out


def _is_number(v) -> bool:
    if isinstance(v, bool):
        return False
    try:
        float(v)
    except (TypeError, ValueError):
        return False
    return not isinstance(v, str)


def table_text(frame: pd.DataFrame, kinds: Mapping[str, str] | None = None, index_kind: str | None = None) -> str:
    """Plain-text table with numbers written by :func:`format_frame`."""
    return format_frame(frame, kinds, index_kind).to_string()
