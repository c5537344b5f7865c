"""Replicate campaigns drawn and fitted in chunks, on any concurrent.futures-style executor.

Seeds come from one ``numpy.random.SeedSequence`` spawned per fixed-size chunk, so results
do not depend on the number of workers or on the executor (a thread pool, a process pool,
or a dask.distributed client's ``get_executor()``).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import progress as _progress

from . import likelihood as lik
from .replicates import fit_concurrent_batch, pooled_loglik
from .simulate import Design, simulate

CHUNK = 1000


@dataclass(frozen=True)
class ReplicateFits:
    """Estimates of R replicate campaigns: moduli, scales (R, k), log-likelihoods, ok mask,
    the pooled (common-modulus) log-likelihood, and how many failures each population had."""

    moduli: np.ndarray
    scales: np.ndarray
    loglik: np.ndarray
    pooled_loglik: np.ndarray
    ok: np.ndarray
    failures: np.ndarray      # (R, k) failures attributed with certainty


def _run_chunk(args):
    model_name, k, partial_index, moduli, scales, fractions, design, size, seed = args
    model = lik.Model(model_name, k, partial_index)
    data = simulate(model, moduli, scales, fractions, design, size, np.random.default_rng(seed))
    m, s, ll, ok = fit_concurrent_batch(data)
    certain = data.failed & (data.candidates.sum(-1) == 1)
    failures = (data.candidates & certain[..., None]).sum(1)
    return m, s, ll, pooled_loglik(data), ok, failures


def simulate_and_fit(model: lik.Model, moduli, scales, fractions, design: Design, replicates: int, seed=0,
                     executor=None, chunk_size: int = CHUNK, progress: bool = False) -> ReplicateFits:
    """Draw ``replicates`` campaigns from ``model`` and fit each with the concurrent MLE.

    executor: anything with ``map(fn, iterable)`` (concurrent.futures executors, a dask
    ``Client.get_executor()``); None runs in this process.
    """
    if replicates < 1:
        raise ValueError("replicates must be at least 1")
    sizes = [chunk_size] * (replicates // chunk_size) + ([replicates % chunk_size] if replicates % chunk_size else [])
    seeds = np.random.SeedSequence(seed).spawn(len(sizes))
    fr = np.ones(model.k) if fractions is None else np.asarray(fractions, dtype=float)
    jobs = [(model.name, model.k, model.partial_index, np.asarray(moduli, float), np.asarray(scales, float), fr,
             design, size, s) for size, s in zip(sizes, seeds)]
    mapper = map if executor is None else executor.map
    parts = []
    with _progress.task("simulated and fitted campaigns", replicates, show=progress) as bar:
        for i, part in enumerate(mapper(_run_chunk, jobs)):
            parts.append(part)
            bar.step(sum(len(p[2]) for p in parts))
    return ReplicateFits(*(np.concatenate([p[i] for p in parts]) for i in range(6)))
