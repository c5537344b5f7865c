"""Bootstrap p-values of the lot tests for labelled lots (flawmix/lot_calibration.py).

External checks: the common-modulus censored fit against scipy's Nelder–Mead on a
likelihood written out here (censored Weibull, DOMAIN.md section 3); the closed-form
statistics against the general joint fit of flawmix.lots, which tests/test_lots.py checks
against a brute-force multi-start optimiser; the size of the test by seeded simulation
(5 % ± binomial error). Data are invented campaigns drawn with seeded numpy generators.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import optimize, stats

from flawmix import lot_calibration as LC
from flawmix import lots as L
from flawmix.censored import censored_weibull_mle, common_modulus_censored_mle

from test_lots import campaign

POPS3 = {"pores": {"kind": "volume", "labels": ["pore"]}, "grinding": {"kind": "surface", "labels": ["grinding"]},
         "inclusions": {"kind": "volume", "labels": ["inclusion"]}}
TRUTH3 = {"pore": (8.0, 520.0), "grinding": (15.0, 480.0), "inclusion": (6.0, 700.0)}


def _labelled_lots(seed, n=30, survive_at=None, shift=1.0, lots=("a", "b", "c")):
    rng = np.random.default_rng(seed)
    frames = []
    for i, name in enumerate(lots):
        truth = dict(TRUTH3)
        truth["grinding"] = (15.0, 480.0 * shift ** i)
        frames.append(campaign(rng, n, truth, 0.0, survive_at, name))
    return pd.concat(frames, ignore_index=True)


def _brute_common_modulus(groups):
    """−max log-likelihood of one modulus and a scale per group, Nelder–Mead from several starts."""
    def nll(p):
        m = np.exp(p[0])
        total = 0.0
        for g, (y, w) in enumerate(groups):
            z = m * (y - p[1 + g])
            total += np.sum(w * (np.log(m) + z) - np.exp(z))
        return -total

    best = None
    for start in (np.log(5.0), np.log(10.0), np.log(20.0)):
        x0 = np.r_[start, [y.mean() for y, _ in groups]]
        res = optimize.minimize(nll, x0, method="Nelder-Mead",
                                options={"maxiter": 40000, "xatol": 1e-11, "fatol": 1e-13})
        if best is None or res.fun < best.fun:
            best = res
    return best


def test_common_modulus_fit_equals_a_brute_force_maximum():
    rng = np.random.default_rng(31)
    groups = []
    for n, scale in ((20, 400.0), (31, 450.0), (12, 380.0)):
        y = np.log(scale * rng.weibull(8.0, n))
        w = (rng.random(n) < 0.7).astype(float)          # the rest suspended at their stresses
        groups.append((y, w))
    u, v, bound = common_modulus_censored_mle(groups)
    brute = _brute_common_modulus(groups)
    assert not bound
    assert u == pytest.approx(brute.x[0], abs=1e-6)
    np.testing.assert_allclose(v, brute.x[1:], atol=1e-6)
    # one group: the ordinary censored fit
    u1, v1, _ = common_modulus_censored_mle(groups[:1])
    u2, v2, _ = censored_weibull_mle(*groups[0])
    assert (u1, v1[0]) == pytest.approx((u2, v2), abs=1e-12)


def test_common_modulus_fit_without_a_root_stays_at_the_bound():
    y = np.log(np.array([[300.0, 350.0, 400.0]]))
    w = np.array([[0.0, 0.0, 1.0]])                      # the only failure is the largest strength
    _, _, bound = common_modulus_censored_mle([(y, w), (y, w)])
    assert bound.all()


@pytest.mark.parametrize("seed,survive_at", [(1, None), (2, 560.0), (3, 520.0)])
def test_closed_form_statistics_equal_the_general_joint_fit(seed, survive_at):
    """Three lots, three populations, every origin identified, survivors at a rig limit: the
    statistic of each test from the closed forms equals the general path's to 1e-7."""
    lots = L.read_lots(_labelled_lots(seed, survive_at=survive_at, shift=1.05), POPS3)
    model = L.lot_model(lots)
    assert LC.applies(model)
    tests = L.likelihood_ratio_tests(model)
    for j in range(model.k):
        for key in LC.TESTS:
            fast, usable = LC.separable_statistic(LC.observed_groups(model, j), key)
            assert usable[0]
            assert fast[0] == pytest.approx(tests[j][key]["statistic"], abs=1e-7)


def test_default_reference_is_the_bootstrap_for_labelled_lots_and_chi2_otherwise():
    frame = _labelled_lots(5, shift=1.0, lots=("a", "b"))
    c = L.compare_lots(frame, POPS3, seed=3)
    again = L.compare_lots(frame, POPS3, seed=3)
    chi2 = L.compare_lots(frame, POPS3, calibrate=0)
    for p, q, r in zip(c.populations, again.populations, chi2.populations):
        for key in LC.TESTS:
            t = getattr(p, key)
            assert t["reference"].startswith("parametric bootstrap")
            assert t["p_value"] == getattr(q, key)["p_value"]                      # seeded
            assert getattr(r, key)["reference"] == "χ²"
            assert getattr(r, key)["p_value"] == pytest.approx(stats.chi2.sf(t["statistic"], t["df"]), rel=1e-9)
            used = int(t["reference"].split(",")[1].split()[0])
            assert used > 500 and (t["p_value"] * (used + 1)) == pytest.approx(round(t["p_value"] * (used + 1)))
    unknown = frame.copy()
    unknown.loc[::7, "origin"] = "?"
    for p in L.compare_lots(unknown, POPS3).populations:
        assert p.same_population["reference"].startswith("χ²; not calibrated (origins not all identified")


def test_beyond_every_replicate_the_p_value_is_below_the_bootstrap_bound():
    """A large change: no bootstrap statistic reaches the observed one, so p < 1/(B + 1)
    (the Bartlett-corrected χ² tail) and the words say very strong evidence."""
    frame = _labelled_lots(8, n=40, shift=1.3, lots=("a", "b"))
    c = L.compare_lots(frame, POPS3, calibrate=199, seed=1)
    t = c.population("grinding").same_population
    used = int(t["reference"].split(",")[1].split()[0])
    assert "beyond every replicate" in t["reference"]
    assert 0 < t["p_value"] <= 1 / (used + 1)
    assert t["p_value"] == pytest.approx(stats.chi2.sf(t["statistic"] / t["bartlett_factor"], t["df"]), rel=1e-9)
    assert "very strong evidence" in c.verdict


@pytest.mark.slow
def test_bootstrap_reference_keeps_its_size_and_power_by_simulation():
    """800 seeded data sets of two labelled lots of 30 (pores m 8, σθ 500; grinding m 16,
    σθ 480 MPa; invented). No change: each test rejects at 5 % within three binomial standard
    errors (the χ² reference gave 7.05 ± 0.57 % for grinding over 2000 sets,
    studies/lots_labelled_bootstrap.py). Grinding σθ +10 % in the second lot: the unchanged
    pores are flagged no more often than the size band allows and grinding most of the time."""
    moduli = np.array([[8.0, 16.0], [8.0, 16.0]])
    same = L.simulated_tests(moduli, [[500.0, 480.0], [500.0, 480.0]], 30, 800, seed=2026, calibrate=None)
    up = L.simulated_tests(moduli, [[500.0, 480.0], [500.0, 528.0]], 30, 400, seed=2027, calibrate=None)
    for result, n in ((same, 800), (up, 400)):
        assert result["dropped"].mean() < 0.01
    band = 3 * np.sqrt(0.05 * 0.95 / 800)
    for key in ("p_same_population", "p_same_modulus"):
        size = np.nanmean(same[key] <= 0.05 + 1e-12, axis=0)
        assert np.all(np.abs(size - 0.05) < band), (key, size)
    assert np.nanmean(up["p_same_population"][:, 0] <= 0.05 + 1e-12) < 0.05 + 3 * np.sqrt(0.05 * 0.95 / 400)
    assert np.nanmean(up["p_same_population"][:, 1] <= 0.05 + 1e-12) > 0.8
