"""Survival, failure probability and quantiles of fitted population sets (no fitting here)."""
from __future__ import annotations

import numpy as np


def weibull_cumulative_hazard(stress, modulus, scale):
    """(σ/σθ)^m, broadcasting stress against parameters (inf where it overflows: certain failure)."""
    with np.errstate(over="ignore"):
        return (np.asarray(stress, dtype=float) / scale) ** modulus


def _log_terms(stress, moduli, scales):
    s = np.asarray(stress, dtype=float)[..., None]
    m = np.asarray(moduli, dtype=float)
    sc = np.asarray(scales, dtype=float)
    with np.errstate(over="ignore"):   # an overflowing hazard is certain failure, not an error
        H = (s / sc) ** m
    logh = np.log(m) + (m - 1.0) * np.log(s) - m * np.log(sc)
    return H, logh


def model_sf(model: str, stress, moduli, scales, fractions=None, partial_index: int = 0):
    """Survival probability of a specimen under the named model (concurrent, exclusive, partial)."""
    H, _ = _log_terms(stress, moduli, scales)
    if model.startswith("concurrent"):
        return np.exp(-H.sum(axis=-1))
    p = np.asarray(fractions, dtype=float)
    if model == "exclusive":
        return (p * np.exp(-H)).sum(axis=-1)
    a = partial_index
    rest = H.sum(axis=-1) - H[..., a]
    return np.exp(-rest) * ((1.0 - p[a]) + p[a] * np.exp(-H[..., a]))


def model_failure_shares(model: str, stress, moduli, scales, fractions=None, partial_index: int = 0):
    """(..., k) share of the failures at stress σ that start from each population."""
    H, logh = _log_terms(stress, moduli, scales)
    if model.startswith("concurrent"):
        logd = logh
    elif model == "exclusive":
        logd = np.log(np.asarray(fractions, dtype=float)) + logh - H
    else:
        a = partial_index
        p = float(np.asarray(fractions)[a])
        mix = np.log((1.0 - p) + p * np.exp(-H[..., a]))
        logd = logh + mix[..., None]
        logd[..., a] = np.log(p) + logh[..., a] - H[..., a]
    logd = logd - logd.max(axis=-1, keepdims=True)
    d = np.exp(logd)
    return d / d.sum(axis=-1, keepdims=True)


def model_ppf(model: str, probability, moduli, scales, fractions=None, partial_index: int = 0,
              iterations: int = 80) -> np.ndarray:
    """Stress at failure probability p for many parameter sets at once (bisection in ln σ).

    moduli, scales, fractions: (S, k). Returns (S,).
    """
    m = np.atleast_2d(np.asarray(moduli, dtype=float))
    sc = np.atleast_2d(np.asarray(scales, dtype=float))
    fr = np.ones_like(m) if fractions is None else np.atleast_2d(np.asarray(fractions, dtype=float))
    target = float(probability)
    lo = np.log(sc.min(axis=1)) - 40.0 / m.min(axis=1) - 1.0
    hi = np.log(sc.max(axis=1)) + 5.0
    for _ in range(iterations):
        mid = 0.5 * (lo + hi)
        pf = 1.0 - _sf_rows(model, np.exp(mid), m, sc, fr, partial_index)
        below = pf < target
        lo = np.where(below, mid, lo)
        hi = np.where(below, hi, mid)
    return np.exp(0.5 * (lo + hi))


def _sf_rows(model, stress_per_row, m, sc, fr, partial_index):
    """Survival at one stress per parameter row: stress (S,), parameters (S, k)."""
    with np.errstate(over="ignore"):   # far above σθ the risk overflows to inf: survival 0, as it should
        H = (stress_per_row[:, None] / sc) ** m
    if model.startswith("concurrent"):
        return np.exp(-H.sum(axis=1))
    if model == "exclusive":
        return (fr * np.exp(-H)).sum(axis=1)
    a = partial_index
    rest = H.sum(axis=1) - H[:, a]
    return np.exp(-rest) * ((1.0 - fr[:, a]) + fr[:, a] * np.exp(-H[:, a]))


def model_sf_rows(model, stress, moduli, scales, fractions=None, partial_index: int = 0):
    """(S, T) survival at each of T stresses for each of S parameter sets."""
    m = np.atleast_2d(np.asarray(moduli, dtype=float))
    sc = np.atleast_2d(np.asarray(scales, dtype=float))
    fr = np.ones_like(m) if fractions is None else np.atleast_2d(np.asarray(fractions, dtype=float))
    s = np.atleast_1d(np.asarray(stress, dtype=float))
    return np.stack([_sf_rows(model, np.full(m.shape[0], t), m, sc, fr, partial_index) for t in s], axis=1)
