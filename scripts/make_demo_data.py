"""Regenerate the invented demo data set shipped in flawmix/data/.

Scenario (invented for flawmix): a maker of silicon-carbide pump seal rings qualifies a new
firing. Forty four-point flexure bars (3 x 4 x 45 mm, spans 40/20 mm) are cut from the same
billets. Fractography finds pores (volume flaws) and grinding damage (surface flaws); some
origins could not be identified, two are undecided between the two, and the rig's load cell
stops at 520 MPa, so bars that reach it are recorded as survivors.
The true populations are: pores m = 5, σθ = 560 MPa; grinding m = 16, σθ = 480 MPa.

Run:  python scripts/make_demo_data.py   (deterministic; tests check the shipped file matches)
"""
from __future__ import annotations

import sys
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
TARGET = HERE.parent / "flawmix" / "data" / "seal_rings.csv"
SEED = 6
RIG_LIMIT = 520.0


def make(seed: int = SEED) -> str:
    rng = np.random.default_rng(seed)
    n = 40
    pores = 560.0 * rng.weibull(5.0, n)
    grinding = 480.0 * rng.weibull(16.0, n)
    pore_words = ["pore", "pore", "Pore", "porous region", "pore "]
    grind_words = ["grinding damage", "grinding damage", "machining damage", "Grinding  damage"]
    lines = ["specimen,strength,origin,status,operator"]
    for i in range(n):
        s = min(pores[i], grinding[i])
        operator = ["AK", "JT", "MR"][i % 3]
        if s >= RIG_LIMIT:
            lines.append(f"SR-{i + 1:02d},{RIG_LIMIT:.1f},,survived,{operator}")
            continue
        u = rng.random()
        if u < 0.12:
            origin = rng.choice(["?", "unknown", ""])
        elif u < 0.17:
            origin = "pore|grinding damage"
        elif pores[i] < grinding[i]:
            origin = rng.choice(pore_words)
        else:
            origin = rng.choice(grind_words)
        lines.append(f"SR-{i + 1:02d},{s:.1f},{origin},failed,{operator}")
    return "\n".join(lines) + "\n"


if __name__ == "__main__":
    text = make()
    if "--check" in sys.argv:
        sys.exit(0 if TARGET.read_text() == text else 1)
    TARGET.write_text(text)
    print(f"wrote {TARGET}")
