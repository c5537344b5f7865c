"""Survival, failure probability and quantiles of fitted population sets (no fitting here)."""
from __future__ import annotations

import numpy as np
from scipy import optimize as _sopt


def weibull_cumulative_hazard(stress, modulus, scale):
    """(σ/σθ)^m, broadcasting stress against parameters."""
    return (np.asarray(stress, dtype=float) / scale) ** modulus


def concurrent_sf(stress, moduli, scales):
    """Survival probability exp(−Σ_j (σ/σθ_j)^m_j); stress (...,), parameters (k,)."""
    s = np.asarray(stress, dtype=float)[..., None]
    return np.exp(-np.sum((s / np.asarray(scales)) ** np.asarray(moduli), axis=-1))


def concurrent_hazard_shares(stress, moduli, scales):
    """(..., k) share of failures at stress σ caused by each population, h_j / Σ h."""
    s = np.asarray(stress, dtype=float)[..., None]
    m = np.asarray(moduli, dtype=float)
    logh = np.log(m) + (m - 1.0) * np.log(s) - m * np.log(np.asarray(scales, dtype=float))
    logh = logh - logh.max(axis=-1, keepdims=True)
    h = np.exp(logh)
    return h / h.sum(axis=-1, keepdims=True)


def invert_sf(sf, probability, lo: float, hi: float) -> float:
    """Stress at which the failure probability 1 − sf(σ) equals ``probability`` (0 < p < 1)."""
    target = float(probability)

    def excess(log_stress: float) -> float:
        return (1.0 - float(sf(np.exp(log_stress)))) - target

    a, b = np.log(lo), np.log(hi)
    while excess(a) > 0:
        a -= 1.0
    while excess(b) < 0:
        b += 1.0
    return float(np.exp(_sopt.brentq(excess, a, b, xtol=1e-14, rtol=1e-15)))
