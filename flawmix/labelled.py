"""Closed forms of the concurrent maximum for labelled data (every failure's origin known).

The concurrent likelihood then separates by population (DOMAIN.md section 2): population j is
a censored Weibull sample of its own failures, every other specimen suspended, so the free
maximum is one censored fit per population (censored.py). With one common modulus m the
score Σ_j ∂/∂m reduces to the censored equation of all failures pooled (⟨ln σ⟩_m runs over
every specimen for each j), and each σθ_j = (Σ_all σ^m / r_j)^(1/m). Both are returned as
:class:`optimize.Optimum` of the one likelihood (its derivatives at the closed-form point),
or None when the score there misses the tolerance (the caller's Newton then finishes).
"""
from __future__ import annotations

import numpy as np

from . import likelihood as lik
from .likelihood import LOG_MODULUS_MAX, LOG_MODULUS_MIN
from .censored import censored_weibull_mle
from .optimize import Optimum


def labelled_optimum(data: lik.Data, tie: np.ndarray | None, score_tol: float) -> Optimum | None:
    """The maximum of the concurrent likelihood of labelled ``data`` (no leading dims), free
    (``tie`` None) or with one common modulus (``tie`` = mle.common_modulus_tie(k))."""
    k = data.k
    own = (data.candidates & data.failed[:, None]).T.astype(float)        # (k, N)
    if tie is None:
        # one population at a time: the single-set iteration has far less bookkeeping
        fits = [censored_weibull_mle(data.y, own[j]) for j in range(k)]
        if any(bound for _, _, bound in fits):
            return None
        theta = np.array([u for u, _, _ in fits] + [v for _, v, _ in fits])
        jacobian = None
    else:
        if tie.shape != (2 * k, k + 1) or not np.array_equal(tie[:k, 0], np.ones(k)) \
                or not np.array_equal(tie[k:, 1:], np.eye(k)) or np.any(tie[:k, 1:]) or np.any(tie[k:, 0]):
            return None
        u_common, _, at_bound = censored_weibull_mle(data.y, data.failed.astype(float))
        if at_bound:
            return None
        m = float(np.exp(u_common))
        top = float(data.y.max())
        total = float(np.exp(m * (data.y - top)).sum())
        with np.errstate(divide="ignore"):
            v = top + np.log(total / own.sum(axis=1)) / m
        theta = np.concatenate([np.full(k, float(u_common)), v])
        jacobian = tie
    if not np.all(np.isfinite(theta)):
        return None
    ll, grad, hess = lik.concurrent_derivatives(data, theta)
    if jacobian is not None:
        grad, hess = jacobian.T @ grad, jacobian.T @ hess @ jacobian
    if not np.isfinite(ll) or np.max(np.abs(grad)) > score_tol:
        return None
    return Optimum(theta, float(ll), grad, hess, 0, True)


def labelled_refits(data: lik.Data, truth: np.ndarray):
    """Bootstrap refits of labelled replicate campaigns in closed form (calibration.py's
    signed roots): data (R, N) with every failure's origin known, truth (2k,) the centred
    parameters the campaigns were drawn from.

    Per population and replicate: the free censored fit; σθ in closed form at the true
    modulus; the modulus by a safeguarded 1-D Newton at the true σθ. The likelihood
    separates, so each profile statistic involves only its own population. Returns
    (theta (R, 2k), signed roots (R, 2k), hessian (R, 2k, 2k), regular (R,)); ``regular`` is
    False for replicates with an estimate at the modulus bound or a Newton that did not
    settle (the caller refits those on the general path)."""
    R, N, k = data.candidates.shape
    own = (data.candidates & data.failed[..., None]).transpose(0, 2, 1).reshape(R * k, N).astype(float)
    y = np.broadcast_to(data.y[:, None, :], (R, k, N)).reshape(R * k, N)
    statistics = lik.censored_statistics(y, own)
    u_true, v_true = np.tile(truth[:k], R), np.tile(truth[k:], R)
    u, v, bound = censored_weibull_mle(y, own, log_modulus_start=u_true)
    free = np.stack([u, v], axis=1)
    ll_free, _, hess = lik.censored_derivatives_batch(y, own, free, statistics)
    fixed_modulus = np.stack([u_true, _closed_form_log_scale(y, own, u_true)], axis=1)
    ll_fixed_modulus = lik.censored_derivatives_batch(y, own, fixed_modulus, statistics)[0]
    u_at_scale, settled = _modulus_at_scale(y, own, v_true, u_true, statistics)
    ll_fixed_scale = lik.censored_derivatives_batch(y, own, np.stack([u_at_scale, v_true], axis=1), statistics)[0]
    roots_u = np.sign(u - u_true) * np.sqrt(np.maximum(2.0 * (ll_free - ll_fixed_modulus), 0.0))
    roots_v = np.sign(v - v_true) * np.sqrt(np.maximum(2.0 * (ll_free - ll_fixed_scale), 0.0))
    theta = np.concatenate([u.reshape(R, k), v.reshape(R, k)], axis=1)
    roots = np.concatenate([roots_u.reshape(R, k), roots_v.reshape(R, k)], axis=1)
    hessian = np.zeros((R, 2 * k, 2 * k))
    blocks = hess.reshape(R, k, 2, 2)
    for j in range(k):     # block diagonal: population j's (u_j, v_j) block
        for a in range(2):
            for b in range(2):
                hessian[:, a * k + j, b * k + j] = blocks[:, j, a, b]
    regular = ~np.any((bound | ~settled | ~np.isfinite(ll_free)).reshape(R, k), axis=1)
    return theta, roots, hessian, regular


def _closed_form_log_scale(y, own, log_modulus):
    """ln σθ at modulus m: (Σ_all σ^m / r)^(1/m) per row (censored.py, DOMAIN.md section 3)."""
    m = np.exp(log_modulus)
    top = y.max(axis=1)
    with np.errstate(divide="ignore", over="ignore"):
        return top + np.log(np.exp(m[:, None] * (y - top[:, None])).sum(axis=1) / own.sum(axis=1)) / m


def _modulus_at_scale(y, own, log_scale, start, statistics, iterations: int = 60):
    """ln m maximising one population's likelihood at fixed ln σθ (rows of y/own): Newton
    on the score in ln m with halving whenever the log-likelihood would fall."""
    u = start.copy()
    theta = np.stack([u, log_scale], axis=1)
    ll, grad, hess = lik.censored_derivatives_batch(y, own, theta, statistics)
    settled = np.zeros(u.size, bool)
    for _ in range(iterations):
        g, h = grad[:, 0], hess[:, 0, 0]
        settled = np.abs(g) <= 1e-10 * np.maximum(1.0, np.abs(ll))
        if settled.all():
            break
        step = np.where(h < 0, -g / np.where(h < 0, h, -1.0), np.sign(g))
        step = np.clip(np.where(settled, 0.0, step), -1.0, 1.0)
        for _ in range(30):
            trial = np.stack([np.clip(u + step, LOG_MODULUS_MIN, LOG_MODULUS_MAX), log_scale], axis=1)
            ll_new, grad_new, hess_new = lik.censored_derivatives_batch(y, own, trial, statistics)
            worse = ~(ll_new >= ll - 1e-12 * np.maximum(1.0, np.abs(ll)))
            if not worse.any():
                break
            step = np.where(worse, step / 2, step)
        u, ll, grad, hess = trial[:, 0], ll_new, grad_new, hess_new
    return u, np.abs(grad[:, 0]) <= 1e-8 * np.maximum(1.0, np.abs(ll))
