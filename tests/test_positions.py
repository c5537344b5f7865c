"""Plotting positions, adjusted ranks and the graphical regression estimate."""
import numpy as np
import pandas as pd
import pytest
from scipy import stats

import flawmix as fm
from flawmix.positions import adjusted_ranks, plotting_positions


def test_johnson_adjusted_ranks_check_vector():
    # Kececioglu, Reliability & Life Testing Handbook vol. 2 (1994), Table 3.1 — values [mem]
    # via a secondary page, recomputed [calc] (DOMAIN.md section 3).
    strength = [5100, 9500, 15000, 22000, 40000]
    failed = [True, False, True, False, True]
    idx, ranks = adjusted_ranks(strength, failed)
    np.testing.assert_allclose(ranks, [1.0, 2.25, 4.125])
    np.testing.assert_array_equal(idx, [0, 2, 4])
    np.testing.assert_allclose(plotting_positions(ranks, 5, "median-rank"), [0.1296, 0.3611, 0.7083], atol=5e-5)


def test_adjusted_ranks_without_suspensions_are_plain_ranks():
    s = np.array([3.0, 1.0, 2.0, 5.0])
    idx, ranks = adjusted_ranks(s, np.ones(4, bool))
    np.testing.assert_allclose(ranks, [1, 2, 3, 4])
    np.testing.assert_array_equal(s[idx], [1, 2, 3, 5])


@pytest.mark.parametrize("rule, expected", [("hazen", (0.5, 0.0)), ("mean-rank", (0.0, 1.0)), ("median-rank", (0.3, 0.4))])
def test_position_rules(rule, expected):
    a, b = expected
    np.testing.assert_allclose(plotting_positions([1, 2, 3], 10, rule), (np.array([1, 2, 3]) - a) / (10 + b))


def test_regression_estimate_matches_scipy_linregress():
    # Reference: scipy.stats.linregress of ln ln 1/(1−P) on ln σ, P = (i − 0.5)/N (common practice).
    rng = np.random.default_rng(9)
    s = np.sort(200 * rng.weibull(7, 25))
    r = fm.fit(pd.DataFrame({"strength": s}), intervals="none")
    p = (np.arange(1, 26) - 0.5) / 25
    fit = stats.linregress(np.log(s), np.log(-np.log(1 - p)))
    assert r.populations[0].regression_modulus == pytest.approx(fit.slope, rel=1e-10)
    assert r.populations[0].regression_strength == pytest.approx(np.exp(-fit.intercept / fit.slope), rel=1e-10)


def _adjusted_ranks_by_hand(strength, failed):
    # Johnson's recursion written out specimen by specimen (DOMAIN.md section 3): sort by
    # strength, failures before suspensions at ties (then input order), reverse rank k = N for
    # the weakest, i_j = i_{j-1} + (N + 1 - i_{j-1}) / (1 + k) at each failure.
    n = len(strength)
    order = sorted(range(n), key=lambda i: (strength[i], not failed[i], i))
    previous, out_idx, out_rank = 0.0, [], []
    for position, i in enumerate(order):
        if failed[i]:
            previous += (n + 1 - previous) / (1 + (n - position))
            out_idx.append(i)
            out_rank.append(previous)
    return np.array(out_idx, int), np.array(out_rank)


def test_adjusted_ranks_with_ties_and_a_shared_sort_match_the_recursion_by_hand():
    from flawmix.positions import strength_order

    rng = np.random.default_rng(12)
    for trial in range(200):
        n = int(rng.integers(1, 40))
        s = rng.integers(1, 6, n).astype(float) if trial % 2 else rng.random(n)   # many ties, or none
        f = rng.random(n) < rng.random()
        expected_idx, expected_rank = _adjusted_ranks_by_hand(list(s), list(f))
        for order in (None, strength_order(s)):
            idx, ranks = adjusted_ranks(s, f, order)
            np.testing.assert_array_equal(idx, expected_idx)
            np.testing.assert_allclose(ranks, expected_rank, rtol=1e-12)
