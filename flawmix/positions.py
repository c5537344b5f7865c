"""Plotting positions and Johnson's adjusted ranks for Weibull probability plots."""
from __future__ import annotations

import numpy as np

from .errors import FlawmixError

# name -> (a, b) in P = (i − a)/(N + b)
POSITION_RULES = {
    "hazen": (0.5, 0.0),        # (i − 0.5)/N, used by ASTM C1239 and ISO 20501 [mem]
    "mean-rank": (0.0, 1.0),    # i/(N + 1)
    "median-rank": (0.3, 0.4),  # (i − 0.3)/(N + 0.4), Benard's approximation
}


def position_rule(name: str) -> tuple[float, float]:
    try:
        return POSITION_RULES[name]
    except KeyError:
        raise FlawmixError(
            f"unknown plotting-position rule '{name}'; use one of {', '.join(POSITION_RULES)}"
        ) from None


def plotting_positions(ranks, n: int, rule: str = "hazen") -> np.ndarray:
    """Failure probability for (possibly fractional) ranks among n specimens."""
    a, b = position_rule(rule)
    return (np.asarray(ranks, dtype=float) - a) / (n + b)


def strength_order(strength) -> np.ndarray:
    """Stable ascending order of the strengths: sort once, rank many populations with it."""
    return np.argsort(np.asarray(strength, dtype=float), kind="stable")


def adjusted_ranks(strength, is_failure, order=None) -> tuple[np.ndarray, np.ndarray]:
    """Johnson's adjusted ranks of the failures of one population.

    All N specimens are sorted by strength (at ties, failures first); the reverse rank k
    is N for the weakest; at each failure i_j = i_{j−1} + (N + 1 − i_{j−1})/(1 + k_j).
    ``order``: :func:`strength_order` of the same strengths, to share one sort between
    populations (big data). Returns (indices of the failures in input order of rising
    strength, their ranks).
    """
    s = np.asarray(strength, dtype=float)
    f = np.asarray(is_failure, dtype=bool)
    n = s.size
    if order is None:
        order = strength_order(s)
    s_sorted, f_sorted = s[order], f[order]
    # at ties the failures come first: a failure's sorted position is the start of its
    # group of equal strengths plus the number of failures before it in that group
    first = np.empty(n, bool)
    first[:1] = True
    np.not_equal(s_sorted[1:], s_sorted[:-1], out=first[1:])
    group_start = np.flatnonzero(first)[np.cumsum(first) - 1]
    failures_before = np.concatenate([[0], np.cumsum(f_sorted)])
    where = np.flatnonzero(f_sorted)
    position = group_start[where] + (failures_before[where] - failures_before[group_start[where]])
    # i_j = i_{j-1} + (N + 1 - i_{j-1})/(1 + k_j)  <=>  N + 1 - i_j = (N + 1 - i_{j-1}) k_j/(1 + k_j)
    k = (n - position).astype(float)   # reverse rank: N for the weakest
    ranks = (n + 1) * (1.0 - np.exp(np.cumsum(np.log(k / (k + 1.0)))))
    return order[where], ranks
