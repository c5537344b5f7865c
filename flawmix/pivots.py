"""Pivotal quantities of the complete-sample Weibull MLE, by seeded Monte Carlo.

For complete (uncensored) data m̂/m and m̂·ln(σ̂θ/σθ) have distributions that depend on N
only, so simulating standard Weibull samples (m = 1, σθ = 1) gives the unbiasing factor
UF(N) = 1/E[m̂/m] and the quantiles behind exact confidence bounds (DOMAIN.md section 3).
"""
from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from .censored import censored_weibull_mle

DEFAULT_REPLICATES = 200_000
DEFAULT_SEED = 20_261_202
_CHUNK = 20_000


@dataclass(frozen=True)
class Pivots:
    n: int
    replicates: int
    unbiasing_factor: float
    modulus_ratio: np.ndarray      # sorted simulated m̂/m
    scale_pivot: np.ndarray        # sorted simulated m̂ ln(σ̂θ/σθ)

    def modulus_quantile(self, p: float) -> float:
        return float(np.quantile(self.modulus_ratio, p))

    def scale_quantile(self, p: float) -> float:
        return float(np.quantile(self.scale_pivot, p))


@lru_cache(maxsize=64)
def complete_sample_pivots(n: int, replicates: int = DEFAULT_REPLICATES, seed: int = DEFAULT_SEED) -> Pivots:
    """Simulate the pivots for sample size n (cached per process)."""
    if n < 2:
        raise ValueError("pivots need at least 2 specimens")
    rng = np.random.default_rng([seed, n])
    ratios, pivots = [], []
    done = 0
    chunk = max(1, min(_CHUNK, 2_000_000 // n))
    while done < replicates:
        size = min(chunk, replicates - done)
        # standard Weibull: ln σ = ln(E) with E ~ Exp(1)
        y = np.log(rng.standard_exponential((size, n)))
        u, v, _ = censored_weibull_mle(y, np.ones_like(y))
        m = np.exp(u)
        ratios.append(m)
        pivots.append(m * v)
        done += size
    ratio = np.sort(np.concatenate(ratios))
    pivot = np.sort(np.concatenate(pivots))
    return Pivots(n, replicates, float(1.0 / ratio.mean()), ratio, pivot)


def ross_unbiasing_factor(n: int) -> float:
    """Closed approximation UF ≈ (N − 2)/(N − 0.68) (Ross 1994, IEEE Trans. Dielectr. Electr. Insul.)."""
    return (n - 2.0) / (n - 0.68)
