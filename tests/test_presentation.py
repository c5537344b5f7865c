"""What reaches the reader: the bottom line, number formats, progress, help texts, warnings
once, reprs and the README's Python snippet."""
from __future__ import annotations

import io
import re
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import flawmix as fm
from flawmix import formatting as fmt
from flawmix import progress
from flawmix.bottomline import analyse, bottom_line, dominance_changes, risk_shares
from flawmix.cli import build_parser, demo_paths, main
from flawmix.scenarios import alone_and_together, describe, what_if_table
from flawmix.study import read_study

ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="module")
def demo():
    csv, toml = demo_paths()
    study = read_study(toml)
    sp = fm.read_specimens(csv, study.populations, study.unit)
    return study, sp, fm.fit(sp)


def test_number_rules():
    assert [fmt.stress(x) for x in (458.93, 73.524, 1.62811, 12345.6)] == ["458.9", "73.5", "1.628", "12346"]
    assert [fmt.modulus(x) for x in (6.0815, 15.67)] == ["6.08", "15.7"]
    assert [fmt.probability(x) for x in (6.05e-6, 0.01647, 0.241)] == ["6.0e-06", "0.0165", "0.241"]
    assert fmt.percent(83.4402) == "83.4" and fmt.percent(-1e-9) == "0.0"
    assert fmt.p_value(0.000771) == "7.7e-04" and fmt.level(0.9) == "90\u00a0% interval"


def test_dominance_changes_against_a_brute_force_grid():
    # three populations; the population with the largest (σ/σθ)^m, checked at 20 000 stresses
    m, s, names = np.array([5.0, 14.0, 9.0]), np.array([640.0, 520.0, 560.0]), ["a", "b", "c"]
    grid = np.geomspace(100, 900, 20000)
    top = np.argmax(m * np.log(grid[:, None] / s), axis=1)
    switches = grid[1:][top[1:] != top[:-1]]
    changes = dominance_changes(m, s, names, 100, 900)
    assert len(changes) == len(switches)
    for c, x in zip(changes, switches):
        assert abs(c["stress"] / x - 1) < 1e-3
    shares = risk_shares(m, s, names, 300.0)
    assert abs(sum(shares.values()) - 1) < 1e-12 and max(shares, key=shares.get) == "a"


def test_bottom_line_of_the_demo(demo):
    study, sp, result = demo
    bl, pred = analyse(result, study, sp, seed=3)
    load = study.component_load()["stress"]
    assert bl.load == load and pred.intervals == "bootstrap"
    pf = bl.failure_probability
    assert pf["low"] < pf["estimate"] < pf["high"]
    # the same number the prediction API gives at that stress
    assert pf["estimate"] == pytest.approx(float(pred.probabilities.loc[load, "seal ring"]))
    assert bl.component_limit == max(pred.risk_shares.xs(load, level=0)["seal ring"].to_dict().items(),
                                     key=lambda kv: kv[1])[0]
    assert len(bl.cautions) <= 2 and any("Extrapolation" in c for c in bl.cautions)
    text = bl.text()
    assert text.splitlines()[1].strip() == "BOTTOM LINE" and "90\u00a0% interval" in text


def test_bottom_line_without_component_flags_small_populations():
    rng = np.random.default_rng(5)
    a = 500 * rng.weibull(6.0, 30)
    b = 430 * rng.weibull(15.0, 30)
    frame = pd.DataFrame({"strength": np.minimum(a, b), "origin": np.where(a < b, "pore", "grind")})
    result = fm.fit(fm.read_specimens(frame))
    bl = bottom_line(result)
    assert bl.specimen_limit in ("pore", "grind") and bl.failure_probability is None
    few = [p for p in result.populations if p.n_failures < 10]
    assert bool(few) == any("Small population" in c for c in bl.cautions)


def test_what_if_names_each_change_alone_and_together(demo):
    study, sp, result = demo
    assert describe({"pores": 0, "grinding": 0.5}) == "pores removed and grinding risk halved"
    scen = alone_and_together({"pores": 0.0, "grinding": 0.5})
    table = what_if_table(result, study.specimen_geometry(sp, result), None, scen, probabilities=[1e-3])
    assert list(dict.fromkeys(table.index.get_level_values("change"))) == [
        "pores removed", "grinding risk halved", "pores removed and grinding risk halved"]


def test_progress_bar_on_a_terminal_and_lines_in_a_pipe():
    class Tty(io.StringIO):
        def isatty(self):
            return True

    tty, pipe = Tty(), io.StringIO()
    progress.BAR_EVERY = progress.LINE_EVERY = 0.0
    try:
        for stream in (tty, pipe):
            bar = progress.Task("fitting", 3, show=True, stream=stream)
            for i in range(3):
                bar.step(i + 1)
            bar.close()
    finally:
        progress.BAR_EVERY, progress.LINE_EVERY = 0.1, 2.0
    assert "\r" in tty.getvalue() and tty.getvalue().count("\n") == 1
    assert "\r" not in pipe.getvalue() and len(pipe.getvalue().splitlines()) == 5
    quiet = io.StringIO()
    progress.Task("fitting", 3, show=False, stream=quiet).step(1)
    assert quiet.getvalue() == ""
    # a quick task in a pipe: its start and its end, no count line within the first interval
    quick = io.StringIO()
    bar = progress.Task("refitting", 3, show=True, stream=quick)
    for i in range(3):
        bar.step(i + 1)
    bar.close()
    assert [line.split(":")[1].split()[0] for line in quick.getvalue().splitlines()] == ["started", "done"]


def _options(parser):
    for action in parser._actions:
        if getattr(action, "choices", None) and isinstance(action.choices, dict):
            for name, sub in action.choices.items():
                yield from ((name, a) for a in sub._actions)


def test_every_option_has_help_and_top_level_shows_examples(capsys):
    parser = build_parser()
    missing = [f"{cmd} {a.option_strings or a.dest}" for cmd, a in _options(parser) if not a.help]
    assert missing == []
    text = parser.format_help()
    assert text.count("\n  flawmix ") >= 3
    predict = [a for a in parser._actions if isinstance(getattr(a, "choices", None), dict)][0].choices["predict"]
    usage = predict.format_usage()
    assert re.search(r" --study FILE", usage) and "[--study FILE]" not in usage
    assert "Required: --study" in predict.format_help()


def test_bootstrap_means_the_fit_bootstrap_everywhere():
    parser = build_parser()
    subs = [a for a in parser._actions if isinstance(getattr(a, "choices", None), dict)][0].choices
    for name in ("fit", "predict", "report"):
        (action,) = [a for a in subs[name]._actions if "--bootstrap" in a.option_strings]
        assert "parametric-bootstrap replicates of the fit" in action.help
    for name in ("compare", "report"):
        assert any("--boundary-replicates" in a.option_strings for a in subs[name]._actions)
    assert not any("--bootstrap" in a.option_strings for a in subs["compare"]._actions)


def test_multiaxial_rule_names_are_spelled_out(capsys):
    table = ROOT / "flawmix" / "data" / "seal_ring_surface.csv"
    assert main(["size", "elements", "--table", str(table), "--modulus", "10", "--rule", "pia"]) == 0
    assert "multiaxial rule: independent-action" in capsys.readouterr().out
    assert main(["size", "elements", "--table", str(table), "--modulus", "10", "--rule", "largest-principal"]) == 0


def test_fit_prints_the_bottom_line_first_and_each_warning_once(tmp_path):
    rng = np.random.default_rng(2)
    a, b = 500 * rng.weibull(6.0, 14), 430 * rng.weibull(15.0, 14)
    frame = pd.DataFrame({"strength": np.minimum(a, b), "origin": np.where(a < b, "pore", "grind")})
    frame.loc[:1, "origin"] = "pore|grind"
    path = tmp_path / "bars.csv"
    frame.to_csv(path, index=False)
    proc = subprocess.run([sys.executable, "-m", "flawmix", "fit", str(path), "--method", "bayes"],
                          capture_output=True, text=True, cwd=ROOT, timeout=300)
    assert proc.returncode == 0, proc.stderr
    assert proc.stdout.lstrip().startswith("=" * 20) and "BOTTOM LINE" in proc.stdout.splitlines()[1]
    warnings = [ln for ln in (proc.stdout + proc.stderr).splitlines() if ln.startswith("warning:")]
    assert len(warnings) == len(set(warnings))
    assert "sampling" in proc.stderr     # progress in a pipe: plain lines
    quiet = subprocess.run([sys.executable, "-m", "flawmix", "fit", str(path), "--quiet"],
                           capture_output=True, text=True, cwd=ROOT, timeout=300)
    assert quiet.returncode == 0 and "simulated" not in quiet.stderr and "started" not in quiet.stderr


def test_reprs_and_summary_are_concise(demo):
    _, sp, result = demo
    assert "\n" not in repr(sp) and len(repr(sp)) < 250 and "array" not in repr(sp)
    assert "\n" not in repr(result) and len(repr(result)) < 250 and "array" not in repr(result)
    with pd.option_context("display.width", 80, "display.max_columns", 0):
        shown = repr(result.summary())
    assert "..." not in shown and max(len(line) for line in shown.splitlines()) <= 80
    for column in ("m", "m 5%", "m 95%", "σθ (MPa)", "σθ 5%", "σθ 95%"):
        assert column in shown


def test_readme_python_snippet_runs_on_the_demo_data():
    import matplotlib

    matplotlib.use("Agg")
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    section = readme[readme.index("## In Python"):]
    code = re.search(r"```python\n(.*?)```", section, re.S).group(1)
    namespace: dict = {}
    exec(compile(code, "README.md", "exec"), namespace)
    assert namespace["mle"].n_specimens == 40


def test_bottom_line_model_sentence_does_not_contradict_a_one_population_verdict():
    # the fit shown has several populations while the comparison found one enough: the line
    # must say both, not "Model: 'concurrent' populations. One population is enough"
    from types import SimpleNamespace

    from flawmix.bottomline import model_choice_text
    from flawmix.evidence import population_count_verdict

    result = SimpleNamespace(model="concurrent", tests=[], populations=[1, 2])
    one = SimpleNamespace(verdict=population_count_verdict(0.6, "a test") + " Scores: ...")
    several = SimpleNamespace(verdict=population_count_verdict(0.001, "a test") + " Scores: ...")
    text = model_choice_text(result, one)
    assert text.startswith("Model comparison: one population is enough") and "still separates" in text
    assert model_choice_text(result, several).startswith("Model: 'concurrent' populations. Several flaw populations")


def test_bottom_line_names_the_comparisons_choice_when_the_estimates_are_under_another_model():
    # compare chose 'partial' but the report's estimates are concurrent: the line says both
    from types import SimpleNamespace

    from flawmix.bottomline import model_choice_text
    from flawmix.evidence import population_count_verdict

    result = SimpleNamespace(model="concurrent", tests=[], populations=[1, 2])
    verdict = population_count_verdict(0.001, "a test") + " Scores: ..."
    other = SimpleNamespace(verdict=verdict, preferred="partial")
    same = SimpleNamespace(verdict=verdict, preferred="concurrent")
    assert "The comparison's choice is 'partial'" in model_choice_text(result, other)
    assert "--model partial" in model_choice_text(result, other)
    assert "choice is" not in model_choice_text(result, same)
