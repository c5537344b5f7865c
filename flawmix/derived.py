"""Calibrated profile-likelihood intervals of derived quantities of a concurrent fit.

ψ = ln H(σ0) (the failure probability at a stress, P_f = 1 − e^−H) or ψ = ln σ_p (the stress
at failure probability p). The parameters are rewritten as φ = (ln m_j, hazard-share logits
α, ψ), so that holding ψ leaves an unconstrained maximum over 2k − 1 coordinates; the
bootstrap campaigns kept by the fit's Calibration give the signed roots of ψ at their truth
and so the cut-offs, exactly as for the parameters (calibration.py), and the observed profile
is cut there. Derivation of the map in DEVELOPERS.md ("Derived-quantity profiles").
"""
from __future__ import annotations

import numpy as np

from . import likelihood as lik
from .calibration import ASCENT_STEPS, CALIBRATED_METHOD, SIGNED_ROOT_CLIP, signed_root_drops

HAZARD, QUANTILE = "hazard", "quantile"
METHOD = CALIBRATED_METHOD   # the parameters' label: the same method
CHI2_METHOD = "profile (χ² cut-off)"
# The default cut of the derived intervals. Measured with studies/interval_coverage.py
# (400 sets per cell, seed 2026, same data sets): the χ² cut covered 87.5–92.5 % (mean
# 89.2 %, no cell more than 2 SE below 90), the bootstrap-calibrated cut 84.5–91.5 % (mean
# 87.7 %, four cells short), because the bootstrap signed roots of ψ come out narrower than
# the root's spread across data sets; χ² is also ~15× cheaper (no held ascents).
DEFAULT_CUT = "chi2"
FALLBACK_METHOD = "bootstrap-t (the calibrated profile was not available)"
MIN_ROOTS = 50               # fewer usable bootstrap roots than this calibrate nothing
MAX_CELLS = 250_000          # replicate rows × specimens × populations per batched ascent (larger
                             # batches ran slower: ten queries at N = 300 took 1.4 s batched, 0.8 s one by one)


def _others(ref: np.ndarray, k: int) -> np.ndarray:
    """(R, k − 1) the non-reference populations of each row, in increasing order."""
    order = np.argsort(np.arange(k)[None, :] == np.asarray(ref)[:, None], axis=1, kind="stable")
    return order[:, :k - 1]


def log_stress_at(theta: np.ndarray, log_hazard: np.ndarray) -> np.ndarray:
    """(R,) x with ln Σ_j exp(m_j (x − v_j)) = log_hazard[r] for rows theta (R, 2k)."""
    k = theta.shape[1] // 2
    m, v = np.exp(theta[:, :k]), theta[:, k:]
    h = np.asarray(log_hazard, dtype=float)
    # each population alone reaches the target at v + h/m; the largest of these lies above the
    # root, and Newton on the convex increasing ln H then falls monotonically to it
    x = np.max(v + h[:, None] / m, axis=1)
    for _ in range(100):
        z = m * (x[:, None] - v)
        top = z.max(axis=1, keepdims=True)
        w = np.exp(z - top)
        total = w.sum(axis=1)
        step = (top[:, 0] + np.log(total) - h) / ((w * m).sum(axis=1) / total)
        x = x - step
        if not np.any(np.abs(step) > 1e-13):
            break
    return x


def psi_of(theta: np.ndarray, kind: str, const: np.ndarray) -> np.ndarray:
    """ψ of parameter rows theta (R, 2k): ln H at x0 = const (hazard) or x at ln H = const."""
    k = theta.shape[1] // 2
    if kind == QUANTILE:
        return log_stress_at(theta, const)
    z = np.exp(theta[:, :k]) * (np.asarray(const)[:, None] - theta[:, k:])
    top = z.max(axis=1)
    return top + np.log(np.exp(z - top[:, None]).sum(axis=1))


def to_phi(theta: np.ndarray, kind: str, const: np.ndarray, ref: np.ndarray | None = None):
    """φ rows (R, 2k) = [u, α (non-reference populations), ψ] of theta rows (R, 2k), and the
    reference population of each row (the largest hazard share at theta unless given)."""
    R, P = theta.shape
    k = P // 2
    const = np.asarray(const, dtype=float)
    psi = psi_of(theta, kind, const)
    h, x0 = (psi, const) if kind == HAZARD else (const, psi)
    z = np.exp(theta[:, :k]) * (x0[:, None] - theta[:, k:])
    log_share = z - h[:, None]
    ref = np.argmax(log_share, axis=1) if ref is None else np.asarray(ref)
    rows = np.arange(R)
    alpha = np.take_along_axis(log_share, _others(ref, k), axis=1) - log_share[rows, ref][:, None]
    return np.concatenate([theta[:, :k], alpha, psi[:, None]], axis=1), ref


def to_theta(phi: np.ndarray, kind: str, const: np.ndarray, ref: np.ndarray, jacobian: bool = False):
    """theta rows (R, 2k) of φ rows; with ``jacobian`` also (J (R, 2k, 2k) = ∂θ/∂φ, and the
    pieces of the second derivatives of v: c (R, k), s_o (R, k − 1), D (R, k, k − 1), m).

    v_j = x0 − (h + L_j)/m_j with L_j = ln s_j, s = softmax(α) (α_ref = 0)."""
    R, P = phi.shape
    k = P // 2
    u, alpha, psi = phi[:, :k], phi[:, k:P - 1], phi[:, P - 1]
    const = np.asarray(const, dtype=float)
    h, x0 = (psi, const) if kind == HAZARD else (const, psi)
    others = _others(ref, k)
    full = np.zeros((R, k))
    np.put_along_axis(full, others, alpha, axis=1)
    top = full.max(axis=1, keepdims=True)
    log_share = full - top - np.log(np.exp(full - top).sum(axis=1, keepdims=True))
    m = np.exp(u)
    c = (h[:, None] + log_share) / m
    theta = np.concatenate([u, x0[:, None] - c], axis=1)
    if not jacobian:
        return theta
    s_o = np.take_along_axis(np.exp(log_share), others, axis=1)                    # (R, k − 1)
    delta = (np.arange(k)[None, :, None] == others[:, None, :]).astype(float)      # (R, k, k − 1)
    D = -(delta - s_o[:, None, :]) / m[:, :, None]                                 # ∂v_j/∂α_a
    J = np.zeros((R, P, P))
    idx = np.arange(k)
    J[:, idx, idx] = 1.0
    J[:, k + idx, idx] = c                                                         # ∂v_j/∂u_j
    J[:, k:, k:P - 1] = D
    J[:, k:, P - 1] = -1.0 / m if kind == HAZARD else 1.0
    return theta, (J, c, s_o, D, m)


def derivatives(data: lik.Data, phi: np.ndarray, kind: str, const, ref, in_theta=None):
    """Log-likelihood (R,), gradient (R, 2k) and Hessian (R, 2k, 2k) in φ: the chain rule
    Jᵀ H_θ J + Σ_j (∂ℓ/∂v_j) ∇²v_j on the one concurrent likelihood (``in_theta``: its
    (ll, gradient, Hessian) in θ at these rows, when already known)."""
    R, P = phi.shape
    k = P // 2
    theta, (J, c, s_o, D, m) = to_theta(phi, kind, const, ref, jacobian=True)
    ll, g, H = lik.concurrent_derivatives_batch(data, theta) if in_theta is None else in_theta
    grad = np.einsum("ri,rij->rj", g, J)
    hess = np.einsum("rij,rik,rkl->rjl", J, H, J)
    gv = g[:, k:]
    idx = np.arange(k)
    hess[:, idx, idx] -= gv * c                                                    # ∂²v_j/∂u_j² = −c_j
    cross = -gv[:, :, None] * D                                                    # ∂²v_j/∂u_j∂α_a = −D_ja
    hess[:, :k, k:P - 1] += cross
    hess[:, k:P - 1, :k] += np.transpose(cross, (0, 2, 1))
    # ∂²v_j/∂α∂α = (diag s − s sᵀ)/m_j, the same matrix for every j
    weight = (gv / m).sum(axis=1)
    hess[:, k:P - 1, k:P - 1] += weight[:, None, None] * (
        np.eye(k - 1)[None] * s_o[:, :, None] - s_o[:, :, None] * s_o[:, None, :])
    if kind == HAZARD:                                                             # ∂²v_j/∂u_j∂h = 1/m_j
        hess[:, idx, P - 1] += gv / m
        hess[:, P - 1, idx] += gv / m
    return ll, grad, hess


def _subset(data: lik.Data, rows) -> lik.Data:
    return lik.Data(data.y[rows], data.failed[rows], data.candidates[rows])


def held_ascent(data: lik.Data, phi: np.ndarray, kind: str, const, ref, steps: int = ASCENT_STEPS,
                tol: float = 1e-6, in_theta=None):
    """Batched Newton ascent over every φ coordinate but ψ (the last, held), for R data sets
    (data with leading dim R) from rows phi (R, 2k). Returns (phi, loglik) (R,).

    The same safeguards as calibration._ascend: an eigenvalue floor on the negated Hessian,
    steps of at most 2 in any coordinate, halving until the likelihood does not fall, and a
    row that gains less than 1e-7 stops (a maximum, or a modulus creeping to its bound).
    ``in_theta``: the likelihood's derivatives in θ at the start, when already known."""
    R, P = phi.shape
    k = P // 2
    const, ref = np.asarray(const, dtype=float), np.asarray(ref)
    lo = np.full(P, -np.inf)
    hi = np.full(P, np.inf)
    lo[:k], hi[:k] = lik.LOG_MODULUS_MIN, lik.LOG_MODULUS_MAX
    phi = phi.copy()
    ll, g, H = derivatives(data, phi, kind, const, ref, in_theta)
    done = np.zeros(R, bool)
    free = P - 1
    for _ in range(steps):
        gf = g[:, :free]
        active = ~done & np.isfinite(ll) & np.all(np.isfinite(gf), axis=1) & (np.max(np.abs(gf), axis=1) > tol)
        if not active.any():
            break
        a = np.flatnonzero(active)
        Hf = -H[a][:, :free, :free]
        good = np.all(np.isfinite(Hf), axis=(1, 2))
        done[a[~good]] = True
        a, Hf = a[good], Hf[good]
        if a.size == 0:
            break
        w, V = np.linalg.eigh(Hf)
        w = np.maximum(np.abs(w), 1e-8 + 1e-6 * np.abs(w).max(axis=1, keepdims=True))
        step_f = np.einsum("rij,rj,rkj,rk->ri", V, 1 / w, V, gf[a])
        step_f *= np.minimum(1.0, 2.0 / np.maximum(np.max(np.abs(step_f), axis=1, keepdims=True), 1e-300))
        step = np.zeros((a.size, P))
        step[:, :free] = step_f
        sub = data if a.size == R else _subset(data, a)
        p_a, ll_a, c_a, r_a = phi[a], ll[a], const[a], ref[a]
        floor = ll_a - 1e-10 * np.maximum(1.0, np.abs(ll_a))
        # the full step with derivatives at once: most rows take it and need no second pass
        full = np.clip(p_a + step, lo, hi)
        with np.errstate(over="ignore", invalid="ignore"):
            ll_new, g_new, H_new = derivatives(sub, full, kind, c_a, r_a)
        accepted = np.isfinite(ll_new) & (ll_new >= floor)
        new = np.where(accepted[:, None], full, p_a)
        scale = np.where(accepted, 1.0, 0.5)
        for _ in range(29):   # halving, on the likelihood alone, for the rows that fell
            pending = np.flatnonzero(~accepted)
            if pending.size == 0:
                break
            trial = np.clip(p_a[pending] + scale[pending, None] * step[pending], lo, hi)
            theta = to_theta(trial, kind, c_a[pending], r_a[pending])
            with np.errstate(over="ignore", invalid="ignore"):
                ll_try = lik.concurrent_loglik(_subset(sub, pending), theta[:, :k], theta[:, k:])
            take = np.isfinite(ll_try) & (ll_try >= floor[pending])
            new[pending[take]] = trial[take]
            accepted[pending[take]] = True
            scale[pending[~take]] /= 2
        halved = np.flatnonzero(accepted & (scale < 1.0))
        if halved.size:
            with np.errstate(over="ignore", invalid="ignore"):
                ll_new[halved], g_new[halved], H_new[halved] = derivatives(
                    _subset(sub, halved), new[halved], kind, c_a[halved], r_a[halved])
        moved = np.flatnonzero(accepted)
        rows = a[moved]
        phi[rows] = new[moved]
        gain = ll_new[moved] - ll[rows]
        ll[rows], g[rows], H[rows] = ll_new[moved], g_new[moved], H_new[moved]
        done[rows[gain <= 1e-7]] = True
        done[a[~accepted]] = True
    return phi, ll


def bootstrap_roots(calibration, kind: str, const: np.ndarray) -> np.ndarray:
    """(S, R) signed roots r* = sign(ψ̂* − ψ_true)·√(2[ℓ*_free − ℓ*(ψ_true)]) of the kept
    campaigns for S queries (``const``: centred ln σ0 for hazard, ln(−ln(1 − p)) for quantile),
    NaN where a campaign gives none; clipped like the parameters' roots."""
    data = calibration.data
    R, N, k = data.candidates.shape
    shift = np.concatenate([np.zeros(k), np.full(k, calibration.centre)])
    truth = calibration.theta_hat - shift
    refits = calibration.theta - shift
    with np.errstate(over="ignore", invalid="ignore"):   # each campaign's free maximum (centred scale)
        ll_free = lik.concurrent_loglik(data, refits[:, :k], refits[:, k:])
    ll_free = np.where(np.isfinite(ll_free), ll_free, np.nan)
    const = np.asarray(const, dtype=float)
    S = const.size
    phi_true, ref = to_phi(np.broadcast_to(truth, (S, 2 * k)).copy(), kind, const)
    roots = np.full((S, R), np.nan)
    # every held ascent starts at the truth, whatever the query: its θ-derivatives once per fit
    at_truth = calibration.__dict__.get("_at_truth")
    if at_truth is None:
        with np.errstate(over="ignore", invalid="ignore"):
            at_truth = lik.concurrent_derivatives_batch(data, np.broadcast_to(truth, (R, 2 * k)).copy())
        object.__setattr__(calibration, "_at_truth", at_truth)   # frozen; this cache is derived
    chunk = max(1, MAX_CELLS // max(1, R * N * k))
    for start in range(0, S, chunk):
        q = np.arange(start, min(S, start + chunk))
        rows = np.repeat(q, R)
        tiled = data if q.size == 1 else lik.Data(np.tile(data.y, (q.size, 1)), np.tile(data.failed, (q.size, 1)),
                                                  np.tile(data.candidates, (q.size, 1, 1)))
        with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
            start_values = tuple(np.tile(a, (q.size,) + (1,) * (a.ndim - 1)) for a in at_truth)
            _, ll_held = held_ascent(tiled, phi_true[rows], kind, const[rows], ref[rows], in_theta=start_values)
            psi_refit = psi_of(np.tile(refits, (q.size, 1)), kind, const[rows])
        statistic = np.maximum(2.0 * (np.tile(ll_free, q.size) - ll_held), 0.0)
        r = np.sign(psi_refit - phi_true[rows, -1]) * np.sqrt(statistic)
        roots[q] = np.where(np.isfinite(r), r, np.nan).reshape(q.size, R)
    return np.clip(roots, -SIGNED_ROOT_CLIP, SIGNED_ROOT_CLIP)


def _centred(observed: lik.Data, centre: float, rows: int) -> lik.Data:
    y = observed.y - centre
    return lik.Data(np.broadcast_to(y, (rows,) + y.shape), np.broadcast_to(observed.failed, (rows,) + y.shape),
                    np.broadcast_to(observed.candidates, (rows,) + observed.candidates.shape))


def profile_ends(observed: lik.Data, theta_hat: np.ndarray, centre: float, kind: str, const: np.ndarray,
                 drops: np.ndarray, problems: list | None = None):
    """(S, 2) centred ψ end points where ℓ_p(ψ) = ℓ̂ − drop (drops (S, 2): below, above) on
    the one observed data set (uncentred log strengths; theta_hat (2k,) centred at its
    maximum). One batched Newton solve for all 2S end points (endpoints._solve), then the
    bracketing search of optimize.profile_interval for any that does not settle; a side the
    data do not bound is ±inf, with a line in ``problems``."""
    from .endpoints import _solve
    from .optimize import Optimum, profile_interval

    const = np.asarray(const, dtype=float)
    S, P = const.size, theta_hat.size
    k = P // 2
    phi_hat, ref = to_phi(np.broadcast_to(theta_hat, (S, P)).copy(), kind, const)
    ll_hat, g_hat, H_hat = derivatives(_centred(observed, centre, S), phi_hat, kind, const, ref)
    E = 2 * S
    rows = np.repeat(np.arange(S), 2)
    direction = np.tile([-1.0, 1.0], S)
    drop = np.asarray(drops, dtype=float).reshape(-1)
    batch = _centred(observed, centre, E)
    deriv = lambda phi: derivatives(batch, phi, kind, const[rows], ref[rows])
    with np.errstate(all="ignore"):
        phi_end, ok = _solve(deriv, phi_hat[rows], H_hat[rows], np.full(E, P - 1), direction,
                             ll_hat[rows] - drop, drop)
    ok &= np.all((phi_end[:, :k] >= lik.LOG_MODULUS_MIN) & (phi_end[:, :k] <= lik.LOG_MODULUS_MAX), axis=1)
    ends = np.where(ok, phi_end[:, -1], np.nan).reshape(S, 2)
    lower = np.full(P, -np.inf)
    upper = np.full(P, np.inf)
    lower[:k], upper[:k] = lik.LOG_MODULUS_MIN, lik.LOG_MODULUS_MAX
    for s in np.flatnonzero(~ok.reshape(S, 2).all(axis=1)):
        one = _centred(observed, centre, 1)
        # a modulus at its bound at the maximum stays there (held: Newton cannot settle a
        # coordinate whose score does not vanish, and the search crawled: 1.4 s against 0.2 s
        # for one such set, whose ends moved by at most 4e-5 in P_f)
        pinned = np.zeros(P, bool)
        pinned[:k] = (phi_hat[s, :k] >= lik.LOG_MODULUS_MAX - 1e-9) | (phi_hat[s, :k] <= lik.LOG_MODULUS_MIN + 1e-9)

        def single(phi, s=s, pinned=pinned):
            phi = np.where(pinned, phi_hat[s], phi)
            ll, g, H = derivatives(one, phi[None, :], kind, const[s:s + 1], ref[s:s + 1])
            return float(ll[0]), *_pin(g[0], H[0], pinned)
        optimum = Optimum(phi_hat[s], float(ll_hat[s]), *_pin(g_hat[s], H_hat[s], pinned), 0, True)
        # beyond these the answer is a failure probability of 0 or 1, or a stress e^20 away
        psi = phi_hat[s, -1]
        limits = (psi - 40.0, max(psi, 0.0) + 4.0) if kind == HAZARD else (psi - 20.0, psi + 20.0)
        with np.errstate(all="ignore"):
            found = profile_interval(single, optimum, P - 1, 0.9, lower=lower, upper=upper, limits=limits,
                                     drops=tuple(drops[s]), problems=problems)
        for side in (0, 1):
            if not ok[2 * s + side]:
                ends[s, side] = found[side]
    return ends


def _pin(gradient, hessian, pinned):
    """Gradient and Hessian with the ``pinned`` coordinates made inert (zero score, unit
    curvature), so a Newton search leaves them where they are."""
    gradient, hessian = gradient.copy(), hessian.copy()
    gradient[pinned] = 0.0
    hessian[pinned, :] = 0.0
    hessian[:, pinned] = 0.0
    hessian[pinned, pinned] = -1.0
    return gradient, hessian


def calibrated_intervals(calibration, observed: lik.Data, kind: str, const_uncentred: np.ndarray,
                         confidence: float, cut: str = "calibrated"):
    """Calibrated profile intervals of ψ for S queries. ``const_uncentred``: ln σ0 (hazard)
    or ln(−ln(1 − p)) (quantile). Returns (low (S,), high (S,), usable (S,) bool, problems):
    ψ on the uncentred scale (ln H, or ln σ_p); ``usable`` False where too few bootstrap
    roots exist (the caller falls back to bootstrap-t there). ``cut="chi2"``: the same
    profile cut at χ²₁(confidence)/2 on both sides, no bootstrap (for the coverage study)."""
    k = calibration.theta_hat.size // 2
    centre = calibration.centre
    const = np.asarray(const_uncentred, dtype=float) - (centre if kind == HAZARD else 0.0)
    S = const.size
    low, high = np.full(S, np.nan), np.full(S, np.nan)
    problems: list[str] = []
    if cut == "chi2":
        from .optimize import chi2_cutoff

        usable = np.ones(S, bool)
        drops = np.full((S, 2), chi2_cutoff(confidence))
    else:
        if calibration.data is None:
            return low, high, np.zeros(S, bool), problems
        roots = bootstrap_roots(calibration, kind, const)
        usable = np.isfinite(roots).sum(axis=1) >= MIN_ROOTS
        if not usable.any():
            return low, high, usable, problems
        drops = signed_root_drops(roots[usable].T, confidence)
    shift = np.concatenate([np.zeros(k), np.full(k, centre)])
    ends = profile_ends(observed, calibration.theta_hat - shift, centre, kind, const[usable], drops, problems)
    offset = centre if kind == QUANTILE else 0.0
    low[usable], high[usable] = ends[:, 0] + offset, ends[:, 1] + offset
    return low, high, usable, problems


def interval_frame(result, point: np.ndarray, values: np.ndarray, kind: str, index_name: str,
                   cut: str = DEFAULT_CUT):
    """The frame a calibrated fit's ``failure_probability`` (``kind`` hazard, values: stresses)
    or ``strength_at`` (quantile, values: probabilities) returns: estimate, low, high and
    ``interval_method`` per value. The profile of ψ cut at ``cut`` (``chi2``, the default, or
    ``calibrated``: the bootstrap drops where its roots exist, bootstrap-t from the same refits
    where they do not); a side the data do not bound is at its
    limit (P_f 0 or 1, a stress 0 or inf), with a warning."""
    import warnings

    import pandas as pd

    from .calibration import failure_probability_interval, strength_interval
    from .errors import FlawmixWarning

    cal, cov = result.extras["calibration"], result.extras.get("covariance")
    observed = cal.observed
    with np.errstate(divide="ignore", invalid="ignore"):
        const = np.log(values) if kind == HAZARD else np.log(-np.log1p(-values))
    low, high = np.full(values.size, np.nan), np.full(values.size, np.nan)
    usable, problems = np.zeros(values.size, bool), []
    asked = np.isfinite(const)   # a stress of 0 or infinity has P_f 0 or 1 under every parameter
    if observed is not None and asked.any():
        try:
            low[asked], high[asked], usable[asked], problems = calibrated_intervals(
                cal, observed, kind, const[asked], result.confidence, cut=cut)
        except (np.linalg.LinAlgError, ValueError, FloatingPointError) as error:
            problems = [f"the calibrated profile of a derived quantity failed ({error}); bootstrap-t is used"]
    unbounded = np.isinf(low) | np.isinf(high)
    with np.errstate(over="ignore"):
        low, high = (-np.expm1(-np.exp(low)), -np.expm1(-np.exp(high))) if kind == HAZARD \
            else (np.exp(low), np.exp(high))
    fallback = failure_probability_interval if kind == HAZARD else strength_interval
    for i in np.flatnonzero(~usable & asked & (cov is not None)):   # no covariance: no bootstrap-t either
        low[i], high[i] = fallback(cal, cov, float(values[i]), result.confidence)
    low[~asked], high[~asked] = point[~asked], point[~asked]
    if np.any(unbounded & usable):
        problems.append("the data do not bound one side of a derived-quantity interval; it is reported "
                        "at its limit (a failure probability of 0 or 1, a stress of 0 or unbounded)")
    for line in dict.fromkeys(problems):
        warnings.warn(line, FlawmixWarning, stacklevel=4)
    method = np.where(usable, CHI2_METHOD if cut == "chi2" else METHOD, np.where(asked, FALLBACK_METHOD, np.where(
        np.isnan(values), "none", "none (the same for every parameter value)")))
    frame = pd.DataFrame({"estimate": point, "low": low, "high": high, "interval_method": method},
                         index=pd.Index(values))
    frame.index.name = index_name
    return frame
