"""The likelihood of competing flaw populations: the one place the model's math lives.

Parameters of population j are held as ``log_modulus`` u_j = ln m_j and ``log_scale``
v_j = ln σθ_j (σθ in the specimens' unit). Per specimen (DOMAIN.md section 2):
failed with candidate set C -> ln Σ_{j∈C} h_j(σ) + ln S(σ); survived -> ln S(σ);
concurrent: S = exp(-Σ_j (σ/σθ_j)^m_j), h_j = (m_j/σ)(σ/σθ_j)^m_j.
MLE, Bayes, bootstrap and simulation all call these functions.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

LOG_MODULUS_MAX = np.log(1000.0)   # a modulus this high means "no scatter": treat as a bound
LOG_MODULUS_MIN = np.log(0.05)


@dataclass(frozen=True)
class Data:
    """Arrays the likelihood needs, prepared once.

    y: (..., N) log strength; failed: (..., N) bool; candidates: (..., N, k) bool.
    Leading dimensions (if any) index replicate data sets.
    """

    y: np.ndarray
    failed: np.ndarray
    candidates: np.ndarray
    geometry: np.ndarray | None = None   # (N,) index of each specimen's geometry (sized models)

    @classmethod
    def from_specimens(cls, specimens) -> "Data":
        return cls(np.log(specimens.strength), specimens.failed.copy(), specimens.candidates.copy())

    @property
    def k(self) -> int:
        return self.candidates.shape[-1]

    @property
    def certain(self) -> bool:
        """True when every failure has exactly one candidate population."""
        c = self.candidates.sum(axis=-1)
        return bool(np.all(c[self.failed] == 1))


def _last_axis(reduce, a: np.ndarray) -> np.ndarray:
    """Reduce the (short: k populations) last axis with keepdims. numpy's reductions over a
    last axis of 2 or 3 strided elements run some 30x slower than the same ufunc applied
    across its slices, so a few populations are combined slice by slice."""
    k = a.shape[-1]
    if k > 8:
        return reduce.reduce(a, axis=-1, keepdims=True)
    out = a[..., 0].copy() if k == 1 else reduce(a[..., 0], a[..., 1])
    for j in range(2, k):
        reduce(out, a[..., j], out=out)
    return out[..., None]


def _masked_logsumexp(logh: np.ndarray, mask: np.ndarray, weights: bool = True,
                      log_mask: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """ln Σ_{j: mask} exp(logh_j) over the last axis, and the normalised weights (None
    unless ``weights``); ``log_mask`` (0 / −inf, from :func:`_log_mask`) may stand in for mask."""
    masked = np.where(mask, logh, -np.inf) if log_mask is None else logh + log_mask
    top = _last_axis(np.maximum, masked)
    top = np.where(np.isfinite(top), top, 0.0)
    e = np.exp(masked - top)
    s = _last_axis(np.add, e)
    with np.errstate(divide="ignore"):
        lse = (top + np.log(s))[..., 0]
    return lse, (e / np.where(s > 0, s, 1.0)) if weights else None


def concurrent_pointwise(data: Data, log_modulus, log_scale, offset=None) -> np.ndarray:
    """Per-specimen log-likelihood of the concurrent model.

    log_modulus, log_scale: (..., k) parameter sets (leading dims broadcast against the
    data's leading dims). offset: optional (..., N, k) added to ln of the cumulative hazard
    (the log effective-size ratio of each specimen's geometry). Returns (..., N).
    """
    u = np.asarray(log_modulus, dtype=float)
    v = np.asarray(log_scale, dtype=float)
    m = np.exp(u)[..., None, :]
    y = data.y[..., :, None]
    z = m * (y - v[..., None, :])
    if offset is not None:
        z = z + offset
    with np.errstate(over="ignore"):
        H = np.exp(z)
    logh = u[..., None, :] - y + z
    lse, _ = _masked_logsumexp(logh, data.candidates, weights=False, log_mask=_log_mask(data))
    return np.where(data.failed, lse, 0.0) - _last_axis(np.add, H)[..., 0]


def concurrent_loglik(data: Data, log_modulus, log_scale) -> np.ndarray:
    """Total log-likelihood, shape (...) for parameter sets of shape (..., k)."""
    return concurrent_pointwise(data, log_modulus, log_scale).sum(axis=-1)


@dataclass(frozen=True)
class _Split:
    """Failures split into certain ones (summarised) and uncertain ones (kept row by row)."""

    count: np.ndarray        # (k,) certain failures of each population
    sum_y: np.ndarray        # (k,) Σ ln σ over them
    sum_y_total: float       # Σ ln σ over all certain failures
    y_uncertain: np.ndarray  # (M,) ln σ of failures with two or more candidates
    c_uncertain: np.ndarray  # (M, k) their candidate sets


def _split(data: Data) -> _Split:
    cached = data.__dict__.get("_split_cache")
    if cached is not None:
        return cached
    n_cand = data.candidates.sum(axis=-1)
    certain = data.failed & (n_cand == 1)
    onehot = data.candidates[certain]
    y_c = data.y[certain]
    uncertain = data.failed & (n_cand > 1)
    split = _Split(onehot.sum(axis=0).astype(float), y_c @ onehot, float(y_c.sum()),
                   np.ascontiguousarray(data.y[uncertain]), np.ascontiguousarray(data.candidates[uncertain]))
    object.__setattr__(data, "_split_cache", split)  # Data is frozen; this cache is derived
    return split


def concurrent_derivatives(data: Data, theta: np.ndarray) -> tuple[float, np.ndarray, np.ndarray]:
    """Log-likelihood, gradient (2k,) and Hessian (2k, 2k) at theta = [u_1..u_k, v_1..v_k].

    Single data set only (no leading dims). Certain failures enter through sufficient
    statistics (their count and Σ ln σ); only uncertain failures are handled row by row,
    and the cumulative hazard needs one exp per specimen and population. Derivation in
    DEVELOPERS.md ("Likelihood derivatives"); tests check it against finite differences.
    """
    k = data.k
    u, v = theta[:k], theta[k:]
    m = np.exp(u)
    sp = _split(data)
    # cumulative hazard over all specimens, (k, N) layout for contiguous reductions
    z = m[:, None] * (data.y[None, :] - v[:, None])
    with np.errstate(over="ignore", invalid="ignore"):   # far from the data: inf, caught by the caller
        H = np.exp(z)
        S0 = H.sum(axis=1)
        Hz = H * z
        S1 = Hz.sum(axis=1)
        S2 = np.einsum("ij,ij->i", Hz, z)

    # certain failures: ln h = u − y + z with z = m (y − v)
    r = sp.count
    zc = m * (sp.sum_y - r * v)                      # Σ z over each population's certain failures
    ll = float(r @ u - sp.sum_y_total + zc.sum() - S0.sum())

    # uncertain failures: ln Σ_{j∈C} h_j and responsibilities π
    zu = m * (sp.y_uncertain[:, None] - v)
    lse, pi = _masked_logsumexp(u - sp.y_uncertain[:, None] + zu, sp.c_uncertain)
    ll += float(lse.sum())
    a = pi * (1.0 + zu)
    b = -pi * m
    sum_pi = pi.sum(axis=0)

    grad = np.empty(2 * k)
    grad[:k] = r + zc + a.sum(axis=0) - S1
    grad[k:] = m * (S0 - r - sum_pi)

    uu = -(a.T @ a)
    uv = -(a.T @ b)
    vv = -(b.T @ b)
    idx = np.arange(k)
    uu[idx, idx] += zc + (pi * (zu + (1.0 + zu) ** 2)).sum(axis=0) - (S2 + S1)
    uv[idx, idx] += -m * r - m * (pi * (2.0 + zu)).sum(axis=0) + m * (S1 + S0)
    vv[idx, idx] += m**2 * (sum_pi - S0)   # certain rows cancel: m² − (−m)²
    hess = np.empty((2 * k, 2 * k))
    hess[:k, :k] = uu
    hess[:k, k:] = uv
    hess[k:, :k] = uv.T
    hess[k:, k:] = vv
    return ll, grad, hess


def _over_specimens(x: np.ndarray) -> np.ndarray:
    """Σ over the specimen axis of (R, N, k) -> (R, k). A product with a vector of ones: numpy's
    reduction over a middle axis is some 40x slower for these shapes (same sum, to rounding)."""
    return np.matmul(np.ones(x.shape[1]), x)


def _log_mask(data: Data) -> np.ndarray:
    """0 where a population is a candidate, −inf elsewhere (cached on the data: adding it masks
    log hazards far faster than np.where does)."""
    cached = data.__dict__.get("_log_mask_cache")
    if cached is None:
        cached = np.where(data.candidates, 0.0, -np.inf)
        object.__setattr__(data, "_log_mask_cache", cached)   # Data is frozen; this is derived
    return cached


def concurrent_derivatives_batch(data: Data, theta: np.ndarray):
    """Log-likelihood (R,), gradient (R, 2k) and Hessian (R, 2k, 2k) of the concurrent model
    for R data sets (data arrays with leading dim R) at parameter sets theta (R, 2k).

    The same formulas as :func:`concurrent_derivatives`, row by row for every failure (no
    sufficient statistics), which is the faster layout for many small data sets."""
    k = data.k
    u, v = theta[:, :k], theta[:, k:]
    m = np.exp(u)[:, None, :]                       # (R, 1, k)
    y = data.y[:, :, None]                          # (R, N, 1)
    z = m * (y - v[:, None, :])                     # (R, N, k)
    with np.errstate(over="ignore"):
        H = np.exp(z)
    logh = u[:, None, :] - y + z
    lse, pi = _masked_logsumexp(logh, data.candidates, log_mask=_log_mask(data))
    F = data.failed[:, :, None]
    pi = np.where(F, pi, 0.0)
    H_total = _over_specimens(H)
    ll = np.where(data.failed, lse, 0.0).sum(axis=1) - H_total.sum(axis=1)
    Hz = H * z
    a = pi * (1.0 + z)
    b = -pi * m
    pi_total, Hz_total = _over_specimens(pi), _over_specimens(Hz)
    g = np.concatenate([_over_specimens(a) - Hz_total, m[:, 0] * (H_total - pi_total)], axis=1)
    at = np.transpose(a, (0, 2, 1))
    uu = -np.matmul(at, a)
    uv = -np.matmul(at, b)
    vv = -np.matmul(np.transpose(b, (0, 2, 1)), b)
    idx = np.arange(k)
    mm = m[:, 0]
    uu[:, idx, idx] += _over_specimens(pi * (z + (1 + z) ** 2)) - _over_specimens(Hz * z) - Hz_total
    uv[:, idx, idx] += -mm * _over_specimens(pi * (2 + z)) + mm * (Hz_total + H_total)
    vv[:, idx, idx] += mm**2 * (pi_total - H_total)
    hess = np.concatenate([np.concatenate([uu, uv], 2), np.concatenate([np.transpose(uv, (0, 2, 1)), vv], 2)], 1)
    return ll, g, hess


def censored_derivatives_batch(log_strength: np.ndarray, failed: np.ndarray, theta: np.ndarray,
                               statistics: tuple | None = None):
    """Log-likelihood (E,), gradient (E, 2), Hessian (E, 2, 2) of one population (k = 1) for E
    data sets (log_strength, failed: (E, N)) at theta (E, 2) = [u, v].

    The concurrent likelihood with k = 1, every failure certain: the certain-failure terms of
    :func:`concurrent_derivatives` from sufficient statistics (failure count, Σ ln σ, which
    ``statistics`` may pass in from :func:`censored_statistics`), batched. With every origin
    identified the concurrent likelihood is the sum of these per population, each
    population's failures alone with every other specimen suspended."""
    r, sum_y = censored_statistics(log_strength, failed) if statistics is None else statistics
    u, v = theta[:, 0], theta[:, 1]
    m = np.exp(u)
    z = m[:, None] * (log_strength - v[:, None])
    with np.errstate(over="ignore"):
        H = np.exp(z)
    S0 = H.sum(axis=1)
    Hz = H * z
    S1 = Hz.sum(axis=1)
    S2 = np.einsum("en,en->e", Hz, z)
    zc = m * (sum_y - r * v)
    ll = r * u - sum_y + zc - S0
    grad = np.empty((u.size, 2))
    grad[:, 0] = r + zc - S1
    grad[:, 1] = m * (S0 - r)
    hess = np.empty((u.size, 2, 2))
    hess[:, 0, 0] = zc - S2 - S1
    hess[:, 0, 1] = hess[:, 1, 0] = m * (S1 + S0 - r)
    hess[:, 1, 1] = -m * m * S0
    return ll, grad, hess


def censored_statistics(log_strength: np.ndarray, failed: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(failure count (E,), Σ ln σ over the failures (E,)) of E one-population data sets."""
    weight = np.asarray(failed, dtype=float)
    return weight.sum(axis=1), np.einsum("en,en->e", log_strength, weight)


def starting_responsibilities(data: Data, split: str = "by-count") -> np.ndarray:
    """(..., N, k) a first split of each failure over its candidates: in proportion to each
    candidate's certain failures (``by-count``) or equally (``equal``); 0 for survivors."""
    cand = data.candidates & data.failed[..., None]
    resp = cand.astype(float)
    if split == "by-count":
        certain = cand.sum(-1) == 1
        counts = (cand & certain[..., None]).sum(-2, keepdims=True) + 0.5
        resp = resp * counts
    total = resp.sum(-1, keepdims=True)
    return np.where(total > 0, resp / np.where(total > 0, total, 1.0), 0.0)


def responsibilities(data: Data, log_modulus, log_scale) -> np.ndarray:
    """(..., N, k) probability that population j caused failure i (0 for survivors)."""
    u = np.asarray(log_modulus, dtype=float)
    v = np.asarray(log_scale, dtype=float)
    m = np.exp(u)[..., None, :]
    y = data.y[..., :, None]
    logh = u[..., None, :] - y + m * (y - v[..., None, :])
    _, pi = _masked_logsumexp(logh, data.candidates)
    return np.where(data.failed[..., None], pi, 0.0)


# ---- exclusive and partially concurrent populations ---------------------------------------
#
# theta layout for every model: [u_1..u_k, v_1..v_k, extra...]
#   concurrent: no extra
#   exclusive:  α_1..α_{k−1}, fractions p = softmax([α, 0]) (population k is the reference)
#   partial:    logit p; population `partial_index` is carried by a fraction p of the
#               specimens, all the others by every specimen.

MODELS = ("concurrent", "exclusive", "partial")


@dataclass(frozen=True)
class Model:
    """Which likelihood, for how many populations (and, for ``partial``, which one is partial)."""

    name: str
    k: int
    partial_index: int = 0
    # sized models: moduli (..., k) -> (..., G, k) ln(k_g(m)/k_ref(m)) per geometry g
    size_offsets: object = field(default=None, compare=False, repr=False)

    def __post_init__(self):
        if self.name not in MODELS:
            raise ValueError(f"unknown model {self.name!r}")

    @property
    def n_extra(self) -> int:
        return {"concurrent": 0, "exclusive": self.k - 1, "partial": 1}[self.name]

    @property
    def n_params(self) -> int:
        return 2 * self.k + self.n_extra

    def fractions(self, theta) -> np.ndarray:
        """(..., k) share of specimens carrying each population."""
        theta = np.asarray(theta, dtype=float)
        k = self.k
        if self.name == "exclusive":
            alpha = np.concatenate([theta[..., 2 * k:], np.zeros(theta.shape[:-1] + (1,))], axis=-1)
            alpha = alpha - alpha.max(axis=-1, keepdims=True)
            e = np.exp(alpha)
            return e / e.sum(axis=-1, keepdims=True)
        out = np.ones(theta.shape[:-1] + (k,))
        if self.name == "partial":
            out[..., self.partial_index] = 1.0 / (1.0 + np.exp(-theta[..., 2 * k]))
        return out

    def pointwise(self, data: Data, theta) -> np.ndarray:
        """(..., N) per-specimen log-likelihood for parameter sets theta (..., n_params)."""
        theta = np.asarray(theta, dtype=float)
        k = self.k
        u, v = theta[..., :k], theta[..., k:2 * k]
        if self.name == "concurrent":
            offset = None
            if self.size_offsets is not None:
                per_geometry = self.size_offsets(np.exp(u))              # (..., G, k)
                offset = np.take(per_geometry, data.geometry, axis=-2)   # (..., N, k)
            return concurrent_pointwise(data, u, v, offset)
        if self.name == "exclusive":
            return exclusive_pointwise(data, u, v, np.log(self.fractions(theta)))
        return partial_pointwise(data, u, v, theta[..., 2 * k], self.partial_index)

    def loglik(self, data: Data, theta) -> np.ndarray:
        return self.pointwise(data, theta).sum(axis=-1)

    def bounds(self) -> tuple[np.ndarray, np.ndarray]:
        k, e = self.k, self.n_extra
        lower = np.concatenate([np.full(k, LOG_MODULUS_MIN), np.full(k, -np.inf), np.full(e, -30.0)])
        upper = np.concatenate([np.full(k, LOG_MODULUS_MAX), np.full(k, np.inf), np.full(e, 30.0)])
        return lower, upper


def _parts(data: Data, log_modulus, log_scale):
    """Shared pieces: y (..., N, 1), z, H, ln h (..., N, k)."""
    u = np.asarray(log_modulus, dtype=float)
    v = np.asarray(log_scale, dtype=float)
    m = np.exp(u)[..., None, :]
    y = data.y[..., :, None]
    z = m * (y - v[..., None, :])
    with np.errstate(over="ignore"):
        H = np.exp(z)
    logh = u[..., None, :] - y + z
    return H, logh


def exclusive_pointwise(data: Data, log_modulus, log_scale, log_fraction) -> np.ndarray:
    """Mixture: failure from C -> ln Σ_{j∈C} p_j f_j; survivor -> ln Σ_j p_j S_j."""
    H, logh = _parts(data, log_modulus, log_scale)
    logp = np.asarray(log_fraction)[..., None, :]
    fail, _ = _masked_logsumexp(logp + logh - H, data.candidates, weights=False)
    surv, _ = _masked_logsumexp(logp - H, np.ones_like(data.candidates, dtype=bool), weights=False)
    return np.where(data.failed, fail, surv)


def partial_pointwise(data: Data, log_modulus, log_scale, logit_fraction, partial_index: int) -> np.ndarray:
    """All specimens carry every population but one (A); a fraction p also carries A.

    S = S_rest [(1 − p) + p S_A]; failure from A: p f_A S_rest; from j ≠ A: h_j S.
    """
    H, logh = _parts(data, log_modulus, log_scale)
    a = partial_index
    t = np.asarray(logit_fraction, dtype=float)[..., None]
    log_p = -np.logaddexp(0.0, -t)        # ln p
    log_q = -np.logaddexp(0.0, t)         # ln (1 − p)
    H_a = H[..., a]
    # summed over the others, never as the total less H_A: a large H_A (a steep population far
    # above its scale) would leave only its rounding error, which the fit could climb on
    H_rest = _last_axis(np.add, np.where(np.arange(H.shape[-1]) == a, 0.0, H))[..., 0]
    mix = np.logaddexp(log_q, log_p - H_a)           # ln[(1 − p) + p S_A]
    terms = logh + (mix - H_rest)[..., None]
    terms[..., a] = log_p + logh[..., a] - H_a - H_rest
    fail, _ = _masked_logsumexp(terms, data.candidates, weights=False)
    return np.where(data.failed, fail, mix - H_rest)


def partial_derivatives(data: Data, theta: np.ndarray, partial_index: int):
    """Log-likelihood, gradient and Hessian of the partial model (one data set, no leading
    dims) at theta = [u_1..u_k, v_1..v_k, logit p]: the exact derivatives of
    :func:`partial_pointwise` (tests check them against central differences). One data set
    of :func:`partial_derivatives_batch`.
    """
    one = Data(data.y[None], data.failed[None], data.candidates[None])
    ll, grad, hess = partial_derivatives_batch(one, np.asarray(theta, dtype=float)[None], partial_index)
    return float(ll[0]), grad[0], hess[0]


def partial_derivatives_batch(data: Data, theta: np.ndarray, partial_index: int):
    """(R,), (R, P), (R, P, P): log-likelihood, gradient and Hessian of the partial model for
    R data sets (y (R, N)) at theta (R, P = 2k + 1).

    Each specimen's likelihood is −H_rest + ln Σ_s exp φ_s over its terms φ_s: a failure
    from j ≠ A gives ln h_j + ln(1 − p) and ln h_j + ln p − H_A, one from A gives
    ln h_A + ln p − H_A, a survivor ln(1 − p) and ln p − H_A. With w_s the terms' softmax
    weights, ∇ℓ = −∇H_rest + Σ w_s ∇φ_s and ∇²ℓ = −∇²H_rest + Σ w_s ∇²φ_s
    + Σ w_s ∇φ_s ∇φ_sᵀ − (Σ w_s ∇φ_s)(Σ w_s ∇φ_s)ᵀ.
    """
    # far out (a steep population well above its scale) H overflows: inf/nan, caught by the caller
    with np.errstate(over="ignore", invalid="ignore"):
        return _partial_derivatives(data, np.asarray(theta, dtype=float), partial_index)


def _partial_derivatives(data: Data, theta: np.ndarray, partial_index: int):
    k, a = data.k, partial_index
    u, v, t = theta[:, :k], theta[:, k:2 * k], theta[:, 2 * k]
    m = np.exp(u)                                   # (R, k)
    y, F, C = data.y, data.failed, data.candidates
    R, n = y.shape
    P = 2 * k + 1
    z = m[:, None, :] * (y[..., None] - v[:, None, :])   # (R, N, k)
    H = np.exp(z)
    g = u[:, None, :] - y[..., None] + z                 # ln h_j
    log_p, log_q = -np.logaddexp(0.0, -t), -np.logaddexp(0.0, t)
    p, q = np.exp(log_p), np.exp(log_q)                  # (R,)
    # term slots: 2j (ln h_j + ln q), 2j + 1 (ln h_j + ln p − H_A), 2k (ln q), 2k + 1 (ln p − H_A)
    S = 2 * k + 2
    phi = np.full((R, n, S), -np.inf)
    fail_j = F[..., None] & C
    other = np.arange(k) != a
    log_p_survive_a = log_p[:, None] - H[..., a]         # (R, N)
    phi[..., 0:2 * k:2] = np.where(fail_j & other, g + log_q[:, None, None], -np.inf)
    phi[..., 1:2 * k:2] = np.where(fail_j, g + log_p_survive_a[..., None], -np.inf)
    phi[..., 2 * k] = np.where(F, -np.inf, log_q[:, None])
    phi[..., 2 * k + 1] = np.where(F, -np.inf, log_p_survive_a)
    top = phi.max(axis=-1, keepdims=True)
    e = np.exp(phi - top)
    total = e.sum(axis=-1, keepdims=True)
    w = e / total
    ll = np.sum(top[..., 0] + np.log(total[..., 0]), axis=-1) - np.sum(H[..., other], axis=(-2, -1))
    # gradients of the pieces, in the full parameter vector
    iu, iv, it = np.arange(k), k + np.arange(k), 2 * k
    grad_phi = np.zeros((R, n, S, P))
    for j in range(k):
        for s in (2 * j, 2 * j + 1):   # ln h_j: (1 + z_j, −m_j)
            grad_phi[..., s, iu[j]] += 1.0 + z[..., j]
            grad_phi[..., s, iv[j]] -= m[:, [j]]
    for s in list(range(1, 2 * k, 2)) + [2 * k + 1]:   # ln p − H_A
        grad_phi[..., s, it] += q[:, None]
        grad_phi[..., s, iu[a]] -= H[..., a] * z[..., a]
        grad_phi[..., s, iv[a]] += m[:, [a]] * H[..., a]
    for s in list(range(0, 2 * k, 2)) + [2 * k]:       # ln q
        grad_phi[..., s, it] -= p[:, None]
    grad_phi = np.where(np.isfinite(phi)[..., None], grad_phi, 0.0)
    weighted = w[..., None] * grad_phi
    mean = weighted.sum(axis=2)                          # (R, N, P)
    grad = mean.sum(axis=1)
    # Σ_n Σ_s w ∇φ ∇φᵀ − Σ_n mean meanᵀ, as batched matrix products
    hess = (np.swapaxes(weighted.reshape(R, n * S, P), 1, 2) @ grad_phi.reshape(R, n * S, P)
            - np.swapaxes(mean, 1, 2) @ mean)
    # Σ w_s ∇²φ_s: ln h_j in the terms of j, −H_A in those with ln p, and ln p / ln q (−pq)
    w_h = w[..., 0:2 * k:2] + w[..., 1:2 * k:2]         # (R, N, k) weight of the terms with ln h_j
    hess[:, iu, iu] += (w_h * z).sum(axis=1)
    hess[:, iu, iv] -= m * w_h.sum(axis=1)
    hess[:, iv, iu] -= m * w_h.sum(axis=1)

    def minus_hazard(j, weight):
        """Σ weight·∇²(−H_j) in (u_j, v_j), added to the Hessian."""
        uu, uv, vv = _hazard_hessian(H[..., j], z[..., j], m[:, j], weight)
        hess[:, iu[j], iu[j]] -= uu
        hess[:, iu[j], iv[j]] -= uv
        hess[:, iv[j], iu[j]] -= uv
        hess[:, iv[j], iv[j]] -= vv

    minus_hazard(a, w[..., 1:2 * k:2].sum(axis=-1) + w[..., 2 * k + 1])   # −H_A in the terms with ln p
    hess[:, it, it] -= p * q * n   # ln p and ln q both have −pq, and each specimen's weights sum to one
    for j in np.flatnonzero(other):   # −H_rest over every specimen
        grad[:, iu[j]] -= np.sum(H[..., j] * z[..., j], axis=-1)
        grad[:, iv[j]] += m[:, j] * np.sum(H[..., j], axis=-1)
        minus_hazard(j, 1.0)
    return ll, grad, hess


def _hazard_hessian(H: np.ndarray, z: np.ndarray, m, weight):
    """Σ weight·∇²H over specimens (the last axis) for H = exp(z), z = m (y − v), in (u = ln m, v):
    (∂²/∂u², ∂²/∂u∂v, ∂²/∂v²) = (Σ w H z (1 + z), −m Σ w H (1 + z), m² Σ w H)."""
    return (np.sum(weight * H * z * (1 + z), axis=-1), -m * np.sum(weight * H * (1 + z), axis=-1),
            m**2 * np.sum(weight * H, axis=-1))


def derivatives(model: Model, data: Data, theta: np.ndarray):
    """Log-likelihood, gradient and Hessian of ``model`` at theta (one data set): exact for the
    concurrent model without size offsets and for the partial model, central differences
    (:func:`numerical_derivatives`) for the others."""
    if model.name == "concurrent" and model.size_offsets is None:
        return concurrent_derivatives(data, theta)
    if model.name == "partial":
        return partial_derivatives(data, theta, model.partial_index)
    return numerical_derivatives(model, data, theta)


def numerical_derivatives(model: Model, data: Data, theta: np.ndarray, step: float = 1e-4):
    """Log-likelihood, gradient and Hessian by central differences, all parameter sets in
    one batched call (for the models without hand-written derivatives: see :func:`derivatives`)."""
    chunk = max(1, int(2e7 // max(1, data.y.size * data.k)))

    def values_at(pts):
        return np.concatenate([model.loglik(data, pts[s:s + chunk]) for s in range(0, len(pts), chunk)])
    return central_differences(values_at, theta, step)


def central_differences(values_at, theta: np.ndarray, step: float = 1e-4):
    """Value, gradient (five-point stencil) and Hessian of a function at ``theta`` by central
    differences; ``values_at`` maps (S, P) points to (S,) values in one batched call."""
    theta = np.asarray(theta, dtype=float)
    P = theta.size
    eye = np.eye(P) * step
    points = [theta]
    for i in range(P):
        points += [theta + eye[i], theta - eye[i]]
    for i in range(P):
        points += [theta + eye[i] / 2, theta - eye[i] / 2]
    for i in range(P):
        for j in range(i + 1, P):
            points += [theta + eye[i] + eye[j], theta + eye[i] - eye[j],
                       theta - eye[i] + eye[j], theta - eye[i] - eye[j]]
    values = values_at(np.array(points))
    f0 = values[0]
    plus, minus = values[1:2 * P + 1:2], values[2:2 * P + 1:2]
    half_plus, half_minus = values[2 * P + 1:4 * P + 1:2], values[2 * P + 2:4 * P + 1:2]
    # five-point stencil (error of order step⁴): the score must be accurate near the optimum
    grad = (8 * (half_plus - half_minus) - (plus - minus)) / (6 * step)
    hess = np.diag((plus - 2 * f0 + minus) / step**2)
    idx = 4 * P + 1
    for i in range(P):
        for j in range(i + 1, P):
            pp, pm, mp, mm = values[idx:idx + 4]
            hess[i, j] = hess[j, i] = (pp - pm - mp + mm) / (4 * step**2)
            idx += 4
    return float(f0), grad, hess
