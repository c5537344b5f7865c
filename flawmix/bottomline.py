"""The bottom line of an analysis, said first: which flaw population limits the specimens and
the component and at what stress, the component's failure probability at the analysed load
with its interval, how sure the model choice is, and the cautions that matter for this data.

Fed only by result objects (FitResult, Prediction, Comparison); the CLI and the report render
:class:`BottomLine` and compute nothing themselves.
"""
from __future__ import annotations

import math
import textwrap
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np

from . import formatting as fmt
from . import support
from .errors import FlawmixError
from .evidence import ONE_POPULATION_ENOUGH

DEFAULT_TARGET = 1e-3            # failure probability analysed when the study gives no load
BOOTSTRAP_REPLICATES = 1000      # draws for intervals when a plain MLE has none (~0.2 s for N = 40)
SMALL_POPULATION = 10            # fewer certain failures than this: a caution (our convention;
                                 # C1239 asks for 30 specimens per fit, from memory)


@dataclass(frozen=True)
class BottomLine:
    """What a reader needs first. ``findings`` are full sentences; ``cautions`` the one or two
    that matter most for this data; the other fields are the numbers behind them."""

    findings: tuple[str, ...]
    cautions: tuple[str, ...]
    unit: str
    specimen_limit: str | None = None
    component_limit: str | None = None
    component_name: str | None = None
    load: float | None = None
    failure_probability: dict | None = None    # estimate, low, high, confidence, interval
    strength_at_target: dict | None = None     # target_probability, estimate, low, high
    model_choice: str = ""
    extra: dict = field(default_factory=dict)

    def to_dict(self) -> dict[str, Any]:
        return {"findings": list(self.findings), "cautions": list(self.cautions), "unit": self.unit,
                "specimen_limit": self.specimen_limit, "component_limit": self.component_limit,
                "component": self.component_name, "load": self.load,
                "failure_probability": self.failure_probability, "strength_at_target": self.strength_at_target,
                "model_choice": self.model_choice}

    def text(self, width: int = 92) -> str:
        """The box printed at the top of ``flawmix fit``, ``report`` and ``demo``."""
        rule = "=" * width
        lines = [rule, "BOTTOM LINE".center(width), rule]
        for f in self.findings:
            lines += textwrap.wrap(f, width - 2, initial_indent="* ", subsequent_indent="  ")
        for c in self.cautions:
            lines += textwrap.wrap(c, width - 2, initial_indent="! ", subsequent_indent="  ")
        lines.append(rule)
        return "\n".join(lines)

    def __str__(self) -> str:
        return self.text()


def _share_words(share: float) -> str:
    return f"{fmt.percent(100 * share)}\u00a0% of the failure probability"


def _limit_at(shares: dict[str, float]) -> tuple[str, float]:
    name = max(shares, key=shares.get)
    return name, shares[name]


def risk_shares(moduli, scales, names, stress: float) -> dict[str, float]:
    """Share of each population in the cumulative risk Σ_j (σ/σθj)^mj at ``stress`` (the
    same rule as :func:`flawmix.predict.crossovers` and the prediction's risk shares)."""
    risk = (stress / np.asarray(scales, float)) ** np.asarray(moduli, float)
    return dict(zip(names, (risk / risk.sum()).tolist()))


def dominance_changes(moduli, scales, names, lo: float, hi: float) -> list[dict[str, Any]]:
    """The crossovers inside [lo, hi] where the population with the largest cumulative risk
    changes (with three or more populations most pairwise crossovers are not such changes).
    Each: {stress, below, above}, sorted by stress."""
    from .predict import crossovers

    if len(names) < 2 or not hi > lo:
        return []
    m, s = np.asarray(moduli, float), np.asarray(scales, float)
    grid = np.geomspace(lo, hi, 2001)
    top = np.argmax(m[None, :] * np.log(grid[:, None] / s[None, :]), axis=1)
    pairs = {(names[i], names[j]) for i, j in zip(top[:-1], top[1:]) if i != j}
    out = [c for c in crossovers(m, s, names) if lo < c["stress"] < hi and (c["below"], c["above"]) in pairs]
    return sorted(out, key=lambda c: c["stress"])


def _crossover_text(changes, unit: str) -> str:
    """Where the dominating population changes, if it does."""
    return "".join(f"; above {fmt.stress(c['stress'])} {unit} '{c['above']}' takes over from '{c['below']}' "
                   "(the larger share of the failure probability)" for c in changes)


def model_choice_text(result, comparison=None) -> str:
    """How sure the model choice is, in words. The single place the words come from: the model
    comparison's verdict when one was run, else the fit's own test of one common modulus.
    (When the shared evidence scale lands, it plugs in here.)"""
    if comparison is not None:
        first = comparison.verdict.split(". ")[0].rstrip(".")
        if comparison.verdict.startswith(ONE_POPULATION_ENOUGH):
            # the fit shown still separates the flaw types: say so, or the line contradicts itself
            return (f"Model comparison: {first[0].lower()}{first[1:]}. The fit here still separates the flaw "
                    f"types ('{result.model}' populations); one pooled Weibull population is not shown to fit worse.")
        text = f"Model: '{result.model}' populations. {first}."
        chosen = getattr(comparison, "preferred", result.model)
        if chosen not in (result.model, "single"):
            text += (f" The comparison's choice is '{chosen}'; the estimates here are under '{result.model}' "
                     f"(flawmix fit --model {chosen} for that model's).")
        return text
    tests = [t for t in result.tests if t.name == "common-modulus"]
    if tests:
        t = tests[0]
        judged = t.meaning.split(". ", 1)[-1].rstrip(".")
        if not judged.startswith("p ="):       # the meaning carries no verdict sentence
            judged = f"p = {fmt.p_value(t.p_value)}"
        return (f"Model: '{result.model}' populations; test of one common modulus (one pooled population, "
                f"{t.method}): {judged}.")
    if len(result.populations) == 1:
        return "Model: one population (nothing to choose between)."
    return f"Model: '{result.model}' populations (no test of the model choice was run; see flawmix compare)."


def _cautions(result, prediction, probability, load) -> list[str]:
    """Every caution that applies, most important first; the caller keeps the first two."""
    out = []
    bound = [p.name for p in result.populations if p.at_bound or not math.isfinite(p.modulus_interval[1])]
    if bound:
        out.append(f"Population(s) {', '.join(repr(n) for n in bound)} are poorly determined (an estimate or "
                   "interval at its limit): their numbers are not reliable.")
    n = result.n_specimens
    if probability is not None and probability < 0.5 / n:
        out.append(f"Extrapolation: a failure probability of {fmt.probability(probability)} lies far below the "
                   f"about {fmt.probability(0.5 / n)} that {n} specimens can resolve; it follows the fitted lines, "
                   "so trust its interval, not the estimate alone.")
    elif load is not None and result.specimens is not None and load < float(np.min(result.specimens.strength)):
        out.append(f"Extrapolation: the load {fmt.stress(load)} {result.unit} is below every tested strength.")
    small = [p for p in result.populations if p.n_failures < SMALL_POPULATION]
    if small:
        out.append("Small population(s): " + ", ".join(f"'{p.name}' {p.n_failures} failures (modulus "
                                                        f"{fmt.interval(*p.modulus_interval, kind=fmt.modulus)})"
                                                        for p in small)
                   + f"; fewer than {SMALL_POPULATION} failures leave the modulus, and so any scaling, uncertain.")
    if prediction is not None and prediction.intervals == "none":
        out.append("The component numbers carry no interval (the fit has no draws).")
    return out


def bottom_line(result, prediction=None, comparison=None, *, load: float | None = None,
                target_probability: float | None = None) -> BottomLine:
    """Assemble the bottom line from results already computed.

    prediction: :func:`flawmix.predict.predict` of ``result`` whose ``stresses`` include
    ``load`` (when given) and whose ``probabilities`` include ``target_probability``;
    comparison: :func:`flawmix.compare.compare` of the same specimens (optional)."""
    unit = result.unit
    findings = []
    spec_limit = comp_limit = None
    sp = result.specimens
    if sp is not None and len(result.populations) > 1:
        typical = float(np.median(sp.strength[sp.failed])) if sp.failed.any() else float(np.median(sp.strength))
        names = [p.name for p in result.populations]
        if result.model.startswith("concurrent"):
            shares = risk_shares(result.moduli, result.characteristic_strengths, names, typical)
            what = _share_words
            cross = _crossover_text(dominance_changes(result.moduli, result.characteristic_strengths, names,
                                                      float(np.min(sp.strength)), float(np.max(sp.strength))), unit)
        else:   # exclusive / partial: the share of failures at that stress
            shares = result.failure_shares([typical]).iloc[0].to_dict()
            what = lambda x: f"{fmt.percent(100 * x)}\u00a0% of the failures there"
            cross = ""
        spec_limit, share = _limit_at(shares)
        weak = support.sentence_note(support.driver_note(support.weak_populations(result), shares))
        findings.append(f"Test specimens: '{spec_limit}' limits strength at the median failure stress "
                        f"{fmt.stress(typical)} {unit} ({what(share)}{'; ' + weak if weak else ''}){cross}.")
    elif len(result.populations) == 1:
        spec_limit = result.populations[0].name
        findings.append(f"Test specimens: one population, '{spec_limit}'.")

    probability_info = strength_info = None
    pf_value = None
    if prediction is not None:
        name = prediction.component_name
        level = fmt.level(prediction.confidence)
        how = "" if prediction.intervals == "none" else f" ({level} from {prediction.intervals} draws)"
        at = load
        if load is not None:
            row = prediction.probabilities.loc[_nearest(prediction.probabilities.index, load)]
            pf_value = float(row[name])
            lo, hi = row.get(f"{name} low"), row.get(f"{name} high")
            probability_info = {"estimate": pf_value, "low": _opt(lo), "high": _opt(hi),
                                "confidence": prediction.confidence, "interval": prediction.intervals}
            rng = "" if lo is None else f" {fmt.interval(lo, hi, fmt.probability)}"
            findings.append(f"{name.capitalize()} at the analysed load {fmt.stress(load)} {unit}: failure probability "
                            f"{fmt.probability(pf_value)}{rng}{how}.")
        if target_probability is not None:
            row = prediction.strengths_at.loc[_nearest(prediction.strengths_at.index, target_probability)]
            est = float(row[name])
            lo, hi = row.get(f"{name} low"), row.get(f"{name} high")
            strength_info = {"target_probability": target_probability, "estimate": est, "low": _opt(lo),
                             "high": _opt(hi), "confidence": prediction.confidence, "interval": prediction.intervals}
            rng = "" if lo is None else f", {fmt.interval(lo, hi)}"
            findings.append(f"{name.capitalize()}: a failure probability of {fmt.probability(target_probability)} "
                            f"is reached at {fmt.stress(est)} {unit}{rng}{how}."
                            + ("" if load is not None else " (No [component] stress in the study: set it to "
                                                           "analyse the load the part carries.)"))
            pf_value = pf_value if pf_value is not None else target_probability
            at = est if at is None else at
        if at is not None:
            risk = prediction.risk_shares.xs(_nearest(prediction.risk_shares.index.get_level_values(0), at),
                                             level=0)[name].to_dict()
            comp_limit, share = _limit_at(risk)
            cross = _crossover_text(dominance_changes(prediction.moduli, prediction.component_strengths,
                                                      list(prediction.populations), 0.5 * at, 2.0 * at), unit)
            differs = (f" (not '{spec_limit}', which limits the test specimens)"
                       if spec_limit and comp_limit != spec_limit else "")
            weak = support.sentence_note(support.notes_at(result, prediction.component_strengths, [at])[0])
            findings.append(f"{name.capitalize()}: '{comp_limit}' limits it at {fmt.stress(at)} {unit} "
                            f"({_share_words(share)}{'; ' + weak if weak else ''}){differs}{cross}.")
    choice = model_choice_text(result, comparison)
    findings.append(choice)
    cautions = _cautions(result, prediction, pf_value, load)[:2]
    return BottomLine(tuple(findings), tuple(cautions), unit, spec_limit, comp_limit,
                      prediction.component_name if prediction is not None else None, load,
                      probability_info, strength_info, choice)


def _opt(x):
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


def _nearest(index, value):
    values = np.asarray(index, dtype=float)
    return index[int(np.argmin(np.abs(np.log(values) - math.log(value))))]


def with_draws(result, seed: int = 0, replicates: int = BOOTSTRAP_REPLICATES):
    """The fit itself when it carries draws; else the same fit with draws for intervals on
    derived quantities: the parametric bootstrap (concurrent MLE), or the normal
    approximation of the estimates where the bootstrap is not available."""
    if result.draws is not None:
        return result
    if result.method == "mle" and result.model == "concurrent" and "reference_geometry" not in result.extras:
        from .mle import attach_bootstrap

        boot = attach_bootstrap(result, replicates, seed=seed)
        return replace(boot, populations=result.populations)    # keep the fit's own intervals
    draws = result.parameter_draws(seed=seed)
    return result if draws is None else replace(result, draws=draws)


def analyse(result, study=None, specimens=None, comparison=None, *, seed: int = 0,
            load: float | None = None, target_probability: float | None = None):
    """Bottom line of a fit and, when the study describes a component, of the component at the
    study's analysed load (``[component] stress`` / ``target_probability``). Returns
    (BottomLine, Prediction or None); the prediction carries intervals by default."""
    from .predict import predict

    prediction = None
    component = study.component_object() if study is not None else None
    spec = specimens if specimens is not None else result.specimens
    if component is not None and result.model.startswith("concurrent"):
        coupon = study.specimen_geometry(spec, result, required=False)
        if coupon is not None:
            keys = study.component_load()
            load = load if load is not None else keys.get("stress")
            target = target_probability or keys.get("target_probability")
            if target is None and load is None:
                target = DEFAULT_TARGET
            drawn = with_draws(result, seed)
            name, body = component
            probs = [p for p in (target,) if p is not None] or [DEFAULT_TARGET]
            stresses = None if load is None else [load]
            if load is None:   # judge the limiting population at the stress of the target
                first = predict(drawn, coupon, body, probabilities=probs, component_name=name, stresses=[1.0])
                stresses = [float(first.strengths_at[name].iloc[0])]
            try:
                prediction = predict(drawn, coupon, body, stresses=stresses, probabilities=probs, component_name=name)
            except FlawmixError:
                prediction = None
            return bottom_line(result, prediction, comparison, load=load, target_probability=target), prediction
    return bottom_line(result, None, comparison), None
