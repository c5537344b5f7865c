"""What-if scenarios named in words: each change alone and the changes together, so a table
says what was applied (``pores removed and grinding risk halved``), not only a factor.

Built on :func:`flawmix.predict.what_if` (the one calculation); this module only names and
combines scenarios.
"""
from __future__ import annotations

import itertools
from typing import Mapping

import pandas as pd

from .predict import CHARACTERISTIC, what_if


def describe(changes: Mapping[str, float]) -> str:
    """``{"pores": 0, "grinding": 0.5}`` → ``pores removed and grinding risk halved``."""
    words = []
    for name, f in changes.items():
        f = float(f)
        if f == 0:
            words.append(f"{name} removed")
        elif f == 0.5:
            words.append(f"{name} risk halved")
        elif f == 1:
            words.append(f"{name} unchanged")
        else:
            words.append(f"{name} risk × {f:g}")
    return " and ".join(words) if words else "no change"


def alone_and_together(changes: Mapping[str, float]) -> list[dict[str, float]]:
    """Each change alone, then all of them together (when there are several)."""
    items = list(changes.items())
    out = [{k: v} for k, v in items]
    if len(items) > 1:
        out.append(dict(items))
    return out


def standard_scenarios(names) -> list[dict[str, float]]:
    """The report's menu: each population removed, each population's risk halved, and every
    pair of one removed with another halved (what a process change usually buys)."""
    names = list(names)
    out = [{n: 0.0} for n in names] + [{n: 0.5} for n in names]
    if len(names) > 1:
        out += [{a: 0.0, b: 0.5} for a, b in itertools.permutations(names, 2)]
    return out


def what_if_table(result, coupon, component, scenarios, *, probabilities=(1e-3, CHARACTERISTIC),
                  component_name: str = "component") -> pd.DataFrame:
    """Stress at each failure probability before and after each scenario.

    scenarios: list of {population: factor}; rows (change, body, failure probability), the
    change named by :func:`describe`; columns as :func:`flawmix.predict.what_if`."""
    frames = []
    for changes in scenarios:
        if all(float(f) == 0 for f in changes.values()) and len(changes) == len(result.populations):
            continue   # nothing would be left to fail
        table = what_if(result, coupon, component, changes, probabilities=probabilities,
                        component_name=component_name)
        frames.append(table.reset_index().assign(change=describe(changes)))
    out = pd.concat(frames, ignore_index=True)
    cols = ["change", "body", "failure probability"] + [c for c in out.columns
                                                        if c not in ("change", "body", "failure probability")]
    return out[cols].set_index(["change", "body", "failure probability"])
