"""Shared helpers: small simulated campaigns with known truth."""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest

DATA = Path(__file__).parent / "data"


def simulate_campaign(rng, n=40, pops=(("pore", 6.0, 400.0), ("machining", 15.0, 420.0)),
                      unknown=0.0, survive_at=None):
    """Concurrent populations: strength = min over populations; origin = the arg-min."""
    draws = np.stack([scale * rng.weibull(m, n) for _, m, scale in pops], axis=1)
    strength = draws.min(axis=1)
    origin = np.array([pops[j][0] for j in draws.argmin(axis=1)], dtype=object)
    status = np.array(["failed"] * n, dtype=object)
    if survive_at is not None:
        above = strength > survive_at
        strength = np.where(above, survive_at, strength)
        status[above] = "survived"
        origin[above] = ""
    hide = (rng.random(n) < unknown) & (status == "failed")
    origin[hide] = "?"
    return pd.DataFrame({"strength": strength, "origin": origin, "status": status})


@pytest.fixture
def rng():
    return np.random.default_rng(12345)
