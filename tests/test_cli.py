"""The command line: output, JSON schema, errors as one line with exit status 2."""
import json
import subprocess
import sys

import pytest

from flawmix.cli import main


def run(*args):
    return subprocess.run([sys.executable, "-m", "flawmix", *args], capture_output=True, text=True)


def test_fit_json_schema(tmp_path):
    p = tmp_path / "bars.csv"
    p.write_text("strength,origin\n" + "\n".join(f"{400 + 7 * i % 50},{'pore' if i % 3 else 'chip'}" for i in range(20)) + "\n300,?\n")
    proc = run("fit", str(p), "--json")
    assert proc.returncode == 0, proc.stderr
    d = json.loads(proc.stdout)
    for key in ["method", "model", "confidence", "unit", "n_specimens", "n_failed", "n_survived",
                "n_unidentified", "log_likelihood", "aic", "bic", "populations"]:
        assert key in d
    assert d["n_specimens"] == 21 and d["n_unidentified"] == 1 and d["method"] == "mle"
    for pop in d["populations"]:
        for key in ["name", "kind", "n_failures", "modulus", "characteristic_strength",
                    "modulus_interval", "strength_interval", "modulus_unbiased"]:
            assert key in pop


@pytest.mark.parametrize("args, fragment", [
    (["fit", "missing.csv"], "missing.csv: no such file"),
    (["fit", "--bogus"], "unrecognized arguments: --bogus"),
    (["fit", "x.csv", "--unit", "bar"], "unknown stress unit"),
])
def test_errors_are_one_line_exit_2(args, fragment):
    proc = run(*args)
    assert proc.returncode == 2
    assert proc.stderr.startswith("error:") and fragment in proc.stderr
    assert proc.stderr.count("\n") == 1 and "Traceback" not in proc.stderr


def test_bad_row_error_from_cli(tmp_path):
    p = tmp_path / "bars.csv"
    p.write_text("strength,origin\n400,pore\n0,pore\n")
    proc = run("fit", str(p))
    assert proc.returncode == 2
    assert "bars.csv, line 3, column 'strength'" in proc.stderr


def test_group_option_and_warnings(tmp_path, capsys):
    p = tmp_path / "bars.csv"
    p.write_text("strength,origin\n300,pore\n320,void\n340,pore\n360,pore\n400,chip\n")
    rc = main(["fit", str(p), "--group", "pores:volume=pore,void", "--group", "chips:edge=chip"])
    out, err = capsys.readouterr()
    assert rc == 0
    assert "pores" in out and "volume" in out
    assert "warning: population 'chips' has one failure, at the highest stress" in err


def test_demo_writes_its_report_and_refuses_to_overwrite(tmp_path):
    out = tmp_path / "demo"
    proc = run("demo", "--out", str(out))
    assert proc.returncode == 0, proc.stderr
    assert "pores" in proc.stdout and "grinding" in proc.stdout
    for name in ("report.html", "results.json", "figures/probability_plot.png", "figures/probability_plot.svg",
                 "tables/estimates.csv"):
        assert (out / name).exists()
    again = run("demo", "--out", str(out))
    assert again.returncode == 2 and "--force" in again.stderr


def test_output_into_a_closed_pipe_ends_quietly():
    """`flawmix fit ... | head -1`: the reader leaves early; no "internal error", status 0."""
    from flawmix.cli import demo_paths

    table, _ = demo_paths()
    reader = subprocess.Popen([sys.executable, "-c", "import sys; sys.stdin.readline()"], stdin=subprocess.PIPE)
    writer = subprocess.run([sys.executable, "-m", "flawmix", "fit", str(table), "--quiet"], stdout=reader.stdin,
                            stderr=subprocess.PIPE, text=True)
    reader.stdin.close()
    reader.wait()
    assert writer.returncode == 0, writer.stderr
    assert "internal error" not in writer.stderr and "Traceback" not in writer.stderr
