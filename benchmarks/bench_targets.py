"""Every speed target of issue 11 as a ratio against a reference timed in the same run.

Run:  python benchmarks/bench_targets.py [--quick] [--only NAME ...]
In-process targets interleave ours and the reference (A B A B ...) and report the ratio of
median CPU times, so a busy machine slows both alike. Whole-process targets are CPU seconds (user +
sys of the child, from os.wait4 accounting) against the import floor
``python -c "import numpy, scipy.stats, pandas"`` measured in the same run.
"""
from __future__ import annotations

import argparse
import os
import statistics
import subprocess
import sys
import tempfile
import time
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
from scipy import optimize, stats

ROOT = Path(__file__).resolve().parents[1]
# four concurrent populations whose mixture maxima are degenerate (see tests/data/README.md)
FOUR = ROOT / "tests" / "data" / "four-populations.csv"
sys.path.insert(0, str(ROOT))
import flawmix as fm  # noqa: E402

FLOOR = [sys.executable, "-c", "import numpy, scipy.stats, pandas"]


def interleaved(ours, reference, repeat):
    """(median CPU seconds of ours, of the reference), run alternately after one warm-up each.
    CPU time of this process, which a busy machine disturbs far less than wall time."""
    ours(), reference()
    a, b = [], []
    for _ in range(repeat):
        t = time.process_time(); ours(); a.append(time.process_time() - t)
        t = time.process_time(); reference(); b.append(time.process_time() - t)
    return statistics.median(a), statistics.median(b)


def process_cpu(command, runs):
    """Median CPU seconds (user + sys) of a whole process, over ``runs`` runs."""
    times = []
    for _ in range(runs):
        proc = subprocess.Popen(command, cwd=ROOT, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        _, status, usage = os.wait4(proc.pid, 0)
        if os.waitstatus_to_exitcode(status) not in (0,):
            raise RuntimeError(f"{' '.join(map(str, command))} exited with {os.waitstatus_to_exitcode(status)}")
        times.append(usage.ru_utime + usage.ru_stime)
    return statistics.median(times)


def campaign(rng, n, unknown, pops=((6.0, 400.0), (15.0, 420.0))):
    draws = np.stack([s * rng.weibull(m, n) for m, s in pops], axis=1)
    origin = np.array([f"p{j}" for j in draws.argmin(axis=1)], dtype=object)
    origin[rng.random(n) < unknown] = "?"
    return pd.DataFrame({"strength": draws.min(axis=1), "origin": origin})


def target_labelled(quick):
    """Default fm.fit, N = 30, two labelled populations, against scipy's two censored fits."""
    rng = np.random.default_rng(2026)
    frame = campaign(rng, 30, 0.0)
    sp = fm.read_specimens(frame)
    s = sp.strength

    def scipy_fits():
        for j in range(2):
            own = sp.candidates[:, j] & sp.failed
            stats.weibull_min.fit(stats.CensoredData(uncensored=s[own], right=s[~own]), floc=0)
    ours, ref = interleaved(lambda: fm.fit(sp), scipy_fits, 15 if quick else 60)
    profile, ref2 = interleaved(lambda: fm.fit(sp, intervals="profile"), scipy_fits, 15 if quick else 60)
    print_row(("fm.fit intervals='profile' (chi-square cut-off), N=30 labelled", profile,
               "scipy weibull_min.fit on CensoredData x2", ref2, ref2 / profile, 100))
    return ("fm.fit default (calibrated profile), N=30 labelled", ours, "scipy weibull_min.fit on CensoredData x2",
            ref, ref / ours, 100)


def _generic_nll(sp):
    s, F, C = sp.strength, sp.failed, sp.candidates

    def nll(t):   # the same likelihood written with scipy.stats, for a generic optimiser
        m, sc = np.exp(t[:2]), np.exp(t[2:])
        logS = np.stack([stats.weibull_min.logsf(s, m[j], scale=sc[j]) for j in range(2)], 1)
        logh = np.stack([stats.weibull_min.logpdf(s, m[j], scale=sc[j]) for j in range(2)], 1) - logS
        return -(np.where(F, np.log(np.where(C, np.exp(logh), 0).sum(1)), 0) + logS.sum(1)).sum()
    return nll


def target_unidentified(quick):
    """Default fm.fit, N = 40, a quarter unidentified, against a 12-start generic optimiser."""
    rng = np.random.default_rng(2027)
    sp = fm.read_specimens(campaign(rng, 40, 0.25))
    nll = _generic_nll(sp)

    def generic():
        x0s = np.log(np.column_stack([np.linspace(3, 25, 12), np.linspace(25, 3, 12),
                                      np.full(12, 400.0), np.full(12, 420.0)]))
        for x0 in x0s:
            r = optimize.minimize(nll, x0, method="Nelder-Mead", options={"maxiter": 4000, "xatol": 1e-8, "fatol": 1e-10})
            optimize.minimize(nll, r.x, method="BFGS")

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ours, ref = interleaved(lambda: fm.fit(sp), generic, 3 if quick else 7)
        profile, ref2 = interleaved(lambda: fm.fit(sp, intervals="profile"), generic, 3 if quick else 7)
    print_row(("fm.fit intervals='profile', N=40, 25% unidentified", profile, "12-start Nelder-Mead + BFGS",
               ref2, ref2 / profile, 60))
    return ("fm.fit default (calibrated profile), N=40, 25% unidentified", ours, "12-start Nelder-Mead + BFGS",
            ref, ref / ours, 60)


def write_table(folder, n, unknown, seed):
    path = Path(folder) / f"campaign_{n}_{seed}.csv"
    campaign(np.random.default_rng(seed), n, unknown).to_csv(path, index=False)
    return path


def many_labels_table(folder):
    rng = np.random.default_rng(7)
    labels = np.repeat([f"L{i:03d}" for i in range(200)], 3)
    path = Path(folder) / "many_labels.csv"
    pd.DataFrame({"strength": 400 * rng.weibull(8, labels.size), "origin": labels}).to_csv(path, index=False)
    return path


def whole_process_targets(quick, only):
    """CPU seconds of CLI commands against the import floor, in the same run."""
    runs = 1 if quick else 3
    rows = []
    with tempfile.TemporaryDirectory() as folder:
        small = write_table(folder, 30, 0.0, 1)
        forty = write_table(folder, 40, 0.25, 2)
        big = write_table(folder, 150, 0.2, 3)
        py = [sys.executable, "-m", "flawmix"]
        commands = [
            ("fit small.csv --json", py + ["fit", str(small), "--json"], 1.6),
            ("fit --method bayes, 2 pops, N=40", py + ["fit", str(forty), "--method", "bayes", "--json"], 10),
            ("compare --json, N=150", py + ["compare", str(big), "--json"], 20),
            ("compare --json, 4 populations, N=55", py + ["compare", str(FOUR), "--json"], 20),
            ("demo", py + ["demo", "--out", str(Path(folder) / "demo"), "--force"], 20),
            ("fit --json, 200 populations x 3 failures", py + ["fit", str(many_labels_table(folder)), "--json"], None),
            # defaults (Bayes included), the demo table without its study file: each label a population
            ("report, demo table, no study file", py + ["report", str(ROOT / "flawmix" / "data" / "seal_rings.csv"),
                                                        "--out", str(Path(folder) / "report")], 20),
        ]
        floor = process_cpu(FLOOR, max(3, runs))
        for name, command, target in commands:
            if only and not any(word in name for word in only):
                continue
            cpu = process_cpu(command, runs if not name.startswith(("demo", "compare", "report")) else 1)
            if target is None:   # an absolute target: an answer within 10 CPU s
                rows.append((name + " (CPU s)", cpu, "target", 10.0, 10.0 / cpu, 1))
            else:
                rows.append((name, cpu, "import numpy, scipy.stats, pandas", floor, cpu / floor, target))
    return rows


def target_many_populations(quick):
    """200 populations of 3 failures each: an answer, with its warnings (target 10 s)."""
    rng = np.random.default_rng(7)
    labels = np.repeat([f"L{i:03d}" for i in range(200)], 3)
    frame = pd.DataFrame({"strength": 400 * rng.weibull(8, labels.size), "origin": labels})
    sp = fm.read_specimens(frame)
    start = time.process_time()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        fm.fit(sp)
    cpu = time.process_time() - start
    return ("fm.fit, 200 populations x 3 failures (CPU s)", cpu, "target", 10.0, 10.0 / cpu, 1)


def target_complete(quick):
    """One complete population, N up to 10^4: the first fit in a fresh process, its modules
    already imported (the import floor is measured on its own), target 0.3 CPU s."""
    code = ("import sys, time, numpy as np, pandas, flawmix as fm, flawmix.mle; n = int(sys.argv[1]); "
            "x = 400 * np.random.default_rng(n).weibull(9.0, n); t = time.process_time(); r = fm.fit(x); "
            "assert r.populations[0].interval_method == 'pivotal', r.populations[0].interval_method; "
            "print(time.process_time() - t)")
    sizes = (7, 300, 1234, 10_000) if quick else (2, 7, 31, 300, 1234, 4321, 9999, 10_000)
    worst = max(float(subprocess.run([sys.executable, "-c", code, str(n)], cwd=ROOT, capture_output=True, text=True,
                                     check=True).stdout) for n in sizes)
    return (f"fm.fit, one complete population, N in {sizes}, first fit in a fresh process (CPU s, worst)",
            worst, "target", 0.3, 0.3 / worst, 1)


def target_million(quick):
    """10^6 specimens, 3 populations, 10 % unidentified: fit with intervals (target 3 s)."""
    # the same scenario as bench_fit.bench_large, in a fresh process
    sys.path.insert(0, str(ROOT / "benchmarks"))
    from bench_fit import bench_large

    d = bench_large()
    wall = d["1e6 specimens, 3 populations, 10% unidentified, fit incl. intervals (s)"]
    seconds = d["the same in CPU seconds"]
    print(f"  (the same fit took {wall:.3g} s of wall time, peak memory {d['peak memory of the process (MB)']:.0f} MB)")
    return ("fm.fit 1e6 specimens, 3 pops, with intervals (CPU s)", seconds, "target", 3.0, 3.0 / seconds, 1)


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="fewer repeats")
    parser.add_argument("--only", nargs="*", default=[], help="run targets whose name contains a word")
    args = parser.parse_args()
    rows = []
    for fn in (target_labelled, target_unidentified, target_complete, target_many_populations, target_million):
        if args.only and not any(w in fn.__name__ for w in args.only):
            continue
        rows.append(fn(args.quick))
        print_row(rows[-1])
    if not args.only or any(w in ("process", "fit", "bayes", "compare", "demo", "report") for w in args.only):
        for row in whole_process_targets(args.quick, [w for w in args.only if w != "process"]):
            print_row(row)


def print_row(row):
    name, ours, ref_name, ref, ratio, target = row
    if ref_name == "target":
        print(f"{name}: {ours:.3g}  (target {ref:.3g}; {'met' if ours <= ref else 'NOT met'})")
    elif ref_name.startswith("import"):
        print(f"{name}: {ours:.3g} CPU s = {ratio:.2f}x the floor {ref:.3g} s (target <= {target}x)")
    else:
        print(f"{name}: {ours * 1e3:.3g} ms; {ref_name}: {ref * 1e3:.3g} ms; ratio {ratio:.0f}x (target >= {target}x)")


if __name__ == "__main__":
    main()
