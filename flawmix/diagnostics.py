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
    return _r_hat(x, _z_scale(_split(x)))


def _r_hat(x: np.ndarray, z: np.ndarray) -> float:
    """R-hat of draws x given their rank-normalised split draws z (shared with bulk ESS)."""
    return max(_rhat(z), _rhat(_z_scale(_split(np.abs(x - np.median(x))))))


def ess_bulk(draws: np.ndarray) -> float:
    return _ess(_z_scale(_split(np.asarray(draws, dtype=float))))


def ess_tail(draws: np.ndarray) -> float:
    x = np.asarray(draws, dtype=float)
    low, high = np.quantile(x, [0.05, 0.95])
    return min(_ess(_split((x <= low).astype(float))), _ess(_split((x <= high).astype(float))))


def convergence(posterior: dict[str, np.ndarray], tail: bool = True) -> dict[str, float]:
    """Largest R-hat, smallest bulk ESS (and, with ``tail``, tail ESS) over parameters shaped
    (chain, draw). The same values as :func:`r_hat`, :func:`ess_bulk` and :func:`ess_tail`;
    the rank-normalised split draws that bulk R-hat and bulk ESS share are computed once."""
    r_max, bulk_min, tail_min = -np.inf, np.inf, np.inf
    for v in posterior.values():
        x = np.asarray(v, dtype=float)
        z = _z_scale(_split(x))
        r_max = max(r_max, _r_hat(x, z))
        bulk_min = min(bulk_min, _ess(z))
        if tail:
            tail_min = min(tail_min, ess_tail(x))
    out = {"r_hat_max": float(r_max), "ess_bulk_min": float(bulk_min)}
    if tail:
        out["ess_tail_min"] = float(tail_min)
    return out


def _generalised_pareto_fit(exceed: np.ndarray) -> tuple[float, float]:
    """(shape k, scale σ) of a generalised Pareto fitted to sorted exceedances: Zhang &
    Stephens' (2009) posterior-mean estimate, k shrunk towards 0.5 by a weak prior of 10
    pseudo-observations as PSIS does (Vehtari et al. 2024); σ from the unshrunk k."""
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
    b_post = np.sum(b * weights)
    k_post = np.log1p(-b_post * exceed).mean()
    return float((n * k_post + 10 * 0.5) / (n + 10)), float(-k_post / b_post)


def _tail_length(size: int, relative_efficiency: float = 1.0) -> int:
    return int(math.ceil(min(0.2 * size, 3 * math.sqrt(size / relative_efficiency))))


def pareto_k(log_weights: np.ndarray) -> float:
    """Shape k of a generalised Pareto fitted to the largest importance weights.

    The tail is the largest min(S/5, 3√S) weights; the fit is Zhang & Stephens' (2009)
    posterior-mean estimate with the weak prior towards 0.5 that PSIS uses. k < 0.7 means
    the weights (and a proposal built from them) are usable.
    """
    lw = np.sort(np.asarray(log_weights, dtype=float).ravel())
    lw = lw[np.isfinite(lw)]
    size = lw.size
    tail = _tail_length(size)
    if size < 2 or tail >= size:
        return float("inf")
    x = lw - lw[-1]
    cut = max(x[-tail - 1], math.log(np.finfo(float).tiny))
    exceed = np.exp(x[x > cut]) - math.exp(cut)
    if exceed.size <= 4:
        return float("inf")
    return _generalised_pareto_fit(exceed)[0]


def _smoothed_log_weights(log_weights: np.ndarray, tail: int) -> tuple[np.ndarray, float]:
    """Pareto-smoothed, truncated, normalised log weights (S,) and the tail's shape k: the
    largest weights are replaced by the expected order statistics of the fitted generalised
    Pareto, none above the largest raw weight (Vehtari et al. 2024, PSIS)."""
    x = log_weights - log_weights.max()
    order = np.argsort(x, kind="stable")
    cut = max(x[order[-tail - 1]], math.log(np.finfo(float).tiny))
    tail_index = np.flatnonzero(x > cut)
    k = float("inf")
    if tail_index.size > 4:
        tail_order = tail_index[np.argsort(x[tail_index], kind="stable")]
        exceed = np.exp(x[tail_order]) - math.exp(cut)
        k, sigma = _generalised_pareto_fit(exceed)
        if np.isfinite(k) and sigma > 0:
            p = np.arange(0.5, tail_index.size) / tail_index.size
            quantiles = -np.log1p(-p) if abs(k) < np.finfo(float).eps else np.expm1(-k * np.log1p(-p)) / k
            x[tail_order] = np.log(sigma * quantiles + math.exp(cut))
            x[x > 0] = 0.0
    top = x.max()
    return x - (top + math.log(np.exp(x - top).sum())), k


def psis_loo(log_likelihood: np.ndarray) -> dict[str, object]:
    """PSIS-LOO from the pointwise log-likelihood (chains, draws, N):
    {elpd_loo, se, pareto_k (N,), pointwise (N,)}; tests/test_bayes.py checks it equal to
    arviz.loo on the same input.

    Relative efficiency (which sets the tail length) as flawmix's earlier arviz call had it:
    that call passed a constant placeholder posterior, whose split-chain ESS is the number of
    draws split chains keep, so r_eff = 2⌊draws/2⌋ / draws (1 for an even number of draws)."""
    ll = np.asarray(log_likelihood, dtype=float)
    draws = ll.shape[1] if ll.ndim == 3 else ll.shape[0]
    ll = ll.reshape(-1, ll.shape[-1])                       # (S, N)
    size, n = ll.shape
    tail = _tail_length(size, 2 * (draws // 2) / draws)
    pointwise = np.empty(n)
    shapes = np.empty(n)
    for i in range(n):
        lw, shapes[i] = _smoothed_log_weights(-ll[:, i], tail)
        terms = ll[:, i] + lw
        top = terms.max()
        pointwise[i] = top + math.log(np.exp(terms - top).sum())
    return {"elpd_loo": float(pointwise.sum()), "se": float(math.sqrt(n * np.var(pointwise))),
            "pareto_k": shapes, "pointwise": pointwise}
