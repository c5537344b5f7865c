"""Would a second bootstrap level lift the parameter cells that the default calibration leaves short?

The default calibrated profile cuts each parameter's signed root r at mean ± z·sd of its
bootstrap roots, drawn at the fit θ̂. In the hard cells that bootstrap world is more regular
than the true one, and m of the low-modulus population is covered 86-87 % at 90 %. This
study draws the study's own campaigns (studies/interval_coverage.py: numpy, true values in
closed form) and, for each, a two-level bootstrap:

- level 1: B1 campaigns at θ̂, refitted: roots r*_j, refits θ̂*_j (the default's ingredients);
- level 2: B2 campaigns at each θ̂*_j: roots r**_jl, their mean μ_j and sd s_j.

Coverage needs no end points: the interval {ψ: lo <= r(ψ) <= hi} holds the truth exactly
when lo <= r(truth) <= hi, and r(truth) is one constrained refit of the observed campaign.
Rules compared on the same campaigns (90 %):

- ``single``: lo, hi = μ* ∓ z·s* (the default's rule, with B1 instead of 400 refits);
- ``prepivot``: Beran's prepivoting. u_j = Φ((r*_j − μ_j)/s_j) is the level-1 root's place in
  its own world's distribution; the 5 % and 95 % quantiles of u_j replace 0.05 and 0.95;
- ``shift``: the level-2 worlds' pooled mean and sd correct the level-1 ones, μ = 2μ* − μ̄**,
  s = 2s* − s̄** (a first-order correction of the calibration's plug-in bias);
- ``fast``: the same with one level-2 campaign per level-1 campaign (a fast double bootstrap).

    python studies/interval_double_bootstrap.py --sets 200 --cells ratio3,issue --outer 200 --inner 25
"""
from __future__ import annotations

import argparse
import sys
import time
import warnings
from pathlib import Path

import numpy as np
from scipy import stats

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
sys.path.insert(0, str(Path(__file__).resolve().parent))

from interval_coverage import CELLS, censor_stress, draw_campaign  # noqa: E402

import flawmix as fm  # noqa: E402
from flawmix import likelihood as lik  # noqa: E402
from flawmix.calibration import SIGNED_ROOT_CLIP, _refits  # noqa: E402
from flawmix.simulate import Design, simulate  # noqa: E402

Z = float(stats.norm.ppf(0.95))


def roots_at(data: lik.Data, truth: np.ndarray):
    """Refits (R, 2k) and the signed root of every parameter at each row's own truth (R, 2k),
    clipped as the default's are."""
    theta, roots, _ = _refits(data, truth)
    return theta, np.clip(np.where(np.isfinite(roots), roots, np.nan), -SIGNED_ROOT_CLIP, SIGNED_ROOT_CLIP)


def campaigns(k, moduli, scales, design, count, rng, centre):
    data = simulate(lik.Model("concurrent", k), moduli, scales, None, design, count, rng)
    return lik.Data(data.y - centre, data.failed, data.candidates)


def stack(parts):
    return lik.Data(np.concatenate([p.y for p in parts]), np.concatenate([p.failed for p in parts]),
                    np.concatenate([p.candidates for p in parts]))


def one_set(cell, frame, rng, outer, inner):
    """Per parameter: r at the truth and the (lo, hi) cut of each rule; None if unusable."""
    k = len(cell["moduli"])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        result = fm.fit(frame, intervals="none")
    if len(result.populations) != k:
        return None
    sp = result.specimens
    centre = float(np.mean(np.log(sp.strength)))
    shift = np.concatenate([np.zeros(k), np.full(k, centre)])
    m_hat = np.array([p.modulus for p in result.populations])
    s_hat = np.array([p.characteristic_strength for p in result.populations])
    theta_hat = np.concatenate([np.log(m_hat), np.log(s_hat)]) - shift
    truth = np.concatenate([np.log(cell["moduli"]), np.log(cell["scales"])]) - shift
    design = Design.like(sp)
    observed = lik.Data.from_specimens(sp)
    observed = lik.Data(observed.y[None] - centre, observed.failed[None], observed.candidates[None])
    with np.errstate(over="ignore", invalid="ignore"):
        # r(truth) of the observed campaign, from the fit itself (the study's own ascent)
        _, r_obs = roots_at(stack([observed, observed]), np.stack([truth, truth]))
        level1 = campaigns(k, m_hat, s_hat, design, outer, rng, centre)
        fit1, r1 = roots_at(level1, np.broadcast_to(theta_hat, (outer, 2 * k)).copy())
        worlds = shift + fit1
        parts = [campaigns(k, np.exp(w[:k]), np.exp(w[k:]), design, inner, rng, centre) for w in worlds]
        _, r2 = roots_at(stack(parts), np.repeat(fit1, inner, axis=0))
    r2 = r2.reshape(outer, inner, 2 * k)
    good = np.all(np.isfinite(r1), axis=1) & np.all(np.isfinite(r2).all(axis=1), axis=1)
    good &= np.all(np.isfinite(fit1), axis=1)
    r1, r2 = r1[good], r2[good]
    mu1, s1 = r1.mean(axis=0), r1.std(axis=0, ddof=1)
    mu_j, s_j = r2.mean(axis=1), r2.std(axis=1, ddof=1)
    cuts = {"single": (mu1 - Z * s1, mu1 + Z * s1)}
    u = stats.norm.cdf((r1 - mu_j) / np.maximum(s_j, 1e-6))
    a_lo, a_hi = np.quantile(u, 0.05, axis=0), np.quantile(u, 0.95, axis=0)
    cuts["prepivot"] = (mu1 + stats.norm.ppf(np.clip(a_lo, 1e-4, 1)) * s1,
                        mu1 + stats.norm.ppf(np.clip(a_hi, 0, 1 - 1e-4)) * s1)
    mu_c, s_c = 2 * mu1 - mu_j.mean(axis=0), 2 * s1 - s_j.mean(axis=0)
    cuts["shift"] = (mu_c - Z * s_c, mu_c + Z * s_c)
    first = r2[:, 0, :]
    mu_f, s_f = 2 * mu1 - first.mean(axis=0), 2 * s1 - first.std(axis=0, ddof=1)
    cuts["fast"] = (mu_f - Z * s_f, mu_f + Z * s_f)
    return r_obs[0], cuts


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sets", type=int, default=200)
    parser.add_argument("--outer", type=int, default=200)
    parser.add_argument("--inner", type=int, default=25)
    parser.add_argument("--seed", type=int, default=2026)
    parser.add_argument("--cells", default="ratio3,issue,rare")
    args = parser.parse_args(argv)
    for name in args.cells.split(","):
        cell = CELLS[name]
        k = len(cell["moduli"])
        labels = [f"m_{chr(97 + j)}" for j in range(k)] + [f"σθ_{chr(97 + j)}" for j in range(k)]
        rng = np.random.default_rng([args.seed, list(CELLS).index(name)])   # the coverage study's campaigns
        boot = np.random.default_rng([args.seed, 99, list(CELLS).index(name)])
        censor = censor_stress(cell)
        hits, below, above, used = {}, {}, {}, 0
        start = time.process_time()
        for s in range(args.sets):
            frame = draw_campaign(cell, rng, censor)
            out = one_set(cell, frame, boot, args.outer, args.inner)
            if out is None:
                continue
            used += 1
            r, cuts = out
            for rule, (lo, hi) in cuts.items():
                hits.setdefault(rule, []).append((lo <= r) & (r <= hi))
                below.setdefault(rule, []).append(r < lo)   # truth above the upper end
                above.setdefault(rule, []).append(r > hi)
            if (s + 1) % 25 == 0:
                print(f"  {name}: {s + 1}/{args.sets} sets, {time.process_time() - start:.0f} CPU s",
                      file=sys.stderr, flush=True)
        print(f"{name}: {cell}; {used} sets; B1 {args.outer}, B2 {args.inner}; "
              f"{(time.process_time() - start) / max(used, 1):.1f} CPU s per set")
        for rule in hits:
            h = np.array(hits[rule], float)
            c, se = h.mean(axis=0), np.sqrt(h.mean(axis=0) * (1 - h.mean(axis=0)) / len(h))
            hi_miss, lo_miss = np.mean(below[rule], axis=0), np.mean(above[rule], axis=0)
            cells = "  ".join(f"{lab} {100 * c[i]:5.1f} ± {100 * se[i]:.1f} ({100 * hi_miss[i]:.1f}/{100 * lo_miss[i]:.1f})"
                              for i, lab in enumerate(labels))
            print(f"  {rule:9s} {cells}", flush=True)
        print("  (in brackets: % of sets with the truth above the upper end / below the lower end)")


if __name__ == "__main__":
    main()
