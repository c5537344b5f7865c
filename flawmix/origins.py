"""Origin probabilities: which population most likely caused each failure given its strength,
and how probable each written origin label is under the model fitted without that label.

Every number comes from the per-specimen terms of :mod:`flawmix.likelihood`: the probability
of population j among the candidates C of failure i is L_ij / Σ_{l∈C} L_il, where L_ij is that
specimen's likelihood term had its origin been written as j (DOMAIN.md section 2). For the
concurrent model this is the hazard share h_j(σ) / Σ_{l∈C} h_l(σ).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from . import likelihood as lik
from .errors import FlawmixError

CHECK_THRESHOLD = 0.05      # a label this improbable at its strength is worth a second look
REFIT_MAX_LABELLED = 400    # above this many labelled failures "auto" uses the one-step approximation
METHODS = ("auto", "refit", "one-step")


@dataclass(frozen=True)
class _Fitted:
    """The fitted model, the data it was fitted on (in the specimens' unit), its estimate and
    the inverse observed information (None when it was not finite)."""

    spec: lik.Model
    data: lik.Data
    theta: np.ndarray
    covariance: np.ndarray | None
    tie: np.ndarray | None


def _fitted(result) -> _Fitted:
    from .mle import common_modulus_tie

    sp = result.specimens
    if sp is None:
        raise FlawmixError("origin probabilities need a result that carries its specimens (fit a table)")
    k = len(result.populations)
    tie = common_modulus_tie(k) if result.model == "concurrent-common-modulus" else None
    spec, data, theta = (result.extras.get(key) for key in ("model_spec", "fit_data", "theta_hat"))
    if spec is None or data is None or theta is None:       # covariance was not finite: rebuild
        if "reference_geometry" in result.extras:
            raise FlawmixError("origin probabilities of this sized fit need finite standard errors; "
                               "the fit's information matrix was singular")
        spec = lik.Model(result.model.removesuffix("-common-modulus"), k, result._partial_index)
        data = lik.Data.from_specimens(sp)
        theta = theta_from_natural(spec, result.moduli[None], result.characteristic_strengths[None],
                                   result.fractions[None])[0]
    return _Fitted(spec, data, np.asarray(theta, dtype=float), result.extras.get("covariance"), tie)


def theta_from_natural(spec: lik.Model, moduli, scales, fractions) -> np.ndarray:
    """(S, n_params) likelihood parameters from (S, k) moduli, scales and fractions."""
    k = spec.k
    parts = [np.log(moduli), np.log(scales)]
    fractions = np.clip(np.asarray(fractions, dtype=float), 1e-300, 1.0)
    if spec.name == "exclusive":
        parts.append(np.log(fractions[:, :k - 1]) - np.log(fractions[:, k - 1:k]))
    elif spec.name == "partial":
        p = np.clip(fractions[:, spec.partial_index], 1e-15, 1 - 1e-15)
        parts.append((np.log(p) - np.log1p(-p))[:, None])
    return np.concatenate(parts, axis=1)


def _as_label(data: lik.Data, j: int) -> lik.Data:
    """The same specimens with every failure's origin written as population j."""
    onehot = np.zeros_like(data.candidates, dtype=bool)
    onehot[..., j] = True
    return lik.Data(data.y, data.failed, onehot & data.failed[..., None], data.geometry)


def label_log_terms(spec: lik.Model, data: lik.Data, theta) -> np.ndarray:
    """(..., N, k) ln L_ij: specimen i's likelihood term had its origin been written as j."""
    return np.stack([spec.pointwise(_as_label(data, j), theta) for j in range(spec.k)], axis=-1)


def candidate_probabilities(spec: lik.Model, data: lik.Data, theta, candidates=None) -> np.ndarray:
    """(..., N, k) probability of each population among each failure's candidates (0 outside
    them and for survivors), at parameter sets theta (..., n_params)."""
    cand = data.candidates if candidates is None else candidates
    _, share = lik._masked_logsumexp(label_log_terms(spec, data, theta), cand)
    return np.where(data.failed[..., None] & cand, share, 0.0)


def _own_rows(data: lik.Data, rows: np.ndarray, candidates: np.ndarray) -> lik.Data:
    """Specimens ``rows`` as R one-specimen data sets (leading dim R), with given candidates."""
    geometry = None if data.geometry is None else data.geometry[rows][:, None]
    return lik.Data(data.y[rows][:, None], data.failed[rows][:, None], candidates[:, None, :], geometry)


def _row_probabilities(fit: _Fitted, rows: np.ndarray, thetas: np.ndarray) -> np.ndarray:
    """(R, k) probabilities of every population for specimen rows[r] at its own thetas[r],
    all populations candidates (the label withheld)."""
    everything = np.ones((rows.size, fit.spec.k), dtype=bool)
    if fit.spec.name == "concurrent" and fit.spec.size_offsets is None:   # the hazard shares, one call
        k = fit.spec.k
        one_each = lik.Data(fit.data.y[rows][:, None], np.ones((rows.size, 1), bool), everything[:, None, :])
        return lik.responsibilities(one_each, thetas[:, :k], thetas[:, k:2 * k])[:, 0, :]
    if fit.spec.size_offsets is None:
        return candidate_probabilities(fit.spec, _own_rows(fit.data, rows, everything), thetas)[:, 0, :]
    # sized models index geometry per specimen of one data set: one row at a time
    single = lik.Data(fit.data.y, fit.data.failed, np.ones_like(fit.data.candidates), fit.data.geometry)
    return np.array([candidate_probabilities(fit.spec, single, t)[i] for i, t in zip(rows, thetas)])


# ---- leaving one label out --------------------------------------------------------------------

def _withheld(data: lik.Data, i: int) -> lik.Data:
    cand = data.candidates.copy()
    cand[i] = True
    return lik.Data(data.y, data.failed, cand, data.geometry)


def _derivatives(spec: lik.Model, data: lik.Data):
    return lambda t: lik.derivatives(spec, data, t)


def refit_without_label(fit: _Fitted, i: int) -> np.ndarray:
    """Maximum-likelihood parameters with specimen i's origin treated as unidentified
    (Newton from the full fit's estimate, which is one label away)."""
    from .optimize import newton_maximise

    data = _withheld(fit.data, i)
    lower, upper = fit.spec.bounds()
    if fit.spec.size_offsets is not None:      # where effective sizes are tabulated
        lower[:fit.spec.k], upper[:fit.spec.k] = np.log(0.5) + 1e-9, np.log(300.0) - 1e-9
    exact = fit.spec.name == "concurrent" and fit.spec.size_offsets is None
    opt = newton_maximise(_derivatives(fit.spec, data), np.clip(fit.theta, lower, upper), tie=fit.tie,
                          lower=lower, upper=upper, score_tol=1e-9 if exact else 1e-6)
    return opt.theta


def one_step_without_label(fit: _Fitted, rows: np.ndarray, step: float = 1e-5, general: bool = False) -> np.ndarray:
    """(R, n_params) one Newton step from the full fit towards the fit with each row's label
    withheld: θ̂ + Cov·∇[ℓ_i(all candidates) − ℓ_i(label)] (the full fit's observed information
    stands in for the refit's). The gradient: analytic for the plain concurrent model (the
    derivatives of DEVELOPERS.md, "Likelihood derivatives"), else central differences of the
    specimen's likelihood terms; ``general=True`` forces the latter (tests compare the two)."""
    if fit.covariance is None:
        raise FlawmixError("the one-step approximation needs finite standard errors; use method='refit'")
    if fit.spec.name == "concurrent" and fit.spec.size_offsets is None and not general:
        k = fit.spec.k
        u, v = fit.theta[:k], fit.theta[k:]
        m = np.exp(u)
        y = fit.data.y[rows]
        everything = lik.Data(y, np.ones(rows.size, bool), np.ones((rows.size, k), bool))
        share = lik.responsibilities(everything, u, v)                     # π_ij, all candidates
        own = fit.data.candidates[rows].astype(float)                      # the written label
        z = m * (y[:, None] - v)
        grad = np.concatenate([(share - own) * (1 + z), m * (own - share)], axis=1)
        return fit.theta + np.einsum("np,qp->nq", grad, np.asarray(fit.covariance))   # BLAS is slow on tall-thin
    P = fit.theta.size
    grad = np.empty((rows.size, P))
    withheld = _withheld_all(fit.data)
    for p in range(P):
        shift = np.zeros(P)
        shift[p] = step
        # the survival terms are common to both and cancel in the difference
        change = [fit.spec.pointwise(withheld, t)[rows] - fit.spec.pointwise(fit.data, t)[rows]
                  for t in (fit.theta + shift, fit.theta - shift)]
        grad[:, p] = (change[0] - change[1]) / (2 * step)
    return fit.theta + np.einsum("np,qp->nq", grad, np.asarray(fit.covariance))


def _withheld_all(data: lik.Data) -> lik.Data:
    return lik.Data(data.y, data.failed, np.ones_like(data.candidates) & data.failed[:, None], data.geometry)


def _labelled_rows(sp) -> np.ndarray:
    return np.flatnonzero(sp.failed & (sp.n_candidates == 1))


def _resolve_method(method: str, n_labelled: int, fit: _Fitted) -> str:
    if method not in METHODS:
        raise FlawmixError(f"unknown method '{method}'; use one of {', '.join(METHODS)}")
    if method == "auto":
        return "refit" if n_labelled <= REFIT_MAX_LABELLED or fit.covariance is None else "one-step"
    return method


def label_probabilities(result, method: str = "auto") -> tuple[np.ndarray, np.ndarray, str]:
    """For every failure with one written origin: (rows (R,), probabilities (R, k) of each
    population with that label withheld, the method used: ``refit`` or ``one-step``)."""
    fit = _fitted(result)
    rows = _labelled_rows(result.specimens)
    method = _resolve_method(method, rows.size, fit)
    if rows.size == 0 or fit.spec.k == 1:
        return rows, np.ones((rows.size, fit.spec.k)), method
    if method == "refit":
        from .progress import task

        thetas = np.empty((rows.size, fit.theta.size))
        quiet = None if rows.size > 100 else False      # a hundred refits take well under a second
        with task("refitting with each origin label withheld", rows.size, show=quiet) as bar:
            for n, i in enumerate(rows):
                thetas[n] = refit_without_label(fit, int(i))
                bar.step(n + 1)
    else:
        thetas = one_step_without_label(fit, rows)
    return rows, _row_probabilities(fit, rows, thetas), method


# ---- unidentified and ambiguous failures -----------------------------------------------------

def _uncertain_rows(sp) -> np.ndarray:
    return np.flatnonzero(sp.failed & (sp.n_candidates > 1))


def _draw_probabilities(result, fit: _Fitted, rows: np.ndarray, max_draws: int = 2000) -> np.ndarray | None:
    """(S, R, k) probabilities of rows under each draw (posterior or bootstrap), or None."""
    d = result.draws
    if d is None or rows.size == 0:
        return None
    pick = np.arange(0, d.size, max(1, d.size // max_draws))
    thetas = theta_from_natural(fit.spec, d.moduli[pick], d.scales[pick], d.fractions[pick])
    sub = lik.Data(fit.data.y[rows], fit.data.failed[rows], fit.data.candidates[rows],
                   None if fit.data.geometry is None else fit.data.geometry[rows])
    out = []
    for start in range(0, len(thetas), 200):
        out.append(candidate_probabilities(fit.spec, sub, thetas[start:start + 200]))
    return np.concatenate(out, axis=0)


def uncertain_probabilities(result):
    """For every unidentified or ambiguous failure: (rows (R,), point probabilities (R, k),
    interval (low, high) each (R, k) or None without draws). Maximum likelihood and bootstrap:
    at the estimate; Bayes: the posterior mean (which sums to one over the candidates)."""
    fit = _fitted(result)
    rows = _uncertain_rows(result.specimens)
    sub = lik.Data(fit.data.y[rows], fit.data.failed[rows], fit.data.candidates[rows],
                   None if fit.data.geometry is None else fit.data.geometry[rows])
    point = candidate_probabilities(fit.spec, sub, fit.theta)
    samples = _draw_probabilities(result, fit, rows)
    if samples is None:
        return rows, point, None
    if result.method == "bayes":
        point = samples.mean(axis=0)
    lo, hi = (1 - result.confidence) / 2, (1 + result.confidence) / 2
    return rows, point, (np.quantile(samples, lo, axis=0), np.quantile(samples, hi, axis=0))


# ---- what the result object, the JSON and the report show --------------------------------------

def _cached(result, key, compute):
    cache = result.__dict__.setdefault("_origin_cache", {})   # FitResult is frozen; this is derived
    if key not in cache:
        cache[key] = compute()
    return cache[key]


def origin_probabilities(result, threshold: float = CHECK_THRESHOLD, method: str = "auto") -> pd.DataFrame:
    """One row per failure whose origin is unidentified or ambiguous (its candidates'
    probabilities at its strength) or written as one population (every population's
    probability with that label withheld, the model refitted without it).

    Columns: specimen, strength, origin (as written), reading (``unidentified``,
    ``ambiguous`` or ``labelled``), one column per population, ``label probability``
    (labelled rows), ``check`` (True where the label's probability is below ``threshold``:
    re-examine that fracture surface), and ``POP low``/``POP high`` when the fit has draws
    (unidentified and ambiguous rows)."""
    if not 0 < threshold < 1:
        raise FlawmixError(f"threshold {threshold} must lie strictly between 0 and 1 (for example 0.05)")
    sp = result.specimens
    names = [p.name for p in result.populations]
    u_rows, u_point, u_interval = _cached(result, "uncertain", lambda: uncertain_probabilities(result))
    l_rows, l_point, used = _cached(result, ("labelled", method), lambda: label_probabilities(result, method))
    rows = np.concatenate([u_rows, l_rows])
    probs = np.concatenate([u_point, l_point])
    reading = np.array(["ambiguous"] * u_rows.size + ["labelled"] * l_rows.size, dtype=object)
    if sp.unidentified is not None:
        reading[:u_rows.size][sp.unidentified[u_rows]] = "unidentified"
    else:
        reading[:u_rows.size][sp.n_candidates[u_rows] == len(names)] = "unidentified"
    if sp.uncertain is not None:
        reading[u_rows.size:][sp.uncertain[l_rows]] = "uncertain label"
    label = np.full(rows.size, np.nan)
    own = sp.candidates[l_rows].argmax(axis=1)
    label[u_rows.size:] = l_point[np.arange(l_rows.size), own]
    ids = sp.ids if sp.ids is not None else np.array([str(i + 1) for i in range(sp.strength.size)], dtype=object)
    frame = pd.DataFrame({"specimen": ids[rows], "strength": sp.strength[rows],
                          "origin": sp.origin[rows] if sp.origin is not None else "", "reading": reading})
    for j, name in enumerate(names):
        frame[name] = probs[:, j]
    frame["label probability"] = label
    frame["check"] = label < threshold
    if u_interval is not None:
        for j, name in enumerate(names):
            frame[f"{name} low"] = np.concatenate([u_interval[0][:, j], np.full(l_rows.size, np.nan)])
            frame[f"{name} high"] = np.concatenate([u_interval[1][:, j], np.full(l_rows.size, np.nan)])
    frame = frame.iloc[np.argsort(rows, kind="stable")].reset_index(drop=True)
    frame.attrs.update({"threshold": threshold, "label_method": used, "unit": result.unit})
    return frame


def specimens_to_reexamine(result, threshold: float = CHECK_THRESHOLD, method: str = "auto") -> pd.DataFrame:
    """The labelled failures whose label is improbable at their strength (``check`` rows),
    most improbable first, with the population the model finds most probable instead."""
    frame = origin_probabilities(result, threshold, method)
    names = [p.name for p in result.populations]
    flagged = frame[frame["check"]].copy()
    flagged["most probable"] = flagged[names].idxmax(axis=1) if len(flagged) else []
    return flagged.sort_values("label probability")[["specimen", "strength", "origin", "label probability",
                                                     "most probable", *names]].reset_index(drop=True)


def origin_export(result, threshold: float = CHECK_THRESHOLD) -> dict:
    """``origin_probabilities`` (every unidentified or ambiguous failure) and ``origin_checks``
    (the flagged labelled ones) for :meth:`FitResult.to_dict`."""
    frame = origin_probabilities(result, threshold)
    names = [p.name for p in result.populations]
    num = lambda x: float(x) if np.isfinite(x) else None
    open_rows = frame[frame["reading"].isin(["unidentified", "ambiguous"])]
    columns = [open_rows[n].to_numpy() for n in names]
    intervals = f"{names[0]} low" in frame
    probabilities = []
    for r, (sid, s, o) in enumerate(zip(open_rows["specimen"], open_rows["strength"], open_rows["origin"])):
        entry = {"specimen": str(sid), "strength": float(s), "origin": str(o),
                 "probabilities": {n: float(c[r]) for n, c in zip(names, columns)}}
        if intervals:
            entry["intervals"] = {n: [num(open_rows[f"{n} low"].iat[r]), num(open_rows[f"{n} high"].iat[r])]
                                  for n in names}
        probabilities.append(entry)
    flagged = frame[frame["check"]]
    checks = [{"specimen": str(sid), "strength": float(s), "origin": str(o), "label_probability": float(p)}
              for sid, s, o, p in zip(flagged["specimen"], flagged["strength"], flagged["origin"],
                                      flagged["label probability"])]
    return {"origin_probabilities": probabilities, "origin_checks": checks}
