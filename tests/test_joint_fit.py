"""Joint fits of concurrent populations with unidentified and ambiguous origins."""
import numpy as np
import pandas as pd
import pytest
from scipy import optimize, stats

import flawmix as fm
from flawmix import likelihood as lik

from conftest import simulate_campaign


def _brute_force_negloglik(strength, failed, candidates):
    """The DOMAIN.md section 2 likelihood written out directly with scipy.stats."""
    k = candidates.shape[1]

    def nll(theta):
        m, scale = np.exp(theta[:k]), np.exp(theta[k:])
        logh = np.stack([stats.weibull_min.logpdf(strength, m[j], scale=scale[j])
                         - stats.weibull_min.logsf(strength, m[j], scale=scale[j]) for j in range(k)], axis=1)
        logS = np.stack([stats.weibull_min.logsf(strength, m[j], scale=scale[j]) for j in range(k)], axis=1).sum(axis=1)
        with np.errstate(divide="ignore"):
            hazard_sum = np.log(np.where(candidates, np.exp(logh), 0.0).sum(axis=1))
        return -(np.where(failed, hazard_sum, 0.0) + logS).sum()

    return nll


def test_joint_fit_not_beaten_by_multistart_generic_optimiser():
    # Reference: scipy.optimize.minimize (Nelder-Mead then BFGS) from 12 random starts.
    rng = np.random.default_rng(11)
    for trial in range(6):
        frame = simulate_campaign(rng, n=40, unknown=0.25, survive_at=470 if trial % 2 else None)
        sp = fm.read_specimens(frame)
        r = fm.fit(sp, intervals="none")
        nll = _brute_force_negloglik(sp.strength, sp.failed, sp.candidates)
        best = np.inf
        for _ in range(12):
            x0 = np.concatenate([np.log(rng.uniform(2, 30, 2)), np.log(rng.uniform(300, 500, 2))])
            res = optimize.minimize(nll, x0, method="Nelder-Mead", options={"maxiter": 4000, "xatol": 1e-8, "fatol": 1e-10})
            res = optimize.minimize(nll, res.x, method="BFGS")
            best = min(best, res.fun)
        assert r.log_likelihood >= -best - 1e-7
        assert r.log_likelihood == pytest.approx(-nll(np.log(np.concatenate([r.moduli, r.characteristic_strengths]))), abs=1e-9)


def test_labelled_joint_fit_equals_separate_censored_fits():
    # DOMAIN.md section 2: with every origin identified the likelihood splits; each
    # population is a censored fit with other origins suspended (scipy CensoredData reference).
    rng = np.random.default_rng(5)
    frame = simulate_campaign(rng, n=60, survive_at=455)
    r = fm.fit(frame, intervals="none")
    for p in r.populations:
        mine = (frame["origin"] == p.name).to_numpy()
        data = stats.CensoredData(uncensored=frame["strength"][mine], right=frame["strength"][~mine])
        c, _, s = stats.weibull_min.fit(data, floc=0)
        assert p.modulus == pytest.approx(c, rel=1e-5)
        assert p.characteristic_strength == pytest.approx(s, rel=1e-5)


def test_score_is_zero_at_the_estimate():
    rng = np.random.default_rng(8)
    sp = fm.read_specimens(simulate_campaign(rng, n=40, unknown=0.25))
    r = fm.fit(sp, intervals="none")
    assert r.converged
    assert r.max_score <= 1e-10


def test_analytic_derivatives_match_finite_differences():
    rng = np.random.default_rng(3)
    frame = simulate_campaign(rng, n=30, unknown=0.3, survive_at=460)
    frame.loc[3, "origin"] = "pore|machining"
    sp = fm.read_specimens(frame)
    data = lik.Data.from_specimens(sp)
    theta = np.array([np.log(5.0), np.log(14.0), np.log(410.0), np.log(430.0)])
    ll, g, H = lik.concurrent_derivatives(data, theta)
    f = lambda t: float(lik.concurrent_loglik(data, t[:2], t[2:]))
    assert ll == pytest.approx(f(theta), rel=1e-12)
    h = 1e-6
    for i in range(4):
        e = np.zeros(4); e[i] = h
        assert g[i] == pytest.approx((f(theta + e) - f(theta - e)) / (2 * h), rel=1e-5, abs=1e-5)
        gp = lik.concurrent_derivatives(data, theta + e)[1]
        gm = lik.concurrent_derivatives(data, theta - e)[1]
        np.testing.assert_allclose(H[i], (gp - gm) / (2 * h), rtol=1e-5, atol=1e-4)


def test_common_modulus_equals_pooled_complete_fit():
    # DOMAIN.md section 2: one common m on the labelled concurrent model gives the pooled
    # complete-sample m, and Σ σθj^(−m) = σθ,pooled^(−m). Pooled reference: scipy.
    rng = np.random.default_rng(21)
    frame = simulate_campaign(rng, n=50)
    r = fm.fit(frame, common_modulus=True, intervals="none")
    c, _, s = stats.weibull_min.fit(frame["strength"], floc=0)
    assert r.populations[0].modulus == pytest.approx(c, rel=1e-5)
    assert r.populations[1].modulus == pytest.approx(c, rel=1e-5)
    m = r.populations[0].modulus
    assert np.sum(r.characteristic_strengths ** -m) == pytest.approx(s ** -m, rel=1e-4)


def test_common_modulus_test_rejects_clearly_different_moduli_and_not_equal_ones():
    rng = np.random.default_rng(4)
    diff = fm.fit(simulate_campaign(rng, n=120, pops=(("a", 4.0, 400.0), ("b", 25.0, 400.0))), intervals="none")
    assert diff.tests[0].p_value < 1e-3
    pvalues = [fm.fit(simulate_campaign(rng, n=60, pops=(("a", 10.0, 400.0), ("b", 10.0, 420.0))),
                      intervals="none").tests[0].p_value for _ in range(40)]
    # under the null the p-values are roughly uniform: most exceed 5 %
    assert np.mean(np.array(pvalues) < 0.05) < 0.2


def test_population_with_one_failure_at_the_top_warns_and_reports_the_bound():
    frame = pd.DataFrame({"strength": [300, 320, 340, 360, 380, 400.0],
                          "origin": ["a", "a", "a", "a", "a", "b"]})
    with pytest.warns(fm.FlawmixWarning, match="unbounded"):
        r = fm.fit(frame, intervals="none")
    assert r.population("b").at_bound


def test_population_without_failures_is_an_error():
    frame = pd.DataFrame({"strength": [300, 320, 340.0], "origin": ["a", "a", "a"]})
    with pytest.raises(fm.FlawmixError, match="no failures"):
        fm.fit(fm.read_specimens(frame, {"a": {"labels": ["a"]}, "b": {"labels": ["b"]}}))
