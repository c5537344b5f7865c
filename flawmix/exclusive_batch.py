"""Exclusive populations (each specimen carries one) fitted for many replicates at once, by EM.

E-step: each specimen's chance of carrying population j among its candidates (a labelled
failure has one; survivors and unidentified failures are split); M-step: the fractions and
one weighted censored Weibull fit per population. Used by the calibrated model-choice test.
"""
from __future__ import annotations

import numpy as np

from . import likelihood as lik


def weighted_weibull_mle(y: np.ndarray, failed: np.ndarray, weight: np.ndarray, iterations: int = 60,
                         log_modulus_start: np.ndarray | None = None):
    """Weibull MLE with specimen weights (exposure) along the last axis.

    Maximises Σ_i w_i [δ_i ln f(σ_i) + (1 − δ_i) ln S(σ_i)]: the modulus solves
    Σ w e^{mx} x / Σ w e^{mx} − Σ wδ x / Σ wδ − 1/m = 0 (x = ln σ − max ln σ, increasing in
    m), then σθ follows in closed form. y, failed, weight: (..., N). Returns (ln m, ln σθ).
    ``log_modulus_start`` (...,): where Newton starts (EM passes its last M-step's); the
    bisection bracket keeps any start safe."""
    top = y.max(axis=-1, keepdims=True)
    x = y - top
    wf = weight * failed
    r = np.maximum(wf.sum(axis=-1), 1e-300)
    xbar = (wf * x).sum(axis=-1) / r
    lo = np.full(xbar.shape, lik.LOG_MODULUS_MIN)
    hi = np.full(xbar.shape, lik.LOG_MODULUS_MAX)
    var = (wf * (x - xbar[..., None]) ** 2).sum(axis=-1) / r
    if log_modulus_start is None:
        u = np.clip(np.log(1.2825 / np.sqrt(np.maximum(var, 1e-12))), lo, hi)
    else:
        u = np.clip(np.where(np.isfinite(log_modulus_start), log_modulus_start, 0.0), lo, hi)
    u = _modulus_newton(x, weight, xbar, u, lo, hi, iterations)
    m = np.exp(u)
    s0 = np.maximum((weight * np.exp(m[..., None] * x)).sum(axis=-1), 1e-300)
    v = top[..., 0] + np.log(s0 / r) / m
    return u, v


def _modulus_newton(x, weight, xbar, u, lo, hi, iterations):
    """Safeguarded Newton on the weighted modulus equation, row by row over the leading axes:
    a row stops once its step is below 1e-10 (the rest go on, on a compacted copy)."""
    shape = u.shape
    n = x.shape[-1]
    x, weight = np.broadcast_to(x, weight.shape).reshape(-1, n), weight.reshape(-1, n)
    xbar, u, lo, hi = (np.broadcast_to(a, shape).reshape(-1).copy() for a in (xbar, u, lo, hi))
    out = u.copy()
    rows = np.arange(u.size)
    for _ in range(iterations):
        m = np.exp(u)
        e = weight * np.exp(m[:, None] * x)
        s0 = np.maximum(e.sum(axis=-1), 1e-300)
        mean = (e * x).sum(axis=-1) / s0
        second = (e * x * x).sum(axis=-1) / s0
        g = mean - xbar - 1.0 / m
        lo, hi = np.where(g < 0, u, lo), np.where(g > 0, u, hi)
        step = np.clip(-g / (m * (second - mean * mean) + 1.0 / m), -1.0, 1.0)
        new = u + step
        u = np.where((new < lo) | (new > hi), 0.5 * (lo + hi), new)
        out[rows] = u
        going = np.abs(step) >= 1e-10
        if not going.any():
            break
        if not going.all():
            rows, x, weight, xbar, u, lo, hi = (a[going] for a in (rows, x, weight, xbar, u, lo, hi))
    return out.reshape(shape)


def _joint(data: lik.Data, u, v, log_fraction):
    """(R, N, k) ln[p_j f_j] for failures and ln[p_j S_j] for survivors, −inf where j is not
    a candidate."""
    m = np.exp(u)[:, None, :]
    z = m * (data.y[:, :, None] - v[:, None, :])
    with np.errstate(over="ignore"):
        log_density = np.where(data.failed[..., None], u[:, None, :] - data.y[..., None] + z, 0.0) - np.exp(z)
    allowed = data.candidates | ~data.failed[..., None]
    return np.where(allowed, log_fraction[:, None, :] + log_density, -np.inf)


def fit_exclusive_batch(data: lik.Data, iterations: int = 300, tol: float = 1e-9) -> np.ndarray:
    """(R,) maximum log-likelihood of the exclusive model for each replicate (EM from the
    labelled failures: a labelled population starts as the specimens labelled with it)."""
    R, N, k = data.candidates.shape
    allowed = data.candidates | ~data.failed[..., None]
    certain = data.failed & (data.candidates.sum(-1) == 1)
    counts = (data.candidates & certain[..., None]).sum(1) + 0.5          # (R, k)
    resp = np.where(allowed, counts[:, None, :], 0.0)
    resp /= resp.sum(-1, keepdims=True)
    previous = np.full(R, -np.inf)
    loglik = previous
    u = None
    for _ in range(iterations):
        fraction = np.clip(resp.mean(axis=1), 1e-12, None)
        yk = np.broadcast_to(data.y[:, None, :], (R, k, N))
        fk = np.broadcast_to(data.failed[:, None, :], (R, k, N))
        u, v = weighted_weibull_mle(yk, fk, np.ascontiguousarray(np.transpose(resp, (0, 2, 1))),
                                    log_modulus_start=u)
        joint = _joint(data, u, v, np.log(fraction))
        top = joint.max(-1, keepdims=True)
        e = np.exp(joint - top)
        total = e.sum(-1, keepdims=True)
        loglik = (top[..., 0] + np.log(total[..., 0])).sum(axis=1)
        resp = e / total
        if np.all(np.abs(loglik - previous) < tol * np.maximum(1.0, np.abs(loglik))):
            break
        previous = loglik
    return loglik
