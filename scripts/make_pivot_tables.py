"""Regenerate flawmix/data/pivots.npz: Monte Carlo quantiles of the complete-sample pivots.

Every N from 2 to 100 with 200 000 replicates (the same seeded simulation as
``flawmix.pivots.complete_sample_pivots``, so those entries equal a fresh simulation), then a
grid of N up to 10 000 with at most 10^8 simulated strengths per N (quantile Monte Carlo error
below 0.3 % of the interval half-width). Seeded: running it again gives the same file.
Run:  python scripts/make_pivot_tables.py        (about 5 CPU minutes)
"""
from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
from flawmix.pivots import (DEFAULT_REPLICATES, DEFAULT_SEED, TABLE_PROBABILITIES,  # noqa: E402
                            complete_sample_pivots)

EXACT_N = list(range(2, 101))
GRID_N = [110, 120, 130, 140, 150, 165, 180, 200, 225, 250, 275, 300, 350, 400, 450, 500, 600, 700, 800,
          900, 1000, 1200, 1400, 1700, 2000, 2500, 3000, 3500, 4000, 5000, 6000, 7000, 8500, 10_000]
MAX_ELEMENTS = 100_000_000


def main(out: Path) -> None:
    rows = []
    start = time.process_time()
    for n in EXACT_N + GRID_N:
        replicates = DEFAULT_REPLICATES if n <= 100 else min(DEFAULT_REPLICATES, MAX_ELEMENTS // n)
        piv = complete_sample_pivots.__wrapped__(n, replicates, DEFAULT_SEED)
        rows.append((n, replicates, piv.unbiasing_factor,
                     np.quantile(piv.modulus_ratio, TABLE_PROBABILITIES),
                     np.quantile(piv.scale_pivot, TABLE_PROBABILITIES)))
        print(f"N = {n}: {replicates} replicates, UF {piv.unbiasing_factor:.4f}, "
              f"{time.process_time() - start:.0f} CPU s so far", file=sys.stderr, flush=True)
    np.savez_compressed(
        out,
        n=np.array([r[0] for r in rows]),
        replicates=np.array([r[1] for r in rows]),
        unbiasing_factor=np.array([r[2] for r in rows]),
        probabilities=np.asarray(TABLE_PROBABILITIES),
        modulus_ratio=np.stack([r[3] for r in rows]),
        scale_pivot=np.stack([r[4] for r in rows]),
        seed=np.array(DEFAULT_SEED),
    )
    print(f"wrote {out}", file=sys.stderr)


if __name__ == "__main__":
    main(Path(__file__).resolve().parents[1] / "flawmix" / "data" / "pivots.npz")
