"""Outputs of the command line: an interrupted or failing report leaves no partial folder,
impossible --out/--plot places are one clear error before any long work, existing outputs are
never replaced without --force, and no command modifies an input file."""
from __future__ import annotations

import hashlib
import io
import os
import signal
import subprocess
import sys
import time
from contextlib import redirect_stderr, redirect_stdout
from pathlib import Path

import pytest

import flawmix.report as report
from flawmix.cli import demo_paths, main
from flawmix.errors import FlawmixError

CORPUS = Path(__file__).parent / "corpus"
TABLE = CORPUS / "layout" / "comma.csv"
ROOT = Path(__file__).parent.parent


def _main(argv) -> tuple[int, str]:
    errors = io.StringIO()
    with redirect_stdout(io.StringIO()), redirect_stderr(errors):
        code = main(argv)
    return code, errors.getvalue()


def _leftovers(folder: Path) -> list[str]:
    return sorted(p.name for p in folder.iterdir())


# ---- no partial report ------------------------------------------------------------------

def test_report_interrupted_midway_by_sigint_leaves_nothing(tmp_path):
    """SIGINT once the report's temporary folder exists (figures being written): exit 130, one
    line, no traceback, and neither the folder nor its temporary twin remains."""
    csv, toml = demo_paths()
    out = tmp_path / "report"
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    process = subprocess.Popen([sys.executable, "-m", "flawmix", "report", str(csv), "--study", str(toml), "--out",
                                str(out), "--no-bayes", "--boundary-replicates", "0", "--quiet"],
                               stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env, cwd=tmp_path)
    deadline = time.monotonic() + 120
    seen = False
    while time.monotonic() < deadline and process.poll() is None:
        if any(p.name.startswith(".report.") for p in tmp_path.iterdir()):
            seen = True
            process.send_signal(signal.SIGINT)
            break
        time.sleep(0.005)
    _, errors = process.communicate(timeout=120)
    assert seen, f"the report finished before its temporary folder was seen (exit {process.returncode})"
    assert process.returncode == 130, errors
    assert "Traceback" not in errors and errors.strip().splitlines()[-1] == "error: interrupted"
    assert _leftovers(tmp_path) == []


@pytest.mark.parametrize("fault, message", [
    (FlawmixError("a section refused"), "a section refused"),
    (OSError(28, "No space left on device"), "writing the report failed (No space left on device); nothing was written"),
])
def test_report_error_midway_leaves_nothing(tmp_path, monkeypatch, fault, message):
    def broken(a, figs, tables):
        raise fault

    monkeypatch.setattr(report, "SECTIONS", [*report.SECTIONS[:3], broken, *report.SECTIONS[3:]])
    out = tmp_path / "report"
    code, errors = _main(["report", str(TABLE), "--out", str(out), "--no-compare", "--quiet"])
    assert code == 2 and errors.strip().splitlines() == [f"error: {message}" if isinstance(fault, FlawmixError)
                                                         else f"error: {out}: {message}; check free space and "
                                                              "permissions"]
    assert _leftovers(tmp_path) == []


def test_failed_replacement_keeps_the_earlier_report(tmp_path, monkeypatch):
    out = tmp_path / "report"
    assert _main(["report", str(TABLE), "--out", str(out), "--no-compare", "--quiet"])[0] == 0
    before = (out / "results.json").read_bytes()

    def broken(a, figs, tables):
        raise FlawmixError("a section refused")

    monkeypatch.setattr(report, "SECTIONS", [*report.SECTIONS[:2], broken])
    code, _ = _main(["report", str(TABLE), "--out", str(out), "--no-compare", "--force", "--quiet", "--seed", "3"])
    assert code == 2 and (out / "results.json").read_bytes() == before
    assert _leftovers(tmp_path) == ["report"]


# ---- impossible places, before the long part ----------------------------------------------

def _places(tmp_path: Path) -> dict[str, tuple[str, str]]:
    plain = tmp_path / "plain.txt"
    plain.write_text("not a folder")
    return {
        "below a plain file": (str(plain / "sub"), f"'{plain}' is a file, not a folder"),
        "unwritable (/proc)": ("/proc/flawmix-report", "cannot create a folder in '/proc'"),
        "an existing file": (str(plain), "already exists; choose another --out folder or add --force"),
    }


@pytest.mark.parametrize("place", ["below a plain file", "unwritable (/proc)", "an existing file"])
def test_report_out_in_an_impossible_place_is_one_error(tmp_path, monkeypatch, place):
    target, fragment = _places(tmp_path)[place]
    analysed = []
    monkeypatch.setattr(report, "analyse", lambda *a, **k: analysed.append(1))
    code, errors = _main(["report", str(TABLE), "--out", target, "--quiet"])
    lines = errors.strip().splitlines()
    assert code == 2 and len(lines) == 1 and lines[0].startswith("error: ") and fragment in lines[0], errors
    assert analysed == []                     # refused before the analysis
    assert (tmp_path / "plain.txt").read_text() == "not a folder"


@pytest.mark.skipif(os.geteuid() == 0, reason="root may write into a read-only folder; /proc covers it")
def test_report_out_in_a_read_only_folder(tmp_path):
    locked = tmp_path / "locked"
    locked.mkdir(mode=0o500)
    code, errors = _main(["report", str(TABLE), "--out", str(locked / "r"), "--quiet"])
    assert code == 2 and "choose a writable --out" in errors


def test_report_out_error_from_a_subprocess_has_exit_2_and_no_traceback(tmp_path):
    plain = tmp_path / "plain.txt"
    plain.write_text("x")
    run = subprocess.run([sys.executable, "-m", "flawmix", "report", str(TABLE), "--out", str(plain / "r")],
                         capture_output=True, text=True, env={**os.environ, "PYTHONPATH": str(ROOT)})
    assert run.returncode == 2 and run.stdout == ""
    assert run.stderr.strip().splitlines() == [f"error: {plain / 'r'}: '{plain}' is a file, not a folder; "
                                               "choose another --out"]


PLAN = ["plan", "--population", "pores:6:400", "--sizes", "10", "--replicates", "20", "--quiet"]


@pytest.mark.parametrize("name, fragment", [
    ("plain.txt/plan.png", "is a file, not a folder"),
    ("missing/plan.png", "the folder"),
    ("", "is a folder; give a file name for --plot"),
    ("plain.txt", "cannot write a '.txt' file; end the --plot name with one of"),
    ("plan", "cannot write a 'file without an ending' file"),
    ("plan.png.bak", "cannot write a '.bak' file"),
])
def test_plan_plot_in_an_impossible_place_is_one_error(tmp_path, monkeypatch, name, fragment):
    (tmp_path / "plain.txt").write_text("mine")
    import flawmix.plan as plan

    monkeypatch.setattr(plan, "plan", lambda *a, **k: pytest.fail("simulated before checking --plot"))
    code, errors = _main([*PLAN, "--plot", str(tmp_path / name) if name else str(tmp_path)])
    assert code == 2 and len(errors.strip().splitlines()) == 1 and fragment in errors, errors
    assert (tmp_path / "plain.txt").read_text() == "mine"


def test_plan_plot_replaced_only_with_force_and_never_half_written(tmp_path):
    target = tmp_path / "plan.png"
    assert _main([*PLAN, "--plot", str(target)])[0] == 0
    first = target.read_bytes()
    assert first.startswith(b"\x89PNG")
    code, errors = _main([*PLAN, "--plot", str(target)])
    assert code == 2 and "already exists; choose another --plot file or add --force" in errors
    assert target.read_bytes() == first
    assert _main([*PLAN, "--plot", str(target), "--force", "--seed", "4"])[0] == 0
    assert _leftovers(tmp_path) == ["plan.png"]          # no temporary file left beside it


# ---- inputs are never modified --------------------------------------------------------------

def _fingerprints(paths) -> dict[str, tuple[str, int]]:
    return {str(p): (hashlib.sha256(p.read_bytes()).hexdigest(), p.stat().st_mtime_ns) for p in paths}


PLAN_OPTIONS = ["--sizes", "10", "--replicates", "10"]
COMPARED = ["layout/semicolon_decimal_comma.csv", "encoding/utf16_le_bom.csv", "excel/two_sheets.xlsx"]


def _run(command: str, target: list[str], *options: str) -> int:
    return _main([command, *target, "--quiet", *options])[0]


def test_no_command_modifies_any_corpus_input(tmp_path):
    """fit on every table and study file of the corpus, compare, plan and report on every one
    that fails to read and on one of each layout, predict on the demo; every file
    hashed (and its modification time taken) before and after."""
    inputs = sorted(p for p in CORPUS.rglob("*") if p.is_file())
    before = _fingerprints(inputs)
    tables = [p for p in inputs if p.suffix in (".csv", ".tsv", ".txt", ".xlsx")
              and p.name != "two_hundred_labels.csv"]          # 200 populations: a long fit, read elsewhere
    targets = [[str(t)] for t in tables] + [["--study", str(p)] for p in inputs if p.suffix == ".toml"]
    for target in [[str(CORPUS / name)] for name in COMPARED]:
        sheet = ["--sheet", "Bars"] if target[0].endswith(".xlsx") else []
        assert _run("compare", target, "--no-bayes", "--boundary-replicates", "0", *sheet) == 0
        assert _run("plan", target, *PLAN_OPTIONS, *sheet) == 0
    for target in targets:
        if _run("fit", target, "--intervals", "none", "--json") == 2:     # tables that fail to read: every command
            assert _run("compare", target, "--no-bayes", "--boundary-replicates", "0") == 2
            assert _run("plan", target, *PLAN_OPTIONS) == 2
            assert _run("report", target, "--out", str(tmp_path / "never")) == 2
    for i, name in enumerate(["layout/tab.tsv"]):
        assert _run("report", [str(CORPUS / name)], "--out", str(tmp_path / f"r{i}"), "--no-compare") == 0
    csv, toml = demo_paths()
    demo_inputs = [Path(csv), Path(toml), *sorted(Path(toml).parent.glob("seal_ring_*.csv"))]
    demo_before = _fingerprints(demo_inputs)
    assert _run("predict", [str(csv), "--study", str(toml)], "--bootstrap", "20") == 0
    assert _fingerprints(demo_inputs) == demo_before
    assert _fingerprints(inputs) == before
    assert not (tmp_path / "never").exists()


def test_output_into_a_closed_pipe_stops_quietly():
    """`flawmix fit ... | head -1`: the reader goes away; no internal error, no traceback."""
    process = subprocess.Popen([sys.executable, "-m", "flawmix", "fit", str(TABLE), "--intervals", "none", "--quiet"],
                               stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                               env={**os.environ, "PYTHONPATH": str(ROOT)})
    process.stdout.close()
    errors = process.stderr.read()
    assert process.wait(timeout=60) == 0
    assert "internal error" not in errors and "Traceback" not in errors and "Exception ignored" not in errors


def test_force_never_replaces_a_folder_that_is_not_a_report(tmp_path, monkeypatch):
    folder = tmp_path / "results"
    folder.mkdir()
    (folder / "thesis.tex").write_text("years of work")
    monkeypatch.setattr(report, "analyse", lambda *a, **k: pytest.fail("analysed before refusing"))
    for extra in ([], ["--force"]):
        code, errors = _main(["report", str(TABLE), "--out", str(folder), "--quiet", *extra])
        assert code == 2 and len(errors.strip().splitlines()) == 1
    assert "not a flawmix report folder" in errors
    assert _leftovers(folder) == ["thesis.tex"] and (folder / "thesis.tex").read_text() == "years of work"
