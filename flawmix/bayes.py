"""Bayesian fit with the emcee ensemble sampler, on the same likelihood as the MLE.

The run length adapts: after a burn-in, production proceeds in blocks until the largest
R-hat is <= 1.01 and the smallest bulk ESS reaches the target (default 1000), or a step
limit is hit (then the result says so in plain words).
"""
from __future__ import annotations

import time
import warnings as _warnings

import numpy as np

from . import progress as _progress
from . import diagnostics
from . import likelihood as lik
from .errors import FlawmixError, FlawmixWarning
from .mle import _centred_data, common_modulus_tie, fit_mle
from .priors import build_priors, prior_dominance_notes
from .result import Draws, FitResult, PopulationEstimate
from .specimens import Specimens

R_HAT_TARGET = 1.01
LOO_DRAWS = 4000


def _start_ball(rng, theta, hessian, walkers, lower, upper):
    P = theta.size
    try:
        sd = np.sqrt(np.clip(np.diag(np.linalg.inv(-hessian)), 1e-8, None))
    except np.linalg.LinAlgError:
        sd = np.full(P, 0.05)
    sd = np.clip(np.nan_to_num(sd, nan=0.05), 1e-3, 0.3)
    centre = np.clip(theta, lower + 0.05, upper - 0.05)
    ball = centre + 0.3 * sd * rng.standard_normal((walkers, P))
    return np.clip(ball, lower + 1e-3, upper - 1e-3)


INDEPENDENCE_BURN = 100           # steps of burn-in when walkers start from importance draws
INDEPENDENCE_MIN_ACCEPTANCE = 0.2  # below this the run is redone with DE moves alone


def _independence_setup(theta_mle, hessian, log_prob, rng, walkers, modulus_index, scale_index):
    """(moves, starting ensemble) for an independence proposal fitted to the posterior, mixed
    with a few DE moves; None when the pilot's importance weights say the proposal is unusable."""
    import emcee

    from . import proposal as _proposal

    found = _proposal.fitted(theta_mle, hessian, modulus_index, scale_index, log_prob, rng)
    if found is None:
        return None
    t, draws, log_weights, k = found
    if not k <= _proposal.PARETO_K_LIMIT:
        return None
    moves = [(_proposal.independence_move(t), 0.8), (emcee.moves.DEMove(), 0.2)]
    return moves, _proposal.resample(draws, log_weights, rng, walkers)


def _posterior_mode(log_prob, theta, lower, upper):
    """(mode, Hessian) of the log posterior: L-BFGS-B from ``theta`` pulled inside the
    sampler's box, the gradient and then the Hessian by central differences of the batched
    ``log_prob``. For a second try at the independence proposal when the maximum-likelihood
    mode misleads it (a degenerate mixture maximum, a modulus beyond the sampler's bound);
    None when no finite start or no finite Hessian."""
    from scipy import optimize as _optimize

    start = np.clip(theta, lower + 0.05, upper - 0.05)
    if not np.isfinite(log_prob(start[None])[0]):
        return None
    h = 1e-5
    eye = np.eye(start.size) * h

    def negative(x):
        values = log_prob(np.vstack([x, x + eye, x - eye]))
        if not np.all(np.isfinite(values)):
            return (np.inf, np.zeros_like(x)) if not np.isfinite(values[0]) else \
                (-values[0], np.zeros_like(x))
        return -values[0], -(values[1:1 + x.size] - values[1 + x.size:]) / (2 * h)

    with np.errstate(all="ignore"):
        found = _optimize.minimize(negative, start, jac=True, method="L-BFGS-B",
                                   bounds=list(zip(lower + 1e-4, upper - 1e-4)))   # the stencil stays inside
        mode = found.x
        _, _, hessian = lik.central_differences(log_prob, mode, 1e-4)
    if not np.all(np.isfinite(hessian)):
        return None
    return mode, hessian


def _proposal_moves(theta_mle, hessian, log_prob, rng, walkers, k, common_modulus, lower, upper):
    """(moves and starting ensemble, or None; what the proposal is centred on): the
    independence proposal from the maximum-likelihood mode, else from the posterior's own mode."""
    modulus_index = np.zeros(k, dtype=int) if common_modulus else np.arange(k)
    scale_index = np.arange(1, k + 1) if common_modulus else np.arange(k, 2 * k)
    found = _independence_setup(theta_mle, hessian, log_prob, rng, walkers, modulus_index, scale_index)
    if found is not None:
        return found, "maximum likelihood"
    mode = _posterior_mode(log_prob, theta_mle, lower, upper)
    if mode is not None:
        found = _independence_setup(*mode, log_prob, rng, walkers, modulus_index, scale_index)
    return found, "posterior mode"


def fit_bayes(
    specimens: Specimens,
    confidence: float = 0.90,
    *,
    model: str = "concurrent",
    priors=None,
    reference_prior: bool = False,
    seed: int | None = 0,
    walkers: int | None = None,
    target_ess: float = 1000.0,
    max_steps: int = 40_000,
    burn: int = 500,
    block: int = 500,
    progress: bool = False,
    loo: bool = True,
    common_modulus: bool = False,
    moves=None,
    geometries=None,
    mle: FitResult | None = None,
) -> FitResult:
    """Posterior of every population's modulus and characteristic strength (and fractions).

    Args:
        priors: ``{population: {"modulus": [lo, hi], "characteristic_strength": [lo, hi]}}``,
            central 95 % ranges of log-normal priors (see :mod:`flawmix.priors`).
        reference_prior: flat in (ln m, ln σθ) (right-Haar; improper).
        seed: sampler seed; the same data, settings and seed give the same draws.
        target_ess: bulk effective sample size to reach before stopping.
        moves: emcee moves (default: an independence proposal from the mode mixed with
            differential evolution when a pilot trusts it, else ``emcee.moves.DEMove()``).
        mle: the maximum-likelihood fit of the same specimens and model, if already made
            (compare passes its own, so it is not computed twice).
    """
    import emcee

    if model not in lik.MODELS:
        raise FlawmixError(f"unknown model '{model}'; use one of {', '.join(lik.MODELS)}")
    start_time = time.perf_counter()
    if mle is None:
        mle = fit_mle(specimens, confidence, model=model, intervals="none", tests=False,
                      common_modulus=common_modulus, geometries=geometries)
    data, centre = _centred_data(specimens)
    k = data.k
    names = specimens.population_names
    partial_index = names.index(mle.partial_population) if mle.partial_population else 0
    spec = lik.Model(model, k, partial_index)
    if "reference_geometry" in mle.extras:
        from .mle import sized_setup

        offsets, gidx, *_ = sized_setup(specimens, geometries)
        spec = lik.Model(model, k, size_offsets=offsets)
        data = lik.Data(data.y, data.failed, data.candidates, geometry=gidx)
    prior = build_priors(names, centre, priors, reference_prior)
    lower, upper = spec.bounds()
    lower[:k] = lik.LOG_MODULUS_MIN if spec.size_offsets is None else np.log(0.5) + 1e-9
    upper[:k] = np.log(500.0) if spec.size_offsets is None else np.log(300.0) - 1e-9   # the prior makes larger moduli negligible; keeps walkers finite
    if common_modulus:
        # sample one ln m shared by all populations: parameters [u, v_1..v_k]
        expand = lambda t: np.concatenate([np.repeat(t[..., :1], k, axis=-1), t[..., 1:]], axis=-1)
        P = k + 1
        lo_s = np.concatenate([lower[:1], lower[k:2 * k]])
        hi_s = np.concatenate([upper[:1], upper[k:2 * k]])
    else:
        expand = lambda t: t
        P = spec.n_params
        lo_s, hi_s = lower, upper

    def log_prob(theta_batch):
        full = expand(theta_batch)
        inside = np.all((theta_batch > lo_s) & (theta_batch < hi_s), axis=-1)
        out = np.full(theta_batch.shape[0], -np.inf)
        if inside.any():
            t = full[inside]
            lp = prior.logpdf(t, spec)
            if common_modulus:  # one modulus prior, not k copies
                lp = lp - sum(prior.log_modulus[j].logpdf(t[:, j]) for j in range(1, k)
                              if prior.log_modulus[j] is not None)
            out[inside] = spec.loglik(data, t) + lp
        return np.where(np.isfinite(out), out, -np.inf)

    theta_mle = np.concatenate([np.log(mle.moduli), np.log(mle.characteristic_strengths) - centre])
    if model == "exclusive":
        fr = mle.fractions
        theta_mle = np.concatenate([theta_mle, np.log(fr[:-1] / fr[-1])])
    elif model == "partial":
        p = float(np.clip(mle.fractions[partial_index], 1e-6, 1 - 1e-6))
        theta_mle = np.concatenate([theta_mle, [np.log(p / (1 - p))]])
    if common_modulus:
        theta_mle = np.concatenate([theta_mle[:1], theta_mle[k:2 * k]])
    n_walkers = walkers or max(32, 4 * P)
    rng = np.random.default_rng(seed)
    if common_modulus:   # the Hessian in [u, v_1..v_k]: J^T H J with J the tie (one u for all)
        tie = common_modulus_tie(k)
        hess = tie.T @ lik.numerical_derivatives(spec, data, expand(theta_mle))[2] @ tie
    else:
        hess = lik.numerical_derivatives(spec, data, theta_mle)[2]
    start = _start_ball(rng, theta_mle, hess, n_walkers, lo_s, hi_s)
    independent, centred_on = None, None
    if moves is None:
        independent, centred_on = _proposal_moves(theta_mle, hess, log_prob, rng, n_walkers, k, common_modulus,
                                                  lo_s, hi_s)
    first_check = 1000
    asked = (burn, block)
    if independent is not None:   # a proposal the pilot trusts: start spread like the posterior
        moves, start = independent
        burn, block, first_check = min(burn, INDEPENDENCE_BURN), min(block, 200), 200
    # Differential-evolution moves mix faster than the default stretch move on these
    # posteriors (demo data: R-hat <= 1.01 in about half the steps). Not DESnookerMove: in
    # emcee 3.1.6 its proposal is mis-normalised and the posterior comes out too narrow
    # (tests/test_bayes.py compares against an exact grid posterior and catches it).
    sampler = emcee.EnsembleSampler(n_walkers, P, log_prob, vectorize=True, moves=moves or emcee.moves.DEMove())
    # emcee draws from its own RandomState: seed it through its public state property
    sampler.random_state = np.random.RandomState(int(rng.integers(2**31 - 1))).get_state()
    bar = _progress.task(f"sampling ({model} model, {n_walkers} walkers)", None, show=progress)
    state = sampler.run_mcmc(start, burn)
    bar.step(burn, "burn-in done")
    sampler.reset()
    steps = 0
    diag = None
    names_params = [f"p{i}" for i in range(P)]
    while steps < max_steps:
        state = sampler.run_mcmc(state, block)
        steps += block
        chain = sampler.get_chain()                      # (steps, walkers, P)
        if steps >= first_check or steps >= max_steps:
            # drop the first fifth as further warm-up before judging
            kept = chain[steps // 5:]
            post = {nm: kept[:, :, i].T for i, nm in enumerate(names_params)}
            # numpy (arviz's xarray path cost more than sampling); tail ESS does not decide when
            # to stop, so it is computed once, on the draws kept
            diag = diagnostics.convergence(post, tail=False)
            bar.step(burn + steps, f"steps, R-hat max {diag['r_hat_max']:.4f} (target {R_HAT_TARGET}), "
                                   f"bulk ESS min {diag['ess_bulk_min']:.0f} (target {target_ess:.0f})")
            if diag["r_hat_max"] <= R_HAT_TARGET and diag["ess_bulk_min"] >= target_ess:
                break
            if independent is not None and np.mean(sampler.acceptance_fraction) < INDEPENDENCE_MIN_ACCEPTANCE:
                break   # known at the first check already: redo with DE moves now, not after a full run
        block = min(max(block, steps // 2), 5000)
    bar.close(f"{burn + steps} steps")
    acceptance = float(np.mean(sampler.acceptance_fraction))
    if independent is not None and acceptance < INDEPENDENCE_MIN_ACCEPTANCE:
        # the proposal looked fine to the pilot but the chain rarely moves: DE moves instead
        import emcee.moves as _moves

        return fit_bayes(specimens, confidence, model=model, priors=priors, reference_prior=reference_prior,
                         seed=seed, walkers=walkers, target_ess=target_ess, max_steps=max_steps, burn=asked[0],
                         block=asked[1], progress=progress, loo=loo, common_modulus=common_modulus,
                         moves=_moves.DEMove(), geometries=geometries, mle=mle)
    chain = sampler.get_chain()[steps // 5:]
    if diag is not None:
        diag["ess_tail_min"] = min(diagnostics.ess_tail(chain[:, :, i].T) for i in range(P))
    kept_steps = chain.shape[0]
    flat = chain.transpose(1, 0, 2).reshape(-1, P)           # walker-major: (walkers*steps, P)
    full = expand(flat)
    notes = list(mle.warnings)
    for line in prior_dominance_notes(prior, names, full, confidence):
        notes.append(line)
        _warnings.warn(line, FlawmixWarning, stacklevel=3)
    if diag is None or diag["r_hat_max"] > R_HAT_TARGET or diag["ess_bulk_min"] < target_ess:
        notes.append(
            f"the sampler did not reach R-hat <= {R_HAT_TARGET} and bulk ESS >= {target_ess:.0f} within "
            f"{max_steps} steps (R-hat {diag['r_hat_max']:.3f}, bulk ESS {diag['ess_bulk_min']:.0f}); "
            "intervals may be unreliable: raise max_steps or check for a poorly identified population")
        _warnings.warn(notes[-1], FlawmixWarning, stacklevel=3)
    acceptance = float(np.mean(sampler.acceptance_fraction))
    moduli = np.exp(full[:, :k])
    scales = np.exp(full[:, k:2 * k] + centre)
    fractions = spec.fractions(full)
    draws = Draws("posterior", moduli, scales, fractions, chains=n_walkers)

    extras = {**{k_: v_ for k_, v_ in mle.extras.items() if k_ != "iterations"},
              "diagnostics": diag, "walkers": n_walkers, "steps": int(kept_steps), "burn_in": int(burn + steps // 5),
              "draws": int(flat.shape[0]), "acceptance_fraction": acceptance, "seed": seed,
              "moves": (f"independence t from the {centred_on}, with DE" if independent is not None
                        else "differential evolution")}
    if loo:
        thin = max(1, kept_steps * n_walkers // LOO_DRAWS)
        sub = chain[::thin]
        pw = spec.pointwise(data, expand(sub.reshape(-1, P))) - np.where(data.failed, centre, 0.0)
        pw = pw.reshape(sub.shape[0], n_walkers, -1).transpose(1, 0, 2)  # (chain, draw, N)
        res = diagnostics.psis_loo(pw)   # numpy; equal to arviz.loo (tests/test_bayes.py)
        bad = int(np.sum(res["pareto_k"] > 0.7))
        extras.update({"elpd_loo": res["elpd_loo"], "elpd_loo_se": res["se"], "pareto_k_bad": bad,
                       "elpd_loo_pointwise": None if res["pointwise"] is None else res["pointwise"].tolist()})
        if bad:
            notes.append(f"PSIS-LOO: {bad} specimen(s) with Pareto k > 0.7; the LOO estimate is unreliable for them "
                         "(usually the most influential failures)")
    elapsed = time.perf_counter() - start_time
    extras["seconds"] = elapsed
    if diag:
        extras["ess_per_second"] = diag["ess_bulk_min"] / elapsed

    lo_q, hi_q = (1 - confidence) / 2, (1 + confidence) / 2
    pops = []
    for j, p in enumerate(mle.populations):
        fi = None
        if model == "exclusive" or (model == "partial" and j == partial_index):
            fi = tuple(float(x) for x in np.quantile(fractions[:, j], [lo_q, hi_q]))
        pops.append(PopulationEstimate(
            name=p.name, kind=p.kind, n_failures=p.n_failures, n_possible=p.n_possible,
            expected_failures=p.expected_failures,
            modulus=float(np.median(moduli[:, j])),
            characteristic_strength=float(np.median(scales[:, j])),
            modulus_interval=tuple(float(x) for x in np.quantile(moduli[:, j], [lo_q, hi_q])),
            strength_interval=tuple(float(x) for x in np.quantile(scales[:, j], [lo_q, hi_q])),
            interval_method="credible (equal-tailed)",
            modulus_unbiased=None, regression_modulus=p.regression_modulus, regression_strength=p.regression_strength,
            at_bound=False, fraction=float(np.median(fractions[:, j])), fraction_interval=fi,
        ))
    return FitResult(
        method="bayes", model=mle.model, confidence=confidence, unit=specimens.unit, populations=tuple(pops),
        n_specimens=mle.n_specimens, n_failed=mle.n_failed, n_survived=mle.n_survived,
        n_unidentified=mle.n_unidentified, n_ambiguous=mle.n_ambiguous,
        log_likelihood=mle.log_likelihood, n_parameters=mle.n_parameters, tests=(), warnings=tuple(dict.fromkeys(notes)),
        converged=bool(diag and diag["r_hat_max"] <= R_HAT_TARGET and diag["ess_bulk_min"] >= target_ess),
        plotting_rule=mle.plotting_rule, source=specimens.source, checksum=specimens.checksum,
        specimens=specimens, extras=extras, partial_population=mle.partial_population, draws=draws,
        priors=tuple(prior.described),
    )
