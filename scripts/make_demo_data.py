"""Regenerate the invented demo data set shipped in flawmix/data/.

Scenario (invented for flawmix): a maker of silicon-carbide pump seal rings qualifies a new
firing. Forty four-point flexure bars (3 x 4 x 45 mm, spans 40/20 mm) are cut from the same
billets. Fractography finds pores (volume flaws) and grinding damage (surface flaws); some
origins could not be identified, two are undecided between the two, and the rig's load cell
stops at 520 MPa, so bars that reach it are recorded as survivors.
The true populations are: pores m = 5, σθ = 560 MPa; grinding m = 16, σθ = 480 MPa.

The component is the seal ring itself, press-fitted on a shaft: bore radius 20 mm, outer
radius 28 mm, height 8 mm, interference pressure 100 MPa. Its "stress analysis export" is
made here from the thick-walled-cylinder (Lamé) solution in plane stress and written as two
element tables (volume elements through the section, area elements on every face).

Run:  python scripts/make_demo_data.py   (deterministic; tests check the shipped files match)
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


def ring_elements(inner=20.0, outer=28.0, height=8.0, pressure=100.0, n_r=40, n_z=8) -> tuple[str, str]:
    """Volume and surface element tables of the press-fitted ring (stresses in MPa, mm)."""
    c = pressure * inner**2 / (outer**2 - inner**2)
    hoop = lambda r: c * (1 + outer**2 / r**2)
    radial = lambda r: c * (1 - outer**2 / r**2)
    edges = np.linspace(inner, outer, n_r + 1)
    mids = 0.5 * (edges[1:] + edges[:-1])
    dz = height / n_z
    vol = ["volume,stress_1,stress_2,stress_3"]
    for r, r0, r1 in zip(mids, edges[:-1], edges[1:]):
        ring_volume = np.pi * (r1**2 - r0**2) * dz
        for _ in range(n_z):
            vol.append(f"{ring_volume:.6f},{hoop(r):.4f},{radial(r):.4f},0")
    surf = ["area,stress_1,stress_2,stress_3"]
    for _ in range(n_z):   # bore and outer cylinder faces
        surf.append(f"{2 * np.pi * inner * dz:.6f},{hoop(inner):.4f},{radial(inner):.4f},0")
        surf.append(f"{2 * np.pi * outer * dz:.6f},{hoop(outer):.4f},0,0")
    for r, r0, r1 in zip(mids, edges[:-1], edges[1:]):   # top and bottom faces
        for _ in range(2):
            surf.append(f"{np.pi * (r1**2 - r0**2):.6f},{hoop(r):.4f},{radial(r):.4f},0")
    return "\n".join(vol) + "\n", "\n".join(surf) + "\n"


def outputs() -> dict[Path, str]:
    volume, surface = ring_elements()
    return {TARGET: make(), TARGET.parent / "seal_ring_volume.csv": volume,
            TARGET.parent / "seal_ring_surface.csv": surface}


if __name__ == "__main__":
    files = outputs()
    if "--check" in sys.argv:
        sys.exit(0 if all(p.read_text() == text for p, text in files.items()) else 1)
    for path, text in files.items():
        path.write_text(text)
        print(f"wrote {path}")
