"""Maximum-likelihood fit of concurrent flaw populations (competing risks, censored).

Start: EM (split each uncertain failure over its candidates in proportion to their
hazards, then one weighted censored fit per population); finish: Newton on the joint
likelihood with analytic derivatives. With every origin identified the EM start is
already the exact answer and Newton only confirms it.
"""
from __future__ import annotations

import warnings as _warnings

import numpy as np
from scipy import special as _sspecial

from . import likelihood as lik
from .censored import censored_weibull_mle, weibull_regression
from .endpoints import batched_profile_intervals
from .errors import FlawmixError, FlawmixWarning
from .labelled import labelled_optimum
from .evidence import verdict_sentence
from .calibration import CALIBRATED_METHOD
from .optimize import newton_maximise, profile_interval, wald_interval
from .pivots import pivot_quantiles
from .positions import adjusted_ranks, plotting_positions, position_rule, strength_order
from .result import FitResult, HypothesisTest, PopulationEstimate
from .specimens import Specimens, check_estimable
from .bootstrap_health import MIN_USED, ratio_corrected, replicate_health

NEWTON_STARTS = 3                # Newton runs from this many EM starts besides by-count
SUBSAMPLE_START = 50_000         # above twice this many specimens the start comes from a subsample
SUBSAMPLE_RARE = 2_000           # populations with fewer possible failures keep them all in it
NO_FINITE_ESTIMATE = "no finite estimate exists"   # the words a study can look for
PROFILE_MAX_SPECIMENS = 20_000   # above this, profile and Wald intervals agree to print precision


def _centred_data(specimens: Specimens) -> tuple[lik.Data, float]:
    y = np.log(specimens.strength)
    centre = float(np.mean(y))
    return lik.Data(y - centre, specimens.failed, specimens.candidates), centre


def _em_start(data: lik.Data, split, max_iter: int | None = None) -> np.ndarray:
    """A starting point from a few EM steps; only uncertain failures are re-split.
    ``split``: a rule of :func:`likelihood.starting_responsibilities` or an (N, k) array."""
    k = data.k
    F = data.failed
    n_cand = data.candidates.sum(axis=1)
    resp = lik.starting_responsibilities(data, split) if isinstance(split, str) else np.array(split, dtype=float)
    if max_iter is None:  # EM only has to get close; Newton finishes, so keep big data cheap
        max_iter = 3 if data.y.size <= 10_000 else 2
    uncertain = np.flatnonzero(F & (n_cand > 1))
    sub = lik.Data(data.y[uncertain], np.ones(uncertain.size, bool), data.candidates[uncertain])
    y = np.broadcast_to(data.y, (k, data.y.size))
    u = None
    for _ in range(max_iter):
        u, v, _ = censored_weibull_mle(y, resp.T, log_modulus_start=u)
        if uncertain.size == 0:
            break
        new = lik.responsibilities(sub, u, v)
        change = np.max(np.abs(new - resp[uncertain]))
        resp[uncertain] = new
        if change < 1e-3:  # Newton finishes the job
            break
    return np.concatenate([u, v])


def _population_orders(k: int) -> list[tuple[int, ...]]:
    """Which population takes the weakest block of uncertain failures, which the next, ...:
    every order for k <= 3, the k rotations and their reverses for larger k."""
    if k <= 3:
        from itertools import permutations

        return list(permutations(range(k)))
    turns = [tuple(np.roll(np.arange(k), r)) for r in range(k)]
    return turns + [t[::-1] for t in turns]


def starting_splits(data: lik.Data) -> list:
    """Starting splits of the uncertain failures for the EM start.

    By certain counts and equally (both symmetric in the populations when every origin is
    unidentified: Newton then stays on the symmetric ridge where all populations are equal, a
    saddle), plus asymmetric splits by strength quantiles: the uncertain failures, in
    strength order, are cut into k blocks and block b goes to population order[b] (when it is
    a candidate; otherwise the failure keeps its by-count split)."""
    splits: list = ["by-count"]
    if data.certain:
        return splits
    splits.append("equal")
    if data.y.size > 10_000:
        return splits[:1]   # a sharply peaked likelihood: one start (see _maximise)
    k = data.k
    base = lik.starting_responsibilities(data, "by-count")
    uncertain = np.flatnonzero(data.failed & (data.candidates.sum(axis=1) > 1))
    ranked = uncertain[np.argsort(data.y[uncertain], kind="stable")]
    blocks = np.array_split(ranked, k)
    for order in _population_orders(k):
        resp = base.copy()
        for block, j in zip(blocks, order):
            allowed = block[data.candidates[block, j]]
            resp[allowed] = 0.0
            resp[allowed, j] = 1.0
        splits.append(resp)
    return splits


def _subsample(data: lik.Data) -> lik.Data:
    """Every s-th specimen (s = N // SUBSAMPLE_START), plus every failure of a population with
    fewer than SUBSAMPLE_RARE possible failures, so that no population goes missing. For a start
    point only: the full-data Newton solve that follows finds the maximum."""
    step = data.y.size // SUBSAMPLE_START
    keep = np.zeros(data.y.size, bool)
    keep[::step] = True
    possible = data.candidates & data.failed[:, None]
    rare = possible.sum(axis=0) < SUBSAMPLE_RARE
    if rare.any():
        keep |= possible[:, rare].any(axis=1)
    return lik.Data(data.y[keep], data.failed[keep], data.candidates[keep])


def _bounds(k: int) -> tuple[np.ndarray, np.ndarray]:
    lower = np.concatenate([np.full(k, lik.LOG_MODULUS_MIN), np.full(k, -np.inf)])
    upper = np.concatenate([np.full(k, lik.LOG_MODULUS_MAX), np.full(k, np.inf)])
    return lower, upper


def _maximise(data: lik.Data, tie=None, start=None):
    k = data.k
    lower, upper = _bounds(k)
    deriv = lambda t: lik.concurrent_derivatives(data, t)
    score_tol = 1e-10 * max(1.0, data.y.size / 1000.0)
    if data.certain:   # labelled: the maximum in closed form, unique (labelled.py)
        closed = labelled_optimum(data, tie, score_tol)
        if closed is not None:
            return closed, deriv, lower, upper
    if data.y.size > 2 * SUBSAMPLE_START:
        # big data: the maximum of an evenly strided subsample lies within a few of its
        # standard errors of the full one, where full Newton converges in a few steps; the
        # EM start on every row costs as much as the whole Newton solve
        near, *_ = _maximise(_subsample(data), tie, start)
        opt = newton_maximise(deriv, np.clip(near.theta, lower, upper), tie=tie, lower=lower, upper=upper,
                              score_tol=score_tol)
        if opt.converged:
            return opt, deriv, lower, upper
    # Unidentified origins can make the likelihood multi-modal: several EM starts; Newton
    # from the by-count start and the NEWTON_STARTS best of the others, the best maximum kept.
    if start is not None:
        points = [np.array(start, dtype=float)]
    else:
        points = [_em_start(data, split) for split in starting_splits(data)]
        if len(points) > NEWTON_STARTS + 1:
            values = [lik.concurrent_loglik(data, p[:k], p[k:]) for p in points[1:]]
            ranked = np.argsort(values)[::-1][:NEWTON_STARTS]
            points = [points[0]] + [points[1 + i] for i in ranked]
    best = None
    for theta0 in points:
        if tie is not None:  # common modulus: start all moduli at their mean
            theta0[:k] = np.mean(theta0[:k])
        opt = newton_maximise(deriv, theta0, tie=tie, lower=lower, upper=upper, score_tol=score_tol)
        if best is None or opt.loglik > best.loglik + 1e-9:
            best = opt
    return best, deriv, lower, upper


def common_modulus_tie(k: int) -> np.ndarray:
    """Map [m, v_1..v_k] (k + 1 free) to [u_1..u_k, v_1..v_k]: one modulus for all."""
    J = np.zeros((2 * k, k + 1))
    J[:k, 0] = 1.0
    J[k:, 1:] = np.eye(k)
    return J


def _regression(specimens: Specimens, j: int, rule: str, single=None, order=None):
    """``single`` (failures with one candidate) and ``order`` (strength_order) may be passed
    in to share them between populations (one sort for big data, not one per population)."""
    if single is None:
        single = specimens.failed & (specimens.n_candidates == 1)
    mine = single & specimens.candidates[:, j]
    if mine.sum() < 2 or np.ptp(specimens.strength[mine]) <= 1e-12 * np.max(specimens.strength[mine]):
        return None, None   # a line needs two distinct strengths
    n = specimens.n_specimens
    if mine.all():
        order = np.argsort(specimens.strength) if order is None else order
        ranks = np.arange(1, n + 1)
        idx = order
    else:
        idx, ranks = adjusted_ranks(specimens.strength, mine, order)
    p = plotting_positions(ranks, n, rule)
    return weibull_regression(np.log(specimens.strength[idx]), p)


def _interval_method(intervals: str, specimens: Specimens, complete_single: bool, calibratable: bool) -> str:
    from .calibration import MAX_SPECIMENS as CALIBRATION_MAX_SPECIMENS

    if intervals not in ("auto", "calibrated", "profile", "wald", "pivotal", "none"):
        raise FlawmixError(f"unknown interval method '{intervals}'; use auto, calibrated, profile, wald, pivotal or none")
    method = intervals
    if method == "auto":
        n = specimens.n_specimens
        method = "pivotal" if complete_single else "calibrated" if calibratable and n <= CALIBRATION_MAX_SPECIMENS \
            else "profile" if n <= PROFILE_MAX_SPECIMENS else "wald"
    if method == "calibrated" and not calibratable:
        raise FlawmixError("bootstrap-calibrated intervals exist for the concurrent model with free moduli "
                           "(one geometry); use intervals='profile'")
    if method == "pivotal" and not complete_single:
        raise FlawmixError("pivotal bounds exist only for one population without survivors; "
                           "use intervals='profile'")
    return method


def _pivotal_bounds(n, m_hat, log_scale, confidence):
    lo_p, hi_p = (1 - confidence) / 2, (1 + confidence) / 2
    piv = pivot_quantiles(n, (lo_p, hi_p))   # shipped Monte Carlo table (pivots.py)
    q_lo, q_hi = piv.modulus_quantile(lo_p), piv.modulus_quantile(hi_p)
    t_lo, t_hi = piv.scale_quantile(lo_p), piv.scale_quantile(hi_p)
    return ((m_hat / q_hi, m_hat / q_lo),
            (np.exp(log_scale - t_hi / m_hat), np.exp(log_scale - t_lo / m_hat)))


def _fit_other_model(data: lik.Data, model_name: str, concurrent_theta: np.ndarray,
                     logit_starts=(2.0, 0.0, -1.0)):
    """Exclusive or partial model: Newton from several starts (exact derivatives for the partial
    model, central differences for the exclusive one)."""
    k = data.k
    F = data.failed
    n_cand = data.candidates.sum(axis=1)
    counts = data.candidates[F & (n_cand == 1)].sum(axis=0) + 0.5
    share = counts / counts.sum()
    candidates = []
    if model_name == "exclusive":
        model = lik.Model("exclusive", k)
        # start 1: the concurrent estimate; start 2: each population fitted to its own
        # labelled failures as a complete sample (what the mixture says they are)
        alpha = np.log(share[:-1] / share[-1])
        u2, v2, _ = censored_weibull_mle(np.broadcast_to(data.y, (k, data.y.size)),
                                         (data.candidates & (F & (n_cand == 1))[:, None]).T.astype(float))
        own = np.zeros((k, data.y.size), bool)
        for j in range(k):
            own[j] = data.candidates[:, j] & F & (n_cand == 1)
        u3 = np.empty(k); v3 = np.empty(k)
        for j in range(k):
            yy = data.y[own[j]] if own[j].sum() >= 2 else data.y[F]
            uu, vv, _ = censored_weibull_mle(yy, np.ones(yy.size))
            u3[j], v3[j] = uu, vv
        starts = [np.concatenate([concurrent_theta, alpha]), np.concatenate([u3, v3, alpha]),
                  np.concatenate([u2, v2, alpha])]
        candidates.append((model, starts))
    else:
        for a in range(k):
            model = lik.Model("partial", k, a)
            starts = [np.concatenate([concurrent_theta, [t]]) for t in logit_starts]
            candidates.append((model, starts))
    best = None
    for model, starts in candidates:
        lower, upper = model.bounds()
        deriv = (lambda t, model=model: lik.derivatives(model, data, t))
        for theta0 in starts:
            theta0 = np.clip(theta0, lower, upper)
            opt = newton_maximise(deriv, theta0, lower=lower, upper=upper, score_tol=1e-6)
            if best is None or opt.loglik > best[0].loglik + 1e-9:
                best = (opt, model, deriv)
    return best


def sized_setup(specimens: Specimens, geometries):
    """For specimens of several geometries: (size-offset function, geometry index per
    specimen, geometry names, reference geometry name). The reference is the most common
    geometry; the fitted characteristic strengths refer to it."""
    from .geometry import Geometry, population_log_sizes

    if specimens.geometry is None:
        raise FlawmixError(f"{specimens.source or 'the specimen table'}: geometries were given but the table has no "
                           "'geometry' column; add one naming each specimen's geometry")
    names = sorted(set(specimens.geometry))
    missing = [n for n in names if n not in geometries]
    if missing:
        raise FlawmixError(f"{specimens.source or 'the specimen table'}, column 'geometry': "
                           f"{', '.join(repr(n) for n in missing)} not defined; add [geometries.NAME] to the study file")
    counts = {n: int(np.sum(specimens.geometry == n)) for n in names}
    reference = max(names, key=lambda n: (counts[n], n == names[0]))
    index = np.array([names.index(g) for g in specimens.geometry])
    kinds = [p.kind for p in specimens.populations]
    geoms = [geometries[n] if isinstance(geometries[n], Geometry) else Geometry.from_spec(n, geometries[n])
             for n in names]
    ref = geoms[names.index(reference)]
    for kind, pop in zip(kinds, specimens.populations):
        if kind == "unspecified":
            raise FlawmixError(f"population '{pop.name}' has kind 'unspecified': to fit specimens of several "
                               "geometries say whether it is a volume, surface or edge flaw population")

    def offsets(moduli):
        base = population_log_sizes(ref, kinds, moduli)
        return np.stack([population_log_sizes(g, kinds, moduli) - base for g in geoms], axis=-2)

    return offsets, index, names, reference, geoms


def fit_mle(
    specimens: Specimens,
    confidence: float = 0.90,
    *,
    model: str = "concurrent",
    intervals: str = "auto",
    positions: str = "hazen",
    common_modulus: bool = False,
    tests: bool = True,
    geometries=None,
    seed=0,
) -> FitResult:
    """Maximum-likelihood fit of every population under the named model.

    geometries: {name: Geometry or study-file table} for tables with a ``geometry`` column:
    each specimen's hazard then scales with its own effective size, and the fit reports the
    material scale σ0 and σθ of every geometry. seed: the bootstrap that calibrates the
    default intervals (flawmix/calibration.py).
    """
    if not 0 < confidence < 1:
        raise FlawmixError(f"confidence {confidence} must lie strictly between 0 and 1 (for example 0.90)")
    if model not in lik.MODELS:
        raise FlawmixError(f"unknown model '{model}'; use one of {', '.join(lik.MODELS)}")
    position_rule(positions)
    notes = check_estimable(specimens)
    for w in notes:
        _warnings.warn(w, FlawmixWarning, stacklevel=3)
    data, centre = _centred_data(specimens)
    k = data.k
    n = specimens.n_specimens
    if model != "concurrent" and k < 2:
        raise FlawmixError(f"the {model} model needs at least two populations; this table has one")
    if model != "concurrent" and common_modulus:
        raise FlawmixError("a common modulus is available for the concurrent model only")
    tie = common_modulus_tie(k) if common_modulus else None
    conc, deriv, lower, upper = _maximise(data, tie)
    spec = lik.Model("concurrent", k)
    opt = conc
    sized = None
    if geometries and specimens.geometry is not None:
        if model != "concurrent" or common_modulus:
            raise FlawmixError("specimens of several geometries can be fitted with the concurrent model only")
        offsets, gidx, gnames, reference, geoms = sized_setup(specimens, geometries)
        sized = (gnames, reference, geoms)
        spec = lik.Model("concurrent", k, size_offsets=offsets)
        data = lik.Data(data.y, data.failed, data.candidates, geometry=gidx)
        lower, upper = spec.bounds()
        lower[:k], upper[:k] = np.log(0.5) + 1e-9, np.log(300.0) - 1e-9   # where sizes are tabulated
        deriv = lambda t: lik.numerical_derivatives(spec, data, t)
        opt = newton_maximise(deriv, np.clip(conc.theta, lower, upper), lower=lower, upper=upper, score_tol=1e-6)
        tests = False
    if model != "concurrent":
        opt, spec, deriv = _fit_other_model(data, model, conc.theta)
        lower, upper = spec.bounds()
    theta = opt.theta.copy()
    u, v = theta[:k], theta[k:2 * k]
    fractions = spec.fractions(theta)
    at_bound = (u >= lik.LOG_MODULUS_MAX - 1e-9) | (u <= lik.LOG_MODULUS_MIN + 1e-9)
    loglik = opt.loglik - specimens.n_failed * centre  # undo the centring's Jacobian shift
    resp = _responsibilities(spec, data, theta)
    expected = resp.sum(axis=0)

    complete_single = k == 1 and specimens.n_survived == 0 and n >= 2   # pivots need two specimens
    method = _interval_method(intervals, specimens, complete_single,
                              calibratable=model == "concurrent" and not common_modulus and sized is None)
    calibration = None
    if method == "calibrated":
        from .calibration import calibrate

        calibration = calibrate(specimens, np.exp(u), np.exp(v + centre), confidence, seed=seed)
        method = "profile" if calibration is None else "calibrated"
    m_hat = np.exp(u)
    unbiased = [None] * k
    if complete_single:
        uf = pivot_quantiles(n).unbiasing_factor
        unbiased[0] = float(m_hat[0] * uf)
    mod_int, str_int, frac_int = [], [], [None] * k

    problems: list[str] = []
    batched = {}
    if method in ("profile", "calibrated") and tie is None and spec.name == "concurrent" and spec.size_offsets is None:
        batched = batched_profile_intervals(   # all end points in one solve (endpoints.py)
            data, opt, confidence, lower, upper, problems=problems,
            drops=None if calibration is None else calibration.drops,
            limits=lambda i: (lik.LOG_MODULUS_MIN, lik.LOG_MODULUS_MAX) if i < k else (-np.inf, np.inf))

    def interval(index, limits=(-np.inf, np.inf)):
        if index in batched:
            return batched[index]
        if method in ("profile", "calibrated"):
            drops = None if calibration is None else tuple(calibration.drops[index])
            return profile_interval(deriv, opt, index, confidence, tie=tie, lower=lower, upper=upper, limits=limits,
                                    drops=drops, problems=problems)
        return wald_interval(opt, index, confidence, tie)

    for j in range(k):
        if method == "none":
            mod_int.append((np.nan, np.nan))
            str_int.append((np.nan, np.nan))
        elif method == "pivotal":
            a, b = _pivotal_bounds(n, m_hat[j], v[j] + centre, confidence)
            mod_int.append(a)
            str_int.append(b)
        else:
            a, b = interval(j, (lik.LOG_MODULUS_MIN, lik.LOG_MODULUS_MAX))
            if b >= lik.LOG_MODULUS_MAX - 1e-9:
                b = np.inf
            c, d = interval(k + j)
            with np.errstate(over="ignore"):   # an end far out is +inf: shown as unbounded
                mod_int.append((float(np.exp(a)), float(np.exp(b))))
                str_int.append((float(np.exp(c + centre)), float(np.exp(d + centre))))
    if method in ("profile", "wald") and spec.n_extra == 1:   # (calibration is concurrent only)
        lo_t, hi_t = interval(2 * k, (-30.0, 30.0))
        sig = lambda t: float(1.0 / (1.0 + np.exp(-t)))
        if spec.name == "exclusive":   # α is the log-odds of population 0 against population 1
            frac_int[0] = (sig(lo_t), sig(hi_t))
            frac_int[1] = (1 - sig(hi_t), 1 - sig(lo_t))
        else:
            frac_int[spec.partial_index] = (sig(lo_t), sig(hi_t))

    for line in dict.fromkeys(problems):
        _warnings.warn(line, FlawmixWarning, stacklevel=3)
        notes.append(line)
    certain = specimens.certain_failures()
    possible = specimens.possible_failures()
    pops = []
    single, order = specimens.failed & (specimens.n_candidates == 1), strength_order(specimens.strength)
    for j, pop in enumerate(specimens.populations):
        rm, rs = _regression(specimens, j, positions, single, order) if sized is None else (None, None)
        pops.append(PopulationEstimate(
            name=pop.name, kind=pop.kind, n_failures=int(certain[j]), n_possible=int(possible[j]),
            expected_failures=float(expected[j]), modulus=float(m_hat[j]),
            characteristic_strength=float(np.exp(v[j] + centre)),
            modulus_interval=mod_int[j], strength_interval=str_int[j],
            interval_method=CALIBRATED_METHOD if method == "calibrated" else method,
            modulus_unbiased=unbiased[j], regression_modulus=rm, regression_strength=rs,
            at_bound=bool(at_bound[j]), fraction=float(fractions[j]), fraction_interval=frac_int[j],
        ))
    n_params = (k + 1) if common_modulus else spec.n_params

    result_tests = []
    if tests and k >= 2 and not common_modulus and model == "concurrent":
        common, *_ = _maximise(data, common_modulus_tie(k), start=opt.theta)
        stat = max(0.0, 2.0 * (opt.loglik - common.loglik))
        p = float(_sspecial.chdtrc(k - 1, stat))   # = scipy.stats.chi2.sf, without its overhead
        result_tests.append(HypothesisTest(
            name="common-modulus",
            statistic=stat, df=k - 1, p_value=p, method="likelihood ratio, χ²",
            meaning=("Null: all populations share one modulus, which is the same as one pooled Weibull "
                     "population whose origin labels are independent of strength. "
                     + verdict_sentence(p, "one common modulus"))))
    if not opt.converged:
        notes.append("the maximisation stopped before the score reached its tolerance")
    notes.extend(_degeneracy_notes(spec, specimens, theta, at_bound))
    notes.extend(_vanishing_notes(specimens, expected, opt.converged))
    if model != "concurrent":
        notes.extend(_collapse_notes(model, specimens, np.exp(conc.theta[:k]), m_hat, at_bound))
    partial_name = specimens.populations[spec.partial_index].name if spec.name == "partial" else None
    return FitResult(
        method="mle",
        model="concurrent-common-modulus" if common_modulus else model,
        confidence=confidence,
        unit=specimens.unit,
        populations=tuple(pops),
        n_specimens=n,
        n_failed=specimens.n_failed,
        n_survived=specimens.n_survived,
        n_unidentified=specimens.n_unidentified,
        n_ambiguous=specimens.n_ambiguous,
        log_likelihood=float(loglik),
        n_parameters=n_params,
        tests=tuple(result_tests),
        warnings=tuple(dict.fromkeys(notes)),
        converged=opt.converged,
        max_score=float(np.max(np.abs(opt.gradient))),
        plotting_rule=positions,
        source=specimens.source,
        checksum=specimens.checksum,
        specimens=specimens,
        extras={"iterations": opt.iterations, **_sized_extras(sized, specimens, m_hat, np.exp(v + centre)),
                **_covariance(opt, tie, centre, spec, data),
                **({} if calibration is None else {"calibration": calibration})},
        partial_population=partial_name,
    )


def _covariance(opt, tie, centre, spec, data) -> dict:
    """Inverse observed information in (ln m, ln σθ, extra) for normal-approximation bands,
    with the model and the (uncentred) data it was fitted on (kept as objects, so they stay
    out of the JSON export)."""
    try:
        J = np.eye(opt.theta.size) if tie is None else tie
        cov = J @ np.linalg.inv(-opt.hessian) @ J.T
    except np.linalg.LinAlgError:
        return {}
    if not np.all(np.isfinite(cov)) or np.any(np.diag(cov) < 0):
        return {}
    theta = opt.theta.copy()
    theta[spec.k:2 * spec.k] += centre
    fitted = lik.Data(data.y + centre, data.failed, data.candidates, data.geometry)
    return {"theta_hat": theta, "covariance": cov, "model_spec": spec, "fit_data": fitted}


def _sized_extras(sized, specimens, moduli, scales) -> dict:
    if sized is None:
        return {}
    from .geometry import population_log_sizes
    from .units import length_unit

    gnames, reference, geoms = sized
    kinds = [p.kind for p in specimens.populations]
    ref = geoms[gnames.index(reference)]
    names = specimens.population_names
    by_geometry = {}
    for g, geom in zip(gnames, geoms):
        ratio = population_log_sizes(ref, kinds, moduli) - population_log_sizes(geom, kinds, moduli)
        by_geometry[g] = dict(zip(names, (scales * np.exp(ratio / moduli)).tolist()))
    sigma0 = scales * np.exp(population_log_sizes(ref, kinds, moduli) / moduli)
    power = {"volume": 3, "surface": 2, "edge": 1}
    unit = length_unit(ref.unit)
    return {"reference_geometry": reference,
            "characteristic_strength_by_geometry": by_geometry,
            "material_scale": dict(zip(names, sigma0.tolist())),
            "material_scale_unit": {n: f"{specimens.unit}·{unit}^({power[k]}/m)" for n, k in zip(names, kinds)}}


def _responsibilities(spec: lik.Model, data: lik.Data, theta: np.ndarray) -> np.ndarray:
    """(N, k) probability that population j caused failure i, under the fitted model."""
    k = spec.k
    if spec.name == "concurrent" and spec.size_offsets is not None:
        u, v = theta[:k], theta[k:2 * k]
        off = np.take(spec.size_offsets(np.exp(u)), data.geometry, axis=-2)
        logh = u - data.y[:, None] + np.exp(u) * (data.y[:, None] - v) + off
        _, pi = lik._masked_logsumexp(logh, data.candidates)
        return np.where(data.failed[:, None], pi, 0.0)
    if spec.name == "concurrent":
        return lik.responsibilities(data, theta[:k], theta[k:2 * k])
    from .distributions import model_failure_shares

    shares = model_failure_shares(spec.name, np.exp(data.y), np.exp(theta[:k]), np.exp(theta[k:2 * k]),
                                  spec.fractions(theta), spec.partial_index)
    shares = np.where(data.candidates, shares, 0.0)
    total = shares.sum(axis=1, keepdims=True)
    return np.where(total > 0, shares / np.where(total > 0, total, 1.0), 0.0)


COLLAPSE_RATIO = 3.0     # modulus this many times its concurrent value ...
COLLAPSE_MODULUS = 50.0  # ... and above this: a mixture collapsing onto a few specimens


def _collapse_notes(model: str, specimens: Specimens, concurrent_moduli, moduli, at_bound) -> list[str]:
    """A mixture-type likelihood (exclusive, partial) grows without bound as one population
    shrinks onto a few nearly equal strengths with an ever larger modulus. Flag it."""
    notes = []
    for j, name in enumerate(specimens.population_names):
        if at_bound[j]:
            continue   # already reported as at the bound
        if moduli[j] > COLLAPSE_MODULUS and moduli[j] > COLLAPSE_RATIO * concurrent_moduli[j]:
            notes.append(f"population '{name}': under the {model} model its modulus jumps to {moduli[j]:.0f} "
                         f"(concurrent fit: {concurrent_moduli[j]:.1f}). The {model} likelihood is concentrating "
                         "this population on a few nearly equal strengths, a known degeneracy of mixture "
                         "likelihoods: this fit and its AIC/BIC are not meaningful. Compare models by PSIS-LOO "
                         "(Bayesian fits with proper priors)")
    return notes


VANISHING_FAILURES = 1.0   # expected failures below this, none certain: the population carries < 1 failure


def _vanishing_notes(specimens: Specimens, expected, converged: bool) -> list[str]:
    """A population without certain failures that carries less than one failure in
    expectation: the likelihood rises as it fades out (σθ → ∞) or shrinks onto a single
    uncertain failure (m → ∞), so the maximisation cannot stop at a finite point."""
    if converged:
        return []
    certain = specimens.certain_failures()
    return [f"population '{name}': it has no certain failure and carries {expected[j]:.2g} of the uncertain ones "
            f"(less than one failure): the likelihood rises as it fades out or shrinks onto a single failure, so "
            f"{NO_FINITE_ESTIMATE}; merge it with another population or fit without it"
            for j, name in enumerate(specimens.population_names)
            if certain[j] == 0 and expected[j] < VANISHING_FAILURES]


def _degeneracy_notes(spec: lik.Model, specimens: Specimens, theta: np.ndarray, at_bound) -> list[str]:
    names = specimens.population_names
    notes = []
    for j in np.flatnonzero(at_bound):
        if spec.name in ("exclusive", "partial"):
            notes.append(f"population '{names[j]}': modulus reached the search bound {np.exp(lik.LOG_MODULUS_MAX):.0f}. "
                         "A mixture likelihood is unbounded when one population collapses onto a few equal-looking "
                         "strengths; this estimate is not meaningful (a known degeneracy of mixture likelihoods). "
                         "Use method='bayes' (proper priors) or the concurrent model")
        elif theta[j] <= lik.LOG_MODULUS_MIN + 1e-9:
            notes.append(f"population '{names[j]}': modulus reached the lower search bound "
                         f"{np.exp(lik.LOG_MODULUS_MIN):g}: its strengths spread over too many decades for a Weibull "
                         f"population, so {NO_FINITE_ESTIMATE} inside the bounds; check the strengths and their unit")
        else:
            mine = specimens.failed & specimens.candidates[:, j]
            why = ("it has a single failure" if mine.sum() < 2 else
                   "its failure strengths are all equal (no scatter)" if np.ptp(specimens.strength[mine]) == 0
                   else "the data do not bound it")
            notes.append(f"population '{names[j]}': modulus reached the search bound "
                         f"{np.exp(lik.LOG_MODULUS_MAX):.0f}: {why}, so {NO_FINITE_ESTIMATE} (the value shown "
                         "is the bound)")
    if spec.name != "concurrent":
        fr = spec.fractions(theta)
        for j in range(spec.k):
            if spec.name == "partial" and j != spec.partial_index:
                continue
            if fr[j] > 0.999:
                notes.append(f"the fraction of specimens carrying '{names[j]}' is at its upper limit (≈ 1): "
                             f"the {spec.name} model reduces to a simpler one here")
            elif fr[j] < 0.001:
                notes.append(f"the fraction of specimens carrying '{names[j]}' is at its lower limit (≈ 0): "
                             "that population is not supported by the data under this model")
    return notes


def likelihood_surface(result: FitResult, population: str, n: int = 80, span: float = 5.0):
    """Relative log-likelihood over (modulus, characteristic strength) of one population,
    the other parameters held at their estimates (for concurrent fits with every origin
    identified this is the profile). Returns (moduli (n,), strengths (n,), values (n, n))."""
    spec = result.extras.get("model_spec")
    theta = result.extras.get("theta_hat")
    cov = result.extras.get("covariance")
    if spec is None or theta is None or cov is None:
        raise FlawmixError("a likelihood surface needs a maximum-likelihood fit with finite standard errors")
    names = [p.name for p in result.populations]
    if population not in names:
        raise FlawmixError(f"no population '{population}'; the fit has {', '.join(names)}")
    j = names.index(population)
    k = spec.k
    sd_u, sd_v = np.sqrt(cov[j, j]), np.sqrt(cov[k + j, k + j])
    u = theta[j] + np.linspace(-span, span, n) * sd_u
    v = theta[k + j] + np.linspace(-span, span, n) * sd_v
    data = result.extras["fit_data"]   # includes each specimen's geometry for sized fits
    grid = np.repeat(theta[None, None, :], n, axis=0).repeat(n, axis=1)
    grid[:, :, j] = u[:, None]
    grid[:, :, k + j] = v[None, :]
    values = spec.loglik(data, grid.reshape(-1, theta.size)).reshape(n, n)
    top = float(spec.loglik(data, theta[None])[0])
    return np.exp(u), np.exp(v), values - top


def attach_bootstrap(result: FitResult, replicates: int = 1000, seed=0, executor=None,
                     progress: bool = False) -> FitResult:
    """Parametric bootstrap of a concurrent MLE: campaigns drawn from the fitted model with the
    observed design (survivors keep their stresses, origins go unidentified as often), refitted.

    Adds ``draws`` (kind "bootstrap") for intervals on every derived quantity, bias-corrected
    moduli and strengths (estimate² / geometric mean of the replicates, never negative), and
    per population the share of replicates it could not be used in (bootstrap_health.py)."""
    from dataclasses import replace

    from .montecarlo import simulate_and_fit
    from .result import Draws
    from .simulate import Design

    if not result.model.startswith("concurrent") or result.method != "mle" or "reference_geometry" in result.extras:
        raise FlawmixError("the bootstrap is available for maximum-likelihood fits of the concurrent model "
                           "(without specimen geometries)")
    if replicates < 20:
        raise FlawmixError(f"bootstrap needs at least 20 replicates (got {replicates}); 1000 or more is usual")
    sp = result.specimens
    design = Design.like(sp)
    k = len(result.populations)
    if result.model == "concurrent-common-modulus":
        raise FlawmixError("bootstrap the free-modulus concurrent fit instead of the common-modulus one")
    fits = simulate_and_fit(lik.Model("concurrent", k), result.moduli, result.characteristic_strengths, None, design,
                            replicates, seed, executor, progress=progress)
    # Reflect each replicate through the Weibull pivots m̂/m and m̂·ln(σ̂θ/σθ) (exact for
    # complete data, DOMAIN.md section 3): the bootstrap law of (m*/m̂, m* ln(σθ*/σ̂θ)) stands
    # in for that of (m̂/m, m̂ ln(σ̂θ/σθ)). Percentiles of the reflected draws are then the
    # pivotal intervals, and every derived quantity inherits the same bias correction.
    m_hat, s_hat = result.moduli, result.characteristic_strengths
    names = [p.name for p in result.populations]
    with np.errstate(all="ignore"):
        health = replicate_health(names, fits, m_hat**2 / fits.moduli)
    used = health.used
    notes = list(result.warnings) + list(health.notes)
    for line in health.notes:
        _warnings.warn(line, FlawmixWarning, stacklevel=3)
    extras = dict(result.extras)
    summary = {"replicates": int(replicates), "used": int(used.sum()), "seed": seed,
               "dropped_no_failures": float(np.mean(np.any(fits.failures == 0, axis=1))),
               "unusable_share": health.unusable_share, "profile_fallback": list(health.fallback)}
    if used.sum() < MIN_USED:   # nothing to build draws from: keep the fit's profile intervals
        extras["bootstrap"] = summary
        return replace(_with_profile(result, names), warnings=tuple(dict.fromkeys(notes)), extras=extras)
    m, s = fits.moduli[used], fits.scales[used]
    m_ref = m_hat**2 / m
    s_ref = s_hat * np.exp(-(m * np.log(s / s_hat)) / m_hat)
    draws = Draws("bootstrap", m_ref, s_ref, np.ones_like(m))
    lo_q, hi_q = (1 - result.confidence) / 2, (1 + result.confidence) / 2
    profile = _with_profile(result, health.fallback) if health.fallback else result
    pops = []
    for j, p in enumerate(result.populations):
        if p.name in health.fallback:
            pops.append(profile.populations[j])
            continue
        pops.append(replace(
            p, modulus_interval=tuple(float(x) for x in np.quantile(m_ref[:, j], [lo_q, hi_q])),
            strength_interval=tuple(float(x) for x in np.quantile(s_ref[:, j], [lo_q, hi_q])),
            interval_method="parametric bootstrap (Weibull pivots)"))
    m_bc, s_bc = ratio_corrected(m_hat, m), ratio_corrected(s_hat, s)
    extras["bootstrap"] = {
        **summary,
        "modulus_bias_corrected": dict(zip(names, m_bc.tolist())),
        "strength_bias_corrected": dict(zip(names, s_bc.tolist())),
        "modulus_mean_ratio": {n: float(m[:, j].mean() / m_hat[j]) for j, n in enumerate(names)},
    }
    return replace(result, populations=tuple(pops), draws=draws, extras=extras, warnings=tuple(dict.fromkeys(notes)))


def _with_profile(result: FitResult, names) -> FitResult:
    """The fit with profile-likelihood intervals for populations ``names`` (refitted only when
    the fit itself carries none)."""
    from dataclasses import replace

    if all(p.interval_method == "profile" for p in result.populations if p.name in names):
        return result
    with _warnings.catch_warnings():
        _warnings.simplefilter("ignore", FlawmixWarning)   # already said once by the fit
        refit = fit_mle(result.specimens, result.confidence, intervals="profile", positions=result.plotting_rule,
                        tests=False)
    return replace(result, populations=tuple(q if p.name in names else p
                                             for p, q in zip(result.populations, refit.populations)))
