"""Visual checks of every figure, on the demo and on an invented three-population data set:
no text box overlaps another, every labelled artist sits inside its axes, crossovers only
where the dominating population changes (each labelled), survivors at one stress all
visible, contour axes from the intervals. Set FLAWMIX_FIGURES_DIR to keep the PNGs."""
from __future__ import annotations

import itertools
import os
from pathlib import Path

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt
import numpy as np
import pandas as pd
import pytest
from matplotlib.collections import PathCollection
from matplotlib.text import Text

import flawmix as fm
from flawmix import plots
from flawmix.bottomline import dominance_changes
from flawmix.cli import demo_paths
from flawmix.geometry import Geometry
from flawmix.study import read_study

BAR = {"type": "flexure-4pt", "width": 4, "depth": 3, "outer_span": 40, "inner_span": 20}


@pytest.fixture(scope="module")
def demo():
    csv, toml = demo_paths()
    study = read_study(toml)
    sp = fm.read_specimens(csv, study.populations, study.unit)
    result = fm.fit(sp)
    return "demo", result, study.specimen_geometry(sp, result), study.component_object()[1]


@pytest.fixture(scope="module")
def three():
    """Invented: 60 alumina bars, three origin types, 6 unidentified, 4 survivors at one
    rig limit (540 MPa)."""
    rng = np.random.default_rng(20261202)
    m = np.array([5.0, 14.0, 9.0])
    s = np.array([640.0, 520.0, 560.0])
    draws = s * rng.weibull(1.0, (60, 3)) ** (1 / m)
    strength = draws.min(axis=1)
    origin = np.array(["pore", "grinding damage", "inclusion"])[draws.argmin(axis=1)].astype(object)
    origin[rng.choice(60, 6, replace=False)] = "?"
    status = np.where(strength > 540.0, "survived", "failed")
    strength = np.where(strength > 540.0, 540.0, strength)
    frame = pd.DataFrame({"strength": strength.round(1), "origin": origin, "status": status})
    pops = {"pores": {"kind": "volume", "labels": ["pore"]},
            "grinding": {"kind": "surface", "labels": ["grinding damage"]},
            "inclusions": {"kind": "volume", "labels": ["inclusion"]}}
    result = fm.fit(fm.read_specimens(frame, pops))
    part = Geometry.from_spec("part", {"type": "sizes", "volume": 2400.0, "area": 1900.0})
    return "three", result, Geometry.from_spec("bar", BAR), part


def _texts(fig):
    fig.canvas.draw()
    renderer = fig.canvas.get_renderer()
    out = []
    for t in fig.findobj(Text):
        if t.get_visible() and t.get_text().strip() and t.get_figure() is fig:
            box = t.get_window_extent(renderer)
            if box.width > 0 and box.height > 0:
                out.append((t, box))
    return out


def _check(fig, name):
    """No two text boxes overlap; every text and labelled point of an axes lies inside it."""
    texts = _texts(fig)
    for (a, ba), (b, bb) in itertools.combinations(texts, 2):
        shrunk = ba.padded(-1.0)
        assert not shrunk.overlaps(bb.padded(-1.0)), f"{name}: '{a.get_text()}' overlaps '{b.get_text()}'"
    renderer = fig.canvas.get_renderer()
    for ax in fig.axes:
        inside = ax.get_window_extent(renderer).padded(1.5)
        for t in ax.texts:
            box = t.get_window_extent(renderer)
            assert inside.contains(box.x0, box.y0) and inside.contains(box.x1, box.y1), \
                f"{name}: text '{t.get_text()}' outside its axes"
        for coll in ax.collections:
            if not isinstance(coll, PathCollection) or coll.get_label().startswith("_") or not len(coll.get_offsets()):
                continue
            pts = coll.get_offset_transform().transform(coll.get_offsets())
            pts = pts[np.all(np.isfinite(pts), axis=1)]
            assert all(inside.contains(x, y) for x, y in pts), f"{name}: '{coll.get_label()}' has points outside"
    folder = os.environ.get("FLAWMIX_FIGURES_DIR")
    if folder:
        Path(folder).mkdir(parents=True, exist_ok=True)
        fig.savefig(Path(folder) / f"{name}.png", dpi=110, bbox_inches="tight")
    plt.close(fig)


@pytest.mark.parametrize("case", ["demo", "three"])
def test_probability_plots_are_readable(case, request):
    label, result, coupon, part = request.getfixturevalue(case)
    names = [p.name for p in result.populations]
    ax = plots.probability_plot(result)
    # each population its own band; the combined curve's band only in the all-specimen view
    assert len([c for c in ax.collections if "band" in c.get_label()]) == len(names)
    assert not [ln for ln in ax.lines if "model" in ln.get_label()]
    _check(ax.figure, f"{label}_probability_plot")

    ax = plots.probability_plot(result, view="all")
    assert len([c for c in ax.collections if "band" in c.get_label()]) == 1
    s = result.specimens.strength
    lo, hi = s.min() / 1.25, s.max() * 1.12
    changes = dominance_changes(result.moduli, result.characteristic_strengths, names, lo, hi)
    marks = [ln for ln in ax.lines if ln.get_label()[:2] in {f"{chr(65 + i)}:" for i in range(len(changes))}]
    letters = {t.get_text().strip() for t in ax.texts}
    assert len(marks) == len(changes) and letters == {chr(65 + i) for i in range(len(changes))}
    survivors = [c for c in ax.collections if c.get_label().startswith("survived")]
    if survivors:
        pts = survivors[0].get_offsets()
        assert len(np.unique(np.round(np.asarray(pts), 6), axis=0)) == len(pts)   # none hidden behind another
    _check(ax.figure, f"{label}_probability_plot_all")


def test_three_populations_have_fewer_drawn_crossovers_than_pairs(three):
    # the invented set is built so that one of its three pairwise crossovers changes nothing
    _, result, *_ = three
    names = [p.name for p in result.populations]
    from flawmix.predict import crossovers

    s = result.specimens.strength
    pairs = [c for c in crossovers(result.moduli, result.characteristic_strengths, names)
             if s.min() / 1.25 < c["stress"] < s.max() * 1.12]
    changes = dominance_changes(result.moduli, result.characteristic_strengths, names, s.min() / 1.25, s.max() * 1.12)
    assert len(changes) < max(len(pairs), 1) or len(pairs) <= 1


@pytest.mark.parametrize("case", ["demo", "three"])
def test_share_and_size_plots_are_readable(case, request):
    label, result, coupon, part = request.getfixturevalue(case)
    _check(plots.failure_share_plot(result, coupon=coupon, component=part).figure, f"{label}_failure_shares")
    ax = plots.size_effect_plot(result, coupon, part)
    labels = [t.get_text() for t in ax.xaxis.get_ticklabels() + ax.yaxis.get_ticklabels() if t.get_text()]
    assert len(labels) >= 4
    _check(ax.figure, f"{label}_size_effect")


@pytest.mark.parametrize("case", ["demo", "three"])
def test_likelihood_contours_follow_the_intervals(case, request):
    label, result, *_ = request.getfixturevalue(case)
    names = plots.contour_populations(result)
    assert names == [p.name for p in result.populations if p.n_failures >= 3]
    for name in names:
        p = result.population(name)
        ax = plots.likelihood_contour_plot(result, name)
        x0, x1 = ax.get_xlim()
        y0, y1 = ax.get_ylim()
        assert x0 < p.strength_interval[0] and x1 > p.strength_interval[1]
        assert y0 < p.modulus_interval[0] and y1 > p.modulus_interval[1]
        assert x0 > p.strength_interval[0] / 2 and y0 > p.modulus_interval[0] / 3 and y1 < 3 * p.modulus_interval[1]
        _check(ax.figure, f"{label}_likelihood_{name}")


def test_log_ticks_are_readable_over_any_range():
    for lo, hi in [(0.5, 2.0), (1.0, 30.0), (0.01, 1e4), (1e-6, 1e9)]:
        fig, ax = plt.subplots(figsize=(6, 2))
        ax.set_xscale("log")
        ax.set_xlim(lo, hi)
        plots._log_ticks(ax.xaxis, lo, hi)
        fig.canvas.draw()
        labels = [t for t in ax.xaxis.get_ticklabels() if t.get_text() and lo <= t.get_position()[0] <= hi]
        assert 2 <= len(labels) <= 12, (lo, hi, [t.get_text() for t in labels])
        _check(fig, f"log_ticks_{lo:g}_{hi:g}")


def test_flaw_size_plot_is_readable_and_rings_the_flagged():
    from flawmix.fracture import analyse_flaws

    folder = Path(__file__).resolve().parents[1] / "examples" / "flaw_sizes"
    study = read_study(folder / "study.toml")
    analysis = analyse_flaws(fm.read_specimens(study.specimens, study.populations, study.unit), study)
    ax = plots.flaw_size_plot(analysis)
    ringed = [c for c in ax.collections if c.get_label().startswith("to look at again")]
    flagged = analysis.flagged
    assert len(ringed) == 1 and len(ringed[0].get_offsets()) == len(flagged) > 0
    lines = [ln for ln in ax.lines if "K_Ic =" in ln.get_label()]
    assert len(lines) == len(analysis.populations)
    # the pores' line (penny cracks, Y = 2/√π, Sneddon 1946): σ·(2/√π)·√a = K_Ic along it, µm → m
    pores = [ln for ln in lines if ln.get_label().startswith("pores")][0]
    a, s = (np.asarray(v, dtype=float) for v in pores.get_data())
    np.testing.assert_allclose(s * 2 / np.sqrt(np.pi) * np.sqrt(a * 1e-6), 5.5, rtol=1e-12)
    _check(ax.figure, "flaw_size_plot")


def test_probability_plot_rings_the_origins_to_reexamine(demo):
    _, result, *_ = demo
    ids = list(result.specimens.ids[:2])
    ax = plots.probability_plot(result, mark=ids)
    ringed = [c for c in ax.collections if c.get_label().startswith("origin label to re-examine")]
    assert len(ringed) == 1 and len(ringed[0].get_offsets()) == 2
    _check(ax.figure, "demo_probability_plot_marked")

def test_lot_plots_are_readable_and_share_axes():
    """The invented two-lot example (examples/lots/): one panel per population, every panel
    on the same stress and probability axes, each lot's points and fitted line in each."""
    from flawmix.lots import compare_lots

    study = read_study(Path(__file__).resolve().parents[1] / "examples" / "lots" / "wheel_change.toml")
    comparison = compare_lots(None, study=study)
    fig = plots.lot_probability_plot(comparison)
    panels = [ax for ax in fig.axes if ax.get_title()]
    assert len(panels) == len(comparison.populations)
    assert len({ax.get_xlim() for ax in panels}) == 1 and len({ax.get_ylim() for ax in panels}) == 1
    for ax in panels:
        labels = [c.get_label() for c in ax.collections]
        assert [lab.split(":")[0] for lab in labels] == list(comparison.lots)
        assert len([ln for ln in ax.lines if not ln.get_label().startswith("_")]) == len(comparison.lots)
    _check(fig, "lots_probability_plots")
