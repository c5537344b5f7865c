"""Model comparison: scores on the same data, tests, verdicts."""
import json
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest

import flawmix as fm
from flawmix import likelihood as lik
from flawmix.compare import compare
from flawmix.simulate import Design, replicate, simulate


def _frame(data):
    origin = np.where(data.candidates.sum(-1) > 1, "?", np.array(["a", "b"])[data.candidates.argmax(-1)])
    return pd.DataFrame({"strength": np.exp(data.y), "origin": np.where(data.failed, origin, ""),
                         "status": np.where(data.failed, "failed", "survived")})


def test_single_equals_common_modulus_and_carries_the_label_term():
    # DOMAIN.md section 2: one pooled Weibull population with origin labels independent of
    # strength has the same likelihood as concurrent populations with one common modulus.
    # Reference: the pooled complete-sample Weibull log-likelihood (scipy.stats) plus the
    # multinomial log-likelihood of the labels at their observed shares.
    from scipy import stats
    rng = np.random.default_rng(3)
    sims = simulate(lik.Model("concurrent", 2), [5.0, 15.0], [400.0, 420.0], None, Design.simple(50), 1, rng)
    frame = _frame(replicate(sims, 0))
    c = compare(fm.read_specimens(frame), bayes=False, bootstrap=0)
    m, _, s = stats.weibull_min.fit(frame["strength"], floc=0)
    counts = frame["origin"].value_counts()
    expected = stats.weibull_min.logpdf(frame["strength"], m, scale=s).sum() + \
        sum(n * np.log(n / counts.sum()) for n in counts)
    assert c.table.loc["single", "log_likelihood"] == pytest.approx(expected, abs=1e-6)
    assert c.table.loc["concurrent-common-modulus", "log_likelihood"] == c.table.loc["single", "log_likelihood"]


def test_json_schema_and_verdict():
    rng = np.random.default_rng(4)
    sims = simulate(lik.Model("concurrent", 2), [4.0, 20.0], [420.0, 400.0], None, Design.simple(60, 0.2), 1, rng)
    c = compare(fm.read_specimens(_frame(replicate(sims, 0))), bayes=True, bootstrap=19, seed=1)
    d = json.loads(json.dumps(c.to_dict()))
    names = [m["model"] for m in d["models"]]
    assert names == ["single", "concurrent", "concurrent-common-modulus", "exclusive", "partial"]
    for m in d["models"]:
        assert set(["model", "log_likelihood", "aic", "bic", "elpd_loo", "elpd_loo_se"]) <= set(m)
        assert m["elpd_loo"] is not None
    assert d["preferred"] in names and isinstance(d["verdict"], str) and d["preferred"] in d["verdict"]
    assert "bootstrap" in c.tests[-1].method and 0 < c.tests[-1].p_value <= 1


def test_cli_compare_json(tmp_path):
    rng = np.random.default_rng(5)
    sims = simulate(lik.Model("concurrent", 2), [4.0, 20.0], [420.0, 400.0], None, Design.simple(40, 0.2), 1, rng)
    p = tmp_path / "bars.csv"
    _frame(replicate(sims, 0)).to_csv(p, index=False)
    proc = subprocess.run([sys.executable, "-m", "flawmix", "compare", str(p), "--no-bayes", "--boundary-replicates", "0", "--json"],
                          capture_output=True, text=True)
    assert proc.returncode == 0, proc.stderr
    d = json.loads(proc.stdout)
    assert {"models", "preferred", "verdict"} <= set(d)
    assert d["models"][0]["elpd_loo"] is None


@pytest.mark.slow
@pytest.mark.parametrize("truth", ["concurrent", "exclusive"])
def test_comparison_finds_the_true_model_when_populations_are_well_separated(truth):
    rng = np.random.default_rng(6)
    reps = 40
    sims = simulate(lik.Model(truth, 2), [4.0, 25.0], [600.0, 420.0], [0.5, 0.5], Design.simple(80, 0.1), reps, rng)
    wins = 0
    for r in range(reps):
        c = compare(fm.read_specimens(_frame(replicate(sims, r))), bayes=False, bootstrap=0)
        wins += c.preferred == truth
    # "most replicates" (issue 3); exclusive truth won 26 of 40 in the run that set this bar
    assert wins / reps > 0.5
