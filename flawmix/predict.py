"""From coupons to components: scaled strengths, failure probability, which flaw limits
strength, and what removing or improving a flaw population would gain.

For concurrent populations each scales with its own effective size and modulus
(DOMAIN.md section 4): σθ_part,j = σθ_coupon,j · (k_coupon,j(m_j) / k_part,j(m_j))^(1/m_j),
and P_f(σ) = 1 − exp[−Σ_j (σ/σθ_part,j)^m_j] at the part's reference (largest) stress σ.
"""
from __future__ import annotations

import itertools
import math
from dataclasses import dataclass
from typing import Any, Mapping

import numpy as np
import pandas as pd

from . import distributions as dist
from . import support
from .errors import FlawmixError
from .geometry import Geometry, population_log_sizes
from .result import FitResult, _num

CHARACTERISTIC = 1.0 - math.exp(-1.0)   # 63.2 %


def _kinds(result: FitResult) -> list[str]:
    return [p.kind for p in result.populations]


def _check_concurrent(result: FitResult) -> None:
    if not result.model.startswith("concurrent"):
        raise FlawmixError(f"scaling to a component needs the concurrent model (the fit is '{result.model}'): "
                           "in a part every flaw population is present")


def scaled_strengths(result: FitResult, coupon: Geometry, target: Geometry, moduli=None, scales=None) -> np.ndarray:
    """Characteristic strength of each population in ``target``, from a fit on ``coupon``.

    moduli, scales: (..., k) parameter sets (default: the fit's estimates)."""
    m = result.moduli if moduli is None else np.asarray(moduli)
    s = result.characteristic_strengths if scales is None else np.asarray(scales)
    kinds = _kinds(result)
    log_ratio = population_log_sizes(coupon, kinds, m) - population_log_sizes(target, kinds, m)
    return s * np.exp(log_ratio / m)


def material_scale(result: FitResult, coupon: Geometry) -> np.ndarray:
    """σ0 of each population: the characteristic strength of a unit effective size
    (unit: stress · length^(d/m), d = 3, 2, 1 for volume, surface, edge flaws)."""
    return result.characteristic_strengths * np.exp(
        population_log_sizes(coupon, _kinds(result), result.moduli) / result.moduli)


def crossovers(moduli, scales, names, rule: str = "risk") -> list[dict[str, Any]]:
    """Stresses where two populations contribute equally.

    rule ``risk``: equal cumulative risk (σ/σθi)^mi = (σ/σθj)^mj; ``hazard``: equal failure rate.
    Below the crossover the lower-modulus population dominates, above it the higher-modulus one.
    """
    out = []
    for i, j in itertools.combinations(range(len(names)), 2):
        mi, mj = float(moduli[i]), float(moduli[j])
        if abs(mi - mj) < 1e-12:
            continue
        num = mi * math.log(scales[i]) - mj * math.log(scales[j])
        if rule == "hazard":
            num += math.log(mj) - math.log(mi)
        stress = math.exp(num / (mi - mj))
        low, high = (names[i], names[j]) if mi < mj else (names[j], names[i])
        out.append({"stress": stress, "below": low, "above": high})
    return out


@dataclass(frozen=True)
class Prediction:
    """Coupon and component side by side: strengths, failure probabilities, risk shares."""

    unit: str
    populations: tuple[str, ...]
    specimen_strengths: np.ndarray          # σθ per population, test specimen
    component_strengths: np.ndarray         # σθ per population, component
    material_scales: np.ndarray
    moduli: np.ndarray
    probabilities: pd.DataFrame             # per stress: specimen and component P_f (+ intervals)
    strengths_at: pd.DataFrame              # per target P_f: specimen and component stress (+ intervals)
    risk_shares: pd.DataFrame               # per stress and population: specimen and component shares
    specimen_crossovers: list
    component_crossovers: list
    component_name: str = "component"
    intervals: str = "none"
    confidence: float = 0.90
    what_if: pd.DataFrame | None = None
    cautions: tuple[str, ...] = ()

    def to_dict(self) -> dict[str, Any]:
        def frame(df):
            if df is None:
                return None
            out = df.reset_index()
            return [{k: (_num(v) if isinstance(v, (int, float, np.floating)) else v) for k, v in row.items()}
                    for row in out.to_dict(orient="records")]

        return {
            "unit": self.unit, "component": self.component_name, "intervals": self.intervals,
            "confidence": self.confidence,
            "populations": [{"name": n, "modulus": _num(m), "specimen_characteristic_strength": _num(a),
                             "component_characteristic_strength": _num(b), "material_scale": _num(c)}
                            for n, m, a, b, c in zip(self.populations, self.moduli, self.specimen_strengths,
                                                     self.component_strengths, self.material_scales)],
            "failure_probability": frame(self.probabilities),
            "strength_at_probability": frame(self.strengths_at),
            "risk_shares": frame(self.risk_shares),
            "crossovers": {"specimen": self.specimen_crossovers, "component": self.component_crossovers},
            "what_if": frame(self.what_if),
            "cautions": list(self.cautions),
        }

    def __str__(self) -> str:
        f = lambda x: f"{x:.4g}"
        lines = [f"flawmix: from test specimens to {self.component_name} (stresses in {self.unit})", ""]
        lines.append(f"{'population':<16}{'modulus':>9}{'σθ specimen':>14}{'σθ ' + self.component_name[:12]:>18}")
        for n, m, a, b in zip(self.populations, self.moduli, self.specimen_strengths, self.component_strengths):
            lines.append(f"{n[:15]:<16}{m:>9.3g}{a:>14.4g}{b:>18.4g}")
        lines.append("")
        for where, cross in (("specimen", self.specimen_crossovers), (self.component_name, self.component_crossovers)):
            for c in cross:
                lines.append(f"{where}: '{c['below']}' dominates below {c['stress']:.4g} {self.unit}, "
                             f"'{c['above']}' above")
        lines.append("")
        lines.append("failure probability:")
        lines.append(self.probabilities.to_string(float_format=f))
        lines.append("")
        lines.append("stress at failure probability:")
        lines.append(self.strengths_at.to_string(float_format=f))
        lines.append("")
        lines.append("share of the risk of rupture by population:")
        lines.append(self.risk_shares.to_string(float_format=lambda x: f"{x:.3f}"))
        if self.what_if is not None:
            lines.append("")
            lines.append("what if:")
            lines.append(self.what_if.to_string(float_format=f))
        for c in self.cautions:
            lines.append(f"caution: {c}")
        return "\n".join(lines)


def _quantiles(samples, confidence):
    lo, hi = (1 - confidence) / 2, (1 + confidence) / 2
    return np.quantile(samples, lo, axis=0), np.quantile(samples, hi, axis=0)


def predict(
    result: FitResult,
    coupon: Geometry,
    component: Geometry,
    *,
    stresses=None,
    probabilities=(1e-4, 1e-3, 1e-2, CHARACTERISTIC),
    changes: Mapping[str, float] | None = None,
    component_name: str = "component",
) -> Prediction:
    """Carry a concurrent fit from its test specimens (``coupon``) to a ``component``.

    stresses: reference stresses at which to report failure probabilities and risk shares
        (default: five stresses spanning the component's 0.1 % to 63 % range).
    probabilities: failure probabilities at which to report the stress.
    changes: what-if scenario per population: a risk factor (0 = population removed,
        0.5 = its risk halved at every stress, e.g. finer grinding).
    Intervals come from the fit's draws (posterior or bootstrap) when it has them.
    """
    _check_concurrent(result)
    names = tuple(p.name for p in result.populations)
    m = result.moduli
    spec_s = result.characteristic_strengths
    comp_s = scaled_strengths(result, coupon, component)
    sigma0 = material_scale(result, coupon)
    draws = result.draws
    if draws is not None:
        comp_draws = scaled_strengths(result, coupon, component, draws.moduli, draws.scales)
    probs = np.atleast_1d(np.asarray(probabilities, dtype=float))
    if stresses is None:
        lo = dist.model_ppf("concurrent", 1e-3, m[None], comp_s[None])[0]
        hi = dist.model_ppf("concurrent", CHARACTERISTIC, m[None], spec_s[None])[0]
        stresses = np.geomspace(lo, hi, 5)
    stresses = np.atleast_1d(np.asarray(stresses, dtype=float))

    rows = {"specimen": 1 - dist.model_sf_rows("concurrent", stresses, m[None], spec_s[None])[0],
            component_name: 1 - dist.model_sf_rows("concurrent", stresses, m[None], comp_s[None])[0]}
    pf = pd.DataFrame(rows, index=pd.Index(stresses, name=f"stress ({result.unit})"))
    at = pd.DataFrame({"specimen": [dist.model_ppf("concurrent", p, m[None], spec_s[None])[0] for p in probs],
                       component_name: [dist.model_ppf("concurrent", p, m[None], comp_s[None])[0] for p in probs]},
                      index=pd.Index(probs, name="failure probability"))
    interval_kind = "none"
    if draws is not None:
        interval_kind = draws.kind
        for label, sc in (("specimen", draws.scales), (component_name, comp_draws)):
            sample_pf = 1 - dist.model_sf_rows("concurrent", stresses, draws.moduli, sc)
            pf[f"{label} low"], pf[f"{label} high"] = _quantiles(sample_pf, result.confidence)
            sample_at = np.stack([dist.model_ppf("concurrent", p, draws.moduli, sc) for p in probs], axis=1)
            at[f"{label} low"], at[f"{label} high"] = _quantiles(sample_at, result.confidence)

    legend = _attach_notes(result, pf, at, spec_s, comp_s, component_name)
    share_rows = []
    for s in stresses:
        hs = (s / spec_s) ** m
        hc = (s / comp_s) ** m
        for j, n in enumerate(names):
            share_rows.append({f"stress ({result.unit})": s, "population": n,
                               "specimen": hs[j] / hs.sum(), component_name: hc[j] / hc.sum()})
    shares = pd.DataFrame(share_rows).set_index([f"stress ({result.unit})", "population"])

    what = None
    if changes:
        what = what_if(result, coupon, component, changes, probabilities=probs, component_name=component_name)
    cautions = (
        "Scaling assumes the component carries the same flaw populations as the test specimens, and that its "
        "stress analysis (reference stress and effective sizes) is accurate.",
        "Failure probabilities far below those tested are extrapolations; their uncertainty grows quickly.",
        "These numbers support, and never replace, the applicable design codes and licensed engineering judgement.",
        *legend,
    )
    return Prediction(result.unit, names, spec_s, comp_s, sigma0, m, pf, at, shares,
                      crossovers(m, spec_s, names), crossovers(m, comp_s, names), component_name,
                      interval_kind, result.confidence, what, cautions)


def _attach_notes(result, pf, at, spec_s, comp_s, component_name) -> list[str]:
    """Note columns beside numbers driven by a weak population or extrapolated below the
    lowest tested failure probability (flawmix.support), added only when some row has one;
    returns the sentences that explain the markers."""
    explained = []
    for label, scales in (("specimen", spec_s), (component_name, comp_s)):
        for table, stresses in ((pf, pf.index.to_numpy(dtype=float)), (at, at[label].to_numpy(dtype=float))):
            notes = support.notes_at(result, scales, stresses)
            if any(notes):
                table[f"{label} note"] = [support.short_note(n) for n in notes]
                explained += notes
    return support.marker_legend(explained)


def what_if(result: FitResult, coupon: Geometry | None, component: Geometry | None, changes: Mapping[str, float],
            *, probabilities=(1e-3, CHARACTERISTIC), component_name: str = "component") -> pd.DataFrame:
    """Stress at each failure probability before and after scaling the risk of populations.

    changes: {population: factor}; factor 0 removes the population, 0.5 halves its risk
    (equivalent to raising its σθ by 2^(1/m)). Rows: (body, failure probability); columns:
    before, after, gain (%), and intervals of the gain when the fit carries draws.
    """
    _check_concurrent(result)
    names = [p.name for p in result.populations]
    factor = np.ones(len(names))
    for name, f in changes.items():
        if name not in names:
            raise FlawmixError(f"what-if: no population '{name}'; the fit has {', '.join(names)}")
        if not (0 <= float(f)):
            raise FlawmixError(f"what-if factor for '{name}' must be >= 0 (0 removes it, 0.5 halves its risk)")
        factor[names.index(name)] = float(f)
    if np.all(factor == 0):
        raise FlawmixError("what-if removes every population: nothing would be left to fail")
    keep = factor > 0
    bodies = [("specimen", None)]
    if component is not None:
        bodies.append((component_name, component))
    probs = np.atleast_1d(np.asarray(probabilities, dtype=float))
    rows = []

    def strengths(body, m, s):
        return s if body is None else scaled_strengths(result, coupon, body, m, s)

    draws = result.draws
    for label, body in bodies:
        m = result.moduli
        s = strengths(body, m, result.characteristic_strengths)
        # a risk factor f multiplies (σ/σθ)^m, i.e. divides σθ by f^(1/m)
        s_after = s[keep] / factor[keep] ** (1 / m[keep])
        s_changed = np.full(s.shape, np.inf)   # every population after the change (removed: no risk)
        s_changed[keep] = s_after
        if draws is not None:
            sd = strengths(body, draws.moduli, draws.scales)
            sd_after = sd[:, keep] / factor[keep] ** (1 / draws.moduli[:, keep])
        for p in probs:
            before = dist.model_ppf("concurrent", p, m[None], s[None])[0]
            after = dist.model_ppf("concurrent", p, m[keep][None], s_after[None])[0]
            row = {"body": label, "failure probability": p, "before": before, "after": after,
                   "gain (%)": 100 * (after / before - 1)}
            row["note"] = support.short_note(support.join_notes(support.notes_at(result, s, [before])[0],
                                                                support.notes_at(result, s_changed, [after])[0]))
            if draws is not None:
                b = dist.model_ppf("concurrent", p, draws.moduli, sd)
                a = dist.model_ppf("concurrent", p, draws.moduli[:, keep], sd_after)
                lo, hi = _quantiles(100 * (a / b - 1), result.confidence)
                row["gain low (%)"], row["gain high (%)"] = lo, hi
            rows.append(row)
    table = pd.DataFrame(rows).set_index(["body", "failure probability"])
    if not table["note"].astype(bool).any():
        table = table.drop(columns="note")
    return table


def failure_share_curves(result: FitResult, stresses, coupon: Geometry | None = None,
                         component: Geometry | None = None) -> pd.DataFrame:
    """Share of failures from each population across stress (h_j / Σh), for the test
    specimen and, when given, the component. Columns: body, stress, one per population."""
    s = np.atleast_1d(np.asarray(stresses, dtype=float))
    names = [p.name for p in result.populations]
    frames = [pd.DataFrame(result.failure_shares(s).to_numpy(), columns=names).assign(body="specimen", stress=s)]
    if component is not None:
        _check_concurrent(result)
        comp_s = scaled_strengths(result, coupon, component)
        shares = dist.model_failure_shares("concurrent", s, result.moduli, comp_s)
        frames.append(pd.DataFrame(shares, columns=names).assign(body="component", stress=s))
    return pd.concat(frames, ignore_index=True)[["body", "stress", *names]]


def size_effect(result: FitResult, coupon: Geometry, component: Geometry | None = None,
                ratios=None) -> pd.DataFrame:
    """Characteristic strength of each population against effective size relative to the
    test specimen (σθ ∝ ratio^(−1/m)); the component's own ratio per population is in the
    ``component_ratio`` column. Rows: population × ratio."""
    _check_concurrent(result)
    r = np.geomspace(0.1, 1e4, 60) if ratios is None else np.asarray(ratios, dtype=float)
    rows = []
    comp_ratio = {}
    if component is not None:
        kinds = _kinds(result)
        lr = population_log_sizes(component, kinds, result.moduli) - population_log_sizes(coupon, kinds, result.moduli)
        comp_ratio = dict(zip([p.name for p in result.populations], np.exp(lr)))
    for p in result.populations:
        for x in r:
            rows.append({"population": p.name, "kind": p.kind, "ratio": x,
                         "characteristic_strength": p.characteristic_strength * x ** (-1 / p.modulus),
                         "component_ratio": comp_ratio.get(p.name, np.nan)})
    return pd.DataFrame(rows)
