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
    for p in L.compare_lots(unknown, POPS3, calibrate=39).populations:
        reference = p.same_population["reference"]
        assert reference.startswith("parametric bootstrap of the null fit") and "of 39 replicates" in reference


class _Observed:
    """One lot's observed table as a batch of one replicate (the shape simulate() returns)."""

    def __init__(self, data, centre):
        self.y, self.failed, self.candidates = (data.y + centre)[None], data.failed[None], data.candidates[None]


@pytest.mark.parametrize("seed,unknown,survive_at", [(11, 0.25, None), (12, 0.4, 540.0)])
def test_batched_refits_equal_the_general_joint_fit_with_unidentified_origins(seed, unknown, survive_at):
    """The bootstrap's batched Newton refits (free and tied, started at the null fit) give the
    observed table (free refit also started at the observed free fit, as in the bootstrap)
    the same statistic as lots.likelihood_ratio_tests, whose maxima
    tests/test_lots.py checks against a brute-force optimiser."""
    rng = np.random.default_rng(seed)
    frame = pd.concat([campaign(rng, 30, TRUTH3, unknown, survive_at, name) for name in ("a", "b")],
                      ignore_index=True)
    model = L.lot_model(L.read_lots(frame, POPS3))
    assert not LC.applies(model)
    free = L.maximise(model)
    tests = L.likelihood_ratio_tests(model, free)
    batches = [_Observed(data, model.centre) for data in model.per_lot]
    for j in range(model.k):
        for key, tie in (("same_population", model.tie_same_population(j)), ("same_modulus", model.tie_same_modulus(j))):
            statistic, usable = LC.general_statistics(model, batches, tests[j][key]["theta"], tie, (free.theta,))
            assert usable[0] and statistic[0] == pytest.approx(tests[j][key]["statistic"], abs=1e-6)


def test_lots_on_several_geometries_keep_the_chi2_reference_and_say_so():
    from flawmix.geometry import Geometry

    rng = np.random.default_rng(21)
    frame = pd.concat([campaign(rng, 25, {"pore": (10.0, 450.0)}, lot=name).assign(geometry=name)
                       for name in ("large", "small")], ignore_index=True)
    geometries = {"large": Geometry.from_spec("large", {"type": "flexure-4pt", "width": 4, "depth": 3,
                                                        "outer_span": 40, "inner_span": 20}),
                  "small": Geometry.from_spec("small", {"type": "flexure-3pt", "width": 2, "depth": 1.5,
                                                        "outer_span": 20})}
    model = L.lot_model(L.read_lots(frame, {"pores": {"kind": "volume", "labels": ["pore"]}}), geometries)
    assert not LC.applies(model)
    tests = L.reference_p_values(model, None, L.likelihood_ratio_tests(model), None)
    assert tests[0]["same_population"]["reference"] == "χ²; not calibrated (lots on several geometries)"
    assert tests[0]["same_population"]["p_value"] == pytest.approx(
        stats.chi2.sf(tests[0]["same_population"]["statistic"], 2), rel=1e-12)
    with pytest.raises(L.FlawmixError, match="several geometries"):
        L.reference_p_values(model, None, tests, 99)


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


@pytest.mark.slow
def test_bootstrap_reference_keeps_its_size_with_unidentified_origins():
    """400 seeded data sets of two lots of 30 with a quarter of the origins unidentified
    (same invented truth), 99 batched bootstrap refits per test: each "same in every lot" test
    rejects a true "no change" at 5 % within three binomial standard errors."""
    moduli = np.array([[8.0, 16.0], [8.0, 16.0]])
    same = L.simulated_tests(moduli, [[500.0, 480.0], [500.0, 480.0]], 30, 400, seed=2028, unidentified=0.25,
                             calibrate=99, calibrate_keys=("same_population",))
    kept = np.sum(~same["dropped"])
    assert kept > 390
    size = np.nanmean(same["p_same_population"] <= 0.05 + 1e-12, axis=0)
    assert np.all(np.abs(size - 0.05) < 3 * np.sqrt(0.05 * 0.95 / kept)), size


def test_too_few_replicates_is_a_one_line_cli_error(tmp_path, capsys):
    from flawmix.cli import main

    path = tmp_path / "lots.csv"
    _labelled_lots(6, lots=("a", "b")).to_csv(path, index=False)
    assert main(["lots", str(path), "--calibrate", "5", "--quiet"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "needs at least 19 replicates, got 5" in err[0]
