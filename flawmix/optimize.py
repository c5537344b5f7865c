"""Newton maximisation of a log-likelihood with analytic derivatives, and profile intervals.

Model-agnostic: callers pass ``derivatives(theta) -> (loglik, gradient, hessian)`` on the
full parameter vector, and optionally a linear map theta = offset + J φ that ties or fixes
parameters (a common modulus, or one parameter held for a profile).
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np
from scipy import optimize as _sopt
from scipy import stats as _sstats

Derivatives = Callable[[np.ndarray], tuple[float, np.ndarray, np.ndarray]]


@dataclass(frozen=True)
class Optimum:
    theta: np.ndarray        # full parameter vector at the maximum
    loglik: float
    gradient: np.ndarray     # score in the free parameters
    hessian: np.ndarray      # Hessian in the free parameters
    iterations: int
    converged: bool


def newton_maximise(
    derivatives: Derivatives,
    theta0: np.ndarray,
    *,
    tie: np.ndarray | None = None,
    offset: np.ndarray | None = None,
    lower: np.ndarray | None = None,
    upper: np.ndarray | None = None,
    score_tol: float = 1e-10,
    max_iter: int = 200,
) -> Optimum:
    """Maximise with a damped (Levenberg-Marquardt) Newton iteration and a backtracking search.

    ``tie`` (P_full, P_free) and ``offset`` (P_full,) map free parameters φ to theta; by
    default every parameter is free. ``lower``/``upper`` clip the full parameters (the
    modulus bound). Convergence: max |score| <= score_tol, or no step can improve the
    log-likelihood at machine precision.
    """
    theta0 = np.asarray(theta0, dtype=float)
    P = theta0.size
    J = np.eye(P) if tie is None else np.asarray(tie, dtype=float)
    c = np.zeros(P) if offset is None else np.asarray(offset, dtype=float)
    phi = np.linalg.lstsq(J, theta0 - c, rcond=None)[0]

    def full(p):
        t = c + J @ p
        if lower is not None or upper is not None:
            t = np.clip(t, lower if lower is not None else -np.inf, upper if upper is not None else np.inf)
        return t

    theta = full(phi)
    ll, g, H = derivatives(theta)
    gf, Hf = J.T @ g, J.T @ H @ J
    damping = 0.0
    it = 0
    converged = False
    for it in range(1, max_iter + 1):
        if np.max(np.abs(gf)) <= score_tol:
            converged = True
            break
        A = -Hf
        scale = np.sqrt(np.maximum(np.abs(np.diag(A)), 1e-300))
        improved = False
        for _ in range(40):
            try:
                M = A + damping * np.diag(scale**2)
                L = np.linalg.cholesky(M)
                step = np.linalg.solve(L.T, np.linalg.solve(L, gf))
            except np.linalg.LinAlgError:
                damping = max(1e-6, damping * 10)
                continue
            norm = np.max(np.abs(J @ step))
            if norm > 2.0:
                step *= 2.0 / norm
            t_new = full(phi + step)
            ll_new, g_new, H_new = derivatives(t_new)
            if np.isfinite(ll_new) and ll_new >= ll - 1e-12 * max(1.0, abs(ll)):
                improved = ll_new > ll or np.max(np.abs(J.T @ g_new)) < np.max(np.abs(gf))
                phi, theta, ll, g, H = phi + step, t_new, ll_new, g_new, H_new
                gf, Hf = J.T @ g, J.T @ H @ J
                damping = damping / 10 if damping > 1e-8 else 0.0
                break
            damping = max(1e-6, damping * 10)
        if not improved:
            # Nothing improves at machine precision: a maximum (or a bound) is reached.
            converged = np.max(np.abs(gf)) <= max(score_tol, 1e-7 * max(1.0, abs(ll)))
            break
    return Optimum(theta, float(ll), gf, Hf, it, bool(converged))


def chi2_cutoff(confidence: float, df: int = 1) -> float:
    """Half the χ² quantile: the drop in log-likelihood bounding a profile interval."""
    return 0.5 * float(_sstats.chi2.ppf(confidence, df))


def profile_interval(
    derivatives: Derivatives,
    optimum: Optimum,
    index: int,
    confidence: float,
    *,
    tie: np.ndarray | None = None,
    lower: np.ndarray | None = None,
    upper: np.ndarray | None = None,
    limits: tuple[float, float] = (-np.inf, np.inf),
) -> tuple[float, float]:
    """Profile-likelihood interval of full parameter ``index`` (e.g. a log modulus).

    Solves ll_max − max_{others} ll(θ_index = t) = χ²_1(confidence)/2 on each side by
    bracketing and Brent's method. A side that never falls below the cut within
    ``limits`` is returned as ±inf (the data do not bound it).
    """
    P = optimum.theta.size
    J = np.eye(P) if tie is None else np.asarray(tie, dtype=float)
    cut = optimum.loglik - chi2_cutoff(confidence)
    # The fixed parameter must map to exactly one free column.
    col = np.flatnonzero(J[index])
    if col.size != 1:
        raise ValueError("profile parameter must map to a single free parameter")
    col = int(col[0])
    keep = [i for i in range(J.shape[1]) if i != col]
    Jr = J[:, keep]
    basis = J[:, col]
    center = optimum.theta[index]
    try:
        cov = np.linalg.inv(-optimum.hessian)
        se = float(np.sqrt(max(cov[col, col], 1e-12)))
    except np.linalg.LinAlgError:
        se = 0.1
    se = min(max(se, 1e-4), 1.0)
    warm = {"theta": optimum.theta.copy()}

    def profile(t: float) -> float:
        offset = basis * t
        start = warm["theta"] + basis * (t - warm["theta"][index])
        opt = newton_maximise(derivatives, start, tie=Jr, offset=offset, lower=lower, upper=upper,
                              score_tol=1e-8, max_iter=100)
        warm["theta"] = opt.theta
        return opt.loglik - cut

    bounds = []
    for direction in (-1.0, 1.0):
        warm["theta"] = optimum.theta.copy()
        limit = limits[0] if direction < 0 else limits[1]
        step = 2.0 * se
        prev = center
        found = None
        for _ in range(60):
            t = center + direction * step
            if (direction < 0 and t <= limit) or (direction > 0 and t >= limit):
                t = limit
            if profile(t) < 0:
                found = (prev, t)
                break
            if t == limit:
                break
            prev = t
            step *= 1.6
        if found is None:
            bounds.append(direction * np.inf)
            continue
        warm["theta"] = optimum.theta.copy()
        a, b = sorted(found)
        bounds.append(_sopt.brentq(profile, a, b, xtol=1e-9, rtol=1e-12))
    return bounds[0], bounds[1]


def wald_interval(optimum: Optimum, index: int, confidence: float, tie: np.ndarray | None = None):
    """Normal-theory interval from the observed information (for very large samples)."""
    P = optimum.theta.size
    J = np.eye(P) if tie is None else np.asarray(tie, dtype=float)
    cov = J @ np.linalg.inv(-optimum.hessian) @ J.T
    z = float(_sstats.norm.ppf(0.5 + confidence / 2))
    se = float(np.sqrt(max(cov[index, index], 0.0)))
    return optimum.theta[index] - z * se, optimum.theta[index] + z * se
