"""Walkthrough 2: a process engineer decides which flaw type to attack.

Scenario (invented): alumina insulator tubes fail in service from either pores (volume
flaws) or grinding damage on the outside diameter (surface flaws). Thirty qualification bars
were broken in four-point flexure; the part is the tube loaded in tension. Hot isostatic
pressing would remove the pores; a finer grinding wheel is expected to halve the surface-flaw
risk. Which buys more strength at the part's design failure probability of 1 in 1000?

Run:  python examples/which_flaw_to_attack.py [OUTPUT_FOLDER]
"""
import sys
from pathlib import Path

import matplotlib

matplotlib.use("Agg")
import numpy as np
import pandas as pd

import flawmix as fm
from flawmix import plots
from flawmix.geometry import Geometry
from flawmix.predict import predict

out = Path(sys.argv[1] if len(sys.argv) > 1 else "example-output") / "which-flaw"
out.mkdir(parents=True, exist_ok=True)

bar = Geometry.from_spec("bar", {"type": "flexure-4pt", "width": 4, "depth": 3, "outer_span": 40, "inner_span": 20})
tube = Geometry.from_spec("tube", {"type": "sizes", "volume": 2400.0, "area": 1900.0})  # from the tube's stress analysis

rng = np.random.default_rng(11)
n = 30
pores = 380 * rng.weibull(9.0, n)
grinding = 360 * rng.weibull(13.0, n)
table = pd.DataFrame({"strength": np.minimum(pores, grinding).round(1),
                      "origin": np.where(pores < grinding, "pore", "grinding")})
specimens = fm.read_specimens(table, {"pores": {"kind": "volume", "labels": ["pore"]},
                                      "grinding": {"kind": "surface", "labels": ["grinding"]}})

# Bayesian fit so every prediction carries a credible interval
result = fm.fit(specimens, method="bayes", seed=5)
print(result)
print()

for label, change in [("hot isostatic pressing (pores removed)", {"pores": 0.0}),
                      ("finer grinding (surface-flaw risk halved)", {"grinding": 0.5})]:
    p = predict(result, bar, tube, probabilities=[1e-3], changes=change, component_name="tube")
    row = p.what_if.loc[("tube", 1e-3)]
    print(f"{label}: stress at 1 in 1000 for the tube {row['before']:.0f} -> {row['after']:.0f} MPa, "
          f"gain {row['gain (%)']:.0f} % (90 % interval {row['gain low (%)']:.0f} to {row['gain high (%)']:.0f} %)")

baseline = predict(result, bar, tube, probabilities=[1e-3], component_name="tube")
print()
print(baseline)
ax = plots.size_effect_plot(result, bar, tube, component_name="tube")
ax.figure.savefig(out / "size_effect.png", dpi=120, bbox_inches="tight")
ax = plots.failure_share_plot(result, coupon=bar, component=tube, component_name="tube")
ax.figure.savefig(out / "failure_shares.png", dpi=120, bbox_inches="tight")
print(f"\nfigures in {out}")
