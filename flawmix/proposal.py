"""An independence proposal for the sampler: a multivariate t fitted to the posterior.

A population with few failures among many censored specimens has a curved (ln m, ln σθ)
posterior: what the data fix is its cumulative hazard near the stresses tested, not its scale.
So the t lives in *hazard coordinates*: each population's ln σθ is replaced by its log
cumulative hazard η = m (c − ln σθ) at the stress e^c where, at the mode, η is uncorrelated with
ln m. There the posterior is close to normal. The t starts from the mode and the inverse
observed information, then takes the mean and covariance of a pilot of importance draws (twice);
every walker's proposal goes through the likelihood in one batched call. The pilot decides
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
ADAPT_ROUNDS = 2            # refits of the t to its own pilot's weighted draws
EXTRA_ROUNDS = 4            # further refits while the best pilot's Pareto k is still above the limit


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


class HazardT:
    """A multivariate t in hazard coordinates, with its density in the sampler's parameters.

    Parameters θ (P,) hold log moduli at ``modulus_index`` and log scales at ``scale_index``
    (one modulus per scale; a common modulus repeats its index). Coordinates z equal θ except
    z_s = exp(θ_m) (c − θ_s) for each scale s with its modulus m; |dz/dθ| = Π exp(θ_m), so
    ln q_θ(θ) = ln q_z(z(θ)) + Σ θ_m.
    """

    def __init__(self, t: MultivariateT, modulus_index, scale_index, pivot):
        self.t = t
        self.modulus_index = np.asarray(modulus_index, dtype=int)
        self.scale_index = np.asarray(scale_index, dtype=int)
        self.pivot = np.asarray(pivot, dtype=float)

    def to_hazard(self, theta: np.ndarray) -> np.ndarray:
        z = np.array(theta, dtype=float, copy=True)
        z[..., self.scale_index] = np.exp(z[..., self.modulus_index]) * (self.pivot - z[..., self.scale_index])
        return z

    def to_theta(self, z: np.ndarray) -> np.ndarray:
        theta = np.array(z, dtype=float, copy=True)
        theta[..., self.scale_index] = self.pivot - theta[..., self.scale_index] * np.exp(-theta[..., self.modulus_index])
        return theta

    def sample(self, random, count: int) -> np.ndarray:
        """(count, P) draws of θ; ``random`` is a numpy RandomState or Generator."""
        return self.to_theta(self.t.sample(random, count))

    def logpdf(self, theta: np.ndarray) -> np.ndarray:
        theta = np.asarray(theta, dtype=float)
        return self.t.logpdf(self.to_hazard(theta)) + theta[..., self.modulus_index].sum(axis=-1)

    def refit(self, theta: np.ndarray, log_weights: np.ndarray) -> "HazardT | None":
        """The same coordinates, centre and scale from weighted draws (None if degenerate)."""
        w = np.exp(log_weights - np.max(log_weights))
        w = np.where(np.isfinite(w), w, 0.0)
        w = w / w.sum()
        z = self.to_hazard(theta)
        mean = w @ z
        spread = z - mean
        cov = (spread * w[:, None]).T @ spread
        try:
            return HazardT(MultivariateT(mean, SCALE_INFLATION ** 2 * 0.5 * (cov + cov.T)),
                           self.modulus_index, self.scale_index, self.pivot)
        except np.linalg.LinAlgError:
            return None


def from_mode(mode: np.ndarray, hessian: np.ndarray, modulus_index, scale_index) -> HazardT | None:
    """The proposal around ``mode``: in hazard coordinates, with scale SCALE_INFLATION² times
    the inverse observed information carried there by the Jacobian; None without a negative
    definite Hessian (no normal approximation to build on)."""
    mode = np.asarray(mode, dtype=float)
    mi, si = np.asarray(modulus_index, dtype=int), np.asarray(scale_index, dtype=int)
    try:
        cov = np.linalg.inv(-np.asarray(hessian, dtype=float))
        cov = 0.5 * (cov + cov.T)
        pivot = mode[si] + cov[mi, si] / cov[mi, mi]      # Cov(ln m, η) = 0 at the mode
        jacobian = np.eye(mode.size)
        jacobian[si, mi] = np.exp(mode[mi]) * (pivot - mode[si])
        jacobian[si, si] = -np.exp(mode[mi])
        shape = HazardT(None, mi, si, pivot)
        shape.t = MultivariateT(shape.to_hazard(mode), SCALE_INFLATION ** 2 * (jacobian @ cov @ jacobian.T))
        return shape
    except np.linalg.LinAlgError:
        return None


def fitted(mode, hessian, modulus_index, scale_index, log_prob, rng):
    """(proposal, pilot draws, log weights, Pareto k): the t from the mode refitted
    ADAPT_ROUNDS times to its pilot, and up to EXTRA_ROUNDS more while the best pilot's
    Pareto k is above PARETO_K_LIMIT (a posterior far from the mode, e.g. a mixture model
    whose maximum likelihood is degenerate, takes a few more refits to reach); of all rounds,
    the one whose pilot has the largest importance ESS. None without a usable start."""
    proposal = from_mode(mode, hessian, modulus_index, scale_index)
    if proposal is None:
        return None
    best, best_ess = None, -1.0
    for round_ in range(ADAPT_ROUNDS + EXTRA_ROUNDS + 1):
        draws, log_weights, k = pilot(proposal, log_prob, rng)
        ess = importance_ess(log_weights)
        if ess > best_ess:
            best, best_ess = (proposal, draws, log_weights, k), ess
        if round_ >= ADAPT_ROUNDS and best[3] <= PARETO_K_LIMIT or round_ == ADAPT_ROUNDS + EXTRA_ROUNDS \
                or not np.isfinite(k):
            break
        proposal = proposal.refit(draws, log_weights)
        if proposal is None:
            break
    return best


def importance_ess(log_weights: np.ndarray) -> float:
    """Kish's effective sample size of importance weights, (Σw)² / Σw² (0 when none is finite)."""
    lw = np.asarray(log_weights, dtype=float)
    lw = lw[np.isfinite(lw)]
    if lw.size == 0:
        return 0.0
    w = np.exp(lw - lw.max())
    return float(w.sum() ** 2 / (w ** 2).sum())


def independence_move(proposal):
    """An emcee Metropolis–Hastings move drawing every walker's proposal from ``proposal``;
    the log-ratio ln q(x) − ln q(x′) makes it an independence sampler."""
    from emcee.moves import MHMove

    def propose(coords, random):
        new = proposal.sample(random, coords.shape[0])
        return new, proposal.logpdf(coords) - proposal.logpdf(new)
    return MHMove(propose)


def pilot(proposal, log_prob, rng, draws: int = PILOT_DRAWS):
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
