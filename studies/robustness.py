"""Seeded robustness study of the maximum-likelihood fit over random campaigns
(flawmix/campaigns.py: N 5-500, modulus 2-60, 1-4 populations, 0-50 % unidentified, 0-20 %
survivors). For every campaign: does the fit converge, or say that no finite estimate exists
(or refuse with a FlawmixError naming the population without failures)? Does any library
warning escape? Every ``invariance_every``-th campaign with a converged, finite fit is refitted with its stresses in units
1e-6 and 1e+6 times as large (12 decades): moduli, σθ / c and the log-likelihood shift
n_failed · ln c must agree to 1e-9.

Usage: python studies/robustness.py [count=10000] [first_seed=0] [intervals=none]
(``intervals`` as fm.fit; "auto" also exercises the interval code, about 10x slower).
"""
import collections
import sys
import time
import warnings
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))   # this checkout, not an installed copy
import flawmix as fm  # noqa: E402
from flawmix.campaigns import random_campaign, rescaled  # noqa: E402
from flawmix.mle import NO_FINITE_ESTIMATE  # noqa: E402


def _fit(specimens, intervals):
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            result = fm.fit(specimens, intervals=intervals)
        except fm.FlawmixError as error:
            result = error
    leaked = [f"{w.category.__name__}: {w.message}" for w in caught if not issubclass(w.category, fm.FlawmixWarning)]
    return result, leaked


def _invariance_error(specimens, result, intervals) -> float:
    worst = 0.0
    for factor in (1e-6, 1e6):
        other, _ = _fit(rescaled(specimens, factor), intervals)
        if isinstance(other, Exception):
            return np.inf
        worst = max(worst, float(np.max(np.abs(other.moduli / result.moduli - 1))),
                    float(np.max(np.abs(other.characteristic_strengths / (factor * result.characteristic_strengths) - 1))),
                    abs(other.log_likelihood - (result.log_likelihood - specimens.n_failed * np.log(factor)))
                    / max(1.0, abs(result.log_likelihood)))
    return worst


def run(count=10_000, first=0, intervals="none", invariance_every=10, echo=True) -> dict:
    """The study; returns its figures (and prints them when ``echo``)."""
    outcome = collections.Counter()
    leaks = collections.Counter()
    unexplained, invariance = [], []
    start = time.time()
    for i, seed in enumerate(range(first, first + count)):
        specimens = random_campaign(seed).specimens
        result, leaked = _fit(specimens, intervals)
        for line in leaked:
            leaks[line[:100]] += 1
        if isinstance(result, Exception):
            outcome["refused (a population without failures)" if "no finite Weibull estimate" in str(result)
                    else f"refused: {str(result)[:60]}"] += 1
            continue
        bound = any(NO_FINITE_ESTIMATE in w for w in result.warnings)
        if result.converged:
            outcome["converged" + (" (and says no finite estimate for a population)" if bound else "")] += 1
        elif bound:
            outcome["no finite estimate (said)"] += 1
        else:
            outcome["NOT converged, nothing said"] += 1
            unexplained.append(seed)
        if i % invariance_every == 0 and result.converged and not bound:   # finite estimates only: a
            invariance.append(_invariance_error(specimens, result, intervals))  # run-away point is arbitrary
        if (i + 1) % 1000 == 0:
            print(f"{i + 1} campaigns, {time.time() - start:.0f} s", file=sys.stderr, flush=True)
    inv = np.array(invariance)
    figures = {"outcome": dict(outcome), "unexplained": unexplained, "invariance_max": float(inv.max()),
               "invariance_checked": int(inv.size), "leaks": dict(leaks)}
    if echo:
        print(f"seeds {first}..{first + count - 1}, intervals={intervals}, {time.time() - start:.0f} s")
        for key, n in sorted(outcome.items()):
            print(f"  {key}: {n}")
        print(f"  unexplained (seeds): {unexplained[:20]}")
        print(f"  unit invariance over 12 decades ({inv.size} campaigns): max relative difference {inv.max():.2e}; "
              f"above 1e-9: {(inv > 1e-9).sum()}")
        print(f"  library warnings escaping: {sum(leaks.values())}"
              + "".join(f"\n    {n} x {k}" for k, n in leaks.items()))
    return figures


if __name__ == "__main__":
    args = sys.argv[1:]
    run(int(args[0]) if args else 10_000, int(args[1]) if len(args) > 1 else 0,
         args[2] if len(args) > 2 else "none")
