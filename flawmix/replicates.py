"""Fit many replicate data sets at once (no Python loop per replicate in the hot path).

Concurrent populations: with every origin identified each population is a censored fit,
solved for all replicates and populations in one vectorised call; with unidentified
origins a few batched EM steps give a start and a batched Newton iteration on the joint
likelihood finishes (eigenvalues of the Hessian are made negative so each step ascends).
Also here: the common-modulus (pooled) fit used by the test for a second population.
"""
from __future__ import annotations

import numpy as np

from . import likelihood as lik
from .censored import censored_weibull_mle


def fit_concurrent_batch(data: lik.Data, *, em_steps: int = 25, newton_steps: int = 60, score_tol: float = 1e-8):
    """MLE of the concurrent model for every replicate.

    Returns (moduli (R, k), scales (R, k), loglik (R,), ok (R,)); ``ok`` is False where a
    population has no failure (no finite estimate) or the fit did not converge.
    """
    R, N, k = data.candidates.shape
    F = data.failed
    cand = data.candidates & F[..., None]
    n_cand = cand.sum(-1)
    possible = cand.sum(1)                                     # (R, k)
    ok = np.all(possible > 0, axis=1)
    resp = lik.starting_responsibilities(data, "by-count")
    y = data.y
    yk = np.broadcast_to(y[:, None, :], (R, k, N))
    uncertain_any = bool(np.any(F & (n_cand > 1)))
    u = None
    for _ in range(em_steps if uncertain_any else 1):
        u, v, _ = censored_weibull_mle(yk, np.transpose(resp, (0, 2, 1)), log_modulus_start=u)
        if not uncertain_any:
            break
        new = lik.responsibilities(data, u, v)
        change = np.max(np.abs(new - resp))
        resp = new
        if change < 1e-3:
            break
    theta = np.concatenate([u, v], axis=1)
    theta = np.where(np.isfinite(theta), theta, 0.0)
    converged = np.zeros(R, bool)
    if uncertain_any:
        lo = np.concatenate([np.full(k, lik.LOG_MODULUS_MIN), np.full(k, -np.inf)])
        hi = np.concatenate([np.full(k, lik.LOG_MODULUS_MAX), np.full(k, np.inf)])
        ll, g, Hs = lik.concurrent_derivatives_batch(data, theta)
        for _ in range(newton_steps):
            active = ok & (np.max(np.abs(g), axis=1) > score_tol)
            if not active.any():
                break
            w, V = np.linalg.eigh(-Hs[active])
            w = np.maximum(np.abs(w), 1e-8 + 1e-6 * np.abs(w).max(axis=1, keepdims=True))
            step = np.einsum("rij,rj,rkj,rk->ri", V, 1 / w, V, g[active])
            norm = np.max(np.abs(step), axis=1, keepdims=True)
            step = step * np.minimum(1.0, 2.0 / np.maximum(norm, 1e-300))
            t_act = theta[active]
            ll_act = ll[active]
            accepted = np.zeros(step.shape[0], bool)
            scale = np.ones(step.shape[0])
            sub = lik.Data(data.y[active], data.failed[active], data.candidates[active])
            for _ in range(30):
                trial = np.clip(t_act + scale[:, None] * step, lo, hi)
                ll_new = lik.concurrent_loglik(sub, trial[:, :k], trial[:, k:])
                good = (ll_new >= ll_act - 1e-10 * np.maximum(1, np.abs(ll_act))) & ~accepted
                t_act = np.where(good[:, None], trial, t_act)
                accepted |= good
                if accepted.all():
                    break
                scale = np.where(accepted, scale, scale / 2)
            theta[active] = t_act
            ll_a, g_a, H_a = lik.concurrent_derivatives_batch(sub, t_act)
            ll[active], g[active], Hs[active] = ll_a, g_a, H_a
            stalled = ~accepted
            if stalled.any():   # no ascent possible at machine precision: a maximum
                idx = np.flatnonzero(active)[stalled]
                g[idx] = 0.0
        converged = ok & (np.max(np.abs(g), axis=1) <= max(score_tol, 1e-6))
    else:
        converged = ok.copy()
    moduli = np.exp(theta[:, :k])
    scales = np.exp(theta[:, k:])
    loglik = lik.concurrent_loglik(data, theta[:, :k], theta[:, k:])
    return moduli, scales, loglik, ok & converged


def pooled_loglik(data: lik.Data) -> np.ndarray:
    """(R,) maximum log-likelihood of one pooled population with origin shares independent
    of strength: a pooled censored Weibull fit plus the multinomial term of the identified
    labels (equal to the common-modulus concurrent fit when unidentified origins are
    wholly unidentified, as in simulated campaigns)."""
    u, v, _ = censored_weibull_mle(data.y, data.failed.astype(float))
    m = np.exp(u)
    z = m[:, None] * (data.y - v[:, None])
    ll = (np.where(data.failed, u[:, None] - data.y + z, 0.0) - np.exp(z)).sum(axis=1)
    F = data.failed
    n_cand = data.candidates.sum(-1)
    certain = F & (n_cand == 1)
    counts = (data.candidates & certain[..., None]).sum(1).astype(float)
    total = counts.sum(1, keepdims=True)
    with np.errstate(divide="ignore", invalid="ignore"):
        term = np.where(counts > 0, counts * np.log(counts / total), 0.0).sum(1)
    return ll + term
