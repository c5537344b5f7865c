"""Start-up: commands that need no sampler or figures import none of emcee, arviz, matplotlib.

Each command runs in a fresh interpreter (a subprocess), since this test session itself has
imported everything; the check reads that interpreter's ``sys.modules``.
"""
import json
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "flawmix" / "data" / "seal_rings.csv"
HEAVY = ("arviz", "emcee", "matplotlib", "xarray")

_PROBE = """
import contextlib, io, json, sys
from flawmix.cli import main
with contextlib.redirect_stdout(io.StringIO()):
    try:
        main(json.loads(sys.argv[1]))
    except SystemExit:
        pass
print(json.dumps(sorted(m for m in sys.modules if m.split('.')[0] in {heavy})))
""".replace("{heavy}", repr(set(HEAVY + ("pandas", "scipy"))))


def _imported(argv) -> set[str]:
    out = subprocess.run([sys.executable, "-c", _PROBE, json.dumps([str(a) for a in argv])], cwd=ROOT,
                         capture_output=True, text=True, check=True, timeout=120)
    return {m.split(".")[0] for m in json.loads(out.stdout.strip().splitlines()[-1])}


LIGHT = set(HEAVY)                        # an MLE fit or an effective size needs no sampler or figures
BARE = set(HEAVY) | {"pandas", "scipy"}   # help text needs nothing numerical


@pytest.mark.parametrize("argv, absent", [
    (["fit", DEMO, "--json"], LIGHT),
    (["size", "flexure-4pt", "--width", "4", "--depth", "3", "--outer-span", "40", "--inner-span", "20",
      "--modulus", "10", "--json"], LIGHT),
    (["plan", "--help"], BARE),
    (["lots", "--help"], BARE),
    (["--help"], BARE),
    # a Bayesian fit samples with emcee, but its diagnostics and PSIS-LOO are numpy: no arviz
    (["fit", DEMO, "--method", "bayes", "--json"], {"arviz", "matplotlib", "xarray"}),
], ids=["fit", "size", "plan-help", "lots-help", "help", "fit-bayes"])
def test_command_imports_only_what_it_needs(argv, absent):
    assert not _imported(argv) & absent


def test_mle_fit_needs_no_scipy_stats_optimize_or_interpolate():
    """Those three cost about 0.6 CPU s to import, more than the fit of a lab table itself; an
    MLE fit (its intervals, origin checks and bottom line) needs scipy.special only."""
    out = subprocess.run([sys.executable, "-c", _PROBE, json.dumps(["fit", str(DEMO), "--json"])], cwd=ROOT,
                         capture_output=True, text=True, check=True, timeout=120)
    loaded = {".".join(m.split(".")[:2]) for m in json.loads(out.stdout.strip().splitlines()[-1])}
    assert "scipy.special" in loaded   # the probe sees scipy's modules at all
    assert not loaded & {"scipy.stats", "scipy.optimize", "scipy.interpolate", "scipy.integrate"}


def test_package_names_load_on_first_use():
    code = ("import sys, flawmix as fm; light = 'pandas' not in sys.modules; "
            f"r = fm.fit(fm.read_specimens({str(DEMO)!r})); "
            "print(light, type(r).__name__, fm.fit.__module__, fm.FitResult.__name__, callable(fm.compare.compare))")
    out = subprocess.run([sys.executable, "-c", code], cwd=ROOT, capture_output=True, text=True, check=True,
                         timeout=120)
    assert out.stdout.split() == ["True", "FitResult", "flawmix.fit", "FitResult", "True"]
