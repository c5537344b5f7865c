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
