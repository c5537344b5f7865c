"""Every profile-likelihood interval end point of a concurrent fit in one batched Newton solve.

An end point of parameter i is a θ with ll(θ) = ll_max − drop and ∂ll/∂θ_l = 0 for every
l ≠ i (the others at their conditional maximum): P equations in P unknowns, solved by Newton
for all 2P end points at once from the quadratic approximation, on the one likelihood
(:func:`likelihood.concurrent_derivatives_batch`). With every origin identified the
likelihood separates by population (DOMAIN.md section 2: ln h_j + ln S_j summed over j), so an
end point of population j is a two-parameter problem on j's own censored data, the other
populations' failures counting as suspensions. An end point that does not settle is left to
the bracketing search of :func:`optimize.profile_interval` (returned as not solved).
"""
from __future__ import annotations

import numpy as np

from . import likelihood as lik

MAX_ITERATIONS = 40


def _separable_derivatives(data: lik.Data, populations: np.ndarray, modulus_rows: np.ndarray):
    """Derivatives for end points ``populations[e]`` of labelled data: that population's
    failures alone, every other specimen suspended (k = 1); and a projection putting each
    modulus end point's σθ at its closed-form conditional maximum (censored.py's
    σθ(m) = (Σ_all σ^m / r)^(1/m)), so those rows are Newton on the profile itself."""
    own = (data.candidates[:, populations].T & data.failed).astype(float)      # (E, N)
    y = np.broadcast_to(data.y, own.shape)
    statistics = lik.censored_statistics(y, own)
    top = float(data.y.max())
    x = data.y - top
    log_failures = np.log(statistics[0][modulus_rows])

    def derivatives(theta):
        return lik.censored_derivatives_batch(y, own, theta, statistics)

    def project(theta):
        m = np.exp(theta[modulus_rows, 0])
        with np.errstate(over="ignore", divide="ignore", invalid="ignore"):
            total = np.exp(m[:, None] * x).sum(axis=1)
            theta[modulus_rows, 1] = top + (np.log(total) - log_failures) / m
        return theta
    return derivatives, project


def _joint_derivatives(data: lik.Data, rows: int):
    """Derivatives of the whole concurrent likelihood, the one data set shared by every row."""
    batch = lik.Data(np.broadcast_to(data.y, (rows,) + data.y.shape),
                     np.broadcast_to(data.failed, (rows,) + data.failed.shape),
                     np.broadcast_to(data.candidates, (rows,) + data.candidates.shape))
    return lambda theta: lik.concurrent_derivatives_batch(batch, theta)


def profile_end_points(data: lik.Data, theta_hat: np.ndarray, hessian: np.ndarray, indices, drops,
                       lower: np.ndarray, upper: np.ndarray):
    """Lower and upper profile end points of each full parameter in ``indices``.

    data: one concurrent data set (no leading dims, no geometries); theta_hat (2k,) the
    maximum and ``hessian`` (2k, 2k) the Hessian there; drops: (below, above) fall in
    log-likelihood, or one such row per entry of ``indices``; lower/upper (2k,): bounds no parameter of an end point may pass.
    Returns (ends (len(indices), 2), solved (len(indices), 2) bool).
    """
    indices = np.asarray(indices, dtype=int)
    k = data.k
    separable = data.certain
    ends = np.full((indices.size, 2), np.nan)
    solved = np.zeros((indices.size, 2), bool)
    # one row per end point: parameter, side
    rows_index = np.repeat(indices, 2)
    direction = np.tile([-1.0, 1.0], indices.size)
    drops = np.asarray(drops, dtype=float)
    # one (below, above) pair for every parameter, or a pair per parameter in ``indices``
    drop = drops.reshape(-1) if drops.ndim == 2 else np.tile(drops, indices.size)
    if separable:
        population = rows_index % k
        local_index = (rows_index >= k).astype(int)                       # 0: modulus, 1: scale
        derivatives, project = _separable_derivatives(data, population, local_index == 0)
        columns = np.stack([population, k + population], axis=1)         # (E, 2) into theta
    else:
        derivatives, project = _joint_derivatives(data, rows_index.size), None
        columns = np.tile(np.arange(2 * k), (rows_index.size, 1))
        local_index = rows_index
    theta0 = theta_hat[columns]                                            # (E, P)
    hess0 = hessian[columns[:, :, None], columns[:, None, :]]              # (E, P, P)
    with np.errstate(all="ignore"):   # rows that overflow far from the maximum end as not solved
        ll_hat, _, _ = derivatives(theta0)
        theta, ok = _solve(derivatives, theta0, hess0, local_index, direction, ll_hat - drop, drop, project)
    low, high = lower[columns], upper[columns]
    ok &= np.all((theta >= low) & (theta <= high), axis=1)
    ends.reshape(-1)[:] = theta[np.arange(theta.shape[0]), local_index]
    solved.reshape(-1)[:] = ok
    return ends, solved


def _quadratic_start(theta_hat, hess, index, direction, drop):
    """End points of the quadratic approximation: Δθ = ±√(2 drop / Σ_ii) Σ_{·i}, Σ = (−H)⁻¹."""
    try:
        cov = np.linalg.inv(-hess)
    except np.linalg.LinAlgError:
        return None
    rows = np.arange(theta_hat.shape[0])
    column = cov[rows, :, index]                                           # (E, P)
    var = column[rows, index]
    with np.errstate(invalid="ignore", divide="ignore"):
        scale = np.sqrt(2.0 * drop / var)
    return theta_hat + (direction * scale)[:, None] * column


def _solve(derivatives, theta_hat, hess_hat, index, direction, target, drop, project=None):
    """Newton on F = [ll − target at row i, ∂ll/∂θ_l elsewhere] for every end point at once.

    Every row is evaluated each iteration (one call, no bookkeeping of subsets); a settled
    row stays where it settled; ``project(theta)``, if given, puts nuisance parameters at a
    known conditional maximum after every step. Returns (theta (E, P), solved (E,) bool)."""
    E, P = theta_hat.shape
    rows = np.arange(E)
    theta = _quadratic_start(theta_hat, hess_hat, index, direction, drop)
    if theta is None:
        return theta_hat, np.zeros(E, bool)
    centre = theta_hat[rows, index]
    done = np.zeros(E, bool)
    failed = ~np.all(np.isfinite(theta), axis=1)
    theta[failed] = theta_hat[failed]
    if project is not None:
        theta = project(theta)
    hess = hess_hat
    for _ in range(MAX_ITERATIONS):
        ll, grad, hess = derivatives(theta)
        residual = grad.copy()
        residual[rows, index] = ll - target
        jac = hess.copy()
        jac[rows, index, :] = grad
        try:
            step = -_solve_linear(jac, residual)
        except np.linalg.LinAlgError:
            break
        largest = np.abs(step).max(axis=1)
        done |= (largest <= 1e-11) & (np.abs(residual).max(axis=1) <= 1e-10 * np.maximum(1.0, np.abs(ll)))
        failed |= ~np.isfinite(largest) | ~np.isfinite(ll)
        if np.all(done | failed):
            break
        step *= np.minimum(1.0, 0.5 / np.where(largest > 0, largest, 1.0))[:, None]
        # never cross to the other side of the estimate (that is the other end point): go at
        # most half way back to it
        toward = -direction * step[rows, index]
        limit = 0.5 * np.abs(theta[rows, index] - centre)
        step *= np.where(toward > limit, limit / np.where(toward > 0, toward, 1.0), 1.0)[:, None]
        step[done | failed] = 0.0
        theta += step
        if project is not None:
            theta = project(theta)
    return theta, done & ~failed & _is_profile_maximum(hess, theta, index)


def _solve_linear(matrix: np.ndarray, vector: np.ndarray) -> np.ndarray:
    """x with matrix @ x = vector for stacks (E, P, P), (E, P); 2 x 2 systems by Cramer's rule
    (np.linalg.solve's per-call overhead dominates for so small a system)."""
    if matrix.shape[-1] != 2:
        return np.linalg.solve(matrix, vector[..., None])[..., 0]
    a, b, c, d = matrix[:, 0, 0], matrix[:, 0, 1], matrix[:, 1, 0], matrix[:, 1, 1]
    with np.errstate(divide="ignore", invalid="ignore"):
        inverse_det = 1.0 / (a * d - b * c)
    out = np.empty_like(vector)
    out[:, 0] = (d * vector[:, 0] - b * vector[:, 1]) * inverse_det
    out[:, 1] = (a * vector[:, 1] - c * vector[:, 0]) * inverse_det
    return out


def _is_profile_maximum(hess, theta, index) -> np.ndarray:
    """True where the other parameters sit at a local maximum (−H without row/column i is
    positive definite; H from the last Newton iterate, a step of < 1e-11 away), i.e. the
    point lies on the profile and not on a saddle."""
    E, P = theta.shape
    if P == 2:
        other = 1 - index
        return (hess[np.arange(E), other, other] < 0) & np.all(np.isfinite(theta), axis=1)
    keep = np.ones((E, P), bool)
    keep[np.arange(E), index] = False
    others = -hess[keep[:, :, None] & keep[:, None, :]].reshape(E, P - 1, P - 1)
    finite = np.all(np.isfinite(theta), axis=1) & np.all(np.isfinite(others), axis=(1, 2))
    positive = np.zeros(E, bool)
    if finite.any():   # a row that overflowed has no eigenvalues (eigvalsh would raise)
        positive[finite] = np.all(np.linalg.eigvalsh(others[finite]) > 0, axis=1)
    return positive


def batched_profile_intervals(data: lik.Data, optimum, confidence: float, lower, upper, drops=None,
                              limits=None, problems: list | None = None) -> dict:
    """{full parameter index: (lower end, upper end)} of a concurrent fit (no tie, no
    geometries). End points the batched solve does not settle are found by
    :func:`optimize.profile_interval` on that population's own two-parameter likelihood
    when origins are labelled (the same profile, up to a constant); with unidentified origins
    they are left out, for the caller's bracketing search on the whole likelihood.
    ``drops``: (below, above) for every parameter, or (2k, 2) one pair per parameter (a
    calibrated cut-off); ``limits(index)`` gives each parameter's (low, high) search limits."""
    from .optimize import Optimum, chi2_cutoff, profile_interval

    P, k = optimum.theta.size, data.k
    if drops is None:
        drops = (chi2_cutoff(confidence), chi2_cutoff(confidence))
    drops = np.asarray(drops, dtype=float)
    per_parameter = drops if drops.ndim == 2 else np.tile(drops, (P, 1))
    if P != 2 * k or not np.all(np.isfinite(optimum.hessian)):
        return {}
    ends, solved = profile_end_points(data, optimum.theta, optimum.hessian, np.arange(P), drops, lower, upper)
    out = {i: (float(ends[i, 0]), float(ends[i, 1])) for i in range(P) if solved[i].all()}
    if not data.certain:
        return out
    for i in sorted(set(range(P)) - set(out)):
        j = i % k
        own = lik.Data(data.y, data.failed & data.candidates[:, j], np.ones((data.y.size, 1), bool))
        columns = [j, k + j]
        theta = optimum.theta[columns]
        ll, grad, hess = lik.concurrent_derivatives(own, theta)
        alone = Optimum(theta, ll, grad, hess, 0, optimum.converged)
        out[i] = profile_interval(lambda t: lik.concurrent_derivatives(own, t), alone, int(i >= k), confidence,
                                  lower=lower[columns], upper=upper[columns], drops=tuple(per_parameter[i]),
                                  limits=limits(i) if limits else (-np.inf, np.inf), problems=problems)
    return out
