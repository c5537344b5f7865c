"""Model choice: one pooled population, concurrent, exclusive or partially concurrent?

Every candidate is scored on the same data, origin labels included: the single pooled
population explains the labels as independent of strength (its likelihood carries their
multinomial term), which is the same likelihood as concurrent populations with one common
modulus. Scores: log-likelihood, AIC, BIC, and PSIS-LOO from Bayesian fits; tests:
likelihood ratios, by parametric bootstrap where the null sits on a boundary.
"""
from __future__ import annotations

import math
import warnings as _warnings
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
from scipy import stats as _sstats

from . import likelihood as lik
from . import progress as _progress
from .errors import FlawmixWarning
from .evidence import loo_words, population_count_verdict, rejects
from .result import FitResult, HypothesisTest, _num
from .simulate import Design, replicate, simulate
from .specimens import Specimens


@dataclass(frozen=True)
class Comparison:
    """Scores of every candidate model on one data set, a preferred model and a verdict."""

    table: pd.DataFrame
    preferred: str
    verdict: str
    tests: tuple[HypothesisTest, ...]
    fits: dict[str, FitResult] = field(repr=False, compare=False)
    criterion: str = "elpd_loo"

    def to_dict(self) -> dict[str, Any]:
        models = []
        for name, row in self.table.iterrows():
            entry = {"model": name, "elpd_loo": None, "elpd_loo_se": None}
            for c in self.table.columns:
                if c == "note":
                    entry[c] = row[c] or None
                elif c in ("n_parameters", "pareto_k_bad"):
                    entry[c] = int(row[c])
                elif c == "degenerate":
                    entry[c] = bool(row[c])
                else:
                    entry[c] = _num(row[c])
            models.append(entry)
        return {"models": models, "preferred": self.preferred, "verdict": self.verdict,
                "criterion": self.criterion, "tests": [t.to_dict() for t in self.tests]}

    def __str__(self) -> str:
        t = self.table.copy()
        lines = ["flawmix: model comparison (same data, origin labels included)", ""]
        cols = [c for c in ["n_parameters", "log_likelihood", "aic", "bic", "elpd_loo", "elpd_loo_se"] if c in t]
        lines.append(t[cols].to_string(float_format=lambda x: f"{x:.2f}"))
        notes = t["note"].dropna() if "note" in t else []
        for name, note in getattr(notes, "items", lambda: [])():
            if note:
                lines.append(f"  {name}: {note}")
        lines.append("")
        for test in self.tests:
            lines.append(f"test {test.name}: statistic {test.statistic:.3f}, p = {test.p_value:.3g} ({test.method})")
        lines.append("")
        lines.append(f"preferred: {self.preferred}")
        lines.append(self.verdict)
        return "\n".join(lines)


def _bootstrap_partial_vs_concurrent(specimens: Specimens, concurrent: FitResult, observed: float,
                                     replicates: int, seed) -> tuple[float, int]:
    """p-value of the LR statistic partial vs concurrent under the fitted concurrent model.

    partial with fraction 1 is concurrent: the null sits on the boundary, so Wilks' χ² does
    not hold (DOMAIN.md section 2); simulate the statistic instead."""
    from .mle import _maximise

    k = len(specimens.populations)
    design = Design.like(specimens)
    rng = np.random.default_rng(seed)
    centre = float(np.mean(np.log(specimens.strength)))
    sims = simulate(lik.Model("concurrent", k), concurrent.moduli, concurrent.characteristic_strengths / np.exp(centre),
                    None, design, replicates, rng)
    # a population without failures: no fit, as with real data
    usable = np.flatnonzero(np.all((sims.candidates & sims.failed[..., None]).sum(axis=1) > 0, axis=1))
    bar = _progress.task("boundary test (concurrent vs partial), replicates", usable.size + k)
    concurrent_theta, concurrent_ll = [], []
    for i, r in enumerate(usable):
        bar.step(i + 1)
        opt, *_ = _maximise(replicate(sims, r))
        concurrent_theta.append(opt.theta)
        concurrent_ll.append(opt.loglik)
    data = lik.Data(sims.y[usable], sims.failed[usable], sims.candidates[usable])
    partial_ll = partial_fits(data, np.array(concurrent_theta).reshape(usable.size, 2 * k),
                              progress=lambda a: bar.step(usable.size + a + 1))
    bar.close()
    statistic = 2 * (partial_ll - np.array(concurrent_ll))
    exceed = int(np.sum(statistic >= observed - 1e-9))
    return (1 + exceed) / (1 + usable.size), int(usable.size)


def partial_fits(data: lik.Data, concurrent_theta: np.ndarray, start_logit: float = 3.0, progress=None) -> np.ndarray:
    """(R,) maximum partial-model log-likelihood of R data sets, over the choice of the partial
    population, each by batched Newton from its concurrent maximum (R, 2k) and one logit
    start: under the concurrent null the fraction is 1, so one start near that boundary is
    enough. Equal to ``mle._fit_other_model(..., "partial", theta, logit_starts=(3.0,))`` on
    each data set (tests/test_fast_paths.py)."""
    from .optimize import newton_maximise_batch

    R, k = data.y.shape[0], data.k
    best = np.full(R, -np.inf)
    start = np.concatenate([concurrent_theta, np.full((R, 1), start_logit)], axis=1)
    for a in range(k):
        lower, upper = lik.Model("partial", k, a).bounds()

        def derivatives(theta, rows, a=a):
            sub = lik.Data(data.y[rows], data.failed[rows], data.candidates[rows])
            return lik.partial_derivatives_batch(sub, theta, a)

        _, ll, _ = newton_maximise_batch(derivatives, start, lower=lower, upper=upper, score_tol=1e-6)
        best = np.maximum(best, ll)
        if progress is not None:
            progress(a)
    return best


SINGLE_TEST = "bootstrap likelihood ratio against the better of concurrent and exclusive populations"


def single_population_statistic(data: lik.Data) -> np.ndarray:
    """(R,) 2[max(ℓ_concurrent, ℓ_exclusive) − ℓ_single] for batched data sets: how much
    better than one pooled population the better of the two main alternatives fits."""
    from .exclusive_batch import fit_exclusive_batch
    from .replicates import fit_concurrent_batch, pooled_loglik

    _, _, concurrent, ok = fit_concurrent_batch(data)
    best = np.maximum(np.where(ok, concurrent, -np.inf), fit_exclusive_batch(data))
    return np.maximum(2.0 * (best - pooled_loglik(data)), 0.0)


def bootstrap_single_test(specimens: Specimens, single: FitResult, replicates: int, seed=0) -> HypothesisTest:
    """Test of one pooled population (one Weibull law, origin shares independent of strength)
    against several populations, concurrent or exclusive.

    Statistic: 2[max(ℓ_concurrent, ℓ_exclusive) − ℓ_single]. The exclusive alternative
    reduces to the null on a boundary and both alternatives are refitted from the data, so
    χ² does not hold; the null distribution is simulated from the fitted single population
    with the observed design and refitted in batches (``replicates`` campaigns)."""
    k = len(specimens.populations)
    observed_data = lik.Data.from_specimens(specimens)
    observed = float(single_population_statistic(
        lik.Data(observed_data.y[None], observed_data.failed[None], observed_data.candidates[None]))[0])
    sims = simulate(lik.Model("concurrent", k), single.moduli, single.characteristic_strengths, None,
                    Design.like(specimens), replicates, np.random.default_rng(seed))
    usable = np.all((sims.candidates & sims.failed[..., None]).sum(1) > 0, axis=1)
    null = single_population_statistic(lik.Data(sims.y[usable], sims.failed[usable], sims.candidates[usable]))
    p = float((1 + np.sum(null >= observed - 1e-9)) / (1 + null.size))
    return HypothesisTest("single-vs-several", observed, k - 1, p,
                          f"likelihood ratio, parametric bootstrap under the fitted single population "
                          f"({null.size} replicates)",
                          "Null: one pooled population (origin shares independent of strength); alternative: "
                          "concurrent or exclusive populations, whichever fits better.")


def compare(
    specimens: Specimens,
    *,
    bayes: bool = True,
    bootstrap: int = 199,
    confidence: float = 0.90,
    seed: int = 0,
    target_ess: float = 1000.0,
    single_test_replicates: int = 999,
) -> Comparison:
    """Fit every candidate model and say which the data support, and how strongly.

    The verdict leads with the calibrated test of one pooled population
    (:func:`bootstrap_single_test`): "one population is enough" exactly when it does not
    reject at 5 %; the scores (AIC, BIC, PSIS-LOO) then rank the multi-population models.

    Args:
        bayes: also run the Bayesian fits and score by PSIS-LOO (slower, the default).
        bootstrap: parametric-bootstrap replicates for the partial-vs-concurrent test (0: skip).
        single_test_replicates: replicates of the batched bootstrap behind the test of one
            population (0: no test; the verdict then rests on the scores alone).
    """
    from .bayes import fit_bayes
    from .fit import fit

    k = len(specimens.populations)
    with _warnings.catch_warnings():
        _warnings.simplefilter("ignore", FlawmixWarning)
        fits: dict[str, FitResult] = {}
        fits["single"] = fit(specimens, model="concurrent", common_modulus=True, intervals="none") if k > 1 else \
            fit(specimens, intervals="none")
        if k > 1:
            fits["concurrent"] = fit(specimens, model="concurrent", intervals="none")
            fits["concurrent-common-modulus"] = fits["single"]
            fits["exclusive"] = fit(specimens, model="exclusive", intervals="none")
            fits["partial"] = fit(specimens, model="partial", intervals="none")
        bayes_fits: dict[str, FitResult] = {}
        if bayes:
            for name in fits:
                if name == "concurrent-common-modulus":
                    continue
                model = "concurrent" if name in ("single", "concurrent") else name
                # the maximum-likelihood fit made above is the sampler's start: not made twice
                bayes_fits[name] = fit_bayes(specimens, confidence, model=model, seed=seed, target_ess=target_ess,
                                             common_modulus=(name == "single" and k > 1), mle=fits[name])
            if k > 1:
                bayes_fits["concurrent-common-modulus"] = bayes_fits["single"]

    rows = {}
    for name, f in fits.items():
        row = {"n_parameters": f.n_parameters, "log_likelihood": f.log_likelihood, "aic": f.aic, "bic": f.bic}
        if bayes:
            b = bayes_fits[name]
            row["elpd_loo"] = b.extras["elpd_loo"]
            row["elpd_loo_se"] = b.extras["elpd_loo_se"]
            row["pareto_k_bad"] = b.extras["pareto_k_bad"]
        note = ""
        if name == "single" and k > 1:
            note = "one Weibull population, origin shares independent of strength"
        elif name == "concurrent-common-modulus":
            note = "same likelihood as 'single': with one modulus the origin shares do not change with stress"
        elif name == "partial" and f.partial_population:
            note = f"a fraction of the specimens carries '{f.partial_population}', all carry the rest"
        degenerate = [w for w in f.warnings if "not meaningful" in w]
        row["degenerate"] = bool(degenerate)
        boundary = [w for w in f.warnings if "limit (≈" in w]
        if degenerate:
            note = (note + "; " if note else "") + "DEGENERATE maximum likelihood: " + degenerate[0]
        elif boundary:
            note = (note + "; " if note else "") + boundary[0]
        row["note"] = note
        rows[name] = row
    table = pd.DataFrame.from_dict(rows, orient="index")
    table.index.name = "model"

    criterion = "elpd_loo" if bayes else "aic"
    order = table["elpd_loo"].sort_values(ascending=False).index if bayes else table["aic"].sort_values().index
    order = [n for n in order if n != "concurrent-common-modulus"]
    excluded = []
    if not bayes:   # a degenerate maximum has a meaningless AIC: never prefer it on that basis
        excluded = [n for n in order if table.loc[n, "degenerate"]]
        order = [n for n in order if not table.loc[n, "degenerate"]]
    preferred = order[0]
    tests: list[HypothesisTest] = []
    single_test = None
    if k > 1:
        conc = fits["concurrent"]
        if single_test_replicates:
            single_test = bootstrap_single_test(specimens, fits["single"], single_test_replicates, seed)
            tests.append(single_test)
        if conc.tests:
            t = conc.tests[0]
            tests.append(HypothesisTest("single-vs-concurrent", t.statistic, t.df, t.p_value, t.method,
                                        "Null: one pooled population (a common modulus)."))
        stat = max(0.0, 2 * (fits["exclusive"].log_likelihood - fits["single"].log_likelihood))
        df = fits["exclusive"].n_parameters - fits["single"].n_parameters
        tests.append(HypothesisTest("single-vs-exclusive", stat, df, float(_sstats.chi2.sf(stat, df)),
                                    "likelihood ratio, χ²", "Null: one pooled population; alternative: each "
                                    "specimen carries one population (identical populations give the null)."))
        if bootstrap:
            stat = max(0.0, 2 * (fits["partial"].log_likelihood - conc.log_likelihood))
            p, used = _bootstrap_partial_vs_concurrent(specimens, conc, stat, bootstrap, seed)
            tests.append(HypothesisTest("concurrent-vs-partial", stat, 1, p,
                                        f"likelihood ratio, parametric bootstrap ({used} replicates; the null is on "
                                        "the boundary fraction = 1, so χ² does not apply)",
                                        "Null: every specimen carries every population."))

    verdict, preferred = _verdict(table, order, bayes, bayes_fits, specimens)
    if single_test is not None:
        several = rejects(single_test.p_value)
        if several and preferred == "single":
            preferred = next(n for n in order if n != "single")
        elif not several:
            preferred = "single"
        verdict = (population_count_verdict(single_test.p_value, SINGLE_TEST) + " "
                   + (f"Among the models with several populations the choice is '{preferred}' (scores below). "
                      if several else _single_alternatives_note(tests))
                   + "Scores: " + verdict)
    if excluded:
        verdict += (f" Not ranked: {', '.join(repr(n) for n in excluded)} (degenerate maximum likelihood; "
                    "run the comparison with Bayesian fits to score them by PSIS-LOO).")
    return Comparison(table, preferred, verdict, tuple(tests), {**fits, **{f"{n} (bayes)": b for n, b in bayes_fits.items()}},
                      criterion)


def _single_alternatives_note(tests) -> str:
    """When one pooled population is kept but a test against one alternative alone rejects
    it, say why the two readings differ (so the verdict agrees with every test it reports)."""
    alone = [t for t in tests if t.name in ("single-vs-concurrent", "single-vs-exclusive") and rejects(t.p_value)]
    if not alone:
        return ""
    said = " and ".join(f"'{t.name.split('-vs-')[1]}' (p = {t.p_value:.2g})" for t in alone)
    several = len(alone) > 1
    tests_word = "On their own, the χ² tests" if several else "On its own, the χ² test"
    return (f"{tests_word} against {said} {'reject' if several else 'rejects'} one population at the 5 % level; "
            "the bootstrap test above "
            "allows for trying both alternatives and decides, so the evidence for several populations is "
            "suggestive, not established. ")


def _verdict(table, order, bayes, bayes_fits, specimens) -> tuple[str, str]:
    """The scores' verdict and the model it chooses: the best, or the simpler of the best two
    when the data cannot tell them apart."""
    if len(order) == 1:
        return "Only one population is defined, so there is nothing to compare.", order[0]
    best, second = order[0], order[1]
    choice = best
    if bayes:
        a = np.asarray(bayes_fits[best].extras["elpd_loo_pointwise"])
        b = np.asarray(bayes_fits[second].extras["elpd_loo_pointwise"])
        diff = a - b
        delta = float(diff.sum())
        se = float(math.sqrt(diff.size * np.var(diff))) if diff.size > 1 else float("nan")
        words = loo_words(delta, se)
        text = (f"By leave-one-out predictive accuracy (PSIS-LOO) the '{best}' model is preferred over "
                f"'{second}' by {delta:.1f} ± {se:.1f} in expected log predictive density: {words}.")
    else:
        delta = float(table.loc[second, "aic"] - table.loc[best, "aic"])
        words = ("no real preference" if delta < 2 else "weak evidence" if delta < 4 else
                 "moderate evidence" if delta < 10 else "strong evidence")
        text = f"By AIC the '{best}' model is preferred over '{second}' by {delta:.1f}: {words}."
    if words == "no real preference":
        simpler = min((best, second), key=lambda n: table.loc[n, "n_parameters"])
        choice = simpler
        text += (f" The data cannot tell these two apart; prefer the simpler ('{simpler}'), and test more "
                 "specimens (or identify more origins) if the choice matters.")
    if "single" not in (best, second) and "single" in table.index:
        if bayes:
            diff = np.asarray(bayes_fits[best].extras["elpd_loo_pointwise"]) - \
                np.asarray(bayes_fits["single"].extras["elpd_loo_pointwise"])
            d, se = float(diff.sum()), float(math.sqrt(diff.size * np.var(diff)))
            text += (f" One pooled population is worse than '{best}' by {d:.1f} ± {se:.1f} "
                     f"({loo_words(d, se)} that the flaw populations differ "
                     "by predictive accuracy; see the likelihood-ratio test of a common modulus for a test).")
        else:
            d = float(table.loc["single", "aic"] - table.loc[best, "aic"])
            text += f" One pooled population is worse than '{best}' by {d:.1f} in AIC."
    bad = int(table.get("pareto_k_bad", pd.Series(dtype=float)).fillna(0).max()) if bayes else 0
    if bad:
        text += f" Some PSIS-LOO estimates are unreliable (Pareto k > 0.7 for up to {bad} specimens)."
    return text, choice
