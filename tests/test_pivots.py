"""The shipped pivot table (flawmix/data/pivots.npz) against DOMAIN.md and fresh Monte Carlo.

The fresh simulations use seeds the table was not made with, and judge each tabulated
quantile q_p by the share of simulated pivots below it: p within four binomial standard
errors sqrt(p(1 − p)/R).
"""
import numpy as np
import pandas as pd
import pytest

import flawmix as fm
from flawmix.censored import censored_weibull_mle
from flawmix.pivots import TABLE_PROBABILITIES, complete_sample_pivots, pivot_quantiles, ross_unbiasing_factor

# DOMAIN.md section 3 [calc: 500 000 Monte Carlo replicates per N]
DOMAIN_TABLE = {
    #  N: (UF, q05, q95, t05, t95)
    5: (0.6945, 0.682, 2.826, -1.242, 1.090),
    10: (0.8551, 0.738, 1.819, -0.664, 0.642),
    15: (0.9047, 0.771, 1.570, -0.502, 0.499),
    20: (0.9290, 0.793, 1.451, -0.423, 0.419),
    30: (0.9533, 0.821, 1.334, -0.333, 0.332),
    40: (0.9650, 0.840, 1.275, -0.284, 0.285),
    50: (0.9723, 0.854, 1.237, -0.253, 0.253),
    100: (0.9864, 0.890, 1.154, -0.176, 0.176),
}


def _simulate(n, replicates, seed):
    """Independent brute force: m̂/m and m̂ ln(σ̂θ/σθ) of standard Weibull samples."""
    rng = np.random.default_rng([seed, n, 7])
    ratios, pivots = [], []
    chunk = max(1, 4_000_000 // n)
    for start in range(0, replicates, chunk):
        y = np.log(rng.standard_exponential((min(chunk, replicates - start), n)))
        u, v, _ = censored_weibull_mle(y, np.ones_like(y))
        ratios.append(np.exp(u))
        pivots.append(np.exp(u) * v)
    return np.concatenate(ratios), np.concatenate(pivots)


def _check_shares(n, replicates, seed, probabilities=(0.05, 0.95)):
    ratio, pivot = _simulate(n, replicates, seed)
    piv = pivot_quantiles(n, probabilities)
    # UF = 1/E[m̂/m]: the simulated mean within four standard errors
    assert 1 / piv.unbiasing_factor == pytest.approx(ratio.mean(), abs=4 * ratio.std() / np.sqrt(replicates))
    for p in probabilities:
        tolerance = 4 * np.sqrt(p * (1 - p) / replicates)
        assert np.mean(ratio <= piv.modulus_quantile(p)) == pytest.approx(p, abs=tolerance), (n, p, "modulus")
        assert np.mean(pivot <= piv.scale_quantile(p)) == pytest.approx(p, abs=tolerance), (n, p, "scale")
    return piv


@pytest.mark.parametrize("n", sorted(DOMAIN_TABLE))
def test_table_agrees_with_domain_table(n):
    uf, q05, q95, t05, t95 = DOMAIN_TABLE[n]
    piv = pivot_quantiles(n)
    assert piv.source == "table"
    # 200 000 replicates per row: Monte Carlo error of the 5 %/95 % quantiles about 0.1 % to 0.3 %
    assert piv.unbiasing_factor == pytest.approx(uf, abs=0.002)
    assert piv.modulus_quantile(0.05) == pytest.approx(q05, rel=0.004)
    assert piv.modulus_quantile(0.95) == pytest.approx(q95, rel=0.006)
    assert piv.scale_quantile(0.05) == pytest.approx(t05, abs=0.006)
    assert piv.scale_quantile(0.95) == pytest.approx(t95, abs=0.006)


def test_table_rows_are_the_seeded_simulation():
    # the script stores complete_sample_pivots(N) itself for N <= 100: rerunning it agrees exactly
    piv = complete_sample_pivots.__wrapped__(7)
    row = pivot_quantiles(7)
    np.testing.assert_allclose(row.modulus_ratio, np.quantile(piv.modulus_ratio, TABLE_PROBABILITIES), rtol=1e-12)
    np.testing.assert_allclose(row.scale_pivot, np.quantile(piv.scale_pivot, TABLE_PROBABILITIES), rtol=1e-12)
    assert row.unbiasing_factor == pytest.approx(piv.unbiasing_factor, rel=1e-12)


def test_tabulated_row_agrees_with_fresh_monte_carlo():
    assert _check_shares(25, 40_000, seed=11, probabilities=(0.025, 0.05, 0.5, 0.95, 0.975)).source == "table"


@pytest.mark.parametrize("n, replicates", [(137, 20_000), (2_200, 4_000)])
def test_interpolated_n_agrees_with_fresh_monte_carlo(n, replicates):
    assert _check_shares(n, replicates, seed=12).source == "interpolated"


def test_beyond_the_table_agrees_with_fresh_monte_carlo():
    assert _check_shares(14_000, 1_500, seed=13).source == "asymptotic"


def test_probability_between_table_entries_agrees_with_monte_carlo():
    # confidence 0.93: 3.5 % and 96.5 % are interpolated between table probabilities
    assert 0.035 not in TABLE_PROBABILITIES
    _check_shares(20, 60_000, seed=14, probabilities=(0.035, 0.965))


def test_probability_outside_the_table_is_simulated():
    piv = pivot_quantiles(10, (0.0001, 0.9999))
    assert piv.source == "monte carlo"
    assert piv.modulus_quantile(0.0001) < pivot_quantiles(10).modulus_quantile(0.0005)


@pytest.mark.parametrize("n", [300, 3_000, 20_000])
def test_unbiasing_factor_at_large_n_is_close_to_ross(n):
    # Ross (1994) UF ≈ (N − 2)/(N − 0.68), i.e. 1 − UF ≈ 1.32/N; the Monte Carlo rows give
    # N(1 − UF) ≈ 1.41 for N = 50 to 500 (200 000 replicates each), so the two differ by
    # about 0.1/N, plus the table's Monte Carlo error (sd of m̂/m is about 0.78/√N, over at
    # least 10 000 replicates).
    tolerance = 0.15 / n + 4 * 0.78 / np.sqrt(n * 10_000)
    assert pivot_quantiles(n).unbiasing_factor == pytest.approx(ross_unbiasing_factor(n), abs=tolerance)


def test_fit_of_one_complete_population_uses_the_table():
    rng = np.random.default_rng(300)
    s = 500 * rng.weibull(10, 300)
    p = fm.fit(pd.DataFrame({"strength": s})).populations[0]
    piv = pivot_quantiles(300)
    assert p.interval_method == "pivotal"
    # bounds m̂/q95 ≤ m ≤ m̂/q05 and σ̂θ exp(−t95/m̂) ≤ σθ ≤ σ̂θ exp(−t05/m̂) (DOMAIN.md section 3)
    assert p.modulus_interval == pytest.approx((p.modulus / piv.modulus_quantile(0.95),
                                                p.modulus / piv.modulus_quantile(0.05)), rel=1e-12)
    assert p.strength_interval[0] == pytest.approx(p.characteristic_strength * np.exp(-piv.scale_quantile(0.95) / p.modulus),
                                                   rel=1e-12)
    assert p.modulus_unbiased == pytest.approx(p.modulus * piv.unbiasing_factor, rel=1e-12)


@pytest.mark.slow
@pytest.mark.parametrize("n", [3, 8, 64, 105, 190, 470, 1_100, 4_500, 9_000, 12_000, 40_000])
def test_table_and_its_extension_agree_with_long_monte_carlo(n):
    replicates = min(200_000, 200_000_000 // n)
    _check_shares(n, replicates, seed=15, probabilities=(0.005, 0.025, 0.05, 0.1, 0.5, 0.9, 0.95, 0.975, 0.995))
