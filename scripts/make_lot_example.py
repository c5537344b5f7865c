"""Write the invented two-lot example (examples/lots/): silicon-nitride bars ground with the
old coarse wheel and with a finer one. Truth (invented): the finer wheel raises the grinding
population's characteristic strength by 12 %; pores and inclusions are unchanged.

Run:  python scripts/make_lot_example.py
"""
from pathlib import Path

import numpy as np
import pandas as pd

OUT = Path(__file__).resolve().parents[1] / "examples" / "lots"
SEED = 20261203
# population -> (origin label, modulus, characteristic strength in MPa per lot)
TRUTH = {"grinding": ("grinding damage", 14.0, {"coarse wheel": 720.0, "fine wheel": 806.0}),
         "pores": ("pore", 7.0, {"coarse wheel": 860.0, "fine wheel": 860.0}),
         "inclusions": ("inclusion", 6.0, {"coarse wheel": 980.0, "fine wheel": 980.0})}
PER_LOT = 40


def main() -> None:
    rng = np.random.default_rng(SEED)
    rows = []
    for lot in ("coarse wheel", "fine wheel"):
        labels = [t[0] for t in TRUTH.values()]
        draws = np.stack([t[2][lot] * rng.weibull(t[1], PER_LOT) for t in TRUTH.values()], axis=1)
        strength = draws.min(axis=1)
        origin = np.array(labels, dtype=object)[draws.argmin(axis=1)]
        hidden = rng.random(PER_LOT) < 0.08            # fracture surface lost or unreadable
        origin[hidden] = "n.d."
        pores_or_inclusion = (~hidden) & np.isin(origin, ["pore", "inclusion"]) & (rng.random(PER_LOT) < 0.1)
        origin[pores_or_inclusion] = "pore or inclusion"
        prefix = "C" if lot == "coarse wheel" else "F"
        for i in range(PER_LOT):
            rows.append({"specimen": f"{prefix}{i + 1:02d}", "lot": lot, "strength (MPa)": round(float(strength[i]), 1),
                         "origin": origin[i]})
    OUT.mkdir(parents=True, exist_ok=True)
    pd.DataFrame(rows).to_csv(OUT / "wheel_change.csv", index=False)


if __name__ == "__main__":
    main()
