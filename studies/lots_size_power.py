"""Size and power of the lot comparison's likelihood-ratio tests, by seeded simulation.

Two lots of N specimens, two concurrent populations (invented truth: pores m = 8,
σθ = 500 MPa; grinding damage m = 16, σθ = 480 MPa, about half the failures each), every
origin identified unless --unidentified says otherwise. Scenario "no change": both lots
equal; the 5 % test of "this population is the same in every lot" should reject 5 % of the
time. Scenario "grinding +10 %": the second lot's grinding σθ is 10 % higher; the rejection
rate of grinding is the power, that of the unchanged pores must stay at the size.
Binomial standard errors sqrt(p(1 − p)/R) are printed beside every rate.

Run:  python studies/lots_size_power.py [--replicates 2000] [--n 30] [--seed 2026] [--unidentified 0]
      python studies/lots_size_power.py --replicates 400 --calibrate 99   (about 15 CPU minutes)
"""
from __future__ import annotations

import argparse
import math
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))   # this checkout's flawmix, not an installed one
from flawmix.lots import simulated_tests  # noqa: E402

MODULI = [[8.0, 16.0], [8.0, 16.0]]
SCENARIOS = {"no change": [[500.0, 480.0], [500.0, 480.0]],
             "grinding +10 %": [[500.0, 480.0], [500.0, 528.0]],
             "pores +10 %": [[500.0, 480.0], [550.0, 480.0]]}
POPULATIONS = ("pores", "grinding")


def rate(p_values: np.ndarray, level: float = 0.05, calibrated: bool = False) -> tuple[float, float, int]:
    """Share rejected at ``level``; a bootstrap p-value (1 + c)/(B + 1) rejects when p ≤ level
    (with B = 99 that is exactly 5 % for a pivotal statistic), a χ² one when p < level."""
    ok = p_values[np.isfinite(p_values)]
    r = float(np.mean(ok <= level + 1e-12)) if calibrated else float(np.mean(ok < level))
    return r, math.sqrt(r * (1 - r) / ok.size), ok.size


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--replicates", type=int, default=2000)
    parser.add_argument("--n", type=int, default=30, help="specimens per lot")
    parser.add_argument("--seed", type=int, default=2026)
    parser.add_argument("--unidentified", type=float, default=0.0, help="share of origins not identified")
    parser.add_argument("--calibrate", type=int, default=0, metavar="B",
                        help="parametric-bootstrap replicates per data set for the 'same in every lot' test "
                             "(0: χ² p-values; 99 makes the 5 %% level exact for a pivotal statistic)")
    parser.add_argument("--scenarios", nargs="+", default=list(SCENARIOS), choices=list(SCENARIOS))
    parser.add_argument("--save", metavar="FILE.npz", help="also save every p-value")
    args = parser.parse_args()
    print(f"two lots of {args.n}, {args.replicates} data sets per scenario, seed {args.seed}, "
          f"unidentified {args.unidentified:g}, calibration {args.calibrate or 'χ²'}; "
          "rejection rate at 5 % ± binomial standard error")
    for i, (name, scales) in enumerate(SCENARIOS.items()):
        if name not in args.scenarios:
            continue
        start = time.perf_counter()
        out = simulated_tests(MODULI, scales, args.n, args.replicates, seed=args.seed + i,
                              unidentified=args.unidentified, progress=True, calibrate=args.calibrate,
                              calibrate_keys=("same_population",))
        seconds = time.perf_counter() - start
        if args.save:
            np.savez(args.save.replace(".npz", f"_{i}.npz"), **out)
        print(f"\n{name} ({seconds:.1f} s, {1000 * seconds / args.replicates:.1f} ms per data set; "
              f"dropped {int(out['dropped'].sum())} with a population absent from a lot)")
        keys = (("p_same_population", "same in every lot (2 df)"), ("p_same_modulus", "same modulus (1 df, χ²)"))
        for key, what in keys[:1] if args.calibrate else keys:
            for j, pop in enumerate(POPULATIONS):
                r, se, used = rate(out[key][:, j], calibrated=bool(args.calibrate) and key == "p_same_population")
                print(f"  {pop:<9} {what:<26} {100 * r:5.2f} % ± {100 * se:4.2f} %  ({used} data sets)")


if __name__ == "__main__":
    main()
