"""Walkthrough 1: a failure analyst explains a kinked probability plot.

Scenario (invented): 36 silicon dies, diced from one wafer lot, broken in four-point
bending. Fractography finds saw-edge chips and surface scratches, but a third of the
origins are lost in the debris. The all-strengths probability plot bends: is it one
population or two, and what are they?

Run:  python examples/kinked_plot_unknown_origins.py [OUTPUT_FOLDER]
"""
import sys
from pathlib import Path

import matplotlib

matplotlib.use("Agg")
import numpy as np
import pandas as pd

import flawmix as fm
from flawmix import plots
from flawmix.compare import compare

out = Path(sys.argv[1] if len(sys.argv) > 1 else "example-output") / "kinked-plot"
out.mkdir(parents=True, exist_ok=True)

# --- the batch (simulated here so the walkthrough is self-contained) ---------------------
rng = np.random.default_rng(7)
n = 36
chips = 420 * rng.weibull(4.0, n)        # edge chipping: wide scatter
scratches = 520 * rng.weibull(14.0, n)   # surface scratches: narrow scatter, higher
strength = np.minimum(chips, scratches).round(1)
origin = np.where(chips < scratches, "edge chip", "scratch").astype(object)
origin[rng.random(n) < 0.33] = "?"        # a third of the origins not found
table = pd.DataFrame({"specimen": [f"D{i + 1:02d}" for i in range(n)], "strength": strength, "origin": origin})

groups = {"chipping": {"kind": "edge", "labels": ["edge chip"]},
          "scratches": {"kind": "surface", "labels": ["scratch"]}}
specimens = fm.read_specimens(table, groups)
print(f"{specimens.n_specimens} dies, {specimens.n_unidentified} origins unidentified\n")

# --- one fit per population, unidentified origins shared by the likelihood ---------------
result = fm.fit(specimens)
print(result)
print()

# --- the picture: each population at its own adjusted ranks, and all together -----------
ax = plots.probability_plot(result)
ax.figure.savefig(out / "probability_plot.png", dpi=120, bbox_inches="tight")
ax = plots.probability_plot(result, view="all")
ax.figure.savefig(out / "probability_plot_all.png", dpi=120, bbox_inches="tight")

# --- one population or two? -----------------------------------------------------------------
comparison = compare(specimens, bayes=True, bootstrap=99, seed=1)   # PSIS-LOO copes with mixture degeneracy
print(comparison)
print()

# --- where does the kink sit, and which flaw causes failures at each stress? ---------------
shares = result.failure_shares([250, 350, 450, 500])
print("share of failures by population at each stress:")
print(shares.round(3))
ax = plots.failure_share_plot(result)
ax.figure.savefig(out / "failure_shares.png", dpi=120, bbox_inches="tight")
print(f"\nfigures in {out}")
