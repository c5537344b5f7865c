"""Writes the invented flaw-size example (bars.csv) next to this file. Scenario (invented):
40 silicon-nitride bars, 3 × 4 mm, four-point flexure; fractography measured each origin's
size. Pores act as embedded penny cracks, machining damage as semi-elliptical surface cracks
in bending; K_Ic = 5.5 MPa·√m. A few records are planted: a mis-measured flaw, a machining
origin found in the interior, a swapped origin label, one slow-crack-growth origin.

Run:  python examples/flaw_sizes/make_data.py [OUTPUT.csv]     (default: bars.csv beside this file)
"""
import sys
from pathlib import Path

import numpy as np
import pandas as pd

from flawmix.cracks import CrackModel

rng = np.random.default_rng(2026_12_03)
n = 40
toughness = 5.5
pores = 690.0 * rng.weibull(7.0, n)
machining = 640.0 * rng.weibull(16.0, n)
strength = np.minimum(pores, machining)
is_pore = pores < machining
origin = np.where(is_pore, "pore", "machining damage").astype(object)
aspect = np.where(is_pore, 1.0, rng.uniform(0.45, 0.9, n))
models = {True: CrackModel("embedded"), False: CrackModel("surface", "bending", 1.0, thickness=3.0, half_width=2.0)}
size = np.empty(n)
for i in range(n):
    model = models[bool(is_pore[i])]
    size[i] = model.critical_size(toughness, strength[i], aspect[i]) * 1e3     # µm
size *= np.exp(rng.normal(0.0, 0.08, n))                                        # measuring scatter
location = np.where(is_pore, "interior", "surface").astype(object)
order = np.argsort(strength)
weakest_pore = order[is_pore[order]][0]
strongest_machining = order[~is_pore[order]][-1]
size[order[~is_pore[order]][3]] *= 2.6                  # mirror counted in: measured much too large
location[order[~is_pore[order]][8]] = "interior"          # machining damage "found in the interior"
origin[weakest_pore] = "machining damage"                 # swapped label: a large pore written as machining
size[order[is_pore[order]][5]] *= 0.45                    # slow crack growth: small initial flaw
width = np.where(is_pore, 2 * size, 2 * size / aspect)
frame = pd.DataFrame({"specimen": [f"SN-{i + 1:02d}" for i in range(n)], "strength": strength.round(1),
                      "origin": origin, "flaw_size (µm)": size.round(1), "flaw_width (µm)": width.round(1),
                      "location": location})
frame.loc[[4, 17, 30], ["origin", "flaw_size (µm)", "flaw_width (µm)", "location"]] = ["?", np.nan, np.nan, ""]
frame.to_csv(Path(sys.argv[1]) if len(sys.argv) > 1 else Path(__file__).with_name("bars.csv"), index=False)
