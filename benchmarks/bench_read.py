"""Reading speed of a large specimen table: `flawmix fit big.csv --json` against pandas'
own read_csv of the same file plus the fit, both as CPU seconds (user + sys) in this run.

Run:  python benchmarks/bench_read.py [ROWS] [FOLDER]     (default 1,000,000 rows, a temp folder)
Target (issue 9): the command within about 3x of read_csv + fit.
"""
from __future__ import annotations

import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]


def write_table(path: Path, rows: int, seed: int = 9) -> None:
    """An invented campaign: two populations, a tenth unidentified, a twentieth survivors."""
    rng = np.random.default_rng(seed)
    a, b = 400 * rng.weibull(8, rows), 430 * rng.weibull(14, rows)
    strength = np.minimum(a, b)
    origin = np.where(a < b, "pore", "machining damage").astype(object)
    origin[rng.random(rows) < 0.1] = "n.d."
    status = np.where(rng.random(rows) < 0.05, "survived", "failed")
    ids = np.char.add("S", np.arange(rows).astype(str))
    with open(path, "w", encoding="utf-8") as fh:
        fh.write("specimen,strength,origin,status\n")
        fh.write("\n".join(f"{i},{s:.4f},{o},{t}" for i, s, o, t in zip(ids, strength, origin, status)))
        fh.write("\n")


def child_cpu(cmd: list[str]) -> float:
    """CPU seconds (user + sys) of one child process."""
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    subprocess.run(cmd, check=True, stdout=subprocess.DEVNULL, cwd=ROOT,
                   env={**os.environ, "PYTHONPATH": str(ROOT)})
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    return (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)


REFERENCE = """
import sys, numpy as np, pandas as pd, flawmix as fm
frame = pd.read_csv(sys.argv[1])
failed = (frame["status"] != "survived").to_numpy()
origin = frame["origin"].to_numpy()
unknown = origin == "n.d."
candidates = np.stack([(origin == "machining damage") | unknown, (origin == "pore") | unknown], axis=1) & failed[:, None]
sp = fm.Specimens(strength=frame["strength"].to_numpy(float), failed=failed, candidates=candidates,
                  populations=(fm.Population("machining damage"), fm.Population("pore")),
                  unidentified=unknown & failed)
fm.fit(sp)
"""


def main() -> None:
    rows = int(sys.argv[1]) if len(sys.argv) > 1 else 1_000_000
    folder = Path(sys.argv[2]) if len(sys.argv) > 2 else Path(tempfile.mkdtemp())
    path = folder / f"big_{rows}.csv"
    if not path.exists():
        t = time.perf_counter()
        write_table(path, rows)
        print(f"wrote {path} ({path.stat().st_size / 1e6:.1f} MB) in {time.perf_counter() - t:.1f} s")
    ours = child_cpu([sys.executable, "-m", "flawmix", "fit", str(path), "--json"])
    ref = child_cpu([sys.executable, "-c", REFERENCE, str(path)])
    print(f"flawmix fit --json: {ours:.2f} CPU s; pandas read_csv + fit: {ref:.2f} CPU s; "
          f"ratio {ours / ref:.2f} (target <= 3)")


if __name__ == "__main__":
    main()
