"""How often the model-comparison verdict says "one population is enough" (seeded study).

Campaigns are drawn here with numpy alone: one pooled population (origin labels independent
of strength), well-separated concurrent populations, and well-separated exclusive ones. The
verdict's lead is the bootstrap test of one population (flawmix.compare.bootstrap_single_test,
the same call compare() makes); the rates below are its acceptance rate of one population
(want >= 90 % under the single truth) and its power (rejections) under the others.

    python studies/model_choice.py --replicates 100 --bootstrap 199 --n 80
"""
from __future__ import annotations

import argparse
import math
import sys
import warnings
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))   # this checkout's flawmix

TRUTHS = {
    # one Weibull law (m 8, σθ 450 MPa); each origin label drawn 50/50 whatever the strength
    "single": dict(kind="single", modulus=8.0, scale=450.0),
    # concurrent: m 4 / 25, σθ 600 / 420 MPa (every specimen carries both flaw types)
    "concurrent": dict(kind="concurrent", moduli=(4.0, 25.0), scales=(600.0, 420.0)),
    # exclusive: the same two laws, half of the specimens carry one, half the other
    "exclusive": dict(kind="exclusive", moduli=(4.0, 25.0), scales=(600.0, 420.0), fraction=0.5),
}


def draw_campaign(truth, n, unidentified, rng):
    if truth["kind"] == "single":
        strength = truth["scale"] * rng.weibull(truth["modulus"], n)
        origin = np.where(rng.random(n) < 0.5, "a", "b")
    else:
        (ma, mb), (sa, sb) = truth["moduli"], truth["scales"]
        a, b = sa * rng.weibull(ma, n), sb * rng.weibull(mb, n)
        if truth["kind"] == "exclusive":
            carries_a = rng.random(n) < truth["fraction"]
            a, b = np.where(carries_a, a, np.inf), np.where(carries_a, np.inf, b)
        strength, origin = np.minimum(a, b), np.where(a < b, "a", "b")
    origin = np.where(rng.random(n) < unidentified, "?", origin)
    return pd.DataFrame({"strength": strength, "origin": origin})


def one_population_rate(name, replicates, n, unidentified, bootstrap, seed):
    import flawmix as fm
    from flawmix.compare import bootstrap_single_test
    from flawmix.evidence import rejects

    rng = np.random.default_rng([seed, list(TRUTHS).index(name)])
    accepted = 0
    for r in range(replicates):
        specimens = fm.read_specimens(draw_campaign(TRUTHS[name], n, unidentified, rng))
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            single = fm.fit(specimens, common_modulus=True, intervals="none")
        test = bootstrap_single_test(specimens, single, bootstrap, seed=r)
        accepted += not rejects(test.p_value)
    rate = accepted / replicates
    return rate, math.sqrt(rate * (1 - rate) / replicates)


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--replicates", type=int, default=100)
    parser.add_argument("--bootstrap", type=int, default=199)
    parser.add_argument("--n", type=int, default=80)
    parser.add_argument("--unidentified", type=float, default=0.1)
    parser.add_argument("--seed", type=int, default=2026)
    args = parser.parse_args(argv)
    for name in TRUTHS:
        rate, se = one_population_rate(name, args.replicates, args.n, args.unidentified, args.bootstrap, args.seed)
        print(f"truth {name:10s}: 'one population is enough' in {100 * rate:5.1f} % ± {100 * se:.1f} "
              f"of {args.replicates} data sets (N {args.n}, {100 * args.unidentified:g} % unidentified, "
              f"{args.bootstrap} bootstrap replicates)", flush=True)


if __name__ == "__main__":
    main()
