"""Coverage of Bayesian 90 % credible intervals (reference prior) on the coverage study's campaigns.

The campaigns and true values are those of studies/interval_coverage.py (numpy draws, closed
forms); only the fit differs: ``fm.fit(frame, method="bayes", reference_prior=True)``, its
equal-tailed credible intervals checked against the truth. Prints coverage ± one binomial SE.

    python studies/interval_coverage_bayes.py --cell issue --sets 200 --seed 2026
"""
from __future__ import annotations

import argparse
import math
import sys
import time
import warnings
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
sys.path.insert(0, str(Path(__file__).resolve().parent))

from interval_coverage import CELLS, censor_stress, covered, draw_campaign  # noqa: E402

import flawmix as fm  # noqa: E402


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cell", default="issue", choices=list(CELLS))
    parser.add_argument("--sets", type=int, default=200)
    parser.add_argument("--seed", type=int, default=2026)
    args = parser.parse_args(argv)
    cell = CELLS[args.cell]
    rng = np.random.default_rng([args.seed, list(CELLS).index(args.cell)])   # the coverage study's campaigns
    censor = censor_stress(cell)
    hits: dict[str, list[bool]] = {}
    start, method = time.process_time(), None
    for s in range(args.sets):
        frame = draw_campaign(cell, rng, censor)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            result = fm.fit(frame, method="bayes", reference_prior=True, seed=s)
        for p in result.populations:
            j = ord(p.name) - ord("a")
            hits.setdefault(f"m_{p.name}", []).append(covered(p.modulus_interval, cell["moduli"][j]))
            hits.setdefault(f"σθ_{p.name}", []).append(covered(p.strength_interval, cell["scales"][j]))
            method = p.interval_method
        if (s + 1) % 25 == 0:
            print(f"  {s + 1}/{args.sets} sets, {time.process_time() - start:.0f} CPU s", file=sys.stderr, flush=True)
    print(f"{args.cell}: {cell}; {args.sets} sets, seed {args.seed}; intervals: {method}")
    for quantity, h in hits.items():
        c = float(np.mean(h))
        print(f"  {quantity:6s} {100 * c:5.1f} % ± {100 * math.sqrt(c * (1 - c) / len(h)):.1f} ({len(h)} sets)")


if __name__ == "__main__":
    main()
