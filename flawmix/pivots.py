"""Pivotal quantities of the complete-sample Weibull MLE, by seeded Monte Carlo.

For complete (uncensored) data m̂/m and m̂·ln(σ̂θ/σθ) have distributions that depend on N
only, so simulating standard Weibull samples (m = 1, σθ = 1) gives the unbiasing factor
UF(N) = 1/E[m̂/m] and the quantiles behind exact confidence bounds (DOMAIN.md section 3).
Fits read them from a table shipped with the package (``data/pivots.npz``, made by
``scripts/make_pivot_tables.py``), interpolated between its N and extrapolated beyond it.
"""
from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache
from importlib.resources import files
from statistics import NormalDist

import numpy as np

from .censored import censored_weibull_mle

DEFAULT_REPLICATES = 200_000
DEFAULT_SEED = 20_261_202
_CHUNK = 20_000
# probabilities at which the shipped table holds quantiles (dense in the tails, where bounds live)
TABLE_PROBABILITIES = (
    0.0005, 0.001, 0.0025, 0.005, 0.0075, 0.01, 0.015, 0.02, 0.025, 0.03, 0.04, 0.05, 0.06, 0.075,
    0.1, 0.125, 0.15, 0.2, 0.25, 0.3, 0.35, 0.4, 0.45, 0.5, 0.55, 0.6, 0.65, 0.7, 0.75, 0.8, 0.85,
    0.875, 0.9, 0.925, 0.94, 0.95, 0.96, 0.97, 0.975, 0.98, 0.985, 0.99, 0.9925, 0.995, 0.9975,
    0.999, 0.9995)


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


# Large-N limits of the pivots: √N ln(m̂/m) → normal with variance 6/π², √N·m̂ ln(σ̂θ/σθ) →
# normal with variance 1 + 6(1 − γ)²/π² (the inverse Fisher information of the Weibull
# model in ln σ, common practice).
_MODULUS_LIMIT_SD = float(np.sqrt(6.0) / np.pi)
_SCALE_LIMIT_SD = float(np.sqrt(1.0 + 6.0 * (1.0 - 0.5772156649015329) ** 2 / np.pi ** 2))


@dataclass(frozen=True)
class PivotQuantiles:
    """Quantiles of m̂/m and m̂ ln(σ̂θ/σθ) for one N, and the unbiasing factor.

    ``source`` says where they come from: ``table`` (a Monte Carlo row for this N),
    ``interpolated`` (between two rows), ``asymptotic`` (beyond the table, towards the normal
    limit) or ``monte carlo`` (a probability outside the table, simulated for this N).
    """
    n: int
    unbiasing_factor: float
    source: str
    probabilities: np.ndarray
    modulus_ratio: np.ndarray      # quantiles of m̂/m at ``probabilities``
    scale_pivot: np.ndarray        # quantiles of m̂ ln(σ̂θ/σθ) at ``probabilities``

    def _at(self, values, p: float) -> float:
        # linear in the normal score, where the quantiles are close to straight lines
        z = _normal_scores(self.probabilities)
        return float(np.interp(NormalDist().inv_cdf(p), z, values))

    def modulus_quantile(self, p: float) -> float:
        return float(np.exp(self._at(np.log(self.modulus_ratio), p)))

    def scale_quantile(self, p: float) -> float:
        return self._at(self.scale_pivot, p)


@lru_cache(maxsize=1)
def _table():
    with files("flawmix").joinpath("data/pivots.npz").open("rb") as handle:
        raw = np.load(handle)
        return {key: raw[key] for key in raw.files}


def _normal_scores(probabilities) -> np.ndarray:
    return np.array([NormalDist().inv_cdf(float(p)) for p in probabilities])


def pivot_quantiles(n: int, probabilities=()) -> PivotQuantiles:
    """Pivots for sample size n from the shipped table (no simulation unless a probability
    lies outside the table's 0.0005..0.9995, then :func:`complete_sample_pivots`).

    Between tabulated N, √N ln q and √N t are linear in 1/√N (their large-sample expansion);
    beyond the largest N they run linearly in 1/√N to their normal limits, and 1 − UF as c/N.
    """
    if n < 2:
        raise ValueError("pivots need at least 2 specimens")
    if any(not TABLE_PROBABILITIES[0] <= p <= TABLE_PROBABILITIES[-1] for p in probabilities):
        piv = complete_sample_pivots(n)
        grid = np.asarray(sorted(set(TABLE_PROBABILITIES) | set(probabilities)))
        return PivotQuantiles(n, piv.unbiasing_factor, "monte carlo", grid,
                              np.quantile(piv.modulus_ratio, grid), np.quantile(piv.scale_pivot, grid))
    table = _table()
    ns = table["n"]
    probs = tuple(float(p) for p in table["probabilities"])
    grid = np.asarray(probs)
    row = int(np.searchsorted(ns, n))
    if row < ns.size and ns[row] == n:
        return PivotQuantiles(n, float(table["unbiasing_factor"][row]), "table", grid,
                              table["modulus_ratio"][row], table["scale_pivot"][row])
    log_q = np.sqrt(ns)[:, None] * np.log(table["modulus_ratio"])
    t = np.sqrt(ns)[:, None] * table["scale_pivot"]
    x = 1.0 / np.sqrt(n)
    if row < ns.size:   # between rows row-1 and row
        a, b = row - 1, row
        xa, xb = 1.0 / np.sqrt(ns[a]), 1.0 / np.sqrt(ns[b])
        w = (x - xb) / (xa - xb)
        lq, tt = w * log_q[a] + (1 - w) * log_q[b], w * t[a] + (1 - w) * t[b]
        uf = w * table["unbiasing_factor"][a] + (1 - w) * table["unbiasing_factor"][b]
        source = "interpolated"
    else:               # from the last row towards the normal limit at 1/√N = 0
        z = _normal_scores(probs)
        w = x * np.sqrt(ns[-1])
        lq = w * log_q[-1] + (1 - w) * _MODULUS_LIMIT_SD * z
        tt = w * t[-1] + (1 - w) * _SCALE_LIMIT_SD * z
        # 1 − UF falls as c/N; c pooled over the rows with N >= 200 (about 1.41; Ross's
        # approximation has 1.32, the rows beyond N = 50 all sit near 1.41)
        big = ns >= 200
        c = float(np.mean(ns[big] * (1.0 - table["unbiasing_factor"][big])))
        uf = 1.0 - c / n
        source = "asymptotic"
    return PivotQuantiles(n, float(uf), source, grid, np.exp(lq / np.sqrt(n)), tt / np.sqrt(n))
