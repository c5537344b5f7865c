"""Random test campaigns over a wide range of designs, for robustness studies of the fit.

Each campaign draws N, the number of populations, their moduli and strengths, the share of
unidentified origins and of survivors from stated ranges, all from one seeded generator.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import optimize as _sopt

from . import likelihood as lik
from .simulate import Design, replicate, simulate
from .specimens import Population, Specimens


@dataclass(frozen=True)
class CampaignRanges:
    """Ranges the campaigns are drawn from (inclusive); moduli are drawn log-uniform."""

    n: tuple[int, int] = (5, 500)
    populations: tuple[int, int] = (1, 4)
    modulus: tuple[float, float] = (2.0, 60.0)
    unidentified: tuple[float, float] = (0.0, 0.5)
    survivors: tuple[float, float] = (0.0, 0.2)


@dataclass(frozen=True)
class Campaign:
    specimens: Specimens
    moduli: np.ndarray
    scales: np.ndarray
    unidentified: float
    survivor_target: float


def _median_strength(moduli, scales) -> float:
    """Median of the concurrent (minimum) law: Σ (σ/σθ_j)^m_j = ln 2."""
    total = lambda s: float(np.sum((s / scales) ** moduli)) - np.log(2.0)
    return float(_sopt.brentq(total, 1e-12 * scales.min(), 10.0 * scales.max()))


def random_campaign(rng, ranges: CampaignRanges = CampaignRanges(), unit_scale: float = 1.0) -> Campaign:
    """One campaign. Survivors: a random subset (twice the target share) is stopped at the
    median strength, independently of the specimen's strength (non-informative censoring),
    so about the target share survives. ``unit_scale`` multiplies every stress."""
    rng = np.random.default_rng(rng)
    n = int(rng.integers(ranges.n[0], ranges.n[1] + 1))
    k = int(rng.integers(ranges.populations[0], ranges.populations[1] + 1))
    moduli = np.exp(rng.uniform(np.log(ranges.modulus[0]), np.log(ranges.modulus[1]), k))
    scales = 300.0 * np.exp(rng.normal(0.0, 0.25, k)) * unit_scale
    unidentified = float(rng.uniform(*ranges.unidentified)) if k > 1 else 0.0
    survivors = float(rng.uniform(*ranges.survivors))
    stopped = rng.random(n) < 2.0 * survivors
    censor = np.where(stopped, _median_strength(moduli, scales), np.inf)
    data = replicate(simulate(lik.Model("concurrent", k), moduli, scales, None,
                              Design(censor, unidentified), 1, rng), 0)
    pops = tuple(Population(f"flaw{j + 1}") for j in range(k))
    specimens = Specimens(np.exp(data.y), data.failed, data.candidates, pops, ids=np.array([f"S{i + 1}" for i in range(n)]))
    return Campaign(specimens, moduli, scales, unidentified, survivors)


def rescaled(specimens: Specimens, factor: float) -> Specimens:
    """The same campaign with every stress multiplied by ``factor`` (a change of unit)."""
    return Specimens(specimens.strength * factor, specimens.failed, specimens.candidates, specimens.populations,
                     unit=specimens.unit, ids=specimens.ids)
