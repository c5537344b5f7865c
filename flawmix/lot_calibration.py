"""Parametric-bootstrap p-values of the lot tests, batched in closed form for labelled lots.

With every failure's origin identified (survivors allowed) and every lot on one geometry,
the log-likelihood of the lot model is a sum over populations and lots (DOMAIN.md
section 2): population j of lot l is a censored Weibull sample of its own failures with
every other specimen of that lot suspended. A test on population j then involves only
population j:

- free: one censored fit per lot (censored.censored_weibull_mle);
- "the same in every lot": one censored fit of the lots pooled;
- "same modulus, scale may differ": one modulus and a scale per lot
  (censored.common_modulus_censored_mle);

and the statistic is twice the difference of those log-likelihoods (likelihood.py's
censored_derivatives_batch, the k = 1 case of the concurrent likelihood). The statistic of
the observed table still comes from the general joint fit (lots.likelihood_ratio_tests);
tests/test_lots.py checks that both give the same number. All bootstrap replicates are
refitted at once, so 999 replicates cost a few tens of milliseconds per test.
"""
from __future__ import annotations

import numpy as np

from . import likelihood as lik
from .censored import censored_weibull_mle, common_modulus_censored_mle
from .simulate import Design, simulate

DEFAULT_REPLICATES = 999
TESTS = ("same_population", "same_modulus")


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


def bootstrap_p_values(model, tests: list[dict], replicates: int = DEFAULT_REPLICATES, seed=0,
                       keys=TESTS, bar=None) -> list[dict]:
    """Replace each test's χ² p-value by its parametric-bootstrap p-value (labelled lots).

    Campaigns are drawn from the test's own null fit (``test["theta"]``) with each lot's
    observed design, and p = (1 + #{LR* ≥ LR}) / (1 + usable replicates) (see
    :func:`_bootstrap_p`). Adds ``p_value_chi2``, ``bartlett_factor`` and ``reference`` to
    each test named in ``keys``."""
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
            groups = [(b.y - model.centre, (b.failed & b.candidates[..., j]).astype(float)) for b in batches]
            statistic, usable = separable_statistic(groups, key)
            test.update(_bootstrap_p(test["statistic"], test["df"], statistic[usable], replicates))
            step += 1
            if bar is not None:
                bar.step(step)
    return tests
