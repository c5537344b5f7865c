"""Parametric-bootstrap p-values of the lot tests, all replicates at once.

Campaigns are drawn from each test's own null fit with every lot's observed design and
refitted free and tied. With every failure's origin identified (survivors allowed) and every
lot on one geometry, the log-likelihood of the lot model is a sum over populations and lots
(DOMAIN.md section 2): population j of lot l is a censored Weibull sample of its own
failures with every other specimen of that lot suspended. A test on population j then
involves only population j, in closed forms:

- free: one censored fit per lot (censored.censored_weibull_mle);
- "the same in every lot": one censored fit of the lots pooled;
- "same modulus, scale may differ": one modulus and a scale per lot
  (censored.common_modulus_censored_mle);

with the log-likelihoods from likelihood.py's censored_derivatives_batch (the k = 1 case of
the concurrent likelihood). With unidentified or ambiguous origins the refits are batched
damped-Newton ascents of the joint lot model (free lot by lot, tied in the tie's
coordinates). The statistic of the observed table comes from the general joint fit
(lots.likelihood_ratio_tests); tests/test_lot_calibration.py checks that both paths give
it the same number.
"""
from __future__ import annotations

import numpy as np

from . import likelihood as lik
from .censored import censored_weibull_mle, common_modulus_censored_mle
from .simulate import Design, simulate

DEFAULT_REPLICATES = 999            # labelled lots: closed forms, tens of milliseconds per test
DEFAULT_REPLICATES_GENERAL = 299    # unidentified or ambiguous origins: batched Newton refits
TESTS = ("same_population", "same_modulus")
ASCENT_STEPS = 20   # refits still climbing after these creep towards an infinite modulus; their LR is already large


def applies(model) -> bool:
    """True when the closed forms hold: lots on one geometry, every failure's origin known."""
    return not model.sized and all(data.certain for data in model.per_lot)


def lot_designs(model) -> list[Design]:
    """Each lot's observed design: survivors keep their stresses, and origins go unidentified
    as often as they did (ambiguous ones count as unidentified)."""
    designs = []
    for data in model.per_lot:
        uncertain = data.failed & (data.candidates.sum(-1) > 1)
        designs.append(Design(np.where(data.failed, np.inf, np.exp(data.y + model.centre)),
                              float(uncertain.sum() / max(1, data.failed.sum())) if model.k > 1 else 0.0))
    return designs


def _loglik(y, w, u, v) -> np.ndarray:
    """Censored Weibull log-likelihood of rows y, w (E, N) at u, v (E,)."""
    return lik.censored_derivatives_batch(y, w, np.stack([u, v], axis=1))[0]


def separable_statistic(groups, key: str) -> tuple[np.ndarray, np.ndarray]:
    """Likelihood-ratio statistic of one population's test from its per-lot data.

    groups: per lot (ln σ (E, N_l), failure weight of the population (E, N_l)).
    Returns (statistic (E,), usable (E,)); unusable rows (a lot without a failure of the
    population) are NaN.
    """
    usable = np.all([w.sum(axis=1) > 0 for _, w in groups], axis=0)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        free = 0.0
        for y, w in groups:
            u, v, _ = censored_weibull_mle(y, w)
            free = free + _loglik(y, w, u, v)
        if key == "same_population":
            y, w = (np.concatenate(parts, axis=1) for parts in zip(*groups))
            u, v, _ = censored_weibull_mle(y, w)
            tied = _loglik(y, w, u, v)
        elif key == "same_modulus":
            u, v, _ = common_modulus_censored_mle(groups)
            tied = sum(_loglik(y, w, u, v[:, lot]) for lot, (y, w) in enumerate(groups))
        else:
            raise ValueError(f"unknown test {key!r}")
        statistic = np.maximum(0.0, 2.0 * (free - tied))
    usable &= np.isfinite(statistic)
    return np.where(usable, statistic, np.nan), usable


def observed_groups(model, population: int) -> list[tuple[np.ndarray, np.ndarray]]:
    """The observed lots as one-row groups of :func:`separable_statistic`."""
    return [(data.y[None, :], (data.failed & data.candidates[:, population])[None, :].astype(float))
            for data in model.per_lot]


def _bootstrap_p(observed: float, df: int, replicas: np.ndarray, replicates: int) -> dict:
    """p = (1 + #{LR* ≥ LR}) / (1 + usable). Beyond every replicate the bootstrap can only say
    p < 1/(1 + usable); the tail then comes from χ² with the statistic scaled by the
    replicates' Bartlett factor df / mean LR* (which alone held the size at 5.65 ± 0.52 %,
    studies/lots_labelled_bootstrap.py), never above that bound."""
    from scipy import stats

    exceed = int(np.sum(replicas >= observed - 1e-9 * max(1.0, observed)))
    bound = 1.0 / (1 + replicas.size)
    factor = float(np.mean(replicas) / df) if replicas.size else np.nan
    out = {"p_value_chi2": float(stats.chi2.sf(observed, df)), "bartlett_factor": factor,
           "reference": f"parametric bootstrap of the null fit, {replicas.size} of {replicates} replicates usable"}
    if exceed or not np.isfinite(factor) or factor <= 0:
        out["p_value"] = float((1 + exceed) * bound)
    else:
        out["p_value"] = float(min(bound, stats.chi2.sf(observed / factor, df)))
        out["reference"] += "; beyond every replicate, so the tail is the Bartlett-corrected χ²"
    return out


class _Replicas:
    """R replicate campaigns of some lots (centred), with their log-likelihood, gradient and
    Hessian for rows of them: the sum over those lots of each lot's concurrent likelihood in
    its own copies (lots.LotModel.block_derivatives, batched). ``columns`` (per lot) place a
    lot's 2k parameters in theta; ``lower``/``upper`` bound theta."""

    def __init__(self, per_lot, columns, lower, upper):
        self.per_lot, self.columns = per_lot, columns
        self.lower, self.upper = lower, upper
        self.n_params = lower.size

    @classmethod
    def joint(cls, model, batches) -> "_Replicas":
        lower, upper = model.bounds()
        return cls([lik.Data(b.y - model.centre, b.failed, b.candidates) for b in batches],
                   [model.columns(lot) for lot in range(model.n_lots)], lower, upper)

    def lot(self, lot: int) -> "_Replicas":
        """One lot alone (its own 2k parameters): the free lot model separates by lot."""
        cols = self.columns[lot]
        return _Replicas([self.per_lot[lot]], [np.arange(cols.size)], self.lower[cols], self.upper[cols])

    def derivatives(self, rows: np.ndarray, theta: np.ndarray):
        P = self.n_params
        if len(self.per_lot) == 1:
            data = self.per_lot[0]
            return lik.concurrent_derivatives_batch(lik.Data(data.y[rows], data.failed[rows], data.candidates[rows]),
                                                    theta)
        ll, grad, hess = np.zeros(rows.size), np.zeros((rows.size, P)), np.zeros((rows.size, P, P))
        for data, cols in zip(self.per_lot, self.columns):
            sub = lik.Data(data.y[rows], data.failed[rows], data.candidates[rows])
            value, g, h = lik.concurrent_derivatives_batch(sub, theta[:, cols])
            ll += value
            grad[:, cols] += g
            hess[:, cols[:, None], cols] += h
        return ll, grad, hess


def _ascend(replicas: _Replicas, start: np.ndarray, tie: np.ndarray | None, steps: int = ASCENT_STEPS,
            tol: float = 1e-7) -> np.ndarray:
    """Batched damped Newton ascent of every replicate from ``start`` (P,), free (tie None) or
    in the tied coordinates θ = J φ; returns the log-likelihoods reached (R,)."""
    lower, upper = replicas.lower, replicas.upper
    J = np.eye(replicas.n_params) if tie is None else tie
    R = replicas.per_lot[0].y.shape[0]
    phi = np.tile(np.linalg.lstsq(J, start, rcond=None)[0], (R, 1))
    rows = np.arange(R)
    theta = np.clip(phi @ J.T, lower, upper)
    ll, g, H = replicas.derivatives(rows, theta)
    done = ~np.isfinite(ll)
    for _ in range(steps):
        gf = g @ J
        # a coordinate at its bound (a modulus at the search limit) whose score points outward
        # stays there: no step and no score for it
        at_lower = (theta <= lower + 1e-12) @ (J > 0) > 0
        at_upper = (theta >= upper - 1e-12) @ (J > 0) > 0
        blocked = (at_lower & (gf < 0)) | (at_upper & (gf > 0))
        gf = np.where(blocked, 0.0, gf)
        active = ~done & (np.max(np.abs(gf), axis=1) > tol)
        if not active.any():
            break
        a = np.flatnonzero(active)
        curvature = -(J.T @ H[a] @ J)
        keep = ~blocked[a]
        curvature = curvature * (keep[:, :, None] & keep[:, None, :]) + np.eye(J.shape[1]) * ~keep[:, :, None]
        w, V = np.linalg.eigh(curvature)
        w = np.maximum(np.abs(w), 1e-8 + 1e-6 * np.abs(w).max(axis=1, keepdims=True))
        # V diag(1/w) Vᵀ g: the Newton step with every curvature made negative and bounded away from 0
        step = (V @ ((V.transpose(0, 2, 1) @ gf[a][..., None]) / w[..., None]))[..., 0]
        step *= np.minimum(1.0, 2.0 / np.maximum(np.max(np.abs(step), axis=1, keepdims=True), 1e-300))
        floor = ll[a] - 1e-10 * np.maximum(1.0, np.abs(ll[a]))
        scale = np.ones(a.size)
        accepted = np.zeros(a.size, bool)
        new = (ll[a].copy(), g[a].copy(), H[a].copy(), phi[a].copy())
        for _ in range(30):
            trying = np.flatnonzero(~accepted)
            if trying.size == 0:
                break
            trial_phi = phi[a[trying]] + scale[trying, None] * step[trying]
            trial = np.clip(trial_phi @ J.T, lower, upper)
            l_t, g_t, H_t = replicas.derivatives(a[trying], trial)
            good = np.isfinite(l_t) & (l_t >= floor[trying])
            idx = trying[good]
            new[0][idx], new[1][idx], new[2][idx], new[3][idx] = l_t[good], g_t[good], H_t[good], trial_phi[good]
            accepted[idx] = True
            scale[trying[~good]] /= 2
        previous = ll[a]
        ll[a], g[a], H[a], phi[a] = new
        theta[a] = np.clip(phi[a] @ J.T, lower, upper)
        # no ascent left that matters for a likelihood ratio (a maximum, a modulus at its bound,
        # or a likelihood still creeping towards an infinite modulus)
        done[a[~accepted | (ll[a] - previous <= 1e-9)]] = True
    return ll


def general_statistics(model, batches, null: np.ndarray, tie: np.ndarray,
                       free_starts=()) -> tuple[np.ndarray, np.ndarray]:
    """Likelihood-ratio statistics (R,) of replicate campaigns on the general path: the tied
    batched ascent started at the null fit they were drawn from, the free one the best of
    that start and ``free_starts`` (with unidentified origins the free likelihood can have
    several maxima). Rows where a population has no possible failure in some lot are NaN
    (usable False)."""
    usable = np.ones(batches[0].y.shape[0], bool)
    for b in batches:
        usable &= np.all((b.candidates & b.failed[..., None]).any(axis=1), axis=1)
    replicas = _Replicas.joint(model, batches)
    with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
        tied = _ascend(replicas, null, tie)
        # free: lot by lot (the free model separates), the best start of each lot
        free = sum(np.maximum.reduce([_ascend(replicas.lot(lot), start[cols], None) for start in (null, *free_starts)])
                   for lot, cols in enumerate(replicas.columns))
        statistic = np.maximum(0.0, 2.0 * (np.maximum(free, tied) - tied))
    usable &= np.isfinite(statistic)
    return np.where(usable, statistic, np.nan), usable


def bootstrap_p_values(model, tests: list[dict], replicates: int = DEFAULT_REPLICATES, seed=0,
                       keys=TESTS, bar=None, free_theta: np.ndarray | None = None) -> list[dict]:
    """Replace each test's χ² p-value by its parametric-bootstrap p-value (lots on one geometry).

    Campaigns are drawn from the test's own null fit (``test["theta"]``) with each lot's
    observed design, and p = (1 + #{LR* ≥ LR}) / (1 + usable replicates) (see
    :func:`_bootstrap_p`). ``free_theta``, the observed free fit, is a second start of the
    replicates' free refits on the general path. Adds ``p_value_chi2``, ``bartlett_factor``
    and ``reference`` to each test named in ``keys``."""
    if model.sized:
        raise ValueError("the bootstrap of lots on several geometries is not available")
    labelled = applies(model)
    rng = np.random.default_rng(seed)
    designs = lot_designs(model)
    step = 0
    for j in range(model.k):
        for key in TESTS:
            if key not in keys:
                continue
            test = tests[j][key]
            null = test["theta"]
            batches = [simulate(lik.Model("concurrent", model.k), np.exp(null[model.columns(lot)][:model.k]),
                                np.exp(null[model.columns(lot)][model.k:] + model.centre), None, design,
                                replicates, rng)
                       for lot, design in enumerate(designs)]
            if labelled:
                groups = [(b.y - model.centre, (b.failed & b.candidates[..., j]).astype(float)) for b in batches]
                statistic, usable = separable_statistic(groups, key)
            else:
                tie = model.tie_same_population(j) if key == "same_population" else model.tie_same_modulus(j)
                statistic, usable = general_statistics(model, batches, null, tie,
                                                       () if free_theta is None else (free_theta,))
            test.update(_bootstrap_p(test["statistic"], test["df"], statistic[usable], replicates))
            step += 1
            if bar is not None:
                bar.step(step)
    return tests
