"""Test planning: how many specimens pin each population's modulus and strength, and how
often does a campaign tell two populations apart? Answered by simulating campaigns.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Sequence

import numpy as np
import pandas as pd
from scipy import stats

from . import likelihood as lik
from .errors import FlawmixError
from .montecarlo import simulate_and_fit
from .result import _num
from .simulate import Design

DEFAULT_SIZES = (10, 15, 20, 30, 40, 60, 80)


@dataclass(frozen=True)
class Plan:
    """Precision, bias and power of campaigns of each size (rows: size × population)."""

    table: pd.DataFrame
    assumptions: pd.DataFrame
    replicates: int
    confidence: float
    seed: int
    unidentified: float
    censor_at: float | None

    def to_dict(self) -> dict[str, Any]:
        rows = [{k: (_num(v) if isinstance(v, (float, np.floating)) else (int(v) if isinstance(v, (np.integer,)) else v))
                 for k, v in r.items()} for r in self.table.reset_index().to_dict(orient="records")]
        return {"replicates": self.replicates, "confidence": self.confidence, "seed": self.seed,
                "unidentified": self.unidentified, "censor_at": self.censor_at,
                "assumed_populations": self.assumptions.to_dict(orient="records"), "rows": rows}

    def __str__(self) -> str:
        lines = [f"flawmix: test plan from {self.replicates} simulated campaigns per size "
                 f"(origins unidentified: {self.unidentified:.0%}"
                 + (f", survivors above {self.censor_at:g}" if self.censor_at else "") + ")", "",
                 "assumed populations:", self.assumptions.to_string(index=False), "",
                 self.table.to_string(float_format=lambda x: f"{x:.3g}"), "",
                 f"modulus ±% and strength ±%: half-width of the central {self.confidence:.0%} range of the "
                 "estimate relative to the truth; bias: mean (modulus) or median (strength) estimate relative to the truth; too few: share of "
                 "campaigns with fewer than 2 identified failures of that population; power: share of campaigns "
                 "in which the likelihood-ratio test rejects one pooled population (5 % level)."]
        return "\n".join(lines)


def plan(
    populations: Sequence[dict],
    sizes: Sequence[int] = DEFAULT_SIZES,
    *,
    unidentified: float = 0.0,
    censor_at: float | None = None,
    replicates: int = 2000,
    confidence: float = 0.90,
    alpha: float = 0.05,
    seed: int = 0,
    executor=None,
    progress: bool = False,
) -> Plan:
    """Simulate campaigns of each size from assumed concurrent populations and fit them.

    populations: ``[{"name": "pores", "modulus": 6, "characteristic_strength": 530}, ...]``
        (σθ of the planned specimen geometry).
    unidentified: share of failures whose origin will not be found.
    censor_at: a run-out or proof stress: specimens reaching it survive.
    """
    if not populations:
        raise FlawmixError("plan needs at least one assumed population (name, modulus, characteristic strength)")
    names, moduli, scales = [], [], []
    for p in populations:
        try:
            names.append(str(p["name"]))
            moduli.append(float(p["modulus"]))
            scales.append(float(p["characteristic_strength"]))
        except (KeyError, TypeError, ValueError):
            raise FlawmixError(f"population {p!r}: give name, modulus and characteristic_strength") from None
    if min(moduli) <= 0 or min(scales) <= 0:
        raise FlawmixError("assumed moduli and characteristic strengths must be positive")
    if not 0 <= unidentified < 1:
        raise FlawmixError(f"unidentified share {unidentified} must lie in [0, 1)")
    sizes = sorted({int(n) for n in sizes})
    if not sizes or sizes[0] < 3:
        raise FlawmixError("specimen counts must be at least 3")
    moduli, scales = np.array(moduli), np.array(scales)
    k = len(names)
    lo_q, hi_q = (1 - confidence) / 2, (1 + confidence) / 2
    cut = stats.chi2.ppf(1 - alpha, k - 1) if k > 1 else np.nan
    rows = []
    for i, n in enumerate(sizes):
        design = Design.simple(n, unidentified, censor_at)
        fits = simulate_and_fit(lik.Model("concurrent", k), moduli, scales, None, design, replicates,
                                seed=[seed, i], executor=executor, progress=progress)
        ok = fits.ok
        power = float(np.mean(2 * (fits.loglik[ok] - fits.pooled_loglik[ok]) > cut)) if k > 1 else np.nan
        for j, name in enumerate(names):
            ratio_m = fits.moduli[ok, j] / moduli[j]
            ratio_s = fits.scales[ok, j] / scales[j]
            rows.append({
                "specimens": n, "population": name,
                "failures (mean)": float(fits.failures[:, j].mean()),
                "too few failures": float(np.mean(fits.failures[:, j] < 2)),
                "modulus ±%": 50 * float(np.quantile(ratio_m, hi_q) - np.quantile(ratio_m, lo_q)),
                "modulus bias %": 100 * float(ratio_m.mean() - 1),
                "strength ±%": 50 * float(np.quantile(ratio_s, hi_q) - np.quantile(ratio_s, lo_q)),
                # median: with few failures σ̂θ has a long upper tail that swamps a mean
                "strength bias % (median)": 100 * float(np.median(ratio_s) - 1),
                "power (two populations)": power,
                "campaigns fitted": int(ok.sum()),
            })
    table = pd.DataFrame(rows).set_index(["specimens", "population"])
    assumptions = pd.DataFrame({"population": names, "modulus": moduli, "characteristic_strength": scales})
    return Plan(table, assumptions, replicates, confidence, seed, unidentified, censor_at)


def plan_from_fit(result, sizes: Sequence[int] = DEFAULT_SIZES, **options) -> Plan:
    """Plan the next campaign assuming the populations a concurrent fit found, and the same
    share of unidentified origins."""
    if not result.model.startswith("concurrent"):
        raise FlawmixError("planning assumes concurrent populations; fit with model='concurrent'")
    sp = result.specimens
    options.setdefault("unidentified", float(np.mean((sp.n_candidates[sp.failed] > 1))) if len(result.populations) > 1 else 0.0)
    pops = [{"name": p.name, "modulus": p.modulus, "characteristic_strength": p.characteristic_strength}
            for p in result.populations]
    return plan(pops, sizes, **options)
