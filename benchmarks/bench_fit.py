"""Speed of the maximum-likelihood engine, as ratios against references timed in the same run.

Run:  python benchmarks/bench_fit.py          (about a minute on a 2-core machine)
Targets (issue 2): per-population censored fit >= 200x scipy's censored fit; joint fit of
2 populations, N = 40, a quarter unidentified: median < 5 ms and >= 50x a generic optimiser;
1,000,000 specimens and 3 populations: < 3 s and < 1 GB.
"""
from __future__ import annotations

import json
import statistics
import subprocess
import sys
import time
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
from scipy import optimize, stats

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
import flawmix as fm  # noqa: E402
from flawmix.censored import censored_weibull_mle  # noqa: E402


def median_time(fn, repeat):
    times = []
    for _ in range(repeat):
        t = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t)
    return statistics.median(times)


def campaign(rng, n, unknown, pops=((6.0, 400.0), (15.0, 420.0))):
    draws = np.stack([s * rng.weibull(m, n) for m, s in pops], axis=1)
    origin = np.array([f"p{j}" for j in draws.argmin(axis=1)], dtype=object)
    origin[rng.random(n) < unknown] = "?"
    return pd.DataFrame({"strength": draws.min(axis=1), "origin": origin})


def bench_single(rng):
    s = 400 * rng.weibull(8, 30)
    failed = rng.random(30) < 0.6
    y, w = np.log(s), failed.astype(float)
    data = stats.CensoredData(uncensored=s[failed], right=s[~failed])
    ours = median_time(lambda: censored_weibull_mle(y, w), 2000)
    ref = median_time(lambda: stats.weibull_min.fit(data, floc=0), 30)
    frame = pd.DataFrame({"strength": s, "origin": np.where(failed, "a", "b")})
    sp = fm.read_specimens(frame)
    whole = median_time(lambda: fm.fit(sp, intervals="none"), 200)
    return {"censored fit N=30 (us)": ours * 1e6, "scipy CensoredData fit (ms)": ref * 1e3,
            "ratio scipy/ours": ref / ours, "target ratio": 200,
            "fm.fit 2 labelled populations incl. common-modulus test (ms)": whole * 1e3}


def bench_joint(rng):
    sp = fm.read_specimens(campaign(rng, 40, 0.25))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ours = median_time(lambda: fm.fit(sp, intervals="none"), 200)
    s, F, C = sp.strength, sp.failed, sp.candidates

    def nll(t):  # the same likelihood written with scipy.stats, for a generic optimiser
        m, sc = np.exp(t[:2]), np.exp(t[2:])
        logS = np.stack([stats.weibull_min.logsf(s, m[j], scale=sc[j]) for j in range(2)], 1)
        logh = np.stack([stats.weibull_min.logpdf(s, m[j], scale=sc[j]) for j in range(2)], 1) - logS
        return -(np.where(F, np.log(np.where(C, np.exp(logh), 0).sum(1)), 0) + logS.sum(1)).sum()

    def generic(starts):
        best = np.inf
        for x0 in np.log(np.column_stack([np.linspace(3, 25, starts), np.linspace(25, 3, starts),
                                          np.full(starts, 400.0), np.full(starts, 420.0)])):
            r = optimize.minimize(nll, x0, method="Nelder-Mead", options={"maxiter": 4000, "xatol": 1e-8, "fatol": 1e-10})
            best = min(best, optimize.minimize(nll, r.x, method="BFGS").fun)
        return best

    one = median_time(lambda: generic(1), 7)
    many = median_time(lambda: generic(12), 3)
    return {"joint fit N=40, 25% unidentified, median (ms)": ours * 1e3, "target (ms)": 5,
            "brute force, 12 starts as in tests/test_joint_fit.py (ms)": many * 1e3,
            "ratio brute force/ours": many / ours, "target ratio": 50,
            "generic optimiser, one start (ms)": one * 1e3, "ratio one start/ours": one / ours}


def bench_large():
    code = r"""
import resource, time, json, numpy as np, pandas as pd, sys
sys.path.insert(0, %r)
import flawmix as fm
rng = np.random.default_rng(1)
n = 1_000_000
draws = np.stack([s * rng.weibull(m, n) for m, s in ((5.0, 500.0), (12.0, 450.0), (20.0, 470.0))], 1)
j = draws.argmin(1)
cand = np.zeros((n, 3), bool); cand[np.arange(n), j] = True
unknown = rng.random(n) < 0.1
cand[unknown] = True
sp = fm.Specimens(strength=draws.min(1), failed=np.ones(n, bool), candidates=cand,
                  populations=tuple(fm.Population(f"p{i}") for i in range(3)))
before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
t, cpu = time.perf_counter(), time.process_time()
r = fm.fit(sp)
elapsed, cpu = time.perf_counter() - t, time.process_time() - cpu
peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
print(json.dumps({"seconds": elapsed, "cpu_seconds": cpu, "peak_rss_mb": peak / 1024, "rss_growth_mb": (peak - before) / 1024,
                  "intervals": r.populations[0].interval_method, "moduli": r.moduli.round(3).tolist()}))
""" % str(Path(__file__).resolve().parents[1])
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    d = json.loads(out.stdout)
    return {"1e6 specimens, 3 populations, 10% unidentified, fit incl. intervals (s)": d["seconds"],
            "the same in CPU seconds": d["cpu_seconds"], "target (s)": 3,
            "peak memory of the process (MB)": d["peak_rss_mb"], "memory growth during fit (MB)": d["rss_growth_mb"],
            "target (MB)": 1024, "interval method": d["intervals"], "fitted moduli (true 5, 12, 20)": d["moduli"]}


if __name__ == "__main__":
    rng = np.random.default_rng(2026)
    for name, fn in [("single population", lambda: bench_single(rng)), ("joint fit", lambda: bench_joint(rng)),
                     ("one million specimens", bench_large)]:
        print(f"== {name}")
        for k, v in fn().items():
            print(f"  {k}: {v:.4g}" if isinstance(v, float) else f"  {k}: {v}")
