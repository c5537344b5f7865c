"""Coverage of flawmix's default 90 % intervals over a grid of hard cases (seeded).

Campaigns are drawn here with numpy alone (not flawmix.simulate), and every true value
(moduli, characteristic strengths, the failure probability at a stress, the stress at a
failure probability) comes from the chosen truth by closed form or scipy root finding, so
nothing under test computes the reference. Prints coverage ± one binomial standard error.

    python studies/interval_coverage.py --replicates 400 [--cells issue,small] [--intervals auto]
"""
from __future__ import annotations

import argparse
import math
import sys
import time
import warnings

from pathlib import Path

import numpy as np
import pandas as pd
from scipy import optimize

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))   # this checkout's flawmix, not an installed one

# name: N, moduli, characteristic strengths, share of origins unidentified, expected survivors
CELLS = {
    # the scenario of the issue: concurrent, crossing, m 5/15, 30 % unidentified, ~2 survivors
    "issue": dict(n=30, moduli=(5.0, 15.0), scales=(430.0, 400.0), unidentified=0.3, survivors=2.0),
    # smallest N, modulus ratio 3, all origins identified, no survivors
    "small": dict(n=15, moduli=(4.0, 12.0), scales=(500.0, 420.0), unidentified=0.0, survivors=0.0),
    # N 40, 40 % unidentified, ratio 2, a few survivors
    "hidden": dict(n=40, moduli=(6.0, 12.0), scales=(450.0, 420.0), unidentified=0.4, survivors=3.0),
    # N 25, ratio 3, 20 % unidentified, crossing inside the data, survivors
    "ratio3": dict(n=25, moduli=(4.0, 12.0), scales=(480.0, 430.0), unidentified=0.2, survivors=2.0),
    # non-crossing in the data range (hazards cross near 270 MPa, data near 400): the weak-slope
    # population is rare, about 5 certain failures of 30 (the edge of estimability)
    "rare": dict(n=30, moduli=(8.0, 12.0), scales=(520.0, 420.0), unidentified=0.1, survivors=1.0),
}
STRESS_PROBABILITY = 0.10     # failure probability at the true 10 % quantile ...
STRENGTH_PROBABILITY = 0.05   # ... and the stress at a 5 % failure probability


def cumulative_hazard(stress, moduli, scales):
    return sum((stress / s) ** m for m, s in zip(moduli, scales))


def true_quantile(probability, moduli, scales):
    target = -math.log1p(-probability)
    return math.exp(optimize.brentq(lambda x: cumulative_hazard(math.exp(x), moduli, scales) - target, -20, 20,
                                    xtol=1e-14))


def censor_stress(cell):
    """The stress at which the expected number of survivors equals the cell's."""
    if cell["survivors"] <= 0:
        return math.inf
    return true_quantile(1.0 - cell["survivors"] / cell["n"], cell["moduli"], cell["scales"])


def draw_campaign(cell, rng, censor):
    """One campaign: the weakest population's flaw breaks each specimen (concurrent risks)."""
    n, k = cell["n"], len(cell["moduli"])
    draws = np.stack([s * rng.weibull(m, n) for m, s in zip(cell["moduli"], cell["scales"])], axis=1)
    strength, origin = draws.min(axis=1), draws.argmin(axis=1)
    failed = strength < censor
    names = np.array([chr(ord("a") + j) for j in range(k)], dtype=object)
    label = np.where(rng.random(n) < cell["unidentified"], "?", names[origin])
    return pd.DataFrame({"strength": np.where(failed, strength, censor),
                         "origin": np.where(failed, label, ""),
                         "status": np.where(failed, "failed", "survived")})


def covered(interval, truth) -> bool:
    low, high = interval
    low = -math.inf if low is None or not np.isfinite(low) else low
    high = math.inf if high is None or not np.isfinite(high) else high
    return bool(low <= truth <= high)


def run_cell(name, replicates, seed, intervals):
    import flawmix as fm

    cell = CELLS[name]
    rng = np.random.default_rng([seed, list(CELLS).index(name)])
    censor = censor_stress(cell)
    stress = true_quantile(STRESS_PROBABILITY, cell["moduli"], cell["scales"])
    strength_truth = true_quantile(STRENGTH_PROBABILITY, cell["moduli"], cell["scales"])
    hits: dict[str, list[bool]] = {}
    errors, seconds, methods = 0, [], set()
    derived_seconds = []
    for _ in range(replicates):
        frame = draw_campaign(cell, rng, censor)
        start = time.perf_counter()
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                result = fm.fit(frame, intervals=intervals)
                queried = time.process_time()
                fp = result.failure_probability(stress)
                if "low" not in fp:   # no default interval: the normal approximation, for comparison
                    fp = result.failure_probability(stress, approximate=True)
                sp = result.strength_at(STRENGTH_PROBABILITY)
                derived_seconds.append((time.process_time() - queried) / 2)
                old = bootstrap_t(result, stress, STRENGTH_PROBABILITY)
        except Exception as error:   # a crash is a result of the study, counted and shown
            errors += 1
            print(f"  {name}: {type(error).__name__}: {error}", file=sys.stderr)
            continue
        seconds.append(time.perf_counter() - start)
        if old is not None:   # former defaults on the same refits: bootstrap-t, the calibrated profile
            hits.setdefault("P_f(σ) bootstrap-t", []).append(covered(old[0], STRESS_PROBABILITY))
            hits.setdefault("σ(P_f) bootstrap-t", []).append(covered(old[1], strength_truth))
            calibrated = other_cut(result, stress, STRENGTH_PROBABILITY, "calibrated")
            hits.setdefault("P_f(σ) calibrated profile", []).append(covered(calibrated[0], STRESS_PROBABILITY))
            hits.setdefault("σ(P_f) calibrated profile", []).append(covered(calibrated[1], strength_truth))
        for column, quantity in ((fp, "P_f(σ)"), (sp, "σ(P_f)")):
            if "interval_method" in column:
                methods.add(f"{quantity}: {column['interval_method'].iloc[0]}")
        for p in result.populations:
            j = ord(p.name) - ord("a")   # by name: a set whose failures all came from b has one population
            hits.setdefault(f"m_{p.name}", []).append(covered(p.modulus_interval, cell["moduli"][j]))
            hits.setdefault(f"σθ_{p.name}", []).append(covered(p.strength_interval, cell["scales"][j]))
            methods.add(p.interval_method)
        if "low" in fp:
            hits.setdefault("P_f(σ)", []).append(covered((fp["low"].iloc[0], fp["high"].iloc[0]),
                                                         STRESS_PROBABILITY))
        if "low" in sp:
            hits.setdefault("σ(P_f)", []).append(covered((sp["low"].iloc[0], sp["high"].iloc[0]), strength_truth))
    rows = []
    for quantity, h in hits.items():
        c = float(np.mean(h))
        rows.append({"cell": name, "quantity": quantity, "data sets": len(h), "coverage": c,
                     "binomial se": math.sqrt(c * (1 - c) / len(h))})
    derived_median = float(np.median(derived_seconds)) if derived_seconds else math.nan
    return rows, errors, float(np.median(seconds)) if seconds else math.nan, sorted(methods), derived_median


def other_cut(result, stress, probability, cut):
    """The same profiles of ln H(σ) and ln σ_p cut at ``cut`` (``calibrated``: the bootstrap
    drops; ``chi2``: the default), mapped to (P_f low, high) and (σ low, high)."""
    from flawmix import derived

    calibration = result.extras["calibration"]
    with np.errstate(over="ignore"):
        low, high, _, _ = derived.calibrated_intervals(calibration, calibration.observed, derived.HAZARD,
                                                       np.log([stress]), result.confidence, cut=cut)
        fp = (-math.expm1(-math.exp(low[0])), -math.expm1(-math.exp(high[0])))
        low, high, _, _ = derived.calibrated_intervals(calibration, calibration.observed, derived.QUANTILE,
                                                       np.log([-math.log1p(-probability)]), result.confidence,
                                                       cut=cut)
    return fp, (math.exp(low[0]), math.exp(high[0]))


def bootstrap_t(result, stress, probability):
    """The bootstrap-t intervals of P_f(σ) and σ(P_f) from the refits of a calibrated fit (the
    former default), or None for a fit without them."""
    from flawmix.calibration import failure_probability_interval, strength_interval

    calibration, covariance = result.extras.get("calibration"), result.extras.get("covariance")
    if calibration is None or covariance is None:
        return None
    return (failure_probability_interval(calibration, covariance, stress, result.confidence),
            strength_interval(calibration, covariance, probability, result.confidence))


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--replicates", type=int, default=400)
    parser.add_argument("--seed", type=int, default=2026)
    parser.add_argument("--cells", default=",".join(CELLS))
    parser.add_argument("--intervals", default="auto")
    args = parser.parse_args(argv)
    all_rows = []
    for name in args.cells.split(","):
        rows, errors, median, methods, derived = run_cell(name, args.replicates, args.seed, args.intervals)
        all_rows.extend(rows)
        print(f"{name}: {CELLS[name]}; crashes {errors}; median fit and queries {median * 1000:.0f} ms "
              f"(median CPU per derived query {derived * 1000:.0f} ms); methods {methods}", flush=True)
        for r in rows:
            print(f"  {r['quantity']:8s} {100 * r['coverage']:5.1f} % ± {100 * r['binomial se']:.1f} "
                  f"({r['data sets']} data sets)", flush=True)
    return pd.DataFrame(all_rows)


if __name__ == "__main__":
    main()
