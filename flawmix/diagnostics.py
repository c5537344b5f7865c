"""MCMC convergence diagnostics in plain numpy: rank-normalised split R-hat, bulk and tail ESS
(Vehtari, Gelman, Simpson, Carpenter & Bürkner 2021, as arviz computes them), and the Pareto
shape k of importance weights (Zhang & Stephens 2009 fit, as in PSIS).

The sampler checks convergence many times per fit; going through arviz's xarray containers
cost more than the sampling itself. tests/test_bayes.py checks these equal arviz's values.
"""
from __future__ import annotations

import math

import numpy as np
from scipy.special import ndtri


def _split(draws: np.ndarray) -> np.ndarray:
    """(chains, draws) -> (2 chains, draws // 2): first and last half of every chain."""
    half = draws.shape[1] // 2
    return np.concatenate([draws[:, :half], draws[:, draws.shape[1] - half:]], axis=0)


def _average_ranks(x: np.ndarray) -> np.ndarray:
    """Ranks 1..S of all values, ties sharing their average rank (repeated MCMC states tie)."""
    flat = x.ravel()
    values, inverse, counts = np.unique(flat, return_inverse=True, return_counts=True)
    before = np.cumsum(counts) - counts
    return (before + (counts + 1) / 2.0)[inverse].reshape(x.shape)


def _z_scale(x: np.ndarray) -> np.ndarray:
    # normal scores of the pooled ranks, with the (r − 3/8)/(S + 1/4) offset
    return ndtri((_average_ranks(x) - 0.375) / (x.size + 0.25))


def _rhat(x: np.ndarray) -> float:
    n = x.shape[1]
    between = n * np.var(x.mean(axis=1), ddof=1)
    within = np.mean(np.var(x, axis=1, ddof=1))
    return float(np.sqrt((between / within + n - 1) / n))


def _autocovariance(x: np.ndarray) -> np.ndarray:
    n = x.shape[1]
    size = 1 << (2 * n - 1).bit_length()          # zero padding >= 2n: exact linear correlation
    centred = x - x.mean(axis=1, keepdims=True)
    spectrum = np.fft.rfft(centred, n=size, axis=1)
    return np.fft.irfft(spectrum * np.conjugate(spectrum), n=size, axis=1)[:, :n] / n


def _ess(x: np.ndarray) -> float:
    """Effective sample size of (chains, draws) by Geyer's initial monotone sequence."""
    chains, n = x.shape
    if np.max(x) - np.min(x) < np.finfo(float).resolution:
        return float(x.size)
    acov = _autocovariance(x)
    mean_var = np.mean(acov[:, 0]) * n / (n - 1.0)
    var_plus = mean_var * (n - 1.0) / n
    if chains > 1:
        var_plus += np.var(x.mean(axis=1), ddof=1)
    rho = np.zeros(n)
    rho_mean = 1.0 - (mean_var - acov.mean(axis=0)) / var_plus   # rho_mean[t] at every lag
    rho[0] = even = 1.0
    rho[1] = odd = rho_mean[1]
    t = 1
    while t < n - 3 and even + odd > 0.0:   # initial positive sequence of pair sums
        even, odd = rho_mean[t + 1], rho_mean[t + 2]
        if even + odd >= 0:
            rho[t + 1], rho[t + 2] = even, odd
        t += 2
    max_t = t - 2
    if even > 0:
        rho[max_t + 1] = even
    t = 1
    while t <= max_t - 2:                   # made monotone
        if rho[t + 1] + rho[t + 2] > rho[t - 1] + rho[t]:
            rho[t + 1] = rho[t + 2] = (rho[t - 1] + rho[t]) / 2.0
        t += 2
    tau = -1.0 + 2.0 * np.sum(rho[:max_t + 1]) + np.sum(rho[max_t + 1:max_t + 2])
    tau = max(tau, 1.0 / np.log10(x.size))
    return float(x.size / tau)


def r_hat(draws: np.ndarray) -> float:
    """Rank-normalised split R-hat of one parameter's (chains, draws): max of bulk and tail."""
    x = np.asarray(draws, dtype=float)
    bulk = _rhat(_z_scale(_split(x)))
    tail = _rhat(_z_scale(_split(np.abs(x - np.median(x)))))
    return max(bulk, tail)


def ess_bulk(draws: np.ndarray) -> float:
    return _ess(_z_scale(_split(np.asarray(draws, dtype=float))))


def ess_tail(draws: np.ndarray) -> float:
    x = np.asarray(draws, dtype=float)
    low, high = np.quantile(x, [0.05, 0.95])
    return min(_ess(_split((x <= low).astype(float))), _ess(_split((x <= high).astype(float))))


def convergence(posterior: dict[str, np.ndarray]) -> dict[str, float]:
    """Largest R-hat, smallest bulk and tail ESS over parameters shaped (chain, draw)."""
    values = [np.asarray(v, dtype=float) for v in posterior.values()]
    return {"r_hat_max": max(r_hat(v) for v in values), "ess_bulk_min": min(ess_bulk(v) for v in values),
            "ess_tail_min": min(ess_tail(v) for v in values)}


def pareto_k(log_weights: np.ndarray) -> float:
    """Shape k of a generalised Pareto fitted to the largest importance weights.

    The tail is the largest min(S/5, 3√S) weights; the fit is Zhang & Stephens' (2009)
    posterior-mean estimate with the weak prior towards 0.5 that PSIS uses. k < 0.7 means
    the weights (and a proposal built from them) are usable.
    """
    lw = np.sort(np.asarray(log_weights, dtype=float).ravel())
    lw = lw[np.isfinite(lw)]
    size = lw.size
    tail = int(math.ceil(min(0.2 * size, 3 * math.sqrt(size))))
    if size < 2 or tail >= size:
        return float("inf")
    x = lw - lw[-1]
    cut = max(x[-tail - 1], math.log(np.finfo(float).tiny))
    exceed = np.exp(x[x > cut]) - math.exp(cut)
    if exceed.size <= 4:
        return float("inf")
    n = exceed.size
    grid = 30 + int(math.sqrt(n))
    b = 1 - np.sqrt(grid / (np.arange(1, grid + 1, dtype=float) - 0.5))
    b /= 3 * exceed[int(n / 4 + 0.5) - 1]
    b += 1 / exceed[-1]
    k = np.log1p(-b[:, None] * exceed).mean(axis=1)
    length = n * (np.log(-(b / k)) - k - 1)
    weights = 1 / np.exp(length - length[:, None]).sum(axis=1)
    keep = weights >= 10 * np.finfo(float).eps
    weights, b = weights[keep] / weights[keep].sum(), b[keep]
    k_post = np.log1p(-np.sum(b * weights) * exceed).mean()
    return float((n * k_post + 10 * 0.5) / (n + 10))
