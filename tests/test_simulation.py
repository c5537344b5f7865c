"""Simulation engine, batched replicate fits, bootstrap intervals and test planning."""
import json
import subprocess
import sys
from concurrent.futures import ThreadPoolExecutor

import numpy as np
import pandas as pd
import pytest
from scipy import stats

import flawmix as fm
from flawmix import likelihood as lik
from flawmix.mle import _maximise
from flawmix.montecarlo import simulate_and_fit
from flawmix.plan import plan
from flawmix.replicates import fit_concurrent_batch, pooled_loglik
from flawmix.simulate import Design, replicate, simulate

from conftest import simulate_campaign

CONC = lik.Model("concurrent", 2)


@pytest.mark.parametrize("unidentified", [0.0, 0.3])
def test_batched_fits_equal_one_at_a_time_fits(unidentified):
    rng = np.random.default_rng(70)
    data = simulate(CONC, [5.0, 15.0], [400.0, 420.0], None, Design.simple(30, unidentified, 460.0), 60, rng)
    m, s, ll, ok = fit_concurrent_batch(data)
    for r in range(60):
        if not ok[r]:
            continue
        opt, *_ = _maximise(replicate(data, r))
        assert ll[r] == pytest.approx(opt.loglik, abs=1e-7)
        np.testing.assert_allclose(m[r], np.exp(opt.theta[:2]), rtol=1e-6)


def test_simulated_campaigns_follow_the_model():
    # The survival of simulated strengths matches 1 − F of the model (Kolmogorov-Smirnov,
    # scipy.stats.kstest) and origin shares match ∫ h_j S (scipy.integrate.quad).
    from scipy import integrate
    rng = np.random.default_rng(71)
    m, s = np.array([5.0, 15.0]), np.array([400.0, 420.0])
    data = simulate(CONC, m, s, None, Design.simple(20000), 1, rng)
    x = np.exp(data.y[0])
    sf = lambda t: np.exp(-((np.asarray(t)[..., None] / s) ** m).sum(-1))
    assert stats.kstest(x, lambda t: 1 - sf(t)).pvalue > 0.01
    share_a = integrate.quad(lambda t: (m[0] / t) * (t / s[0]) ** m[0] * sf(t), 0, np.inf)[0]
    assert data.candidates[0][:, 0].mean() == pytest.approx(share_a, abs=0.015)


def test_pivots_of_the_simulation_engine_agree_with_the_published_table():
    # DOMAIN.md section 3 [calc, 500 000 replicates]: N = 20, UF 0.9290, q05 0.793, q95 1.451.
    model = lik.Model("concurrent", 1)
    fits = simulate_and_fit(model, [1.0], [1.0], None, Design.simple(20), 100_000, seed=3)
    ratio = fits.moduli[fits.ok, 0]
    assert 1 / ratio.mean() == pytest.approx(0.9290, abs=0.003)
    assert np.quantile(ratio, 0.05) == pytest.approx(0.793, rel=0.01)
    assert np.quantile(ratio, 0.95) == pytest.approx(1.451, rel=0.01)


def test_results_do_not_depend_on_workers_or_executor():
    args = (CONC, [5.0, 15.0], [400.0, 420.0], None, Design.simple(25, 0.25), 2500)
    a = simulate_and_fit(*args, seed=9)
    with ThreadPoolExecutor(max_workers=3) as pool:
        b = simulate_and_fit(*args, seed=9, executor=pool)
    np.testing.assert_array_equal(a.moduli, b.moduli)
    np.testing.assert_array_equal(a.loglik, b.loglik)


def test_runs_on_a_dask_local_cluster():
    distributed = pytest.importorskip("distributed")
    args = (CONC, [5.0, 15.0], [400.0, 420.0], None, Design.simple(25, 0.25), 1500)
    local = simulate_and_fit(*args, seed=4, chunk_size=500)
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=False, dashboard_address=None) as cluster, \
            distributed.Client(cluster) as client:
        remote = simulate_and_fit(*args, seed=4, chunk_size=500, executor=client.get_executor())
    np.testing.assert_array_equal(local.moduli, remote.moduli)


def test_pooled_loglik_is_the_common_modulus_fit():
    rng = np.random.default_rng(72)
    data = simulate(CONC, [5.0, 15.0], [400.0, 420.0], None, Design.simple(40, 0.2, 450.0), 5, rng)
    pooled = pooled_loglik(data)
    from flawmix.mle import common_modulus_tie
    for r in range(5):
        opt, *_ = _maximise(replicate(data, r), common_modulus_tie(2))
        assert pooled[r] == pytest.approx(opt.loglik, abs=1e-6)


def test_bootstrap_adds_intervals_and_is_seeded():
    rng = np.random.default_rng(73)
    sp = fm.read_specimens(simulate_campaign(rng, n=40, unknown=0.2))
    a = fm.fit(sp, bootstrap=300, seed=5)
    b = fm.fit(sp, bootstrap=300, seed=5)
    np.testing.assert_array_equal(a.draws.moduli, b.draws.moduli)
    assert a.populations[0].interval_method.startswith("profile")   # likelihood intervals kept
    pf = a.failure_probability([380.0])
    assert pf["low"].iloc[0] < pf["estimate"].iloc[0] < pf["high"].iloc[0]
    c = fm.fit(sp, intervals="bootstrap", bootstrap=300, seed=5)
    assert c.populations[0].interval_method.startswith("parametric bootstrap")
    assert set(c.extras["bootstrap"]["modulus_bias_corrected"]) == {"machining", "pore"}


def test_plan_table_and_cli(tmp_path):
    p = plan([{"name": "a", "modulus": 5, "characteristic_strength": 400},
              {"name": "b", "modulus": 15, "characteristic_strength": 420}], sizes=[15, 60], replicates=400)
    t = p.table
    # more specimens: tighter modulus, more power
    assert t.loc[(60, "a"), "modulus ±%"] < t.loc[(15, "a"), "modulus ±%"]
    assert t.loc[(60, "a"), "power (two populations)"] > t.loc[(15, "a"), "power (two populations)"]
    out = tmp_path / "plan.png"
    proc = subprocess.run([sys.executable, "-m", "flawmix", "plan", "--population", "a:5:400", "--population",
                           "b:15:420", "--sizes", "20", "30", "--replicates", "200", "--json", "--plot", str(out)],
                          capture_output=True, text=True)
    assert proc.returncode == 0, proc.stderr
    d = json.loads(proc.stdout)
    assert len(d["rows"]) == 4 and out.stat().st_size > 5000


def test_plan_power_is_the_test_size_when_populations_are_equal():
    # same modulus for both: "power" is the false-alarm rate of the 5 % likelihood-ratio test
    p = plan([{"name": "a", "modulus": 10, "characteristic_strength": 400},
              {"name": "b", "modulus": 10, "characteristic_strength": 420}], sizes=[60], replicates=2000, seed=1)
    size = p.table["power (two populations)"].iloc[0]
    assert abs(size - 0.05) < 3 * np.sqrt(0.05 * 0.95 / 2000) + 0.01


@pytest.mark.slow
def test_bootstrap_intervals_reach_nominal_coverage_for_a_censored_two_population_case():
    rng = np.random.default_rng(74)
    M, S = np.array([5.0, 15.0]), np.array([480.0, 450.0])
    reps = 400
    sims = simulate(CONC, M, S, None, Design.simple(40, 0.2, 470.0), reps, rng)
    hits, used = np.zeros(4), 0
    for r in range(reps):
        d = replicate(sims, r)
        origin = np.where(d.candidates.sum(-1) > 1, "?", np.array(["a", "b"])[d.candidates.argmax(-1)])
        frame = pd.DataFrame({"strength": np.exp(d.y), "origin": np.where(d.failed, origin, ""),
                              "status": np.where(d.failed, "failed", "survived")})
        try:
            res = fm.fit(frame, intervals="bootstrap", bootstrap=400, seed=r)
        except fm.FlawmixError:
            continue
        if [p.name for p in res.populations] != ["a", "b"]:
            continue
        used += 1
        for j, p in enumerate(res.populations):
            hits[2 * j] += p.modulus_interval[0] < M[j] < p.modulus_interval[1]
            hits[2 * j + 1] += p.strength_interval[0] < S[j] < p.strength_interval[1]
    sd = np.sqrt(0.09 / used)
    assert np.all(np.abs(hits / used - 0.9) < 3 * sd + 0.01)
