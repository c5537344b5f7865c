"""Fast paths of the maximum-likelihood fit are special cases of the one likelihood: the labelled
closed forms (labelled.py) and the batched profile end points (endpoints.py) give what the
general Newton / bracketing path and an independent scipy.stats computation give."""
import numpy as np
import pandas as pd
import pytest
from scipy import optimize, stats

import flawmix as fm
from flawmix import likelihood as lik
from flawmix import mle
from flawmix.endpoints import batched_profile_intervals, profile_end_points
from flawmix.labelled import labelled_optimum
from flawmix.optimize import chi2_cutoff, newton_maximise, profile_interval

from conftest import simulate_campaign

CUT_90 = 0.5 * stats.chi2.ppf(0.90, 1)


def _fit_parts(frame):
    sp = fm.read_specimens(frame)
    data, centre = mle._centred_data(sp)
    opt, deriv, lower, upper = mle._maximise(data)
    return sp, data, centre, opt, deriv, lower, upper


def _scipy_loglik(strength, own, modulus, scale):
    """One population's censored log-likelihood written with scipy.stats: its own failures
    by the density, every other specimen by the survival function."""
    return (stats.weibull_min.logpdf(strength[own], modulus, scale=scale).sum()
            + stats.weibull_min.logsf(strength[~own], modulus, scale=scale).sum())


def _closed_scale(strength, own, modulus):
    # σθ(m) = (Σ_all σ^m / r)^(1/m): the censored MLE of σθ at a given m (DOMAIN.md section 3)
    top = strength.max()   # scaled by the largest strength, so σ^m cannot overflow
    return top * (np.sum((strength / top) ** modulus) / own.sum()) ** (1.0 / modulus)


def _modulus_score(strength, own, modulus, scale):
    # ∂ ln L / ∂m = r/m + Σ_own ln(σ/σθ) − Σ_all (σ/σθ)^m ln(σ/σθ)  (differentiated by hand)
    x = np.log(strength / scale)
    return own.sum() / modulus + x[own].sum() - np.sum(np.exp(modulus * x) * x)


def _independent_ends(strength, own, modulus_hat, scale_hat):
    """Profile end points of one labelled population by scipy brentq (xtol 1e-14) on the
    scipy.stats log-likelihood, the nuisance parameter maximised in closed form (σθ) or by
    its score's root (m). Returns ((m_lo, m_hi), (σθ_lo, σθ_hi))."""
    top = _scipy_loglik(strength, own, modulus_hat, scale_hat)

    def by_modulus(m):
        return _scipy_loglik(strength, own, m, _closed_scale(strength, own, m)) - (top - CUT_90)

    def by_scale(s):
        m = optimize.brentq(lambda m: _modulus_score(strength, own, m, s), 0.05, 500.0, xtol=1e-14, rtol=1e-15)
        return _scipy_loglik(strength, own, m, s) - (top - CUT_90)

    m_ends = (optimize.brentq(by_modulus, modulus_hat / 5, modulus_hat, xtol=1e-14, rtol=1e-15),
              optimize.brentq(by_modulus, modulus_hat, modulus_hat * 5, xtol=1e-14, rtol=1e-15))
    s_ends = (optimize.brentq(by_scale, scale_hat * 0.6, scale_hat, xtol=1e-13, rtol=1e-15),
              optimize.brentq(by_scale, scale_hat, scale_hat * 1.6, xtol=1e-13, rtol=1e-15))
    return m_ends, s_ends


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_labelled_end_points_equal_an_independent_scipy_profile(seed):
    frame = simulate_campaign(np.random.default_rng(seed), n=30, survive_at=430.0)
    sp, data, centre, opt, _, lower, upper = _fit_parts(frame)
    ends, solved = profile_end_points(data, opt.theta, opt.hessian, np.arange(4), (CUT_90, CUT_90), lower, upper)
    assert solved.all()
    for j in range(2):
        own = sp.failed & sp.candidates[:, j]
        m_ends, s_ends = _independent_ends(sp.strength, own, np.exp(opt.theta[j]), np.exp(opt.theta[2 + j] + centre))
        np.testing.assert_allclose(ends[j], np.log(m_ends), rtol=0, atol=1e-10)
        np.testing.assert_allclose(ends[2 + j] + centre, np.log(s_ends), rtol=0, atol=1e-10)


@pytest.mark.parametrize("seed", [0, 1, 2, 3])
def test_batched_end_points_with_unidentified_origins_equal_the_bracketing_search(seed):
    frame = simulate_campaign(np.random.default_rng(seed), n=40, unknown=0.25)
    _, data, _, opt, deriv, lower, upper = _fit_parts(frame)
    assert not data.certain
    batched = batched_profile_intervals(data, opt, 0.90, lower, upper)
    assert set(batched) == {0, 1, 2, 3}
    for i in range(4):
        limits = (lik.LOG_MODULUS_MIN, lik.LOG_MODULUS_MAX) if i < 2 else (-np.inf, np.inf)
        general = profile_interval(deriv, opt, i, 0.90, lower=lower, upper=upper, limits=limits)
        # the bracketing search stops at brentq's xtol = 1e-9; the batched Newton is far tighter
        np.testing.assert_allclose(batched[i], general, rtol=0, atol=2e-9)


def test_batched_end_points_satisfy_their_equations():
    # at each end point: ll = ll_max − χ²₁(0.90)/2 and the score of every other parameter is 0
    frame = simulate_campaign(np.random.default_rng(7), n=40, unknown=0.25, survive_at=440.0)
    _, data, _, opt, _, lower, upper = _fit_parts(frame)
    ends, solved = profile_end_points(data, opt.theta, opt.hessian, np.arange(4), (CUT_90, CUT_90), lower, upper)
    assert solved.all()
    for i in range(4):
        for end in ends[i]:
            offset = np.zeros(4)
            offset[i] = end
            tie = np.delete(np.eye(4), i, axis=1)
            start = opt.theta.copy()
            start[i] = end
            inner = newton_maximise(lambda t: lik.concurrent_derivatives(data, t), start, tie=tie, offset=offset,
                                    score_tol=1e-11)
            assert inner.loglik == pytest.approx(opt.loglik - CUT_90, abs=1e-9)


def test_unbounded_end_is_left_to_the_bracketing_search():
    # the two strongest specimens are the only failures of 'b': its modulus estimate sits at
    # the search bound and its upper end is not bounded by the data
    frame = simulate_campaign(np.random.default_rng(3), n=20)
    frame.loc[:, "origin"] = "a"
    frame.loc[np.argsort(frame.strength.to_numpy())[-2:], "origin"] = "b"
    sp, data, _, opt, _, lower, upper = _fit_parts(frame)
    _, solved = profile_end_points(data, opt.theta, opt.hessian, np.arange(4), (CUT_90, CUT_90), lower, upper)
    assert not solved[1, 1]                 # not settled by Newton ...
    batched = batched_profile_intervals(data, opt, 0.90, lower, upper,
                                        limits=lambda i: (lik.LOG_MODULUS_MIN, lik.LOG_MODULUS_MAX))
    assert batched[1][1] == np.inf          # ... so searched on b's own likelihood, up to the bound
    general = profile_interval(lambda t: lik.concurrent_derivatives(data, t), opt, 1, 0.90, lower=lower,
                               upper=upper, limits=(lik.LOG_MODULUS_MIN, lik.LOG_MODULUS_MAX))
    np.testing.assert_allclose(batched[1], general, rtol=0, atol=2e-9)   # the whole likelihood's search
    result = fm.fit(sp)
    assert any("search bound" in line for line in result.warnings)
    assert result.populations[1].modulus_interval[1] == np.inf    # ... and unbounded in the fit


@pytest.mark.parametrize("survive_at", [None, 425.0])
def test_labelled_closed_form_maximum_equals_newton_on_the_joint_likelihood(survive_at):
    frame = simulate_campaign(np.random.default_rng(11), n=50, survive_at=survive_at,
                              pops=(("a", 6.0, 400.0), ("b", 15.0, 420.0), ("c", 9.0, 450.0)))
    sp = fm.read_specimens(frame)
    data, _ = mle._centred_data(sp)
    deriv = lambda t: lik.concurrent_derivatives(data, t)
    lower, upper = mle._bounds(3)
    for tie in (None, mle.common_modulus_tie(3)):
        closed = labelled_optimum(data, tie, 1e-10)
        start = mle._em_start(data, "equal")
        start[:3] = start[:3].mean()   # a start away from the answer
        newton = newton_maximise(deriv, start, tie=tie, lower=lower, upper=upper, score_tol=1e-12)
        np.testing.assert_allclose(closed.theta, newton.theta, rtol=0, atol=1e-10)
        assert closed.loglik == pytest.approx(newton.loglik, abs=1e-9)


def test_labelled_common_modulus_is_the_pooled_censored_fit_of_scipy():
    # one common modulus over labelled populations = one Weibull fit of all failures pooled
    # (every survivor suspended): the modulus scipy's CensoredData fit finds for the pool
    frame = simulate_campaign(np.random.default_rng(5), n=40, survive_at=430.0)
    sp = fm.read_specimens(frame)
    data, _ = mle._centred_data(sp)
    closed = labelled_optimum(data, mle.common_modulus_tie(2), 1e-10)
    pooled = stats.CensoredData(uncensored=sp.strength[sp.failed], right=sp.strength[~sp.failed])
    modulus, _, _ = stats.weibull_min.fit(pooled, floc=0)
    assert np.exp(closed.theta[0]) == pytest.approx(modulus, rel=1e-4)   # scipy's optimiser tolerance


def test_fit_intervals_equal_the_general_path():
    from flawmix.calibration import calibrate

    frame = simulate_campaign(np.random.default_rng(21), n=30)
    sp, data, centre, opt, deriv, lower, upper = _fit_parts(frame)
    calibrated = fm.fit(frame)   # the default: calibrated cut-offs from a seeded bootstrap (seed 0)
    drops = calibrate(sp, calibrated.moduli, calibrated.characteristic_strengths, 0.90, seed=0).drops
    for result, cut in ((fm.fit(frame, intervals="profile"), None), (calibrated, drops)):
        _check_intervals(result, opt, deriv, lower, upper, centre, cut)


def _check_intervals(result, opt, deriv, lower, upper, centre, drops):
    for j, pop in enumerate(result.populations):
        m_lo, m_hi = profile_interval(deriv, opt, j, 0.90, lower=lower, upper=upper,
                                      limits=(lik.LOG_MODULUS_MIN, lik.LOG_MODULUS_MAX),
                                      drops=None if drops is None else tuple(drops[j]))
        s_lo, s_hi = profile_interval(deriv, opt, 2 + j, 0.90, lower=lower, upper=upper,
                                      drops=None if drops is None else tuple(drops[2 + j]))
        np.testing.assert_allclose(np.log(pop.modulus_interval), [m_lo, m_hi], atol=2e-9)
        np.testing.assert_allclose(np.log(pop.strength_interval), np.array([s_lo, s_hi]) + centre, atol=2e-9)


def test_chi2_cutoff_equals_scipy_stats():
    for confidence in (0.5, 0.8, 0.9, 0.95, 0.99):
        for df in (1, 2, 3):
            assert chi2_cutoff(confidence, df) == 0.5 * stats.chi2.ppf(confidence, df)


def test_many_small_labelled_populations_equal_the_general_path():
    # 12 populations of 3 failures each: every end point, batched or searched population by
    # population, equals the bracketing search on the whole 24-parameter likelihood
    rng = np.random.default_rng(8)
    labels = np.repeat([f"L{i:02d}" for i in range(12)], 3)
    frame = pd.DataFrame({"strength": 400 * rng.weibull(8, labels.size), "origin": labels})
    _, data, _, opt, deriv, lower, upper = _fit_parts(frame)
    limits = lambda i: (lik.LOG_MODULUS_MIN, lik.LOG_MODULUS_MAX) if i < 12 else (-np.inf, np.inf)
    batched = batched_profile_intervals(data, opt, 0.90, lower, upper, limits=limits)
    for i in (0, 5, 11, 12, 17, 23):
        general = profile_interval(deriv, opt, i, 0.90, lower=lower, upper=upper, limits=limits(i))
        np.testing.assert_allclose(batched[i], general, rtol=0, atol=2e-9)


@pytest.mark.parametrize("unknown", [0.0, 0.25])
def test_batched_end_points_with_a_drop_per_parameter_equal_the_bracketing_search(unknown):
    # calibrated cut-offs: a different (below, above) drop for every parameter
    frame = simulate_campaign(np.random.default_rng(31), n=40, unknown=unknown, survive_at=440.0)
    _, data, _, opt, deriv, lower, upper = _fit_parts(frame)
    drops = np.array([[1.1, 1.7], [1.5, 1.2], [1.3, 1.4], [1.9, 1.0]])
    limits = lambda i: (lik.LOG_MODULUS_MIN, lik.LOG_MODULUS_MAX) if i < 2 else (-np.inf, np.inf)
    batched = batched_profile_intervals(data, opt, 0.90, lower, upper, drops=drops, limits=limits)
    for i in range(4):
        general = profile_interval(deriv, opt, i, 0.90, lower=lower, upper=upper, limits=limits(i),
                                   drops=tuple(drops[i]))
        np.testing.assert_allclose(batched[i], general, rtol=0, atol=2e-9)


@pytest.mark.parametrize("seed, survive_at, n", [(0, None, 30), (1, 430.0, 30), (3, 440.0, 60)])
def test_labelled_calibration_equals_the_general_refits(seed, survive_at, n, monkeypatch):
    # the closed-form refits of labelled bootstrap campaigns give the cut-offs, refits and
    # covariances the batched ascent on the joint likelihood gives (forced by hiding that
    # the campaigns are labelled)
    from flawmix import calibration

    sp = fm.read_specimens(simulate_campaign(np.random.default_rng(seed), n=n, survive_at=survive_at))
    fitted = fm.fit(sp, intervals="none")
    closed = calibration.calibrate(sp, fitted.moduli, fitted.characteristic_strengths, 0.90, seed=0)
    monkeypatch.setattr(lik.Data, "certain", property(lambda self: False))
    general = calibration.calibrate(sp, fitted.moduli, fitted.characteristic_strengths, 0.90, seed=0)
    np.testing.assert_allclose(closed.drops, general.drops, rtol=0, atol=1e-9)
    np.testing.assert_allclose(closed.signed_roots, general.signed_roots, rtol=0, atol=1e-7)
    np.testing.assert_allclose(closed.theta, general.theta, rtol=0, atol=1e-6)     # ascent stops at |score| 1e-6
    np.testing.assert_allclose(closed.covariance, general.covariance, rtol=1e-5, atol=1e-9)


@pytest.mark.parametrize("rare", [False, True])
def test_big_data_subsample_start_reaches_the_maximum_of_the_em_start(rare, monkeypatch):
    """Above 2 × SUBSAMPLE_START specimens Newton starts from a strided subsample's maximum
    instead of the EM starts: the same maximum (free and common-modulus fits), also when one
    population has only a few dozen failures among 10^5 specimens."""
    rng = np.random.default_rng(11)
    n = 110_000
    pops = ((5.0, 500.0), (12.0, 450.0), (20.0, 650.0 if rare else 470.0))
    draws = np.stack([s * rng.weibull(m, n) for m, s in pops], axis=1)
    strength, origin = draws.min(axis=1), draws.argmin(axis=1)
    censor = np.quantile(strength, 0.97)
    failed = strength < censor
    cand = (np.arange(3) == origin[:, None]) & failed[:, None]
    hidden = failed & (rng.random(n) < 0.15)
    if rare:   # ambiguous between the two common populations only: the rare one keeps all its failures
        hidden &= origin < 2
        cand[hidden, :2] = True
    else:
        cand[hidden] = True
    data = lik.Data(np.log(np.minimum(strength, censor)) - 6.0, failed, cand)
    assert not rare or 10 < (cand[:, 2] & failed).sum() < mle.SUBSAMPLE_RARE
    assert data.y.size > 2 * mle.SUBSAMPLE_START
    tie = mle.common_modulus_tie(3)
    fast, fast_tied = mle._maximise(data)[0], mle._maximise(data, tie)[0]
    monkeypatch.setattr(mle, "SUBSAMPLE_START", 10**9)   # the general path: EM starts on every row
    general, general_tied = mle._maximise(data)[0], mle._maximise(data, tie)[0]
    for a, b in ((fast, general), (fast_tied, general_tied)):
        assert a.converged and b.converged
        np.testing.assert_allclose(a.theta, b.theta, rtol=0, atol=1e-9)
        assert a.loglik == pytest.approx(b.loglik, rel=1e-13)


@pytest.mark.parametrize("k", [3, 4])
def test_batched_partial_fits_of_the_boundary_test_equal_one_at_a_time(k):
    # compare.partial_fits runs newton_maximise's iteration for every replicate and every
    # choice of partial population at once; each row must end where newton_maximise alone
    # ends from the same start (the general path the boundary test used before)
    from flawmix.compare import partial_fits
    from flawmix.simulate import Design, simulate

    rng = np.random.default_rng(20 + k)
    moduli, scales = np.array([5.0, 12.0, 8.0, 15.0][:k]), np.array([1.0, 0.95, 1.1, 1.0][:k])
    sims = simulate(lik.Model("concurrent", k), moduli, scales, None,
                    Design(np.where(rng.random(36) < 0.1, 0.9, np.inf), 0.25), 40, rng)
    usable = np.flatnonzero(np.all((sims.candidates & sims.failed[..., None]).sum(axis=1) > 0, axis=1))
    data = lik.Data(sims.y[usable], sims.failed[usable], sims.candidates[usable])
    one_at_a_time, theta = [], []
    for r in range(usable.size):
        single = lik.Data(data.y[r], data.failed[r], data.candidates[r])
        concurrent = mle._maximise(single)[0]
        theta.append(concurrent.theta)
        one_at_a_time.append(mle._fit_other_model(single, "partial", concurrent.theta, logit_starts=(3.0,))[0].loglik)
    np.testing.assert_allclose(partial_fits(data, np.array(theta)), one_at_a_time, rtol=0, atol=1e-9)
    assert len(one_at_a_time) >= 30
