"""Which bootstrap replicates can be used, population by population, and what to say when some
cannot: a replicate fails (a population drew no failure, the fit did not converge) or a
population collapses in it (its modulus at a search bound, or reflected outside the bounds).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import likelihood as lik

FALLBACK_SHARE = 0.05   # a population unusable in more replicates than this keeps its profile interval
MIN_USED = 20           # fewer usable replicates than this: no bootstrap draws at all


@dataclass(frozen=True)
class ReplicateHealth:
    used: np.ndarray            # (R,) replicates whose every population is usable
    unusable_share: dict        # {population: share of replicates where it is unusable}
    fallback: tuple             # populations whose intervals fall back to the profile likelihood
    notes: tuple


def _at_bounds(moduli: np.ndarray) -> np.ndarray:
    lo, hi = np.exp(lik.LOG_MODULUS_MIN), np.exp(lik.LOG_MODULUS_MAX)
    return (moduli <= lo * (1 + 1e-9)) | (moduli >= hi * (1 - 1e-9))


def replicate_health(names, fits, reflected_moduli: np.ndarray) -> ReplicateHealth:
    """fits: montecarlo.ReplicateFits; reflected_moduli (R, k): m̂²/m* of every replicate."""
    bad = (~fits.ok)[:, None] & (fits.failures == 0)                  # failed: blame the empty ones
    bad |= (~fits.ok & ~np.any(fits.failures == 0, axis=1))[:, None]  # failed otherwise: every population
    with np.errstate(invalid="ignore"):
        bad |= fits.ok[:, None] & (_at_bounds(fits.moduli) | _at_bounds(reflected_moduli)
                                   | ~np.isfinite(reflected_moduli))
    share = {n: float(bad[:, j].mean()) for j, n in enumerate(names)}
    used = ~np.any(bad, axis=1)
    R = fits.ok.size
    notes, fallback = [], []
    for name, frac in share.items():
        if frac == 0:
            continue
        what = (f"bootstrap: population '{name}' could not be used in {100 * frac:.1f} % of the {R} replicates "
                "(no failure drawn, no convergence, or its modulus at a search bound)")
        if frac > FALLBACK_SHARE or used.sum() < MIN_USED:
            fallback.append(name)
            notes.append(what + "; its intervals are the profile-likelihood ones, and the bootstrap draws leave "
                                "those replicates out")
        else:
            notes.append(what + "; those replicates are left out")
    return ReplicateHealth(used, share, tuple(fallback), tuple(notes))


def ratio_corrected(estimate: np.ndarray, replicates: np.ndarray) -> np.ndarray:
    """Bias correction on the log scale, estimate² / geometric mean of the replicates: always
    positive (the additive 2·estimate − mean can go negative for a skewed modulus)."""
    return estimate * np.exp(np.log(estimate) - np.mean(np.log(replicates), axis=0))
