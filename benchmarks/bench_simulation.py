"""Speed of the replicate engine (issue 6): 10,000 fits of a two-population concurrent
campaign of N = 30, all origins identified (target < 5 s) and with a quarter unidentified
(target < 30 s), against a per-replicate loop of flawmix's own single fit timed in the same
run on a subset and scaled to 10,000.
Run:  python benchmarks/bench_simulation.py
"""
from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
from flawmix import likelihood as lik  # noqa: E402
from flawmix.mle import _maximise  # noqa: E402
from flawmix.montecarlo import simulate_and_fit  # noqa: E402
from flawmix.simulate import Design, replicate, simulate  # noqa: E402

MODEL = lik.Model("concurrent", 2)
M, S = [6.0, 15.0], [400.0, 420.0]

if __name__ == "__main__":
    for unidentified, target in ((0.0, 5.0), (0.25, 30.0)):
        design = Design.simple(30, unidentified)
        t = time.perf_counter()
        fits = simulate_and_fit(MODEL, M, S, None, design, 10_000, seed=1)
        ours = time.perf_counter() - t
        data = simulate(MODEL, M, S, None, design, 300, np.random.default_rng(2))
        t = time.perf_counter()
        for r in range(300):
            _maximise(replicate(data, r))
        loop = (time.perf_counter() - t) / 300 * 10_000
        print(f"== 10,000 campaigns, N = 30, {unidentified:.0%} unidentified")
        print(f"  simulate + fit, vectorised: {ours:.2f} s (target < {target:g} s); fitted {fits.ok.mean():.1%}")
        print(f"  per-replicate loop of the single fit (300 timed, scaled): {loop:.2f} s; ratio loop/ours {loop / ours:.1f}")
