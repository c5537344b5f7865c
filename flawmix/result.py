"""Immutable fit results: estimates, intervals, tests; they print, export and answer
distribution questions (cdf, sf, ppf) like a frozen scipy distribution."""
from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from . import distributions as dist
from .errors import FlawmixError
from .support import FEW_FAILURES, UNSUPPORTED, is_weak, support_words


def _num(x):
    """JSON-safe number: None for missing or infinite values."""
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


@dataclass(frozen=True)
class PopulationEstimate:
    """One flaw population's fitted Weibull distribution.

    ``modulus`` m and ``characteristic_strength`` σθ (63.2 % failure probability of the
    tested specimen geometry when this population acts alone), with intervals at the
    result's confidence. ``n_failures`` counts failures attributed with certainty;
    ``expected_failures`` adds the fitted shares of unidentified and ambiguous ones.
    """

    name: str
    kind: str
    n_failures: int
    n_possible: int
    expected_failures: float
    modulus: float
    characteristic_strength: float
    modulus_interval: tuple[float, float]
    strength_interval: tuple[float, float]
    interval_method: str
    modulus_unbiased: float | None = None
    regression_modulus: float | None = None
    regression_strength: float | None = None
    at_bound: bool = False
    fraction: float = 1.0
    fraction_interval: tuple[float, float] | None = None

    # scipy.stats-like questions for this population acting alone
    def cdf(self, stress):
        return 1.0 - self.sf(stress)

    def sf(self, stress):
        return np.exp(-dist.weibull_cumulative_hazard(stress, self.modulus, self.characteristic_strength))

    def ppf(self, probability):
        p = np.asarray(probability, dtype=float)
        return self.characteristic_strength * (-np.log1p(-p)) ** (1.0 / self.modulus)

    def rvs(self, size=None, random_state=None):
        rng = np.random.default_rng(random_state)
        return self.characteristic_strength * rng.weibull(self.modulus, size)

    def to_dict(self) -> dict[str, Any]:
        return {
            "name": self.name,
            "kind": self.kind,
            "n_failures": int(self.n_failures),
            "support": support_words(self.n_failures, self.n_possible),
            "expected_failures": _num(self.expected_failures),
            "modulus": _num(self.modulus),
            "characteristic_strength": _num(self.characteristic_strength),
            "modulus_interval": [_num(x) for x in self.modulus_interval],
            "strength_interval": [_num(x) for x in self.strength_interval],
            "interval_method": self.interval_method,
            "modulus_unbiased": _num(self.modulus_unbiased),
            "regression_modulus": _num(self.regression_modulus),
            "regression_strength": _num(self.regression_strength),
            "at_bound": bool(self.at_bound),
            "fraction": _num(self.fraction),
            "fraction_interval": None if self.fraction_interval is None else [_num(x) for x in self.fraction_interval],
        }


@dataclass(frozen=True)
class HypothesisTest:
    name: str
    statistic: float
    df: int
    p_value: float
    method: str
    meaning: str

    def to_dict(self) -> dict[str, Any]:
        return {"name": self.name, "statistic": _num(self.statistic), "df": self.df,
                "p_value": _num(self.p_value), "method": self.method, "meaning": self.meaning}


@dataclass(frozen=True)
class Draws:
    """Parameter sets drawn from the posterior (Bayes) or from refits (bootstrap).

    moduli, scales, fractions: (S, k) in natural units; ``chains`` is the number of chains
    the S draws are split into (emcee walkers), for diagnostics.
    """

    kind: str
    moduli: np.ndarray
    scales: np.ndarray
    fractions: np.ndarray
    chains: int = 1

    @property
    def size(self) -> int:
        return self.moduli.shape[0]


def _summary_frame(samples: np.ndarray, point: np.ndarray, confidence: float, index, name: str) -> pd.DataFrame:
    lo, hi = (1 - confidence) / 2, (1 + confidence) / 2
    frame = pd.DataFrame({"estimate": point}, index=index)
    if samples is not None:
        frame["low"] = np.quantile(samples, lo, axis=0)
        frame["high"] = np.quantile(samples, hi, axis=0)
    frame.index.name = name
    return frame


@dataclass(frozen=True)
class FitResult:
    """Everything a fit learned. Build with :func:`flawmix.fit`; never half-built."""

    method: str
    model: str
    confidence: float
    unit: str
    populations: tuple[PopulationEstimate, ...]
    n_specimens: int
    n_failed: int
    n_survived: int
    n_unidentified: int
    n_ambiguous: int
    log_likelihood: float
    n_parameters: int
    tests: tuple[HypothesisTest, ...] = ()
    warnings: tuple[str, ...] = ()
    converged: bool = True
    max_score: float = 0.0
    plotting_rule: str = "hazen"
    source: str | None = None
    checksum: str | None = None
    specimens: Any = field(default=None, repr=False, compare=False)
    extras: dict = field(default_factory=dict, repr=False, compare=False)
    partial_population: str | None = None
    draws: Draws | None = field(default=None, repr=False, compare=False)
    priors: tuple = ()

    # ---- derived numbers --------------------------------------------------------------
    @property
    def aic(self) -> float:
        return 2.0 * self.n_parameters - 2.0 * self.log_likelihood

    @property
    def bic(self) -> float:
        return self.n_parameters * math.log(self.n_specimens) - 2.0 * self.log_likelihood

    @property
    def moduli(self) -> np.ndarray:
        return np.array([p.modulus for p in self.populations])

    @property
    def characteristic_strengths(self) -> np.ndarray:
        return np.array([p.characteristic_strength for p in self.populations])

    @property
    def fractions(self) -> np.ndarray:
        return np.array([p.fraction for p in self.populations])

    @property
    def _partial_index(self) -> int:
        names = [p.name for p in self.populations]
        return names.index(self.partial_population) if self.partial_population else 0

    def population(self, name: str) -> PopulationEstimate:
        for p in self.populations:
            if p.name == name:
                return p
        raise FlawmixError(f"no population '{name}'; the fit has {', '.join(p.name for p in self.populations)}")

    # ---- the combined distribution of a specimen -------------------------------------
    def sf(self, stress):
        """Probability that a test specimen survives ``stress`` (all populations acting)."""
        return dist.model_sf(self.model, stress, self.moduli, self.characteristic_strengths,
                             self.fractions, self._partial_index)

    def cdf(self, stress):
        return 1.0 - self.sf(stress)

    def ppf(self, probability):
        """Stress at which a specimen's failure probability equals ``probability``."""
        p = np.atleast_1d(np.asarray(probability, dtype=float))
        out = np.array([dist.model_ppf(self.model, q, *self._point_params(), self._partial_index)[0]
                        for q in p.ravel()]).reshape(p.shape)
        return out if np.ndim(probability) else float(out[0])

    def failure_shares(self, stress) -> pd.DataFrame:
        """Share of failures at each stress caused by each population (rows: stresses)."""
        s = np.atleast_1d(np.asarray(stress, dtype=float))
        shares = dist.model_failure_shares(self.model, s, self.moduli, self.characteristic_strengths,
                                           self.fractions, self._partial_index)
        return pd.DataFrame(shares, index=pd.Index(s, name=f"stress ({self.unit})"),
                            columns=[p.name for p in self.populations])

    # ---- what plots and reports show ------------------------------------------------------
    def plotting_positions(self, view: str = "populations") -> pd.DataFrame:
        """Failure probability plotting positions of every specimen.

        view ``populations``: each population's certain failures ranked by Johnson's adjusted
        ranks among all specimens (other failures and survivors suspended), so censored
        populations sit where they belong; ``all``: every failure ranked among all specimens.
        Unidentified/ambiguous failures get their all-specimen position in both views;
        survivors get none (NaN). Columns: specimen, strength, group, probability.
        """
        from .positions import adjusted_ranks, plotting_positions

        sp = self.specimens
        if sp is None:
            raise FlawmixError("this result carries no specimens to plot")
        n = sp.n_specimens
        names = list(sp.population_names)
        certain = sp.failed & (sp.n_candidates == 1)
        group = np.where(~sp.failed, "survived", "unidentified or ambiguous").astype(object)
        for j, name in enumerate(names):
            group[certain & sp.candidates[:, j]] = name
        prob = np.full(n, np.nan)
        idx, ranks = adjusted_ranks(sp.strength, sp.failed)
        prob[idx] = plotting_positions(ranks, n, self.plotting_rule)
        if view == "populations":
            for j in range(len(names)):
                mine = certain & sp.candidates[:, j]
                if mine.any():
                    idx, ranks = adjusted_ranks(sp.strength, mine)
                    prob[idx] = plotting_positions(ranks, n, self.plotting_rule)
        elif view != "all":
            raise FlawmixError(f"unknown view '{view}'; use 'populations' or 'all'")
        return pd.DataFrame({"specimen": sp.ids, "strength": sp.strength, "group": group, "probability": prob})

    def parameter_draws(self, size: int = 2000, seed: int = 0) -> "Draws | None":
        """The fit's draws (posterior or bootstrap) or, for a plain MLE, draws from the normal
        approximation of the estimates (for bands on plots); None when neither exists."""
        if self.draws is not None:
            return self.draws
        theta, cov, spec = (self.extras.get(k) for k in ("theta_hat", "covariance", "model_spec"))
        if theta is None:
            return None
        rng = np.random.default_rng(seed)
        t = rng.multivariate_normal(theta, cov, size=size, method="eigh")
        k = spec.k
        return Draws("normal approximation", np.exp(t[:, :k]), np.exp(t[:, k:2 * k]), spec.fractions(t))

    # ---- derived quantities with intervals (from posterior or bootstrap draws) ------------
    def _point_params(self):
        return self.moduli[None, :], self.characteristic_strengths[None, :], self.fractions[None, :]

    def failure_probability(self, stress, approximate: bool = False) -> pd.DataFrame:
        """Failure probability of a test specimen at each stress: estimate and, when the fit
        carries draws (Bayes, bootstrap) or was calibrated (the default intervals of a
        concurrent MLE: the profile likelihood of ln H(σ) cut at the χ² drop, column
        ``interval_method``), the interval at the result's confidence;
        ``approximate=True`` lets a plain MLE use its normal-approximation draws (cheap, for
        plot bands)."""
        s = np.atleast_1d(np.asarray(stress, dtype=float))
        point = 1.0 - dist.model_sf_rows(self.model, s, *self._point_params(), self._partial_index)[0]
        samples = None
        d = self.parameter_draws() if approximate else self.draws
        if d is not None:
            samples = 1.0 - dist.model_sf_rows(self.model, s, d.moduli, d.scales, d.fractions, self._partial_index)
            if self.method == "bayes":
                point = np.median(samples, axis=0)
        elif "calibration" in self.extras:   # the refits that calibrated the fit
            return self._calibrated_frame(point, s, "hazard", f"stress ({self.unit})")
        return _summary_frame(samples, point, self.confidence, pd.Index(s), f"stress ({self.unit})")

    def _calibrated_frame(self, point, values, kind: str, index_name: str) -> pd.DataFrame:
        """Estimate, interval and ``interval_method`` of each value from the kept bootstrap
        campaigns (derived.py: ``kind`` hazard for P_f(σ), quantile for σ(P_f))."""
        from .derived import interval_frame

        return interval_frame(self, np.asarray(point, dtype=float), np.asarray(values, dtype=float), kind, index_name)

    def population_failure_probability(self, name: str, stress, approximate: bool = False) -> pd.DataFrame:
        """Failure probability of a test specimen from population ``name`` acting alone, at
        each stress, with its interval when the fit carries draws (``approximate=True``: a
        plain MLE uses its normal-approximation draws). For the population's own band."""
        j = [p.name for p in self.populations].index(self.population(name).name)
        s = np.atleast_1d(np.asarray(stress, dtype=float))
        p = self.populations[j]
        point = 1.0 - np.exp(-dist.weibull_cumulative_hazard(s, p.modulus, p.characteristic_strength))
        d = self.parameter_draws() if approximate else self.draws
        samples = None
        if d is not None:
            samples = 1.0 - np.exp(-dist.weibull_cumulative_hazard(s[None, :], d.moduli[:, j:j + 1],
                                                                   d.scales[:, j:j + 1]))
        return _summary_frame(samples, point, self.confidence, pd.Index(s), f"stress ({self.unit})")

    def strength_at(self, probability) -> pd.DataFrame:
        """Stress at which a test specimen's failure probability equals each ``probability``."""
        ps = np.atleast_1d(np.asarray(probability, dtype=float))
        if np.any((ps <= 0) | (ps >= 1)):
            raise FlawmixError("failure probabilities must lie strictly between 0 and 1")
        point = np.array([dist.model_ppf(self.model, p, *self._point_params(), self._partial_index)[0] for p in ps])
        samples = None
        if self.draws is not None:
            d = self.draws
            samples = np.stack([dist.model_ppf(self.model, p, d.moduli, d.scales, d.fractions, self._partial_index)
                                for p in ps], axis=1)
            if self.method == "bayes":
                point = np.median(samples, axis=0)
        elif "calibration" in self.extras:
            return self._calibrated_frame(point, ps, "quantile", "failure probability")
        return _summary_frame(samples, point, self.confidence, pd.Index(ps), "failure probability")

    def failure_share_intervals(self, stress) -> pd.DataFrame:
        """Share of failures from each population at each stress, with intervals when draws exist.

        Rows: (stress, population); columns: estimate, low, high."""
        s = np.atleast_1d(np.asarray(stress, dtype=float))
        names = [p.name for p in self.populations]
        point = dist.model_failure_shares(self.model, s, self.moduli, self.characteristic_strengths,
                                          self.fractions, self._partial_index)        # (T, k)
        samples = None
        if self.draws is not None:
            d = self.draws
            samples = np.stack([dist.model_failure_shares(self.model, s, d.moduli[i], d.scales[i], d.fractions[i],
                                                          self._partial_index)
                                for i in range(0, d.size, max(1, d.size // 2000))])      # (S, T, k)
            if self.method == "bayes":
                point = np.median(samples, axis=0)
            samples = samples.reshape(samples.shape[0], -1)
        index = pd.MultiIndex.from_product([s, names], names=[f"stress ({self.unit})", "population"])
        frame = _summary_frame(samples, point.reshape(-1), self.confidence, index, None)
        frame.index.names = [f"stress ({self.unit})", "population"]
        return frame

    def origin_probabilities(self, threshold: float = 0.05, method: str = "auto") -> pd.DataFrame:
        """Probability of each population as the origin of every unidentified or ambiguous
        failure, and of every written label with that label withheld (``check``: below
        ``threshold``, re-examine that fracture surface). See :mod:`flawmix.origins`."""
        from .origins import origin_probabilities

        return origin_probabilities(self, threshold, method)

    @property
    def posterior(self):
        """The posterior as arviz InferenceData (arviz 0.x) or DataTree (1.x); Bayes fits only."""
        if self.method != "bayes" or self.draws is None:
            raise FlawmixError("only a Bayesian fit (method='bayes') has a posterior")
        from . import _arviz

        d = self.draws
        c = d.chains
        shape = lambda a: a.reshape(-1, c, a.shape[-1]).transpose(1, 0, 2)
        post = {f"modulus[{p.name}]": shape(d.moduli)[..., j] for j, p in enumerate(self.populations)}
        post.update({f"characteristic_strength[{p.name}]": shape(d.scales)[..., j] for j, p in enumerate(self.populations)})
        if not self.model.startswith("concurrent"):
            post.update({f"fraction[{p.name}]": shape(d.fractions)[..., j] for j, p in enumerate(self.populations)})
        return _arviz.to_inference_data(post)

    # ---- presentation -----------------------------------------------------------------
    def summary(self, full: bool = False) -> pd.DataFrame:
        """One row per population: modulus and characteristic strength with their interval
        bounds (columns named by percentile: ``m 5%``/``m 95%`` for 90 % intervals), rounded to
        the digits that mean something so it displays whole at the default pandas width.

        ``full=True``: every column (expected failures, unbiased modulus, fraction, interval
        method) at full precision, as the report's estimates.csv."""
        from . import formatting as fmt

        lo_pct = f"{100 * (1 - self.confidence) / 2:g}%"
        hi_pct = f"{100 * (1 + self.confidence) / 2:g}%"
        rows = []
        for p in self.populations:
            if full:
                pct = f"{self.confidence:.0%}"
                rows.append({
                    "population": p.name, "kind": p.kind, "failures": p.n_failures,
                    "expected failures": round(p.expected_failures, 2), "modulus": p.modulus,
                    f"modulus {pct} low": p.modulus_interval[0], f"modulus {pct} high": p.modulus_interval[1],
                    f"characteristic strength ({self.unit})": p.characteristic_strength,
                    f"strength {pct} low": p.strength_interval[0], f"strength {pct} high": p.strength_interval[1],
                    "unbiased modulus": p.modulus_unbiased, "fraction": p.fraction,
                    "interval method": p.interval_method, "support": support_words(p.n_failures, p.n_possible),
                })
                continue
            m = lambda x: float(fmt.modulus(x)) if x is not None and math.isfinite(x) else x
            st = lambda x: float(fmt.stress(x)) if x is not None and math.isfinite(x) else x
            row = {"population": p.name, "kind": p.kind, "failures": p.n_failures, "m": m(p.modulus),
                   f"m {lo_pct}": m(p.modulus_interval[0]), f"m {hi_pct}": m(p.modulus_interval[1]),
                   f"σθ ({self.unit})": st(p.characteristic_strength), f"σθ {lo_pct}": st(p.strength_interval[0]),
                   f"σθ {hi_pct}": st(p.strength_interval[1])}
            if not self.model.startswith("concurrent"):
                row["fraction"] = round(p.fraction, 3)
            if any(is_weak(q.n_failures) for q in self.populations):
                row["support"] = UNSUPPORTED if is_weak(p.n_failures) else ""
            rows.append(row)
        frame = pd.DataFrame(rows).set_index("population")
        frame.attrs["confidence"] = self.confidence
        return frame

    def __repr__(self) -> str:
        from . import formatting as fmt

        pops = "; ".join(f"{p.name} m {fmt.modulus(p.modulus)}, σθ {fmt.stress(p.characteristic_strength)}"
                         for p in self.populations)
        return (f"<FitResult {self.model} {self.method}, {self.n_specimens} specimens, {self.unit}: {pops}; "
                f"print() for the full text, .summary() for a table>")

    def to_dict(self) -> dict[str, Any]:
        """Plain JSON-ready dictionary (schema documented in README.md)."""
        return {
            "method": self.method,
            "model": self.model,
            "confidence": self.confidence,
            "unit": self.unit,
            "n_specimens": self.n_specimens,
            "n_failed": self.n_failed,
            "n_survived": self.n_survived,
            "n_unidentified": self.n_unidentified,
            "n_ambiguous": self.n_ambiguous,
            "log_likelihood": _num(self.log_likelihood),
            "n_parameters": self.n_parameters,
            "aic": _num(self.aic),
            "bic": _num(self.bic),
            "populations": [p.to_dict() for p in self.populations],
            "tests": [t.to_dict() for t in self.tests],
            "warnings": list(self.warnings),
            "converged": bool(self.converged),
            "plotting_rule": self.plotting_rule,
            "source": self.source,
            "checksum_sha256": self.checksum,
            "partial_population": self.partial_population,
            **({"priors": list(self.priors)} if self.priors else {}),
            **{k: v for k, v in self.extras.items() if isinstance(v, (dict, list, str, int, float, type(None)))},
            **({"accounting": _accounting(self.specimens)} if self.specimens is not None else {}),
            **_origin_keys(self),
        }

    def __str__(self) -> str:
        return format_result(self)

    def _repr_html_(self) -> str:
        return f"<p>{self.model} {self.method} fit, {self.n_specimens} specimens, unit {self.unit}</p>" + \
            self.summary().to_html(float_format=lambda x: f"{x:.4g}")


def _fmt(x: float | None, digits: int = 4) -> str:
    if x is None:
        return "—"
    if not math.isfinite(x):
        return "unbounded"
    return f"{x:.{digits}g}"


def format_result(r: FitResult, warnings: bool = True) -> str:
    """A readable plain-text report of a fit (``warnings=False``: without its warning lines,
    for callers that print warnings elsewhere, once)."""
    from . import formatting as fmt

    level = fmt.level(r.confidence)
    lines = [
        f"flawmix: {r.model} populations, {r.method.upper() if r.method == 'mle' else r.method} fit"
        + (f" of {r.source}" if r.source else ""),
        f"specimens {r.n_specimens}: failed {r.n_failed} (origin unidentified {r.n_unidentified}, "
        f"ambiguous {r.n_ambiguous}), survived {r.n_survived}; stress unit {r.unit}",
        "",
    ]
    unbiased = any(p.modulus_unbiased is not None for p in r.populations)   # complete single samples only
    header = (f"{'population':<18}{'kind':<10}{'failures':>9}{'expected':>9}  {'modulus':>7}  {'(' + level + ')':<20}"
              f"{'σθ':>8}  {'(' + level + ')':<18}" + (f"{'m unbiased':>10}" if unbiased else "")).rstrip()
    lines.append(header)
    lines.append("-" * len(header))
    for p in r.populations:
        mi = fmt.interval(*p.modulus_interval, kind=fmt.modulus)
        si = fmt.interval(*p.strength_interval)
        lines.append(
            f"{p.name[:17]:<18}{p.kind:<10}{p.n_failures:>9}{p.expected_failures:>9.1f}  {fmt.modulus(p.modulus):>7}  "
            f"{mi:<20}{fmt.stress(p.characteristic_strength):>8}  {si:<18}"
            + (f"{fmt.modulus(p.modulus_unbiased):>10}" if unbiased else "")
        )
        lines[-1] = lines[-1].rstrip() + ("  ← " + UNSUPPORTED if is_weak(p.n_failures) else "")
    if any(is_weak(p.n_failures) for p in r.populations):
        lines.append(f"← {UNSUPPORTED}: fewer than {FEW_FAILURES} certain failures; these estimates, and any "
                     "prediction or what-if gain they drive, are not supported by the data")
    if not r.model.startswith("concurrent"):
        lines.append("")
        for p in r.populations:
            fi = "" if p.fraction_interval is None else f" [{_fmt(p.fraction_interval[0], 3)}, {_fmt(p.fraction_interval[1], 3)}]"
            lines.append(f"share of specimens carrying {p.name}: {_fmt(p.fraction, 3)}{fi}")
        if r.partial_population:
            lines.append(f"(partial model: every specimen carries the other population(s); "
                         f"only a fraction carries {r.partial_population})")
    methods = sorted({p.interval_method for p in r.populations})
    lines.append("")
    lines.append(f"intervals: {', '.join(methods)}; log-likelihood {r.log_likelihood:.2f}, "
                 f"AIC {r.aic:.1f}, BIC {r.bic:.1f} ({r.n_parameters} parameters)")
    reg = [p for p in r.populations if p.regression_modulus is not None]
    if reg:
        lines.append(f"graphical estimate (least squares on the probability plot, {r.plotting_rule} positions): "
                     + "; ".join(f"{p.name} m = {fmt.modulus(p.regression_modulus)}, σθ = {fmt.stress(p.regression_strength)}"
                                 for p in reg))
    for t in r.tests:
        lines.append(f"test {t.name}: statistic {t.statistic:.2f}, {t.df} degree(s) of freedom, "
                     f"p = {fmt.p_value(t.p_value)} ({t.method}). {t.meaning}")
    if "reference_geometry" in r.extras:
        lines.append(f"σθ above refers to geometry '{r.extras['reference_geometry']}'; by geometry: "
                     + "; ".join(f"{g}: " + ", ".join(f"{n} {_fmt(v)}" for n, v in d.items())
                                 for g, d in r.extras["characteristic_strength_by_geometry"].items()))
        lines.append("material scale σ0: " + ", ".join(
            f"{n} {_fmt(v)} {r.extras['material_scale_unit'][n]}" for n, v in r.extras["material_scale"].items()))
    boot = r.extras.get("bootstrap")
    if boot:
        lines.append(f"parametric bootstrap: {boot['used']} of {boot['replicates']} replicates fitted (seed {boot['seed']}); "
                     "bias-corrected modulus " + ", ".join(f"{n} {_fmt(v)}" for n, v in boot["modulus_bias_corrected"].items())
                     + "; bias-corrected σθ " + ", ".join(f"{n} {_fmt(v)}" for n, v in boot["strength_bias_corrected"].items()))
    diag = r.extras.get("diagnostics")
    if diag:
        lines.append(f"sampler: R-hat max {diag['r_hat_max']:.4f}, bulk ESS min {diag['ess_bulk_min']:.0f}, "
                     f"tail ESS min {diag['ess_tail_min']:.0f}; {r.extras.get('draws', 0)} draws"
                     + (f" ({r.extras['moves']} moves)" if r.extras.get("moves") else ""))
    if "elpd_loo" in r.extras:
        lines.append(f"PSIS-LOO: elpd {r.extras['elpd_loo']:.2f} ± {r.extras['elpd_loo_se']:.2f}")
    if not r.converged and r.method == "mle":
        lines.append("WARNING: the maximisation did not reach the convergence tolerance; treat estimates with care.")
    for w in (r.warnings if warnings else ()):
        lines.append(f"warning: {w}")
    return "\n".join(lines)


def _origin_keys(result) -> dict:
    """``origin_probabilities`` and ``origin_checks`` (flawmix.origins) when the result has specimens."""
    if result.specimens is None:
        return {}
    from .origins import origin_export

    return origin_export(result)


def _accounting(specimens) -> dict:
    """Every row of the input: used or excluded with the reason, and how each origin as written
    was read (see :meth:`flawmix.Specimens.origin_table`)."""
    own = getattr(specimens, "accounting", None) or {   # built from arrays: nothing was excluded
        "rows_read": specimens.n_specimens, "used": specimens.n_specimens, "failed": specimens.n_failed,
        "survived": specimens.n_survived, "excluded": 0, "excluded_rows": [],
        "origins": {"unidentified": specimens.n_unidentified, "uncertain": 0}}
    return {**own, "origins_as_written": [dict(e) for e in getattr(specimens, "origin_map", ())]}
