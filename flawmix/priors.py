"""Prior distributions for the Bayesian fit, on the sampler's scale (ln m, ln σθ, fractions).

Defaults (weak for real ceramics, glasses and silicon):
- modulus: log-normal, median 11, central 95 % range 1.9 to 64;
- characteristic strength: log-normal centred on the geometric mean strength of the data,
  log-sd 1.5 (a factor 20 either way covers 95 %), so the prior follows the data's unit;
- fractions (exclusive, partial): uniform (Dirichlet(1), Beta(1, 1)).
A user prior for a population gives a central 95 % range, e.g. ``modulus = [8, 14]``,
``characteristic_strength = [480, 560]`` (log-normal through those points).
``reference=True`` uses p(m, σθ) ∝ 1/(σθ m), flat in (ln m, ln σθ): the right-Haar prior,
exact frequentist coverage for one complete population, improper otherwise.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Mapping

import numpy as np

from .errors import FlawmixError

Z95 = 1.959963984540054
DEFAULT_MODULUS_MEDIAN = 11.0
DEFAULT_LOG_MODULUS_SD = 0.9
DEFAULT_LOG_STRENGTH_SD = 1.5


@dataclass(frozen=True)
class Normal:
    mean: float
    sd: float

    def logpdf(self, x):
        return -0.5 * ((x - self.mean) / self.sd) ** 2 - np.log(self.sd) - 0.5 * np.log(2 * np.pi)


def _from_range(name: str, what: str, values) -> Normal:
    try:
        lo, hi = (float(x) for x in values)
    except (TypeError, ValueError):
        raise FlawmixError(f"prior for '{name}': {what} must be two numbers [low, high] (a central 95 % range)") from None
    if not (0 < lo < hi):
        raise FlawmixError(f"prior for '{name}': {what} range [{lo}, {hi}] must satisfy 0 < low < high")
    return Normal((np.log(lo) + np.log(hi)) / 2, (np.log(hi) - np.log(lo)) / (2 * Z95))


@dataclass(frozen=True)
class Priors:
    """Independent priors per population, plus uniform fractions."""

    log_modulus: tuple[Normal | None, ...]       # None = flat (reference)
    log_strength: tuple[Normal | None, ...]
    reference: bool = False
    described: list[dict[str, Any]] = field(default_factory=list)

    def logpdf(self, theta: np.ndarray, model) -> np.ndarray:
        """Log prior density of parameter sets theta (..., P) on the sampler's scale."""
        k = model.k
        out = np.zeros(theta.shape[:-1])
        for j in range(k):
            if self.log_modulus[j] is not None:
                out = out + self.log_modulus[j].logpdf(theta[..., j])
            if self.log_strength[j] is not None:
                out = out + self.log_strength[j].logpdf(theta[..., k + j])
        if model.n_extra:
            p = model.fractions(theta)
            if model.name == "exclusive":
                # uniform Dirichlet on p, times the Jacobian Π_j p_j of the log-ratio transform
                out = out + np.log(p).sum(axis=-1)
            else:
                a = model.partial_index
                out = out + np.log(p[..., a]) + np.log1p(-p[..., a])
        return out


def build_priors(names, centre: float, user: Mapping[str, Mapping[str, Any]] | None = None,
                 reference: bool = False) -> Priors:
    """Priors for populations ``names``; ``centre`` is the mean ln strength of the data,
    user priors are given in the data's unit."""
    user = dict(user or {})
    unknown = set(user) - set(names)
    if unknown:
        raise FlawmixError(f"prior given for unknown population(s) {', '.join(sorted(unknown))}; "
                           f"populations are {', '.join(names)}")
    mods, strs, described = [], [], []
    for name in names:
        spec = dict(user.get(name, {}))
        bad = set(spec) - {"modulus", "characteristic_strength"}
        if bad:
            raise FlawmixError(f"prior for '{name}': unknown key(s) {', '.join(sorted(bad))}; "
                               "use modulus and characteristic_strength")
        if "modulus" in spec:
            mod = _from_range(name, "modulus", spec["modulus"])
        elif reference:
            mod = None
        else:
            mod = Normal(np.log(DEFAULT_MODULUS_MEDIAN), DEFAULT_LOG_MODULUS_SD)
        if "characteristic_strength" in spec:
            s = _from_range(name, "characteristic_strength", spec["characteristic_strength"])
            st = Normal(s.mean - centre, s.sd)   # the sampler works with ln σθ − centre
        elif reference:
            st = None
        else:
            st = Normal(0.0, DEFAULT_LOG_STRENGTH_SD)
        mods.append(mod)
        strs.append(st)
        described.append({
            "population": name,
            "modulus": "flat in ln m (reference)" if mod is None else
            f"log-normal, 95 % range [{np.exp(mod.mean - Z95 * mod.sd):.4g}, {np.exp(mod.mean + Z95 * mod.sd):.4g}]"
            + (" (user)" if "modulus" in spec else " (default)"),
            "characteristic_strength": "flat in ln σθ (reference)" if st is None else
            f"log-normal, 95 % range [{np.exp(st.mean + centre - Z95 * st.sd):.4g}, "
            f"{np.exp(st.mean + centre + Z95 * st.sd):.4g}]" + (" (user)" if "characteristic_strength" in spec else " (default)"),
        })
    return Priors(tuple(mods), tuple(strs), reference, described)


PRIOR_DOMINANCE = 0.8   # posterior interval this wide a share of the prior's: the prior decides


def prior_dominance_notes(priors: Priors, names, samples: np.ndarray, confidence: float) -> list[str]:
    """Populations whose posterior interval for ln m or ln σθ is wider than PRIOR_DOMINANCE
    times the prior's interval at the same level: the data add little, the prior sets it.

    samples: (draws, P) on the sampler's scale ([ln m_1..k, ln σθ_1..k − centre, ...])."""
    k = len(names)
    lo_q, hi_q = (1 - confidence) / 2, (1 + confidence) / 2
    z = float(np.sqrt(2.0) * _erfinv(confidence))      # normal quantile of the central interval
    notes = []
    for j, name in enumerate(names):
        for what, prior, column in (("modulus", priors.log_modulus[j], j),
                                    ("characteristic strength", priors.log_strength[j], k + j)):
            if prior is None:
                continue
            lo, hi = np.quantile(samples[:, column], [lo_q, hi_q])
            ratio = float((hi - lo) / (2 * z * prior.sd))
            if ratio > PRIOR_DOMINANCE:
                notes.append(f"population '{name}': the posterior of its {what} is {ratio:.2f} times as wide as "
                             f"its prior (above {PRIOR_DOMINANCE}): the prior, not the data, sets this estimate; "
                             "state a prior from independent experience or report it as not determined by the tests")
    return notes


def _erfinv(x: float) -> float:
    from scipy.special import erfinv

    return float(erfinv(x))
