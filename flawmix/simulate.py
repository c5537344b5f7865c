"""Draw replicate test campaigns from a model, vectorised across replicates.

A campaign copies a design: N specimens, each with a censoring stress (a survivor's
withstood stress, or none), and a chance that a failure's origin goes unidentified.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import likelihood as lik


@dataclass(frozen=True)
class Design:
    """What a campaign looks like apart from the strengths.

    censor_at: (N,) stress at which specimen i stops unbroken (np.inf: loaded to failure).
    unidentified: probability that a failure's origin is not identified.
    """

    censor_at: np.ndarray
    unidentified: float = 0.0

    @property
    def n(self) -> int:
        return self.censor_at.size

    @classmethod
    def like(cls, specimens) -> "Design":
        """The design of an observed campaign: survivors keep their stresses, and origins go
        unidentified as often as they did (ambiguous ones count as unidentified)."""
        censor = np.where(specimens.failed, np.inf, specimens.strength)
        uncertain = specimens.failed & (specimens.n_candidates > 1)
        frac = float(uncertain.sum() / max(1, specimens.n_failed)) if len(specimens.populations) > 1 else 0.0
        return cls(censor, frac)

    @classmethod
    def simple(cls, n: int, unidentified: float = 0.0, censor_at: float | None = None) -> "Design":
        return cls(np.full(n, np.inf if censor_at is None else float(censor_at)), unidentified)


def simulate(model: lik.Model, moduli, scales, fractions, design: Design, replicates: int, rng) -> lik.Data:
    """Replicate data sets as one batched :class:`likelihood.Data` with leading dim ``replicates``.

    moduli, scales, fractions: (k,) in natural units (fractions ignored by ``concurrent``).
    """
    rng = np.random.default_rng(rng)
    k = model.k
    n = design.n
    m = np.asarray(moduli, dtype=float)
    sc = np.asarray(scales, dtype=float)
    draws = sc * rng.weibull(1.0, (replicates, n, k)) ** (1.0 / m)   # Weibull(m, σθ) per population
    if model.name == "exclusive":
        p = np.asarray(fractions, dtype=float)
        carried = rng.choice(k, size=(replicates, n), p=p / p.sum())
        mask = np.arange(k) == carried[..., None]
        draws = np.where(mask, draws, np.inf)
    elif model.name == "partial":
        a = model.partial_index
        p = float(np.asarray(fractions)[a])
        draws[..., a] = np.where(rng.random((replicates, n)) < p, draws[..., a], np.inf)
    strength = draws.min(axis=-1)
    origin = draws.argmin(axis=-1)
    failed = strength < design.censor_at
    strength = np.where(failed, strength, design.censor_at)
    candidates = (np.arange(k) == origin[..., None]) & failed[..., None]
    hide = failed & (rng.random((replicates, n)) < design.unidentified)
    candidates = np.where(hide[..., None], True, candidates)
    return lik.Data(np.log(strength), failed, candidates)


def replicate(data: lik.Data, r: int) -> lik.Data:
    """Replicate r of a batched data set, as an ordinary single data set."""
    return lik.Data(data.y[r], data.failed[r], data.candidates[r])
