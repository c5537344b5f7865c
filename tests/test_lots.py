"""Lots compared population by population (flawmix/lots.py).

External checks: the likelihood-ratio statistics against a brute-force multi-start scipy
optimiser on a likelihood written out here from the competing-risk formulas (DOMAIN.md
section 2); per-lot estimates against ordinary per-lot fits; size scaling against
σθ1/σθ2 = (V_E2/V_E1)^(1/m) with the effective volume of a four-point bar (DOMAIN.md section
4). Data are invented campaigns drawn with seeded numpy generators.
"""
from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from scipy import optimize

import flawmix as fm
from flawmix import lots as L
from flawmix.cli import main

POPS = {"pores": {"kind": "volume", "labels": ["pore"]}, "grinding": {"kind": "surface", "labels": ["grinding"]}}


def campaign(rng, n, truth, unknown=0.0, survive_at=None, lot="A"):
    """Concurrent populations: strength = min over populations, origin = the arg-min."""
    labels = list(truth)
    draws = np.stack([s * rng.weibull(m, n) for m, s in truth.values()], axis=1)
    strength = draws.min(axis=1)
    origin = np.array(labels, dtype=object)[draws.argmin(axis=1)]
    status = np.full(n, "failed", dtype=object)
    if survive_at is not None:
        above = strength > survive_at
        strength, status[above], origin[above] = np.where(above, survive_at, strength), "survived", ""
    origin[(rng.random(n) < unknown) & (status == "failed")] = "?"
    return pd.DataFrame({"strength": strength, "origin": origin, "status": status, "lot": lot})


@pytest.fixture(scope="module")
def two_lots():
    """Invented: 35 bars per lot; the second lot's grinding population 12 % stronger; some
    origins unidentified, a few survivors at a 520 MPa rig limit."""
    rng = np.random.default_rng(20261203)
    a = campaign(rng, 35, {"pore": (8.0, 500.0), "grinding": (15.0, 470.0)}, 0.1, 520.0, "before")
    b = campaign(rng, 35, {"pore": (8.0, 500.0), "grinding": (15.0, 526.0)}, 0.1, 520.0, "after")
    return pd.concat([a, b], ignore_index=True)


# ---- an independent likelihood and optimiser ------------------------------------------------

def brute_loglik(params, strength, failed, candidates, lot, n_lots):
    """Σ over specimens: failed -> ln Σ_{j∈C} h_j − Σ_j H_j, survived -> −Σ_j H_j, with lot l's
    own (m, σθ) per population; params (L, k, 2) as (ln m, ln σθ)."""
    total = 0.0
    for l in range(n_lots):
        mine = lot == l
        m, s = np.exp(params[l, :, 0]), np.exp(params[l, :, 1])
        x = strength[mine][:, None]
        H = (x / s) ** m
        h = m / x * H
        hazard = np.where(candidates[mine], h, 0.0).sum(axis=1)
        total += np.sum(np.where(failed[mine], np.log(np.where(failed[mine], hazard, 1.0)), 0.0)) - H.sum()
    return total


def brute_maximum(strength, failed, candidates, lot, n_lots, tie=None, starts=12, seed=0):
    """Largest log-likelihood over many random starts of L-BFGS-B (tie: (population, 'both'
    or 'modulus') shared by every lot)."""
    k = candidates.shape[1]
    rng = np.random.default_rng(seed)
    centre = np.log(strength).mean()

    def unpack(x):
        params = np.empty((n_lots, k, 2))
        it = iter(x)
        for j in range(k):
            for which in (0, 1):
                shared = tie is not None and tie[0] == j and (tie[1] == "both" or which == 0)
                value = next(it) if shared else None
                for l in range(n_lots):
                    params[l, j, which] = value if shared else next(it)
        return params

    best = -np.inf
    for _ in range(starts):
        x0 = _order_start(k, n_lots, tie, centre, rng)
        fun = lambda x: -brute_loglik(unpack(x), strength, failed, candidates, lot, n_lots)
        with np.errstate(all="ignore"):
            res = optimize.minimize(fun, x0, method="L-BFGS-B", options={"maxiter": 5000, "ftol": 1e-14, "gtol": 1e-9})
            res = optimize.minimize(fun, res.x, method="Nelder-Mead",
                                    options={"maxiter": 20000, "xatol": 1e-9, "fatol": 1e-12})
        if np.isfinite(res.fun):
            best = max(best, -res.fun)
    return best


def _order_start(k, n_lots, tie, centre, rng):
    """Random starts: ln m near ln 10, ln σθ near the mean ln strength, in unpack's order."""
    out = []
    for j in range(k):
        for which in (0, 1):
            shared = tie is not None and tie[0] == j and (tie[1] == "both" or which == 0)
            for _ in range(1 if shared else n_lots):
                out.append((np.log(10.0) if which == 0 else centre) + rng.normal(0, 0.3))
    return np.array(out)


def test_likelihood_ratio_statistics_equal_brute_force_maxima(two_lots):
    lots = L.read_lots(two_lots, POPS)
    sp = lots.specimens
    model = L.lot_model(lots)
    tests = L.likelihood_ratio_tests(model)
    args = (sp.strength, sp.failed, sp.candidates, lots.lot, 2)
    free = brute_maximum(*args)
    for j in range(2):
        for key, tie in (("same_population", (j, "both")), ("same_modulus", (j, "modulus"))):
            null = brute_maximum(*args, tie=tie)
            assert tests[j][key]["statistic"] == pytest.approx(2 * (free - null), abs=2e-5)
    assert tests[0]["same_population"]["df"] == 2 and tests[0]["same_modulus"]["df"] == 1


def test_fast_path_equals_the_one_concurrent_model(two_lots):
    lots = L.read_lots(two_lots, POPS)
    fast, general = L.lot_model(lots), L.lot_model(lots, force_general=True)
    rng = np.random.default_rng(4)
    for _ in range(3):
        theta = np.concatenate([rng.normal(np.log(10), 0.4, 4), rng.normal(0.0, 0.05, 4)])
        a, b = fast.block_derivatives(theta), general.derivatives(theta)
        assert a[0] == pytest.approx(b[0], rel=1e-12)
        np.testing.assert_allclose(a[1], b[1], rtol=1e-6, atol=1e-6)
        np.testing.assert_allclose(a[2], b[2], rtol=1e-4, atol=1e-3)
    assert L.maximise(fast).loglik == pytest.approx(L.maximise(general).loglik, abs=1e-6)


def test_per_lot_estimates_equal_each_lots_own_fit(two_lots):
    c = L.compare_lots(two_lots, POPS)
    for l, name in enumerate(("before", "after")):
        own = fm.fit(fm.read_specimens(two_lots[two_lots.lot == name], POPS), intervals="profile")
        for p in c.populations:
            row, ref = p.by_lot[l], own.population(p.name)
            assert row["modulus"] == pytest.approx(ref.modulus, rel=1e-6)
            assert row["characteristic_strength"] == pytest.approx(ref.characteristic_strength, rel=1e-6)
            np.testing.assert_allclose(row["modulus_interval"], ref.modulus_interval, rtol=1e-4)
            np.testing.assert_allclose(row["strength_interval"], ref.strength_interval, rtol=1e-4)


def test_change_interval_is_the_profile_of_the_ratio(two_lots):
    """At each end of the σθ-ratio interval, the best fit holding the ratio there lies
    χ²₁(0.90)/2 below the maximum (computed here by brute force on the tied likelihood)."""
    from scipy import stats

    c = L.compare_lots(two_lots, POPS)
    lots = L.read_lots(two_lots, POPS)
    sp = lots.specimens
    top = brute_maximum(sp.strength, sp.failed, sp.candidates, lots.lot, 2, starts=4)
    j = 1   # grinding
    model = L.lot_model(lots)
    theta = L.maximise(model).theta
    start = np.array([[[theta[model.u_index(l, i)], theta[model.v_index(l, i)] + model.centre] for i in range(2)]
                      for l in range(2)]).reshape(-1)
    fixed = 1 * 4 + j * 2 + 1          # ln σθ of grinding in lot 'after', in the (L, k, 2) layout
    keep = [i for i in range(8) if i != fixed]
    for end in c.population("grinding").strength_change["ratio_interval"]:
        def fun(x):
            params = np.zeros(8)
            params[keep] = x
            params = params.reshape(2, 2, 2)
            params[1, j, 1] = params[0, j, 1] + np.log(end)
            return -brute_loglik(params, sp.strength, sp.failed, sp.candidates, lots.lot, 2)
        res = optimize.minimize(fun, start[keep], method="Nelder-Mead",
                                options={"maxiter": 40000, "xatol": 1e-10, "fatol": 1e-12})
        assert top - (-res.fun) == pytest.approx(stats.chi2.ppf(0.90, 1) / 2, abs=2e-3)


def test_the_changed_population_is_flagged_and_the_other_not(two_lots):
    c = L.compare_lots(two_lots, POPS)
    grinding, pores = c.population("grinding"), c.population("pores")
    assert grinding.changed and not pores.changed
    assert grinding.strength_change["ratio_interval"][0] > 1.0
    assert "grinding: σθ up" in c.verdict and "pores: no detectable change" in c.verdict
    shares = [row["risk_shares"] for row in c.overall["by_lot"]]
    assert all(sum(s.values()) == pytest.approx(1.0) for s in shares)


def test_relabelling_lots_or_populations_permutes_results(two_lots):
    c = L.compare_lots(two_lots, POPS)
    swapped = L.compare_lots(two_lots, POPS, order=["after", "before"])
    renamed = two_lots.assign(origin=two_lots.origin.map({"pore": "grinding", "grinding": "pore"}).fillna(two_lots.origin))
    pops = {"zz_pores": {"kind": "volume", "labels": ["grinding"]}, "aa_grinding": {"kind": "surface", "labels": ["pore"]}}
    relabelled = L.compare_lots(renamed, pops)
    for p in c.populations:
        q = swapped.population(p.name)
        assert q.same_population["statistic"] == pytest.approx(p.same_population["statistic"], abs=1e-6)
        assert q.same_modulus["statistic"] == pytest.approx(p.same_modulus["statistic"], abs=1e-6)
        assert q.strength_change["ratio"] == pytest.approx(1 / p.strength_change["ratio"], rel=1e-6)
        lo, hi = p.strength_change["ratio_interval"]
        np.testing.assert_allclose(q.strength_change["ratio_interval"], (1 / hi, 1 / lo), rtol=1e-5)
        assert [r["modulus"] for r in q.by_lot] == pytest.approx([r["modulus"] for r in p.by_lot][::-1], rel=1e-6)
        r = relabelled.population({"pores": "zz_pores", "grinding": "aa_grinding"}[p.name])
        assert r.same_population["statistic"] == pytest.approx(p.same_population["statistic"], abs=1e-6)
        assert r.strength_change["ratio"] == pytest.approx(p.strength_change["ratio"], rel=1e-6)


def test_unit_invariance(two_lots):
    c = L.compare_lots(two_lots, POPS)
    gpa = L.compare_lots(two_lots.assign(strength=two_lots.strength / 1000), POPS, unit="GPa")
    for p in c.populations:
        q = gpa.population(p.name)
        assert q.same_population["statistic"] == pytest.approx(p.same_population["statistic"], abs=1e-6)
        # the seeded bootstrap draws the same campaigns in either unit
        assert q.same_population["p_value"] == pytest.approx(p.same_population["p_value"], rel=1e-9)
        assert q.strength_change["ratio"] == pytest.approx(p.strength_change["ratio"], rel=1e-7)
        for a, b in zip(p.by_lot, q.by_lot):
            assert b["characteristic_strength"] * 1000 == pytest.approx(a["characteristic_strength"], rel=1e-7)
            assert b["modulus"] == pytest.approx(a["modulus"], rel=1e-7)
    assert gpa.overall["ratio"] == pytest.approx(c.overall["ratio"], rel=1e-7)


def test_several_tables_equal_one_table_with_a_lot_column(two_lots, tmp_path):
    paths = {}
    for name in ("before", "after"):
        paths[name] = tmp_path / f"{name}.csv"
        two_lots[two_lots.lot == name].drop(columns="lot").to_csv(paths[name], index=False)
    one = L.compare_lots(two_lots, POPS)
    several = L.compare_lots([paths["before"], paths["after"]], POPS)
    assert several.lots == ("before", "after")
    for p, q in zip(one.populations, several.populations):
        assert q.same_population["statistic"] == pytest.approx(p.same_population["statistic"], abs=1e-9)


def test_lots_on_different_bars_compare_through_the_material_scale():
    """Same material, lot 'small' on a 3-point bar, lot 'large' on a 4-point bar: σθ of each
    lot's own bar differs by (V_E,large/V_E,small)^(1/m) (DOMAIN.md section 4), the lot model
    finds no change, and its log-likelihood equals the two lots' own fits summed."""
    from flawmix.geometry import Geometry

    rng = np.random.default_rng(8)
    large = Geometry.from_spec("large", {"type": "flexure-4pt", "width": 4, "depth": 3, "outer_span": 40, "inner_span": 20})
    small = Geometry.from_spec("small", {"type": "flexure-3pt", "width": 2, "depth": 1.5, "outer_span": 20})
    m, sigma0 = 10.0, 450.0
    frames = []
    for name, geom in (("large", large), ("small", small)):
        scale = sigma0 * large.size("volume", m) ** (-1 / m) * (large.size("volume", m) / geom.size("volume", m)) ** (1 / m)
        f = campaign(rng, 40, {"pore": (m, scale)}, lot=name)
        frames.append(f.assign(geometry=name))
    frame = pd.concat(frames, ignore_index=True)
    pops = {"pores": {"kind": "volume", "labels": ["pore"]}}
    lots = L.read_lots(frame, pops, lots=["large", "small"])
    geometries = {"large": large, "small": small}
    model = L.lot_model(lots, geometries)
    free = L.maximise(model)
    own = sum(fm.fit(fm.read_specimens(f, pops)).log_likelihood for f in frames)
    assert free.loglik - lots.specimens.n_failed * model.centre == pytest.approx(own, abs=1e-4)
    small_fit = fm.fit(fm.read_specimens(frames[1], pops))
    expected = small_fit.characteristic_strengths[0] * (small.size("volume", small_fit.moduli[0]) /
                                                        large.size("volume", small_fit.moduli[0])) ** (1 / small_fit.moduli[0])
    theta = free.theta
    assert np.exp(theta[model.v_index(1, 0)] + model.centre) == pytest.approx(expected, rel=1e-4)


def test_cli_json_has_the_promised_shape(two_lots, tmp_path, capsys):
    path = tmp_path / "lots.csv"
    two_lots.to_csv(path, index=False)
    code = main(["lots", str(path), "--group", "pores:volume=pore", "--group", "grinding:surface=grinding", "--json",
                 "--quiet"])
    assert code == 0
    data = json.loads(capsys.readouterr().out)
    assert data["lots"] == ["before", "after"] and data["unit"] == "MPa" and isinstance(data["verdict"], str)
    p = data["populations"][0]
    assert {"name", "by_lot", "same_population", "same_modulus", "strength_change"} <= set(p)
    assert set(p["by_lot"][0]) == {"lot", "n_failures", "modulus", "characteristic_strength", "modulus_interval",
                                   "strength_interval"}
    assert {"statistic", "df", "p_value", "reference", "p_value_chi2", "bartlett_factor"} == set(p["same_population"]) \
        == set(p["same_modulus"])
    assert {"from", "to", "ratio", "ratio_interval"} <= set(p["strength_change"])


def test_cli_table_without_lots_is_one_line_error(tmp_path, capsys):
    path = tmp_path / "bars.csv"
    pd.DataFrame({"strength": [400.0, 420.0, 450.0], "origin": ["pore"] * 3}).to_csv(path, index=False)
    assert main(["lots", str(path)]) == 2
    err = capsys.readouterr().err.strip()
    assert err.startswith("error:") and "'lot' column" in err and "\n" not in err


def test_population_only_possible_in_a_lot_is_warned_about(two_lots):
    frame = two_lots[~((two_lots.lot == "after") & (two_lots.origin == "pore"))]
    c = L.compare_lots(frame, POPS)
    assert any(w.startswith("lot 'after': population 'pores' has no failure attributed") for w in c.warnings)


def test_population_without_failures_in_a_lot_is_named(two_lots):
    frame = two_lots[~((two_lots.lot == "after") & two_lots.origin.isin(["pore", "?"]))]
    with pytest.raises(fm.FlawmixError, match="'pores' has no failure in lot 'after'"):
        L.compare_lots(frame, POPS)


TRUTH_M = [[8.0, 16.0], [8.0, 16.0]]          # pores, grinding (invented), about half the failures each
SAME = [[500.0, 480.0], [500.0, 480.0]]
GRINDING_UP = [[500.0, 480.0], [500.0, 528.0]]   # grinding σθ 10 % higher in the second lot


@pytest.mark.slow
def test_chi2_size_and_power_by_simulation():
    """600 seeded data sets of two lots of 30. With no change the 5 % χ² test rejects within
    three binomial standard errors of 5 %, plus an allowance of 2 points for the known
    small-sample liberalness (measured 6.55 ± 0.55 % for m = 16 over 2000 data sets by
    studies/lots_size_power.py); with grinding's σθ 10 % up the unchanged pores are flagged
    no more often than that, and grinding's change is found most of the time."""
    same = L.simulated_tests(TRUTH_M, SAME, 30, 600, seed=101)
    changed = L.simulated_tests(TRUTH_M, GRINDING_UP, 30, 600, seed=202)
    assert same["dropped"].mean() < 0.01 and changed["dropped"].mean() < 0.01
    band = 3 * np.sqrt(0.05 * 0.95 / 600)
    size = np.nanmean(same["p_same_population"] < 0.05, axis=0)
    assert np.all(size > 0.05 - band) and np.all(size < 0.05 + band + 0.02), size
    assert np.nanmean(changed["p_same_population"][:, 0] < 0.05) < 0.05 + band + 0.02
    assert np.nanmean(changed["p_same_population"][:, 1] < 0.05) > 0.8


@pytest.mark.slow
def test_calibrated_test_keeps_its_size_by_simulation():
    """400 seeded data sets, each test calibrated by 99 bootstrap replicates: the rejection
    rate of a true "no change" is 5 % within three binomial standard errors (the same run as
    `studies/lots_size_power.py --replicates 400 --calibrate 99`: 4.75 ± 1.06 % for pores and
    7.50 ± 1.32 % for grinding, where the χ² p-values of the same data sets gave 5.50 % and
    7.25 %). The batched closed forms (lot_calibration.py) take about 20 s and reproduce the
    rates of the former one-replicate-at-a-time general path (about 15 CPU minutes) exactly."""
    same = L.simulated_tests(TRUTH_M, SAME, 30, 400, seed=2026, calibrate=99, calibrate_keys=("same_population",))
    size = np.nanmean(same["p_same_population"] < 0.05 + 1e-9, axis=0)
    band = 3 * np.sqrt(0.05 * 0.95 / np.sum(~same["dropped"]))
    assert np.all(np.abs(size - 0.05) < band), size


def test_study_file_names_each_lots_table_and_geometry(tmp_path, capsys):
    """[lots.NAME] tables give each lot's table and bar; the lots are then compared through
    the material scale (the sized lot model) and the JSON names the reference geometry."""
    rng = np.random.default_rng(12)
    bars = {"large": {"type": "flexure-4pt", "width": 4, "depth": 3, "outer_span": 40, "inner_span": 20},
            "small": {"type": "flexure-3pt", "width": 2, "depth": 1.5, "outer_span": 20}}
    campaign(rng, 30, {"pore": (9.0, 480.0), "grinding": (14.0, 470.0)}).drop(columns="lot").to_csv(
        tmp_path / "old.csv", index=False)
    campaign(rng, 30, {"pore": (9.0, 560.0), "grinding": (14.0, 520.0)}).drop(columns="lot").to_csv(
        tmp_path / "new.csv", index=False)
    lines = ['[populations.pores]', 'kind = "volume"', 'labels = ["pore"]', '[populations.grinding]',
             'kind = "surface"', 'labels = ["grinding"]',
             '[lots.old]', 'specimens = "old.csv"', 'geometry = "large"',
             '[lots.new]', 'specimens = "new.csv"', 'geometry = "small"']
    for name, spec in bars.items():
        lines += [f"[geometries.{name}]"] + [f'{k} = "{v}"' if isinstance(v, str) else f"{k} = {v}"
                                             for k, v in spec.items()]
    (tmp_path / "study.toml").write_text("\n".join(lines) + "\n")
    assert main(["lots", "--study", str(tmp_path / "study.toml"), "--json", "--quiet"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert data["lots"] == ["old", "new"] and data["reference_geometry"] in bars
    assert [r["lot"] for r in data["populations"][0]["by_lot"]] == ["old", "new"]


def test_cli_refuses_to_overwrite_a_plot(two_lots, tmp_path, capsys):
    path, plot = tmp_path / "lots.csv", tmp_path / "lots.png"
    two_lots.to_csv(path, index=False)
    plot.write_bytes(b"keep")
    assert main(["lots", str(path), "--plot", str(plot), "--quiet"]) == 2
    assert "already exists" in capsys.readouterr().err and plot.read_bytes() == b"keep"


def test_calibrated_p_values_come_from_the_null_fits_bootstrap(two_lots):
    """Calibration keeps the statistics and replaces each p-value by a bootstrap share on the
    grid 1/(B + 1); the χ² p-value is kept beside it."""
    c = L.compare_lots(two_lots, POPS, calibrate=39, seed=5)
    plain = L.compare_lots(two_lots, POPS, calibrate=0)
    for p, q in zip(c.populations, plain.populations):
        t = p.same_population
        assert t["statistic"] == pytest.approx(q.same_population["statistic"], abs=1e-9)
        assert t["p_value_chi2"] == pytest.approx(q.same_population["p_value"], abs=1e-12)
        used = int(t["reference"].split(",")[1].split()[0])
        assert round(t["p_value"] * (used + 1)) == pytest.approx(t["p_value"] * (used + 1), abs=1e-9)
    grinding = c.population("grinding").same_population     # beyond all 39 replicates
    assert "beyond every replicate" in grinding["reference"] and 0 < grinding["p_value"] <= 1 / 40


def test_three_lots_have_2_and_1_degrees_of_freedom_per_extra_lot():
    """Three lots of one population with survivors: df 2(L − 1) = 4 and L − 1 = 2, and both
    statistics equal twice the difference of brute-force maxima."""
    rng = np.random.default_rng(77)
    frame = pd.concat([campaign(rng, 25, {"pore": (9.0, s)}, survive_at=560.0, lot=name)
                       for name, s in (("a", 500.0), ("b", 520.0), ("c", 540.0))], ignore_index=True)
    pops = {"pores": {"kind": "volume", "labels": ["pore"]}}
    lots = L.read_lots(frame, pops)
    tests = L.likelihood_ratio_tests(L.lot_model(lots))[0]
    assert (tests["same_population"]["df"], tests["same_modulus"]["df"]) == (4, 2)
    sp = lots.specimens
    args = (sp.strength, sp.failed, sp.candidates, lots.lot, 3)
    free = brute_maximum(*args, starts=6)
    for key, tie in (("same_population", (0, "both")), ("same_modulus", (0, "modulus"))):
        assert tests[key]["statistic"] == pytest.approx(2 * (free - brute_maximum(*args, tie=tie, starts=6)), abs=2e-5)


def test_component_change_scales_each_population_by_its_own_size_and_modulus():
    """The example's [component] (fixed sizes): each lot's σθ carried to the part by
    σθ_part = σθ_bar·(k_bar/k_part)^(1/m) (DOMAIN.md section 4) and the part's stress at 1 %
    solved here by brentq; the bar's effective sizes from the closed forms of DOMAIN.md."""
    from pathlib import Path

    from scipy.optimize import brentq

    study = fm.study.read_study(Path(__file__).resolve().parents[1] / "examples" / "lots" / "wheel_change.toml")
    c = L.compare_lots(None, study=study)
    model = L.lot_model(L.read_lots_for_study(None, study))
    held = [j for j, p in enumerate(c.populations) if not p.changed]
    assert [c.populations[j].name for j in held] == c.overall["held_equal"] == ["pores", "inclusions"]
    moduli, scales = L.selected_parameters(model, L.maximise(model), held)
    np.testing.assert_allclose(moduli[0, held], moduli[1, held], rtol=1e-12)   # unchanged: one set for all lots
    b, d, outer, inner = 4.0, 3.0, 40.0, 20.0
    for l, row in enumerate(c.component["by_lot"]):
        m = moduli[l]
        v_bar = b * d * (m * inner + outer) / (2 * (m + 1) ** 2)
        a_bar = (m * inner + outer) / (m + 1) ** 2 * (b * (m + 1) + d)
        bar_size = np.array([a_bar[0], v_bar[1], v_bar[2]])    # grinding: surface; pores, inclusions: volume
        part_size = np.array([1500.0, 1800.0, 1800.0])
        scale = scales[l] * (bar_size / part_size) ** (1 / m)
        stress = brentq(lambda x: np.sum((x / scale) ** m) + np.log1p(-0.01), 1.0, 5000.0, xtol=1e-10)
        assert row["stress_at_probability"] == pytest.approx(stress, rel=1e-5)
    assert c.component["name"] == "nozzle ring" and "Component 'nozzle ring'" in c.verdict


def test_three_lots_report_every_lot_against_the_baseline():
    """Each lot's change against the baseline; in the free model a lot's copies are
    independent of the other lots, so 'trial'/'old' equals the two-lot comparison of those
    lots alone, and the last entry is the first→last change of the verdict."""
    rng = np.random.default_rng(5)
    frame = pd.concat([campaign(rng, 30, {"pore": (8.0, 500.0), "grinding": (15.0, 470 * f)}, 0.0, None, name)
                       for name, f in (("old", 1.0), ("trial", 1.06), ("new", 1.15))], ignore_index=True)
    three = L.compare_lots(frame, POPS, order=["old", "trial", "new"], calibrate=0)
    two = L.compare_lots(frame[frame["lot"] != "new"], POPS, order=["old", "trial"], calibrate=0)
    for p, q in zip(three.populations, two.populations):
        assert [row["to"] for row in p.changes_by_lot] == ["trial", "new"]
        first, last = p.changes_by_lot
        assert first["ratio"] == pytest.approx(q.strength_change["ratio"], rel=1e-7)
        np.testing.assert_allclose(first["ratio_interval"], q.strength_change["ratio_interval"], rtol=1e-6)
        np.testing.assert_allclose(first["stress_ratio_interval"], q.stress_change["ratio_interval"], rtol=1e-6)
        assert last["ratio"] == p.strength_change["ratio"]
    assert "against 'old': 'trial'" in three.population("grinding").verdict
    assert "σθ ratio 'trial'/'old'" in L.format_comparison(three)


def _bars():
    from flawmix.geometry import Geometry

    return {"large": Geometry.from_spec("large", {"type": "flexure-4pt", "width": 4, "depth": 3, "outer_span": 40,
                                                  "inner_span": 20}),
            "small": Geometry.from_spec("small", {"type": "flexure-3pt", "width": 2, "depth": 1.5, "outer_span": 20})}


def _lots_on_two_bars(rng, n=40, m=10.0, sigma0=450.0, change=1.0):
    """One volume population; lot 'large' on a 4-point bar, lot 'small' on a 3-point bar, σθ of
    each bar from σθ_bar = σ0·V_E^(−1/m) (DOMAIN.md section 4), the second lot's σ0 × change."""
    frames = []
    for (name, geom), factor in zip(_bars().items(), (1.0, change)):
        scale = factor * sigma0 * geom.size("volume", m) ** (-1 / m)
        frames.append(campaign(rng, n, {"pore": (m, scale)}, lot=name).assign(geometry=name))
    return pd.concat(frames, ignore_index=True)


def test_bayes_lots_on_two_bars_compare_through_the_material_scale():
    """Same material on two bars: each lot's posterior draws carried to the reference bar by
    (V_E,own/V_E,ref)^(1/m) give a σθ ratio near 1 whose credible interval agrees with the
    sized MLE's profile interval (both quantify the same likelihood; flat-ish priors)."""
    pops = {"pores": {"kind": "volume", "labels": ["pore"]}}
    lots = L.read_lots(_lots_on_two_bars(np.random.default_rng(41)), pops, lots=["large", "small"])
    study = type("S", (), {"geometries": True, "geometry_objects": staticmethod(_bars), "priors": None,
                           "confidence": None, "component": None, "component_load": lambda self: {}})()
    mle = L.compare_lots(lots, study=study, calibrate=0)
    bayes = L.compare_lots(lots, study=study, method="bayes", seed=3)
    a, b = mle.populations[0].strength_change, bayes.populations[0].strength_change
    assert b["interval_method"] == "credible (equal-tailed)" and 0 < b["probability_stronger"] < 1
    assert b["ratio"] == pytest.approx(a["ratio"], rel=0.02)
    np.testing.assert_allclose(b["ratio_interval"], a["ratio_interval"], rtol=0.04)
    for r, s in zip(mle.populations[0].by_lot, bayes.populations[0].by_lot):
        assert s["characteristic_strength"] == pytest.approx(r["characteristic_strength"], rel=0.02)


def test_bayes_lots_need_one_bar_per_lot():
    pops = {"pores": {"kind": "volume", "labels": ["pore"]}}
    frame = _lots_on_two_bars(np.random.default_rng(42))
    frame.loc[frame.index[:3], "geometry"] = "small"          # three bars of lot 'large' on the other bar
    lots = L.read_lots(frame, pops, lots=["large", "small"])
    study = type("S", (), {"geometries": True, "geometry_objects": staticmethod(_bars), "priors": None,
                           "confidence": None, "component": None, "component_load": lambda self: {}})()
    with pytest.raises(L.FlawmixError, match="lot 'large' was tested on several geometries"):
        L.compare_lots(lots, study=study, method="bayes")
