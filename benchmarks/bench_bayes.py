"""Speed of the Bayesian fit (issue 3): two concurrent populations, N = 40, default settings.

Target: under 10 s with R-hat <= 1.01 and bulk ESS >= 1000 for every parameter. The reference
timed in the same run is the same fit with emcee's default stretch move.
Run:  python benchmarks/bench_bayes.py
"""
from __future__ import annotations

import sys
import time
import warnings
from pathlib import Path

import emcee
import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
import flawmix as fm  # noqa: E402


def campaign(seed):
    rng = np.random.default_rng(seed)
    draws = np.stack([400 * rng.weibull(6, 40), 420 * rng.weibull(15, 40)], 1)
    origin = np.where(draws.argmin(1) == 0, "pore", "machining").astype(object)
    origin[rng.random(40) < 0.25] = "?"
    return fm.read_specimens(pd.DataFrame({"strength": draws.min(1), "origin": origin}))


def run(sp, seed, moves=None):
    t = time.perf_counter()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        r = fm.bayes.fit_bayes(sp, seed=seed, moves=moves)
    return time.perf_counter() - t, r


if __name__ == "__main__":
    import flawmix.bayes  # noqa: F401
    fm.fit(campaign(0), method="bayes")   # warm-up: imports, first compilation of arviz paths
    print("== two concurrent populations, N = 40, a quarter unidentified, default settings")
    rows = []
    for seed in range(3):
        sp = campaign(seed)
        ours, r = run(sp, seed)
        ref, r_ref = run(sp, seed, emcee.moves.StretchMove())
        d = r.extras["diagnostics"]
        rows.append((ours, ref, d, r.extras["ess_per_second"], r_ref.extras["ess_per_second"]))
        print(f"  data set {seed}: {ours:.2f} s (target < 10 s), R-hat max {d['r_hat_max']:.4f}, "
              f"bulk ESS min {d['ess_bulk_min']:.0f}, tail ESS min {d['ess_tail_min']:.0f}, "
              f"{r.extras['ess_per_second']:.0f} effective samples/s; "
              f"stretch-move reference {ref:.2f} s, {r_ref.extras['ess_per_second']:.0f}/s; ratio {ref / ours:.2f}")
    print(f"  median time {np.median([x[0] for x in rows]):.2f} s; median ratio reference/ours "
          f"{np.median([x[1] / x[0] for x in rows]):.2f}")
