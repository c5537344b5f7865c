"""The one place flawmix talks to arviz.

arviz 0.x (the line installed on Python 3.11) takes ``from_dict(posterior=..., log_likelihood=...)``
and returns InferenceData; arviz 1.x (Python >= 3.12) takes ``from_dict({"posterior": ...})``
and returns a DataTree. Everything else in flawmix sees plain numbers and arrays.
"""
from __future__ import annotations

import warnings

import numpy as np


def _az():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # 0.x prints a FutureWarning about the 1.x refactor on import
        import arviz

    return arviz


def major_version() -> int:
    return int(_az().__version__.split(".")[0])


def to_inference_data(posterior: dict[str, np.ndarray], log_likelihood: dict[str, np.ndarray] | None = None):
    """Arrays shaped (chain, draw, ...) -> arviz InferenceData (0.x) or DataTree (1.x)."""
    az = _az()
    groups = {"posterior": posterior}
    if log_likelihood is not None:
        groups["log_likelihood"] = log_likelihood
    if major_version() >= 1:
        return az.from_dict(groups)
    return az.from_dict(**groups)


def _values(obj) -> list[np.ndarray]:
    """All numbers of an arviz diagnostic result, whatever container it comes in."""
    for attr in ("ds", "dataset", "to_dataset"):
        inner = getattr(obj, attr, None)
        if inner is not None:
            obj = inner() if callable(inner) else inner
            break
    if hasattr(obj, "data_vars"):
        return [np.asarray(obj[name].values, dtype=float).ravel() for name in obj.data_vars]
    return [np.asarray(obj, dtype=float).ravel()]


def convergence(posterior: dict[str, np.ndarray]) -> dict[str, float]:
    """Largest rank-normalised split R-hat, smallest bulk and tail ESS over all parameters."""
    az = _az()
    data = to_inference_data(posterior)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        rhat = np.concatenate(_values(az.rhat(data)))
        bulk = np.concatenate(_values(az.ess(data, method="bulk")))
        tail = np.concatenate(_values(az.ess(data, method="tail")))
    return {"r_hat_max": float(np.max(rhat)), "ess_bulk_min": float(np.min(bulk)),
            "ess_tail_min": float(np.min(tail))}


def loo(log_likelihood: np.ndarray) -> dict[str, object]:
    """PSIS-LOO from pointwise log-likelihood shaped (chain, draw, N)."""
    az = _az()
    data = to_inference_data({"dummy": np.zeros(log_likelihood.shape[:2])}, {"y": log_likelihood})
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = az.loo(data, pointwise=True)
    elpd = getattr(res, "elpd_loo", None)
    if elpd is None:
        elpd = getattr(res, "elpd")
    se = getattr(res, "se")
    k = np.asarray(getattr(res, "pareto_k"), dtype=float).ravel()
    pointwise = getattr(res, "loo_i", None)
    if pointwise is None:
        pointwise = getattr(res, "elpd_i", None)
    pointwise = None if pointwise is None else np.asarray(pointwise, dtype=float).ravel()
    return {"elpd_loo": float(elpd), "se": float(se), "pareto_k": k, "pointwise": pointwise}
