"""An independence proposal for the sampler: a multivariate t around the posterior mode.

Near the mode these posteriors are close to normal, so a fixed heavy-tailed proposal from the
mode and the inverse observed information is accepted most of the time, and every walker's
proposal goes through the likelihood in one batched call. A pilot of importance draws decides
whether to trust it: a Pareto k of the weights above ``PARETO_K_LIMIT`` (the tails of the
proposal are too light for the posterior) leaves the sampler on differential-evolution moves.
"""
from __future__ import annotations

import math

import numpy as np
from scipy.special import gammaln

from .diagnostics import pareto_k

DEGREES_OF_FREEDOM = 5.0
SCALE_INFLATION = 1.2       # proposal spread against the normal approximation
PARETO_K_LIMIT = 0.5        # importance weights with k <= 0.5 have finite variance (PSIS practice)
PILOT_DRAWS = 2000


class MultivariateT:
    """Multivariate t with ``df`` degrees of freedom, centre (P,) and scale matrix (P, P)."""

    def __init__(self, centre: np.ndarray, scale: np.ndarray, df: float = DEGREES_OF_FREEDOM):
        self.centre = np.asarray(centre, dtype=float)
        self.df = float(df)
        self.cholesky = np.linalg.cholesky(scale)
        P = self.centre.size
        self._norm = (gammaln((self.df + P) / 2) - gammaln(self.df / 2) - 0.5 * P * math.log(self.df * math.pi)
                      - np.log(np.diag(self.cholesky)).sum())

    def sample(self, random, count: int) -> np.ndarray:
        """(count, P) draws; ``random`` is a numpy RandomState or Generator."""
        P = self.centre.size
        normal = random.standard_normal((count, P))
        chi2 = random.chisquare(self.df, count)
        return self.centre + (normal @ self.cholesky.T) * np.sqrt(self.df / chi2)[:, None]

    def logpdf(self, x: np.ndarray) -> np.ndarray:
        P = self.centre.size
        white = np.linalg.solve(self.cholesky, (np.asarray(x) - self.centre).T).T
        return self._norm - 0.5 * (self.df + P) * np.log1p((white ** 2).sum(axis=1) / self.df)


def from_mode(mode: np.ndarray, hessian: np.ndarray) -> MultivariateT | None:
    """The proposal around ``mode`` with scale SCALE_INFLATION² (−H)⁻¹, or None without a
    negative definite Hessian (no normal approximation to build on)."""
    try:
        cov = np.linalg.inv(-np.asarray(hessian, dtype=float))
        cov = 0.5 * (cov + cov.T)
        return MultivariateT(mode, SCALE_INFLATION ** 2 * cov)
    except np.linalg.LinAlgError:
        return None


def independence_move(proposal: MultivariateT):
    """An emcee Metropolis–Hastings move drawing every walker's proposal from ``proposal``;
    the log-ratio ln q(x) − ln q(x′) makes it an independence sampler."""
    from emcee.moves import MHMove

    def propose(coords, random):
        new = proposal.sample(random, coords.shape[0])
        return new, proposal.logpdf(coords) - proposal.logpdf(new)
    return MHMove(propose)


def pilot(proposal: MultivariateT, log_prob, rng, draws: int = PILOT_DRAWS):
    """Importance draws from the proposal: (draws (S, P), log weights (S,), Pareto k)."""
    x = proposal.sample(rng, draws)
    log_weights = log_prob(x) - proposal.logpdf(x)
    finite = np.isfinite(log_weights)
    if finite.sum() < draws // 2:
        return x, log_weights, np.inf
    return x, log_weights, pareto_k(np.where(finite, log_weights, -np.inf)[finite])


def resample(draws: np.ndarray, log_weights: np.ndarray, rng, count: int) -> np.ndarray:
    """``count`` distinct-as-possible draws in proportion to their importance weights (a
    starting ensemble already spread like the posterior)."""
    w = np.exp(log_weights - np.max(log_weights))
    w = np.where(np.isfinite(w), w, 0.0)
    replace = np.count_nonzero(w) < count
    return draws[rng.choice(draws.shape[0], size=count, replace=replace, p=w / w.sum())]
