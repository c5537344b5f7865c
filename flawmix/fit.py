"""``flawmix.fit``: one entry point that dispatches to the estimator asked for."""
from __future__ import annotations

from typing import TYPE_CHECKING

from .errors import FlawmixError

if TYPE_CHECKING:   # imported where used, so `import flawmix` stays light (PEP 562 in __init__)
    from .result import FitResult

METHODS = ("mle", "bayes")
MODELS = ("concurrent", "exclusive", "partial")


def fit(
    specimens,
    method: str = "mle",
    model: str = "concurrent",
    confidence: float = 0.90,
    *,
    intervals: str = "auto",
    positions: str = "hazen",
    common_modulus: bool = False,
    priors=None,
    reference_prior: bool = False,
    seed: int | None = 0,
    target_ess: float = 1000.0,
    max_steps: int = 40_000,
    progress: bool = False,
    geometries=None,
    bootstrap: int = 0,
    executor=None,
    **read_options,
) -> FitResult:
    """Fit every flaw population of a specimen set.

    Args:
        specimens: a :class:`Specimens` (from :func:`read_specimens`), or anything
            ``read_specimens`` accepts (path, DataFrame, or a 1-D sequence of strengths)
            together with its options.
        method: ``"mle"`` (competing-risk censored maximum likelihood) or ``"bayes"``
            (emcee ensemble sampler on the same likelihood; see :func:`flawmix.bayes.fit_bayes`
            for ``priors``, ``reference_prior``, ``seed``, ``target_ess``, ``max_steps``, ``progress``).
        model: ``"concurrent"`` (every specimen carries every population), ``"exclusive"``
            (each specimen carries one population; fractions are fitted) or ``"partial"``
            (every specimen carries all but one population, a fraction also carries that one;
            both ways round are fitted and the better reported).
        confidence: two-sided level of the intervals (0.90 gives 5 % / 95 % bounds).
        intervals: ``auto`` (pivotal bounds for one complete population; for concurrent
            populations up to 3000 specimens, profile likelihood with its cut-off calibrated by
            a seeded parametric bootstrap (``calibrated``, see flawmix/calibration.py); χ²
            profile likelihood otherwise, Wald beyond 20 000 specimens), ``calibrated``,
            ``profile`` (χ² cut-off), ``wald``, ``pivotal``,
            ``bootstrap`` (parametric bootstrap percentiles; 1000 replicates unless
            ``bootstrap`` says otherwise), ``none``.
        bootstrap: number of parametric-bootstrap replicates (MLE, concurrent model): adds
            draws, so failure probabilities, strengths at a probability and component
            predictions carry intervals, plus bias-corrected estimates. ``executor`` runs the
            replicates on a concurrent.futures-style executor.
        positions: plotting-position rule for the graphical comparison estimate:
            ``hazen`` (i − 0.5)/N, ``mean-rank`` i/(N + 1), ``median-rank`` (i − 0.3)/(N + 0.4).
        common_modulus: impose one modulus on all populations.
        geometries: ``{name: Geometry or study-file table}`` when the table has a ``geometry``
            column (specimens of several sizes or shapes, fitted together).
    """
    from .specimens import Specimens, read_specimens

    if not isinstance(specimens, Specimens):
        specimens = read_specimens(specimens, **read_options)
    elif read_options:
        raise FlawmixError(f"options {', '.join(read_options)} apply only when fit() reads the table itself")
    method = str(method).lower()
    model = str(model).lower()
    if method not in METHODS:
        raise FlawmixError(f"unknown method '{method}'; use one of {', '.join(METHODS)}")
    if model not in MODELS:
        raise FlawmixError(f"unknown model '{model}'; use one of {', '.join(MODELS)}")
    if method == "bayes":
        from .bayes import fit_bayes

        return fit_bayes(specimens, confidence, model=model, priors=priors, reference_prior=reference_prior,
                         seed=seed, target_ess=target_ess, max_steps=max_steps, progress=progress,
                         common_modulus=common_modulus, geometries=geometries)
    from .mle import attach_bootstrap, fit_mle

    use_bootstrap = intervals == "bootstrap" or bootstrap > 0
    result = fit_mle(specimens, confidence, model=model, intervals="none" if intervals == "bootstrap" else intervals,
                     positions=positions, common_modulus=common_modulus, geometries=geometries, seed=seed)
    if use_bootstrap:
        boot = attach_bootstrap(result, bootstrap or 1000, seed=seed, executor=executor, progress=progress)
        if intervals != "bootstrap":   # keep the likelihood intervals, add the draws
            from dataclasses import replace

            boot = replace(boot, populations=result.populations)
        result = boot
    return result
