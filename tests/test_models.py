"""Exclusive and partially concurrent models: likelihood checks and parameter recovery."""
import numpy as np
import pandas as pd
import pytest
from scipy import integrate, stats

import flawmix as fm
from flawmix import likelihood as lik
from flawmix.simulate import Design, simulate

M, S = np.array([5.0, 18.0]), np.array([420.0, 460.0])


def _origin_density(model, theta, stress, j):
    """Density of failing at `stress` from population j, read off the model's likelihood."""
    data = lik.Data(np.log(np.atleast_1d(stress)), np.array([True]), np.array([[i == j for i in range(2)]]))
    return float(np.exp(model.pointwise(data, theta))[0])


def _survival(model, theta, stress):
    data = lik.Data(np.log(np.atleast_1d(stress)), np.array([False]), np.zeros((1, 2), bool))
    return float(np.exp(model.pointwise(data, theta))[0])


@pytest.mark.parametrize("model, extra", [
    (lik.Model("concurrent", 2), []),
    (lik.Model("exclusive", 2), [np.log(0.3 / 0.7)]),
    (lik.Model("partial", 2, 0), [np.log(0.4 / 0.6)]),
    (lik.Model("partial", 2, 1), [np.log(0.8 / 0.2)]),
])
def test_failure_densities_integrate_to_the_failure_probability(model, extra):
    # Brute force (scipy.integrate.quad): ∫_0^σ Σ_j density_j = 1 − S(σ), so the per-origin
    # terms of the likelihood and its survivor term describe one distribution.
    theta = np.concatenate([np.log(M), np.log(S), extra])
    for sigma in (250.0, 400.0, 470.0):
        total = sum(integrate.quad(lambda x: _origin_density(model, theta, x, j), 1e-6, sigma,
                                   limit=200, epsabs=1e-12)[0] for j in range(2))
        assert total == pytest.approx(1.0 - _survival(model, theta, sigma), abs=1e-8)


def test_likelihood_terms_match_scipy_weibull_formulas():
    # DOMAIN.md section 2, written with scipy.stats.weibull_min: exclusive failure from A is
    # p_A f_A, partial failure from A is p f_A S_B, from B is f_B[(1 − p) + p S_A].
    a = stats.weibull_min(M[0], scale=S[0])
    b = stats.weibull_min(M[1], scale=S[1])
    p = 0.3
    x = 430.0
    ex = lik.Model("exclusive", 2)
    th = np.concatenate([np.log(M), np.log(S), [np.log(p / (1 - p))]])
    assert _origin_density(ex, th, x, 0) == pytest.approx(p * a.pdf(x), rel=1e-12)
    assert _origin_density(ex, th, x, 1) == pytest.approx((1 - p) * b.pdf(x), rel=1e-12)
    assert _survival(ex, th, x) == pytest.approx(p * a.sf(x) + (1 - p) * b.sf(x), rel=1e-12)
    pa = lik.Model("partial", 2, 0)
    assert _origin_density(pa, th, x, 0) == pytest.approx(p * a.pdf(x) * b.sf(x), rel=1e-12)
    assert _origin_density(pa, th, x, 1) == pytest.approx(b.pdf(x) * ((1 - p) + p * a.sf(x)), rel=1e-12)
    assert _survival(pa, th, x) == pytest.approx(b.sf(x) * ((1 - p) + p * a.sf(x)), rel=1e-12)


def test_partial_with_fraction_one_is_concurrent():
    rng = np.random.default_rng(2)
    data = simulate(lik.Model("concurrent", 2), M, S, None, Design.simple(30, 0.3), 1, rng)
    th = np.concatenate([np.log(M), np.log(S)])
    conc = lik.Model("concurrent", 2).loglik(data, th)
    part = lik.Model("partial", 2, 0).loglik(data, np.concatenate([th, [40.0]]))
    assert part == pytest.approx(conc, abs=1e-9)


def _frame_from(data, names=("a", "b")):
    origin = np.where(data.candidates.sum(-1) > 1, "?", np.array(names)[data.candidates.argmax(-1)])
    origin = np.where(data.failed, origin, "")
    return pd.DataFrame({"strength": np.exp(data.y), "origin": origin,
                         "status": np.where(data.failed, "failed", "survived")})


@pytest.mark.parametrize("name, partial_index, fraction", [("exclusive", 0, 0.35), ("partial", 0, 0.4)])
def test_models_recover_known_parameters(name, partial_index, fraction):
    rng = np.random.default_rng(17)
    model = lik.Model(name, 2, partial_index)
    fr = np.array([fraction, 1 - fraction]) if name == "exclusive" else np.array([fraction, 1.0])
    data = simulate(model, M, S, fr, Design.simple(800, 0.1), 1, rng)
    r = fm.fit(_frame_from(lik.Data(data.y[0], data.failed[0], data.candidates[0])), model=name,
               intervals="wald", confidence=0.999)
    for j, p in enumerate(r.populations):
        assert p.modulus_interval[0] < M[j] < p.modulus_interval[1]
        assert p.strength_interval[0] < S[j] < p.strength_interval[1]
    j = partial_index
    assert r.populations[j].fraction_interval[0] < fr[j] < r.populations[j].fraction_interval[1]
    if name == "partial":
        assert r.partial_population == "a"


def test_exclusive_and_partial_mle_not_beaten_by_generic_optimiser():
    from scipy import optimize
    rng = np.random.default_rng(5)
    data = simulate(lik.Model("exclusive", 2), M, S, [0.4, 0.6], Design.simple(50, 0.3), 1, rng)
    frame = _frame_from(lik.Data(data.y[0], data.failed[0], data.candidates[0]))
    sp = fm.read_specimens(frame)
    d = lik.Data.from_specimens(sp)
    for name in ("exclusive", "partial"):
        r = fm.fit(sp, model=name, intervals="none")
        best = np.inf
        for idx in (0, 1) if name == "partial" else (0,):
            model = lik.Model(name, 2, idx)
            nll = lambda t: -float(model.loglik(d, t)) if np.all(np.abs(t[4:]) < 30) else np.inf
            for _ in range(8):
                x0 = np.concatenate([np.log(rng.uniform(2, 30, 2)), np.log(rng.uniform(350, 500, 2)), rng.normal(0, 1, 1)])
                res = optimize.minimize(nll, x0, method="Nelder-Mead", options={"maxiter": 6000, "xatol": 1e-9, "fatol": 1e-11})
                best = min(best, res.fun)
        assert r.log_likelihood >= -best - 1e-6


def test_mixture_collapse_is_reported_in_plain_words():
    # one labelled failure from 'b' sitting amid 'a' failures: the mixture can put population b
    # onto that single strength with an ever larger modulus (unbounded likelihood)
    s = np.array([300, 320, 340, 350, 360, 370, 380, 400, 410, 420.0])
    origin = ["a"] * 4 + ["b"] + ["a"] * 5
    with pytest.warns(fm.FlawmixWarning):
        r = fm.fit(pd.DataFrame({"strength": s, "origin": origin}), model="exclusive", intervals="none")
    assert r.population("b").at_bound
    assert any("mixture likelihood is unbounded" in w and "not meaningful" in w for w in r.warnings)


@pytest.mark.parametrize("k", [2, 3, 4])
def test_partial_derivatives_equal_central_differences(k):
    # exact gradient and Hessian of the partial likelihood (survivors, unidentified origins,
    # each population in turn the partial one) against the five-point stencil of
    # numerical_derivatives, and the Hessian against differences of the exact gradient
    rng = np.random.default_rng(k)
    moduli, scales = np.array([5.0, 10.0, 15.0, 8.0][:k]), np.array([1.0, 1.05, 0.95, 1.1][:k])
    design = Design(np.where(rng.random(40) < 0.3, 0.85, np.inf), 0.3)   # some bars stop unbroken at 0.85
    sims = simulate(lik.Model("partial", k, 0), moduli, scales, [0.6] + [1.0] * (k - 1), design, 1, rng)
    data = lik.Data(sims.y[0], sims.failed[0], sims.candidates[0])
    assert (~data.failed).any() and (data.candidates[data.failed].sum(axis=1) > 1).any()
    for a in range(k):
        theta = np.concatenate([np.log(moduli) + 0.1 * rng.standard_normal(k), 0.05 * rng.standard_normal(k),
                                [rng.normal(0.5, 1.0)]])
        ll, g, H = lik.partial_derivatives(data, theta, a)
        ln, gn, Hn = lik.numerical_derivatives(lik.Model("partial", k, a), data, theta)
        assert ll == pytest.approx(ln, rel=1e-13)
        np.testing.assert_allclose(g, gn, rtol=0, atol=1e-9 * np.abs(gn).max())
        np.testing.assert_allclose(H, Hn, rtol=0, atol=1e-6 * np.abs(Hn).max())
        step = 1e-6 * np.eye(theta.size)
        Hg = np.array([(lik.partial_derivatives(data, theta + e, a)[1] - lik.partial_derivatives(data, theta - e, a)[1])
                       / 2e-6 for e in step])
        np.testing.assert_allclose(H, Hg, rtol=0, atol=1e-8 * np.abs(H).max())


def test_partial_derivatives_of_a_batch_equal_those_of_each_data_set():
    # the batched form (replicate campaigns, one parameter set each) row by row equals the
    # one-data-set call, which numerical_derivatives checks above
    rng = np.random.default_rng(9)
    k = 3
    moduli, scales = np.array([5.0, 10.0, 15.0]), np.array([1.0, 1.05, 0.95])
    design = Design(np.where(rng.random(30) < 0.3, 0.85, np.inf), 0.3)
    sims = simulate(lik.Model("partial", k, 1), moduli, scales, [1.0, 0.6, 1.0], design, 6, rng)
    theta = np.concatenate([np.log(moduli) + 0.1 * rng.standard_normal((6, k)), 0.05 * rng.standard_normal((6, k)),
                            rng.normal(0.5, 1.0, (6, 1))], axis=1)
    for a in range(k):
        ll, g, H = lik.partial_derivatives_batch(sims, theta, a)
        for r in range(6):
            one = lik.partial_derivatives(lik.Data(sims.y[r], sims.failed[r], sims.candidates[r]), theta[r], a)
            assert ll[r] == pytest.approx(one[0], rel=1e-13)
            np.testing.assert_allclose(g[r], one[1], rtol=1e-12, atol=1e-12)
            np.testing.assert_allclose(H[r], one[2], rtol=1e-12, atol=1e-12)


def test_partial_likelihood_stays_exact_when_the_partial_population_is_far_past_its_scale():
    # The survival of the others used to be the total cumulative hazard less H_A: with H_A of
    # 1e20 only its rounding error was left (tens of log units a specimen), which fits climbed
    # on. Reference: scipy.stats' Weibull log-density and log-survival, population by population.
    s = np.array([300.0, 320.0, 350.0, 380.0, 400.0])
    failed = np.array([True, True, True, True, False])
    cand = np.array([[False, True], [False, True], [True, True], [False, True], [False, False]])
    data = lik.Data(np.log(s), failed, cand)
    m_a, s_a, m_b, s_b, p = 200.0, 250.0, 8.0, 420.0, 0.3      # (300/250)^200 ≈ 7e15, H_A ≥ 7e15
    theta = np.array([np.log(m_a), np.log(m_b), np.log(s_a), np.log(s_b), np.log(p / (1 - p))])
    got = lik.Model("partial", 2, 0).pointwise(data, theta)
    logS_a, logS_b = stats.weibull_min.logsf(s, m_a, scale=s_a), stats.weibull_min.logsf(s, m_b, scale=s_b)
    logf_a, logf_b = stats.weibull_min.logpdf(s, m_a, scale=s_a), stats.weibull_min.logpdf(s, m_b, scale=s_b)
    mix = np.logaddexp(np.log(1 - p), np.log(p) + logS_a)                  # ln[(1 − p) + p S_A]
    from_b = logf_b + mix                                                 # f_B [(1 − p) + p S_A]
    from_a = np.log(p) + logf_a + logS_b                                  # p f_A S_B
    expected = np.where(~failed, logS_b + mix, np.where(cand[:, 0], np.logaddexp(from_a, from_b), from_b))
    np.testing.assert_allclose(got, expected, rtol=1e-12, atol=1e-9)
