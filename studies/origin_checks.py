"""Seeded study of the origin checks (flawmix.origins): how often a swapped origin label is
flagged ("check this origin", label probability < 5 %), how often a correct one is, and the
calibration of origin probabilities of unidentified failures. Binomial standard errors shown.

Scenario (invented): pores (m 3, σθ 800 MPa) cause the weak failures, grinding damage (m 25,
σθ 460 MPa) those near 450 MPa; N specimens per campaign, all failures labelled, then
``swaps`` labels changed: "gap" swaps the weakest pore failures and the strongest grinding
ones; "random" flips randomly chosen labels.

Run:  python studies/origin_checks.py [CAMPAIGNS] [N]      (default 200 campaigns of 60)
"""
import sys

import numpy as np
import pandas as pd

import flawmix as fm


def campaign(rng, n):
    draws = np.stack([800.0 * rng.weibull(3.0, n), 460.0 * rng.weibull(25.0, n)], axis=1)
    return draws.min(axis=1), draws.argmin(axis=1)


def swapped(strength, cause, mode, rng, per_side=2):
    label = cause.copy()
    if mode == "gap":
        pores = np.flatnonzero(cause == 0)
        grinding = np.flatnonzero(cause == 1)
        chosen = np.concatenate([pores[np.argsort(strength[pores])[:per_side]],
                                 grinding[np.argsort(strength[grinding])[-per_side:]]])
    else:
        chosen = rng.choice(strength.size, 2 * per_side, replace=False)
    label[chosen] = 1 - label[chosen]
    return label, chosen


def rate(hits, total):
    p = hits / total if total else float("nan")
    return f"{p:.3f} ± {np.sqrt(p * (1 - p) / total):.3f} ({hits}/{total})"


def main(campaigns=200, n=60):
    rng = np.random.default_rng(20261203)
    for mode in ("gap", "random"):
        flagged_swapped = total_swapped = flagged_correct = total_correct = 0
        for _ in range(campaigns):
            strength, cause = campaign(rng, n)
            label, chosen = swapped(strength, cause, mode, rng)
            if len(set(label)) < 2:
                continue
            frame = pd.DataFrame({"strength": strength, "origin": np.array(["pore", "grinding"])[label]})
            table = fm.fit(frame, intervals="none").origin_probabilities()
            check = table["check"].to_numpy()
            is_swapped = np.zeros(n, bool)
            is_swapped[chosen] = True
            flagged_swapped += int(check[is_swapped].sum())
            total_swapped += int(is_swapped.sum())
            flagged_correct += int(check[~is_swapped].sum())
            total_correct += int((~is_swapped).sum())
        print(f"{mode:>6} swaps: swapped labels flagged {rate(flagged_swapped, total_swapped)}; "
              f"correct labels flagged {rate(flagged_correct, total_correct)}")
    given, truth = [], []
    for _ in range(campaigns // 2):
        strength, cause = campaign(rng, n)
        hidden = rng.random(n) < 0.3
        origin = np.array(["pore", "grinding"], dtype=object)[cause]
        origin[hidden] = "?"
        if len(set(origin[~hidden])) < 2:
            continue
        table = fm.fit(pd.DataFrame({"strength": strength, "origin": origin}), intervals="none").origin_probabilities()
        unk = table[table["reading"] == "unidentified"]
        given.append(unk["pore"].to_numpy())
        truth.append(cause[hidden] == 0)
    given, truth = np.concatenate(given), np.concatenate(truth)
    print("calibration of P(pore) for unidentified failures:")
    for lo, hi in [(0, 0.1), (0.1, 0.3), (0.3, 0.7), (0.7, 0.9), (0.9, 1.0001)]:
        inside = (given >= lo) & (given < hi)
        if inside.sum():
            print(f"  given {lo:.1f}-{min(hi, 1):.1f}: mean given {given[inside].mean():.3f}, truly pore "
                  f"{rate(int(truth[inside].sum()), int(inside.sum()))}")


if __name__ == "__main__":
    main(*(int(a) for a in sys.argv[1:3]))
