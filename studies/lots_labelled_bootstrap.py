"""Size of the "same in every lot" test with a batched labelled bootstrap, against χ² and a Bartlett factor.

Same invented truth as studies/lots_size_power.py (two lots of N = 30, pores m = 8,
σθ = 500 MPa; grinding m = 16, σθ = 480 MPa; every origin identified, no survivors); the
grinding population is tested. With every origin known the concurrent likelihood separates
by population, so each test is a censored Weibull fit per lot (free) against one on the
pooled lots (null), done for all data sets and bootstrap replicates at once with
flawmix.censored.censored_weibull_mle. Bootstrap replicates are drawn from each data set's
null fit (grinding pooled, pores at its own per-lot fit). Three references are compared:
χ² (2 df), Bartlett-corrected χ² (LR × df / mean LR*), and the bootstrap p-value
(1 + #{LR* ≥ LR}) / (1 + B). Rates at 5 % with binomial SE sqrt(p(1 − p)/R).
The statistic is flawmix.lot_calibration's (tests/test_lot_calibration.py checks it against
the general joint fit).

Run:  python studies/lots_labelled_bootstrap.py [--replicates 2000] [--bootstrap 99] [--seed 2026] [--power]
"""
from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np
from scipy import stats

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))   # this checkout's flawmix
from flawmix.censored import censored_weibull_mle  # noqa: E402
from flawmix.lot_calibration import separable_statistic  # noqa: E402

N, TESTED = 30, 1
MODULI = np.array([[8.0, 16.0], [8.0, 16.0]])
SCALES = {"no change": np.array([[500.0, 480.0], [500.0, 480.0]]),
          "grinding +10 %": np.array([[500.0, 480.0], [500.0, 528.0]])}


def draw(rng, moduli, scales, shape):
    """Concurrent campaigns: moduli, scales (..., L, k) broadcast to shape (..., L, N)."""
    x = scales[..., None, :] * rng.weibull(1.0, size=shape + (2,)) ** (1 / moduli[..., None, :])
    return np.log(x.min(-1)), x.argmin(-1)


def lr_same(y, origin, j):
    """LR of "population j the same in every lot" for y (..., L, N) (flawmix.lot_calibration's
    closed forms); NaN where a lot has no j failure. Also the pooled fit (ln m, ln σθ) of j."""
    lead, (L, n) = y.shape[:-2], y.shape[-2:]
    w = (origin == j).astype(float)
    groups = [(y[..., l, :].reshape(-1, n), w[..., l, :].reshape(-1, n)) for l in range(L)]
    statistic, _ = separable_statistic(groups, "same_population")
    a0, b0, _ = censored_weibull_mle(y.reshape(lead + (-1,)), w.reshape(lead + (-1,)))
    return statistic.reshape(lead), a0, b0


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--replicates", type=int, default=2000)
    parser.add_argument("--bootstrap", type=int, default=99)
    parser.add_argument("--seed", type=int, default=2026)
    parser.add_argument("--power", action="store_true", help="grinding +10 %% in the second lot")
    args = parser.parse_args()
    np.seterr(all="ignore")   # data sets without a failure of a population are NaN and dropped
    rng = np.random.default_rng(args.seed)
    R, B, j = args.replicates, args.bootstrap, TESTED
    t0 = time.perf_counter()
    y, origin = draw(rng, MODULI, SCALES["grinding +10 %" if args.power else "no change"], (R, 2, N))
    lr, a0, b0 = lr_same(y, origin, j)
    a_other, b_other, _ = censored_weibull_mle(y, (origin != j).astype(float))
    m, s = np.empty((R, 2, 2)), np.empty((R, 2, 2))
    m[:, :, j], s[:, :, j] = np.exp(a0)[:, None], np.exp(b0)[:, None]
    m[:, :, 1 - j], s[:, :, 1 - j] = np.exp(a_other), np.exp(b_other)
    yb, ob = draw(rng, m[:, None], s[:, None], (R, B, 2, N))
    lrb, _, _ = lr_same(yb, ob, j)
    ok = np.isfinite(lr)
    df = 2
    p = {"χ² (2 df)": (stats.chi2.sf(lr[ok], df), False),
         "Bartlett-corrected χ²": (stats.chi2.sf((lr * df / np.nanmean(lrb, axis=1))[ok], df), False),
         "bootstrap p-value": (((1 + np.nansum(lrb >= lr[:, None] - 1e-9, axis=1))
                                / (1 + np.isfinite(lrb).sum(1)))[ok], True)}
    print(f"{'power' if args.power else 'size'}, grinding, two lots of {N}, {ok.sum()} of {R} data sets, "
          f"B = {B}, seed {args.seed}")
    for name, (pv, bootstrap) in p.items():
        r = float(np.mean(pv <= 0.05 + 1e-12) if bootstrap else np.mean(pv < 0.05))
        print(f"  {name:24s} {100 * r:5.2f} ± {100 * np.sqrt(r * (1 - r) / ok.sum()):.2f} %")
    print(f"  {time.perf_counter() - t0:.1f} s wall")


if __name__ == "__main__":
    main()
