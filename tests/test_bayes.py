"""Bayesian fits: agreement with exact posteriors, with the MLE, reproducibility, diagnostics."""
import json
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest
from scipy import special

import flawmix as fm
from flawmix.bayes import fit_bayes
from flawmix.pivots import complete_sample_pivots

from conftest import DATA, simulate_campaign


def _grid_posterior_cdf(strength, failed=None, n=1000):
    """Exact marginal posterior CDFs of ln m and ln σθ of one censored Weibull population under
    the prior flat in (ln m, ln σθ) for m >= 0.05 (the sampler's bound), by brute-force
    summation on a grid (scipy.special.logsumexp): (u grid, CDF of ln m, v grid, CDF of ln σθ).
    ``failed`` None: a complete sample (its posterior is narrow: the grid spans 1 in ln σθ
    about the strengths). With few failures the posterior reaches far, low m with σθ many
    times the strengths tested, so the grid does too (its edges hold < 1e-5)."""
    y = np.log(strength)
    if failed is None:
        failed = np.ones(y.size, dtype=bool)
        u, v = np.linspace(0.0, np.log(40.0), n), np.linspace(y.mean() - 1.0, y.mean() + 1.0, n)
    else:
        u, v = np.linspace(np.log(0.05), np.log(80.0), n), np.linspace(y.min() - 1.0, y.max() + 25.0, n)
    logpost = np.empty((n, n))
    for i, ui in enumerate(u):           # a row at a time: (n, N), not (n, n, N)
        z = np.exp(ui) * (y - v[:, None])
        logpost[i] = (np.where(failed, ui + z, 0.0) - np.exp(z)).sum(-1)
    cdfs = []
    for axis in (1, 0):
        marg = special.logsumexp(logpost, axis=axis)
        w = np.exp(marg - marg.max())
        cdfs.append((np.cumsum(w) - 0.5 * w) / w.sum())    # midpoint: no half-cell shift
    return u, cdfs[0], v, cdfs[1]


def _assert_matches_exact(draws, grid, cdf, ess, levels=(0.05, 0.5, 0.95)):
    """Sample quantiles of ``draws`` read on the exact CDF lie within 4 Monte Carlo standard
    errors, 4 √(p(1 − p)/ESS), of their levels p (ESS: the run's smallest bulk ESS)."""
    levels = np.asarray(levels)
    got = np.interp(np.quantile(draws, levels), grid, cdf)
    assert np.all(np.abs(got - levels) <= 4 * np.sqrt(levels * (1 - levels) / ess)), (got, levels, ess)


def test_sampler_matches_exact_posterior_with_reference_prior():
    rng = np.random.default_rng(41)
    s = 350 * rng.weibull(9, 12)
    r = fit_bayes(fm.read_specimens(pd.DataFrame({"strength": s})), reference_prior=True, loo=False, seed=1)
    u, cdf_u, v, cdf_v = _grid_posterior_cdf(s)
    _assert_matches_exact(np.log(r.draws.moduli[:, 0]), u, cdf_u, r.extras["diagnostics"]["ess_bulk_min"])
    _assert_matches_exact(np.log(r.draws.scales[:, 0]), v, cdf_v, r.extras["diagnostics"]["ess_bulk_min"])


def test_posterior_median_approaches_mle_for_large_samples():
    rng = np.random.default_rng(42)
    frame = simulate_campaign(rng, n=1500, unknown=0.2)
    sp = fm.read_specimens(frame)
    mle = fm.fit(sp, intervals="none")
    bay = fit_bayes(sp, loo=False, seed=2)
    np.testing.assert_allclose(bay.moduli, mle.moduli, rtol=0.03)
    np.testing.assert_allclose(bay.characteristic_strengths, mle.characteristic_strengths, rtol=0.003)


def test_same_seed_same_draws_and_diagnostics_reported():
    rng = np.random.default_rng(43)
    sp = fm.read_specimens(simulate_campaign(rng, n=40, unknown=0.25))
    a = fm.fit(sp, method="bayes", seed=7)
    b = fm.fit(sp, method="bayes", seed=7)
    np.testing.assert_array_equal(a.draws.moduli, b.draws.moduli)
    d = a.to_dict()
    assert d["method"] == "bayes"
    diag = d["diagnostics"]
    assert diag["r_hat_max"] <= 1.01 and diag["ess_bulk_min"] >= 1000
    assert set(diag) == {"r_hat_max", "ess_bulk_min", "ess_tail_min"}
    assert len(d["priors"]) == 2 and "default" in d["priors"][0]["modulus"]
    for p in a.populations:
        assert p.modulus_interval[0] < p.modulus < p.modulus_interval[1]


def test_short_run_warns_that_targets_were_missed():
    rng = np.random.default_rng(44)
    sp = fm.read_specimens(simulate_campaign(rng, n=30))
    with pytest.warns(fm.FlawmixWarning, match="did not reach R-hat"):
        r = fit_bayes(sp, max_steps=500, target_ess=1e6, loo=False)
    assert not r.converged


def test_user_prior_pulls_the_estimate_and_is_recorded():
    rng = np.random.default_rng(45)
    sp = fm.read_specimens(simulate_campaign(rng, n=12))
    tight = {"pore": {"modulus": [19.0, 21.0]}}
    r = fit_bayes(sp, priors=tight, loo=False)
    assert 18.5 < r.population("pore").modulus < 21.5
    described = {d["population"]: d for d in r.priors}
    assert "(user)" in described["pore"]["modulus"] and "(default)" in described["machining"]["modulus"]
    with pytest.raises(fm.FlawmixError, match="unknown population"):
        fit_bayes(sp, priors={"nope": {"modulus": [1, 2]}})


def test_derived_quantities_have_credible_intervals():
    rng = np.random.default_rng(46)
    sp = fm.read_specimens(simulate_campaign(rng, n=40))
    r = fm.fit(sp, method="bayes", seed=1)
    pf = r.failure_probability([350.0, 420.0])
    assert (pf["low"] < pf["estimate"]).all() and (pf["estimate"] < pf["high"]).all()
    st = r.strength_at([0.1])
    # consistency: the failure probability at the median strength-at-10 % is about 10 %
    assert float(r.failure_probability(st["estimate"].iloc[0])["estimate"].iloc[0]) == pytest.approx(0.1, abs=0.02)
    shares = r.failure_share_intervals([300.0])
    assert shares["estimate"].sum() == pytest.approx(1.0, abs=0.02)


def test_cli_bayes_json(tmp_path):
    rng = np.random.default_rng(49)
    path = tmp_path / "bars.csv"
    simulate_campaign(rng, n=30, unknown=0.2).to_csv(path, index=False)
    proc = subprocess.run([sys.executable, "-m", "flawmix", "fit", str(path), "--method", "bayes", "--seed", "3",
                           "--json"], capture_output=True, text=True)
    assert proc.returncode == 0, proc.stderr
    d = json.loads(proc.stdout)
    assert d["method"] == "bayes" and set(d["diagnostics"]) == {"r_hat_max", "ess_bulk_min", "ess_tail_min"}
    assert all(p["interval_method"].startswith("credible") for p in d["populations"])


@pytest.mark.slow
def test_reference_prior_credible_intervals_have_exact_coverage():
    # DOMAIN.md section 3 [mem]: with the right-Haar prior 1/(σθ m) on complete data, 90 %
    # equal-tailed credible intervals cover the truth in 90 % of repeated samples, with an
    # average width close to that of the pivotal bounds.
    # (300 replicates with this seed gave 84 % for σθ; an exact grid posterior gave 85 % on the
    # same data sets and 90 % over 2 x 1000 others: the first 300 are an unlucky draw, so the
    # study uses 600 replicates)
    rng = np.random.default_rng(47)
    n, reps, m_true, s_true = 10, 600, 8.0, 400.0
    cover_m = cover_s = 0
    width_ratio = []
    piv = complete_sample_pivots(n)
    for i in range(reps):
        s = s_true * rng.weibull(m_true, n)
        r = fit_bayes(fm.read_specimens(pd.DataFrame({"strength": s})), reference_prior=True, loo=False, seed=i)
        p = r.populations[0]
        cover_m += p.modulus_interval[0] < m_true < p.modulus_interval[1]
        cover_s += p.strength_interval[0] < s_true < p.strength_interval[1]
        mle = fm.fit(pd.DataFrame({"strength": s}), intervals="none").populations[0].modulus
        pivotal = mle / piv.modulus_quantile(0.05) - mle / piv.modulus_quantile(0.95)
        width_ratio.append((p.modulus_interval[1] - p.modulus_interval[0]) / pivotal)
    sd = np.sqrt(0.9 * 0.1 / reps)
    assert abs(cover_m / reps - 0.9) < 3 * sd
    assert abs(cover_s / reps - 0.9) < 3 * sd
    assert np.mean(width_ratio) == pytest.approx(1.0, abs=0.1)


@pytest.mark.slow
@pytest.mark.parametrize("model", ["concurrent", "exclusive"])
def test_multi_population_credible_intervals_cover(model):
    from flawmix import likelihood as lik
    from flawmix.simulate import Design, replicate, simulate

    rng = np.random.default_rng(48)
    M, S = np.array([5.0, 16.0]), np.array([480.0, 450.0])
    fr = np.array([0.4, 0.6])
    reps = 100
    sims = simulate(lik.Model(model, 2), M, S, fr, Design.simple(60, 0.2), reps, rng)
    hits = np.zeros(4)
    for r in range(reps):
        d = replicate(sims, r)
        origin = np.where(d.candidates.sum(-1) > 1, "?", np.array(["a", "b"])[d.candidates.argmax(-1)])
        res = fit_bayes(fm.read_specimens(pd.DataFrame({"strength": np.exp(d.y), "origin": origin})),
                        model=model, loo=False, seed=r, target_ess=600)
        for j, p in enumerate(res.populations):
            hits[2 * j] += p.modulus_interval[0] < M[j] < p.modulus_interval[1]
            hits[2 * j + 1] += p.strength_interval[0] < S[j] < p.strength_interval[1]
    # weak priors: coverage about nominal (3 binomial standard deviations)
    assert np.all(np.abs(hits / reps - 0.9) < 3 * np.sqrt(0.09 / reps) + 0.02)


def _chains(rng, chains, draws, phi, repeat):
    """AR(1) chains with some states repeated (as rejected MCMC proposals repeat them)."""
    x = np.zeros((chains, draws))
    noise = rng.standard_normal((chains, draws))
    stay = rng.random((chains, draws)) < repeat
    for t in range(1, draws):
        x[:, t] = np.where(stay[:, t], x[:, t - 1], phi * x[:, t - 1] + noise[:, t])
    return x


# flawmix's numpy diagnostics follow Vehtari et al. (2021) and PSIS (Vehtari et al. 2024) as
# arviz 0.x implements them, and equal it to 1e-10 (the Python 3.11 run). arviz 1.x
# (arviz-stats) re-implemented tail ESS, PSIS and the LOO standard error with other details:
# measured on these draws, tail ESS up to 47 % apart on chains with many repeated values, the
# LOO standard error 1–2 % apart (n − 1 in the variance) and elpd within 0.4 %. R-hat and bulk
# ESS still agree with arviz 1.x to 1e-10; the rest is compared on the arviz 0.x line only.
ARVIZ_1_DIFFERS = "arviz 1.x computes tail ESS and PSIS-LOO with other conventions; compared with arviz 0.x"


@pytest.mark.parametrize("phi, repeat, shift", [(0.0, 0.0, 0.0), (0.6, 0.4, 0.0), (0.95, 0.2, 0.3)])
def test_own_diagnostics_equal_arviz(phi, repeat, shift):
    # Reference: arviz (rank-normalised split R-hat, bulk and tail ESS; Pareto k of PSIS) on
    # the same draws; flawmix computes them in numpy to skip xarray in the sampling loop.
    from flawmix import _arviz, diagnostics

    az = _arviz._az()
    rng = np.random.default_rng(int(phi * 100))
    x = _chains(rng, 16, 301, phi, repeat)
    x[:4] += shift                      # a few chains elsewhere: R-hat well above 1
    data = az.convert_to_dataset({"a": x})
    assert diagnostics.r_hat(x) == pytest.approx(float(az.rhat(data)["a"]), rel=1e-10)
    assert diagnostics.ess_bulk(x) == pytest.approx(float(az.ess(data, method="bulk")["a"]), rel=1e-10)
    if _arviz.major_version() >= 1:
        pytest.skip(ARVIZ_1_DIFFERS)
    assert diagnostics.ess_tail(x) == pytest.approx(float(az.ess(data, method="tail")["a"]), rel=1e-10)
    log_weights = rng.standard_t(2 + 10 * phi, 3000)
    assert diagnostics.pareto_k(log_weights) == pytest.approx(float(az.psislw(log_weights)[1]), rel=1e-10)


def test_convergence_summary_equals_the_single_diagnostics():
    # the sampler's summary shares the rank-normalised draws between R-hat and bulk ESS
    from flawmix import diagnostics

    rng = np.random.default_rng(4)
    post = {"a": _chains(rng, 16, 301, 0.6, 0.4), "b": _chains(rng, 16, 301, 0.95, 0.2) + 0.3}
    post["b"][:4] += 0.5
    got = diagnostics.convergence(post)
    assert got["r_hat_max"] == max(diagnostics.r_hat(v) for v in post.values())
    assert got["ess_bulk_min"] == min(diagnostics.ess_bulk(v) for v in post.values())
    assert got["ess_tail_min"] == min(diagnostics.ess_tail(v) for v in post.values())
    assert diagnostics.convergence(post, tail=False) == {k: got[k] for k in ("r_hat_max", "ess_bulk_min")}


@pytest.mark.parametrize("draws, spread", [(250, 0.3), (375, 1.5), (125, 3.0)])
def test_psis_loo_equals_arviz(draws, spread):
    # Reference: arviz.loo on the same pointwise log-likelihood (with the constant placeholder
    # posterior flawmix passed it before); wide spreads give Pareto k above 0.7 for some points.
    from flawmix import _arviz, diagnostics

    rng = np.random.default_rng(draws)
    mu = spread * rng.standard_normal((16, draws, 1))
    y = 2.0 * rng.standard_normal(25)
    ll = -0.5 * (y - mu) ** 2 - 0.5 * np.log(2 * np.pi)
    if _arviz.major_version() >= 1:
        pytest.skip(ARVIZ_1_DIFFERS)
    ours, ref = diagnostics.psis_loo(ll), _arviz.loo(ll)
    assert ours["elpd_loo"] == pytest.approx(ref["elpd_loo"], rel=1e-12)
    assert ours["se"] == pytest.approx(ref["se"], rel=1e-10)
    np.testing.assert_allclose(ours["pareto_k"], ref["pareto_k"], rtol=1e-10)
    np.testing.assert_allclose(ours["pointwise"], ref["pointwise"], rtol=1e-12)
    if spread > 1:
        assert np.any(ours["pareto_k"] > 0.7)


def test_independence_proposal_is_used_and_matches_the_exact_posterior():
    # The default sampler starts from importance draws of a t proposal around the mode; its
    # posterior must still match the brute-force grid posterior (as the DE-only run does).
    rng = np.random.default_rng(44)
    s = 350 * rng.weibull(9, 25)
    r = fit_bayes(fm.read_specimens(pd.DataFrame({"strength": s})), reference_prior=True, loo=False, seed=3)
    assert r.extras["burn_in"] < 500          # the short burn-in of the independence proposal
    u, cdf_u, v, cdf_v = _grid_posterior_cdf(s)
    _assert_matches_exact(np.log(r.draws.moduli[:, 0]), u, cdf_u, r.extras["diagnostics"]["ess_bulk_min"])
    _assert_matches_exact(np.log(r.draws.scales[:, 0]), v, cdf_v, r.extras["diagnostics"]["ess_bulk_min"])


def test_hazard_coordinates_proposal_is_a_normalised_density_in_the_parameters():
    # the t lives in (ln m, η = m (c − ln σθ)); its density carried back to (ln m, ln σθ) with
    # the Jacobian must integrate to one there (grid sum) and invert exactly
    from flawmix import proposal

    mode = np.array([np.log(5.0), 0.3])
    cov = np.array([[0.09, 0.05], [0.05, 0.06]])
    t = proposal.from_mode(mode, -np.linalg.inv(cov), [0], [1])
    u, v = np.meshgrid(np.linspace(-1.0, 4.0, 801), np.linspace(-3.0, 4.0, 801), indexing="ij")
    theta = np.stack([u.ravel(), v.ravel()], axis=1)
    mass = np.exp(t.logpdf(theta)).sum() * (5.0 / 800) * (7.0 / 800)
    assert mass == pytest.approx(1.0, abs=0.01)     # t tails beyond the grid hold < 1 %
    draws = t.sample(np.random.default_rng(0), 50)
    np.testing.assert_allclose(t.to_theta(t.to_hazard(draws)), draws, rtol=1e-12, atol=1e-12)


def test_independence_proposal_samples_a_curved_posterior_of_a_rare_population():
    # Population 'inclusion' has 4 failures among 30 specimens: its (ln m, ln σθ) posterior is
    # curved, where a t around the mode in (ln m, ln σθ) was rejected by its pilot. With labelled
    # origins and the reference prior the posterior factorises by population, so its exact
    # marginals come from a 2-D grid.
    frame = simulate_campaign(np.random.default_rng(43), n=30,
                              pops=(("pore", 12.0, 400.0), ("inclusion", 4.0, 700.0)))
    assert (frame.origin == "inclusion").sum() == 4
    r = fit_bayes(fm.read_specimens(frame), reference_prior=True, loo=False, seed=5)
    assert r.extras["burn_in"] < 500          # the independence proposal was trusted and kept
    j = [p.name for p in r.populations].index("inclusion")
    u, cdf_u, v, cdf_v = _grid_posterior_cdf(frame.strength.to_numpy(), (frame.origin == "inclusion").to_numpy())
    _assert_matches_exact(np.log(r.draws.moduli[:, j]), u, cdf_u, r.extras["diagnostics"]["ess_bulk_min"])
    _assert_matches_exact(np.log(r.draws.scales[:, j]), v, cdf_v, r.extras["diagnostics"]["ess_bulk_min"])


def test_low_acceptance_of_the_independence_proposal_falls_back_to_de_moves(monkeypatch):
    # forced: every run counts as rarely accepted, so the fit is redone with DE moves alone
    # (their full burn-in) and must still match the brute-force grid posterior
    import flawmix.bayes as bayes

    monkeypatch.setattr(bayes, "INDEPENDENCE_MIN_ACCEPTANCE", 1.01)
    rng = np.random.default_rng(41)
    s = 350 * rng.weibull(9, 12)
    r = fit_bayes(fm.read_specimens(pd.DataFrame({"strength": s})), reference_prior=True, loo=False, seed=1)
    assert r.extras["burn_in"] >= 500
    u, cdf_u, *_ = _grid_posterior_cdf(s)
    _assert_matches_exact(np.log(r.draws.moduli[:, 0]), u, cdf_u, r.extras["diagnostics"]["ess_bulk_min"])


def test_proposal_keeps_refitting_while_the_pilot_weights_are_heavy_tailed(monkeypatch):
    # a mode far from the posterior (as when a mixture model's maximum likelihood is
    # degenerate): the two standard refits leave Pareto k above the limit, the extra rounds
    # bring it under, and the fit returned is still the round with the largest importance ESS
    from scipy import stats

    from flawmix import proposal as P

    target = stats.multivariate_normal(mean=[0.0, 0.0], cov=[[1.0, 0.3], [0.3, 1.0]])   # in (ln m, ln σθ)
    mode, hessian = np.array([2.0, -2.0]), -np.eye(2) / 0.2 ** 2

    def run():
        return P.fitted(mode, hessian, [0], [1], target.logpdf, np.random.default_rng(1))

    monkeypatch.setattr(P, "EXTRA_ROUNDS", 0)
    assert run()[3] > P.PARETO_K_LIMIT           # two refits are not enough here
    monkeypatch.setattr(P, "EXTRA_ROUNDS", 4)
    proposal, draws, log_weights, k = run()
    assert k <= P.PARETO_K_LIMIT
    ess = P.importance_ess(log_weights)
    assert ess > 200
    # the weighted pilot recovers the target's mean (importance sampling, 2000 draws)
    w = np.exp(log_weights - log_weights.max())
    mean = (w[:, None] * draws).sum(0) / w.sum()
    np.testing.assert_allclose(mean, [0.0, 0.0], atol=4 / np.sqrt(ess))


def test_posterior_mode_of_the_second_try_is_the_maximum_and_its_curvature():
    # the second try at the proposal starts from the log posterior's own mode; on a normal
    # log density whose maximum sits inside the box, started outside it (as a degenerate
    # maximum-likelihood modulus beyond the sampler's bound is), it finds the mean and the
    # negated inverse covariance (scipy.stats as the reference)
    from scipy import stats

    from flawmix.bayes import _posterior_mode

    cov = np.array([[0.04, 0.01, 0.0], [0.01, 0.09, -0.02], [0.0, -0.02, 0.25]])
    target = stats.multivariate_normal(mean=[1.5, 0.2, -0.4], cov=cov)
    lower, upper = np.array([-2.0, -3.0, -3.0]), np.array([3.0, 3.0, 3.0])

    def log_prob(x):
        inside = np.all((x > lower) & (x < upper), axis=-1)
        return np.where(inside, target.logpdf(x), -np.inf)

    mode, hessian = _posterior_mode(log_prob, np.array([6.9, 0.0, 0.0]), lower, upper)
    np.testing.assert_allclose(mode, [1.5, 0.2, -0.4], atol=1e-4)
    np.testing.assert_allclose(hessian, -np.linalg.inv(cov), rtol=1e-4)


@pytest.mark.slow
def test_four_populations_whose_mixture_maxima_are_degenerate_sample_from_the_posterior_mode():
    # a four-population table whose partial and exclusive maximum-likelihood fits put a
    # modulus at its bound: the proposal from the posterior mode is used, and its posterior
    # quantiles agree with a differential-evolution run's within Monte Carlo error
    import emcee

    sp = fm.read_specimens(DATA / "four-populations.csv")
    assert sp.candidates.shape == (55, 4)
    fast = fit_bayes(sp, model="partial", seed=0)
    assert fast.extras["moves"].startswith("independence t from the posterior mode")
    slow = fit_bayes(sp, model="partial", seed=0, moves=emcee.moves.DEMove())
    assert slow.extras["moves"] == "differential evolution"
    for a, b in ((fast.draws.moduli, slow.draws.moduli), (fast.draws.scales, slow.draws.scales)):
        for j in range(a.shape[1]):
            x, y = np.log(a[:, j]), np.log(b[:, j])
            # quantile standard error ~ sqrt(p(1-p)/ESS)/density; ESS >= 1000 on both runs
            np.testing.assert_allclose(np.quantile(x, [0.05, 0.5, 0.95]), np.quantile(y, [0.05, 0.5, 0.95]),
                                       atol=0.2 * np.std(y))
