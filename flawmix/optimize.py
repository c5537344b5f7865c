"""Newton maximisation of a log-likelihood with analytic derivatives, and profile intervals.

Model-agnostic: callers pass ``derivatives(theta) -> (loglik, gradient, hessian)`` on the
full parameter vector, and optionally a linear map theta = offset + J φ that ties or fixes
parameters (a common modulus, or one parameter held for a profile).
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np
from scipy import special as _sspecial   # scipy.stats and scipy.optimize cost ~0.6 s to import

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
    if not (np.isfinite(ll) and np.all(np.isfinite(g)) and np.all(np.isfinite(H))):
        # the start overflows (far out on a profile): no maximum from here, said by -inf
        return Optimum(theta, -np.inf, np.full(J.shape[1], np.nan), np.full((J.shape[1],) * 2, np.nan), 0, False)
    gf, Hf = J.T @ g, J.T @ H @ J
    lo_t = np.full(P, -np.inf) if lower is None else np.broadcast_to(lower, (P,))
    hi_t = np.full(P, np.inf) if upper is None else np.broadcast_to(upper, (P,))
    rising, falling = (J > 0).astype(float), (J < 0).astype(float)

    def free_score(theta, gf):
        """The score with every coordinate that a bound holds (its score points outward) set to
        0: those stay where they are (the KKT conditions of the bounded maximum)."""
        at_lo, at_hi = (theta <= lo_t + 1e-12).astype(float), (theta >= hi_t - 1e-12).astype(float)
        held = ((gf > 0) & ((at_hi @ rising + at_lo @ falling) > 0)) | \
            ((gf < 0) & ((at_lo @ rising + at_hi @ falling) > 0))
        return np.where(held, 0.0, gf), held

    damping = 0.0
    it = 0
    converged = False
    for it in range(1, max_iter + 1):
        score, held = free_score(theta, gf)
        if np.max(np.abs(score)) <= score_tol:
            converged = True
            break
        A = np.where(held[:, None] | held[None, :], 0.0, -Hf) + np.diag(held.astype(float))
        scale = np.sqrt(np.maximum(np.abs(np.diag(A)), 1e-300))
        improved = False
        for _ in range(40):
            try:
                M = A + damping * np.diag(scale**2)
                L = np.linalg.cholesky(M)
                step = np.linalg.solve(L.T, np.linalg.solve(L, score))
            except np.linalg.LinAlgError:
                damping = max(1e-6, damping * 10)
                continue
            if not np.all(np.isfinite(step)):   # an overflowing point: damp, never step to nan
                damping = max(1e-6, damping * 10)
                continue
            norm = np.max(np.abs(J @ step))
            if norm > 2.0:
                step *= 2.0 / norm
            t_new = full(phi + step)
            ll_new, g_new, H_new = derivatives(t_new)
            finite = np.isfinite(ll_new) and np.all(np.isfinite(g_new)) and np.all(np.isfinite(H_new))
            if finite and ll_new >= ll - 1e-12 * max(1.0, abs(ll)):
                improved = ll_new > ll or np.max(np.abs(free_score(t_new, J.T @ g_new)[0])) < np.max(np.abs(score))
                phi, theta, ll, g, H = phi + step, t_new, ll_new, g_new, H_new
                gf, Hf = J.T @ g, J.T @ H @ J
                damping = damping / 10 if damping > 1e-8 else 0.0
                break
            damping = max(1e-6, damping * 10)
        if not improved:
            # Nothing improves at machine precision: a maximum (or a bound) is reached.
            converged = np.max(np.abs(free_score(theta, gf)[0])) <= max(score_tol, 1e-7 * max(1.0, abs(ll)))
            break
    return Optimum(theta, float(ll), gf, Hf, it, bool(converged))


BatchDerivatives = Callable[[np.ndarray, np.ndarray], tuple[np.ndarray, np.ndarray, np.ndarray]]


def newton_maximise_batch(
    derivatives: BatchDerivatives,
    theta0: np.ndarray,
    *,
    lower: np.ndarray,
    upper: np.ndarray,
    score_tol: float = 1e-10,
    max_iter: int = 200,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """:func:`newton_maximise` (without ties) of R independent problems at once.

    Every row takes the same iterates as it would alone: its own Levenberg–Marquardt damping,
    step cap, acceptance rule and stopping rule; only the derivative calls are shared.
    ``derivatives(theta (R', P), rows (R',))`` gives (loglik (R',), gradient (R', P), Hessian
    (R', P, P)) for the problems ``rows``. Returns (theta (R, P), loglik (R,), converged (R,)).
    """
    phi = np.array(theta0, dtype=float)     # unclipped iterates; theta is phi clipped to the bounds
    theta = np.clip(phi, lower, upper)
    R, P = theta.shape
    ll, g, H = derivatives(theta, np.arange(R))
    finite = _finite(ll, g, H)
    ll = np.where(finite, ll, -np.inf)
    done = ~finite
    converged = np.zeros(R, bool)
    damping = np.zeros(R)

    def free_score(theta, g):
        held = ((g > 0) & (theta >= upper - 1e-12)) | ((g < 0) & (theta <= lower + 1e-12))
        return np.where(held, 0.0, g), held

    for _ in range(max_iter):
        score, held = free_score(theta, g)
        size = np.max(np.abs(score), axis=1)
        converged |= ~done & (size <= score_tol)
        done |= converged
        a = np.flatnonzero(~done)
        if a.size == 0:
            break
        keep = ~held[a]
        A = np.where(keep[:, :, None] & keep[:, None, :], -H[a], 0.0) + np.eye(P) * (~keep)[:, None, :]
        scale2 = np.maximum(np.abs(np.diagonal(A, axis1=1, axis2=2)), 1e-300)
        pending = np.ones(a.size, bool)
        improved = np.zeros(a.size, bool)
        for _ in range(40):
            b = np.flatnonzero(pending)
            if b.size == 0:
                break
            M = A[b] + damping[a[b], None, None] * (np.eye(P) * scale2[b, None, :])
            L, definite = _cholesky(M)
            step = np.full((b.size, P), np.nan)
            if definite.any():
                Ld = L[definite]
                half = np.linalg.solve(Ld, score[a[b[definite]], :, None])
                step[definite] = np.linalg.solve(np.swapaxes(Ld, 1, 2), half)[..., 0]
            usable = np.all(np.isfinite(step), axis=1)
            unusable = b[~usable]
            damping[a[unusable]] = np.maximum(1e-6, damping[a[unusable]] * 10)
            b, step = b[usable], step[usable]
            if b.size == 0:
                continue
            step *= np.minimum(1.0, 2.0 / np.maximum(np.max(np.abs(step), axis=1, keepdims=True), 1e-300))
            rows = a[b]
            trial = np.clip(phi[rows] + step, lower, upper)
            l_t, g_t, H_t = derivatives(trial, rows)
            ok = _finite(l_t, g_t, H_t) & (l_t >= ll[rows] - 1e-12 * np.maximum(1.0, np.abs(ll[rows])))
            took = rows[ok]
            improved[b[ok]] = (l_t[ok] > ll[took]) | \
                (np.max(np.abs(free_score(trial[ok], g_t[ok])[0]), axis=1) < size[took])
            phi[took] += step[ok]
            theta[took], ll[took], g[took], H[took] = trial[ok], l_t[ok], g_t[ok], H_t[ok]
            damping[took] = np.where(damping[took] > 1e-8, damping[took] / 10, 0.0)
            damping[rows[~ok]] = np.maximum(1e-6, damping[rows[~ok]] * 10)
            pending[b[ok]] = False
        stuck = a[~improved]
        # nothing improves at machine precision: a maximum (or a bound) is reached
        converged[stuck] = np.max(np.abs(free_score(theta[stuck], g[stuck])[0]), axis=1) <= \
            np.maximum(score_tol, 1e-7 * np.maximum(1.0, np.abs(ll[stuck])))
        done[stuck] = True
    return theta, ll, converged


def _cholesky(M: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Lower Cholesky factors of a stack (R, P, P) and where each exists (R,): the same test
    as newton_maximise's (it passes matrices indefinite at rounding level, as LAPACK does)."""
    try:
        return np.linalg.cholesky(M), np.ones(M.shape[0], bool)
    except np.linalg.LinAlgError:
        L, ok = np.zeros_like(M), np.zeros(M.shape[0], bool)
        for r in range(M.shape[0]):
            try:
                L[r], ok[r] = np.linalg.cholesky(M[r]), True
            except np.linalg.LinAlgError:
                pass
        return L, ok


def _finite(ll, g, H) -> np.ndarray:
    return np.isfinite(ll) & np.all(np.isfinite(g), axis=1) & np.all(np.isfinite(H), axis=(1, 2))


def chi2_cutoff(confidence: float, df: int = 1) -> float:
    """Half the χ² quantile: the drop in log-likelihood bounding a profile interval."""
    # scipy.stats.chi2.ppf is 2·gammaincinv(df/2, p); called directly it costs 0.4 µs, not 100
    return float(_sspecial.gammaincinv(0.5 * df, confidence))


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
    drops: tuple[float, float] | None = None,
    problems: list | None = None,
) -> tuple[float, float]:
    """Profile-likelihood interval of full parameter ``index`` (e.g. a log modulus).

    Solves ll_max − max_{others} ll(θ_index = t) = drop on each side by bracketing and
    Brent's method; ``drops`` (below, above the estimate) defaults to χ²_1(confidence)/2 on
    both sides (a calibrated cut-off passes its own). A side that never falls below the cut
    within ``limits`` is returned as ±inf (the data do not bound it). A side whose root
    cannot be located (the bracket is inconsistent, the inner maximisation fails) is also
    returned as ±inf, never as a finite accident, and a line saying so is appended to
    ``problems``.
    """
    P = optimum.theta.size
    J = np.eye(P) if tie is None else np.asarray(tie, dtype=float)
    if drops is None:
        drops = (chi2_cutoff(confidence), chi2_cutoff(confidence))
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
    se = min(max(se, 1e-4), 1.0) if np.isfinite(se) else 0.1
    warm = {"theta": optimum.theta.copy()}

    def profile(t: float, cut: float) -> float:
        offset = basis * t
        start = warm["theta"] + basis * (t - warm["theta"][index])
        opt = newton_maximise(derivatives, start, tie=Jr, offset=offset, lower=lower, upper=upper,
                              score_tol=1e-8, max_iter=100)
        if np.isfinite(opt.loglik):
            warm["theta"] = opt.theta
        # a profile value can never exceed the maximum; a larger one means the start was
        # not the global maximum, and the side is treated as unlocatable below
        return opt.loglik - cut

    bounds = []
    for direction, drop in zip((-1.0, 1.0), drops):
        cut = optimum.loglik - max(float(drop), 0.0)
        bounds.append(_one_side(profile, cut, center, direction, se, limits, problems))
    return bounds[0], bounds[1]


def _one_side(profile, cut, center, direction, se, limits, problems) -> float:
    """Bracket and solve one end of a profile interval (see :func:`profile_interval`)."""
    limit = limits[0] if direction < 0 else limits[1]
    step = 2.0 * se
    prev = center
    found = None
    for _ in range(60):
        t = center + direction * step
        if (direction < 0 and t <= limit) or (direction > 0 and t >= limit):
            t = limit
        f = profile(t, cut)
        if not np.isfinite(f):
            break
        if f < 0:
            found = (prev, t)
            break
        if t == limit:
            return direction * np.inf      # the data do not bound this side
        prev = t
        step *= 1.6
    if found is None:
        if problems is not None:
            problems.append("a profile-likelihood bound could not be bracketed; it is reported as unbounded")
        return direction * np.inf
    a, b = sorted(found)
    try:
        from scipy.optimize import brentq

        return float(brentq(lambda t: profile(t, cut), a, b, xtol=1e-9, rtol=1e-12))
    except (ValueError, RuntimeError):
        # The inner maximisation found different maxima on two calls at the same point
        # (several local maxima): no trustworthy root in this bracket.
        if problems is not None:
            problems.append("a profile-likelihood bound could not be located (the profile is not "
                            "monotone there: several local maxima); it is reported as unbounded")
        return direction * np.inf


def wald_interval(optimum: Optimum, index: int, confidence: float, tie: np.ndarray | None = None):
    """Normal-theory interval from the observed information (for very large samples)."""
    P = optimum.theta.size
    J = np.eye(P) if tie is None else np.asarray(tie, dtype=float)
    try:
        cov = J @ np.linalg.inv(-optimum.hessian) @ J.T
    except np.linalg.LinAlgError:   # no curvature: the data do not bound the parameter
        return -np.inf, np.inf
    z = float(_sspecial.ndtri(0.5 + confidence / 2))   # the normal quantile
    se = float(np.sqrt(max(cov[index, index], 0.0)))
    if not np.isfinite(se):
        return -np.inf, np.inf
    return optimum.theta[index] - z * se, optimum.theta[index] + z * se
