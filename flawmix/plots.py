"""Figures: probability plot, failure shares, size effect, posterior pairs, likelihood contours.

Presentation only: every number drawn comes from the result object or the predict API.
Every function takes ``ax=None`` and returns the matplotlib Axes (or Figure for pair plots).
Markers and colours are flawmix's own: they differ in shape, fill and lightness, so they
stay apart in greyscale and for colour-blind readers.
"""
from __future__ import annotations

import math

import numpy as np

from .errors import FlawmixError

# (colour, marker, filled): distinct in hue, lightness and shape
STYLES = [("#1d3f72", "o", True), ("#c2571a", "s", False), ("#3f8f6b", "D", True), ("#8a3b8f", "^", False),
          ("#7a6a10", "v", True), ("#3a7ca5", "P", False)]
UNIDENTIFIED = ("#6b6b6b", "X")
SURVIVOR = ("#111111", ">")
PERCENT_TICKS = [0.1, 0.5, 1, 2, 5, 10, 20, 30, 50, 63.2, 80, 90, 95, 99, 99.9]


def _plt():
    import matplotlib

    if matplotlib.get_backend().lower() not in ("agg", "module://matplotlib_inline.backend_inline"):
        try:
            matplotlib.use("Agg", force=False)
        except Exception:
            pass
    import matplotlib.pyplot as plt

    return plt


def _ax(ax, size=(7.0, 5.0)):
    if ax is not None:
        return ax
    fig, ax = _plt().subplots(figsize=size, constrained_layout=True)
    return ax


def _weibit(p):
    p = np.asarray(p, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.log(-np.log1p(-p))


def _log_ticks(axis, lo: float, hi: float) -> None:
    """Readable ticks on a logarithmic axis over any range: every integer multiple over a
    narrow range, 1-2-5 over a few decades, whole decades (thinned) beyond."""
    from matplotlib.ticker import FuncFormatter, LogLocator, NullFormatter

    decades = math.log10(hi / lo) if hi > lo > 0 else 1.0
    if decades < 1.0:
        subs = tuple(range(1, 10))
    elif decades < 1.6:
        subs = (1.0, 2.0, 3.0, 5.0, 7.0)
    elif decades < 3.5:
        subs = (1.0, 2.0, 5.0)
    else:
        subs = (1.0,)
    axis.set_major_locator(LogLocator(base=10, subs=subs, numticks=12))
    axis.set_major_formatter(FuncFormatter(_tick_text))
    axis.set_minor_formatter(NullFormatter())


def _tick_text(x, _=None) -> str:
    if x <= 0:
        return ""
    if 1e-3 <= x < 1e5:
        return f"{x:g}"
    return f"$10^{{{round(math.log10(x))}}}$" if abs(math.log10(x) - round(math.log10(x))) < 1e-9 else f"{x:.0e}"


def _stress_axis(ax, unit):
    ax.set_xscale("log")
    lo, hi = ax.get_xlim()
    _log_ticks(ax.xaxis, lo, hi)
    ax.set_xlabel(f"strength ({unit}), logarithmic")


def _style(j):
    return STYLES[j % len(STYLES)]


def _band_edges(frame):
    return _weibit(frame["low"].clip(1e-12, 1 - 1e-12)), _weibit(frame["high"].clip(1e-12, 1 - 1e-12))


def _survivor_heights(strength, base: float, step: float) -> np.ndarray:
    """Survivors at (nearly) the same stress are stacked upwards so every one stays visible."""
    order = np.argsort(strength, kind="stable")
    heights = np.empty(len(strength))
    last, level = None, 0
    for i in order:
        if last is not None and abs(strength[i] / last - 1) < 0.004:
            level += 1
        else:
            level, last = 0, strength[i]
        heights[i] = base + step * level
    return heights


def _crossover_marks(ax, changes, unit, lo, hi):
    """A dotted line and a short letter at each change of the dominating population; the
    legend spells each out. Letters close together are staggered downwards."""
    placed = []
    for n, c in enumerate(changes):
        letter = chr(ord("A") + n)
        x = c["stress"]
        frac = math.log(x / lo) / math.log(hi / lo)
        row = sum(1 for f in placed if abs(f - frac) < 0.05)
        placed.append(frac)
        ax.axvline(x, color="#444444", ls=":", lw=1.2, zorder=2,
                   label=f"{letter}: {c['below']} dominates below {x:.4g} {unit}, {c['above']} above")
        ax.text(x, 0.97 - 0.07 * row, f" {letter}", transform=ax.get_xaxis_transform(), fontsize=9,
                fontweight="bold", color="#333333", va="top", ha="left", clip_on=True,
                bbox=dict(boxstyle="round,pad=0.15", fc="white", ec="none", alpha=0.85))


def probability_plot(result, ax=None, view: str = "populations", band: bool = True, crossover: bool = True,
                     title: str | None = None, mark=None):
    # (the legend sits below the axes, so the default figure is taller than wide-screen)
    """Weibull probability plot of every specimen, marked by origin population.

    view ``populations``: each population's failures at its own adjusted ranks, with that
    population's own fitted line and own band; ``all``: all failures ranked together, with
    the model's combined curve and its band and the stresses where the dominating
    population changes. ``mark``: specimen ids to ring (e.g. the origins to re-examine from
    ``result.origin_probabilities()``)."""
    from .bottomline import dominance_changes

    if view not in ("populations", "all"):
        raise FlawmixError(f"unknown view '{view}'; use 'populations' or 'all'")
    ax = _ax(ax, (7.5, 6.6))
    pos = result.plotting_positions(view)
    names = [p.name for p in result.populations]
    s = pos["strength"].to_numpy()
    lo, hi = s.min() / 1.25, s.max() * 1.12
    grid = np.geomspace(lo, hi, 400)
    what = "credible" if result.method == "bayes" else "confidence"
    drawn = result.parameter_draws()
    kind = drawn.kind if drawn is not None else ""

    for j, name in enumerate(names):
        mine = pos[pos["group"] == name]
        colour, marker, filled = _style(j)
        ax.scatter(mine["strength"], _weibit(mine["probability"]), marker=marker, s=38, zorder=4,
                   facecolors=colour if filled else "white", edgecolors=colour, linewidths=1.4,
                   label=f"{name} ({result.populations[j].kind}), {len(mine)} failures")
    unk = pos[pos["group"] == "unidentified or ambiguous"]
    if len(unk):
        ax.scatter(unk["strength"], _weibit(unk["probability"]), marker=UNIDENTIFIED[1], s=42, zorder=4,
                   color=UNIDENTIFIED[0], linewidths=0.6, label=f"origin unidentified or ambiguous, {len(unk)}")

    if view == "populations":
        for j, p in enumerate(result.populations):
            colour = _style(j)[0]
            ax.plot(grid, _weibit(p.cdf(grid)), color=colour, lw=1.4, ls=(0, (5, 3)), zorder=3,
                    label=f"{p.name} alone: fitted line")
            if band and drawn is not None:
                edges = _band_edges(result.population_failure_probability(p.name, grid, approximate=True))
                ax.fill_between(grid, *edges, color=colour, alpha=0.10, lw=0, zorder=1,
                                label=f"{p.name}: {result.confidence:.0%} {what} band ({kind})")
    else:
        for j, p in enumerate(result.populations):
            ax.plot(grid, _weibit(p.cdf(grid)), color=_style(j)[0], lw=0.9, ls=(0, (2, 3)), zorder=2, alpha=0.8)
        ax.plot(grid, _weibit(result.cdf(grid)), color="black", lw=2.0, zorder=3,
                label=f"{result.model} model, all populations")
        if band and drawn is not None:
            fp = result.failure_probability(grid, approximate=True)
            if "low" in fp:
                ax.fill_between(grid, *_band_edges(fp), color="black", alpha=0.12, lw=0, zorder=1,
                                label=f"model: {result.confidence:.0%} {what} band ({kind})")
    ymin = float(np.nanmin(_weibit(pos["probability"].dropna()))) - 0.8
    ymax = max(float(np.nanmax(_weibit(pos["probability"].dropna()))) + 0.9, 1.4)

    if crossover and view == "all" and result.model.startswith("concurrent") and len(names) > 1:
        _crossover_marks(ax, dominance_changes(result.moduli, result.characteristic_strengths, names, lo, hi),
                         result.unit, lo, hi)

    ringed = pos[pos["specimen"].isin(list(mark) if mark is not None else []) & pos["probability"].notna()]
    if len(ringed):
        ax.scatter(ringed["strength"], _weibit(ringed["probability"]), s=170, facecolors="none", zorder=5,
                   edgecolors="#b0202a", linewidths=1.6, label=f"origin label to re-examine, {len(ringed)}")

    surv = pos[pos["group"] == "survived"]
    if len(surv):
        heights = _survivor_heights(surv["strength"].to_numpy(), ymin + 0.15, 0.22)
        ax.scatter(surv["strength"], heights, marker=SURVIVOR[1], s=40, zorder=4,
                   facecolors="white", edgecolors=SURVIVOR[0], linewidths=1.2,
                   label=f"survived (at the stress withstood; same stress stacked), {len(surv)}")

    ax.set_xlim(lo, hi)
    _stress_axis(ax, result.unit)
    ax.set_ylim(ymin, ymax)
    ax.set_ylabel("ln ln 1/(1 − P)")
    right = ax.twinx()
    right.set_ylim(ymin, ymax)
    ticks = [t for t in PERCENT_TICKS if ymin <= _weibit(t / 100) <= ymax]
    right.set_yticks([_weibit(t / 100) for t in ticks])
    right.set_yticklabels([f"{t:g}" for t in ticks])
    right.set_ylabel("failure probability (%)")
    ax.grid(True, which="major", color="#dddddd", lw=0.6)
    ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.13), ncol=2, fontsize=7.5, frameon=False)
    rule = {"hazen": "(i − 0.5)/N", "mean-rank": "i/(N + 1)", "median-rank": "(i − 0.3)/(N + 0.4)"}[result.plotting_rule]
    ax.set_title(title or f"Probability plot: {'adjusted ranks per population' if view == 'populations' else 'all specimens ranked together'}, {rule}",
                 fontsize=10)
    return ax


def failure_share_plot(result, ax=None, coupon=None, component=None, component_name="component", stresses=None):
    """Share of failures caused by each population across stress: specimen solid, component dashed."""
    from .predict import failure_share_curves

    ax = _ax(ax, (7.0, 4.0))
    if stresses is None:
        s = result.specimens.strength
        stresses = np.geomspace(s.min() / 3, s.max() * 1.2, 200)
    table = failure_share_curves(result, stresses, coupon, component)
    for j, p in enumerate(result.populations):
        colour = _style(j)[0]
        spec = table[table["body"] == "specimen"]
        ax.plot(spec["stress"], spec[p.name], color=colour, lw=2, label=f"{p.name}, test specimen")
        if component is not None:
            comp = table[table["body"] == "component"]
            ax.plot(comp["stress"], comp[p.name], color=colour, lw=2, ls=(0, (4, 2)),
                    label=f"{p.name}, {component_name}")
    ax.set_xlim(float(np.min(stresses)), float(np.max(stresses)))
    _stress_axis(ax, result.unit)
    ax.set_ylim(-0.02, 1.02)
    ax.set_ylabel("share of failures at this stress\n(hazard rate)")
    ax.grid(True, color="#dddddd", lw=0.6)
    ax.legend(fontsize=8)
    ax.set_title("Which flaw population causes failures, by stress", fontsize=10)
    return ax


def size_effect_plot(result, coupon, component=None, ax=None, component_name="component"):
    """Characteristic strength of each population against effective size (relative to the
    test specimen), with the test specimen and the component marked (named in the legend,
    so no label sits on another)."""
    from .predict import size_effect

    ax = _ax(ax, (7.0, 4.8))
    table = size_effect(result, coupon, component)
    ys = []
    for j, p in enumerate(result.populations):
        colour, marker, filled = _style(j)
        rows = table[table["population"] == p.name]
        measure = {"volume": "volume", "surface": "area", "edge": "edge length"}.get(p.kind, p.kind)
        ax.plot(rows["ratio"], rows["characteristic_strength"], color=colour, lw=2,
                label=f"{p.name}: scales with effective {measure}, m = {p.modulus:.3g}")
        ys += list(rows["characteristic_strength"])
        ax.scatter([1.0], [p.characteristic_strength], marker="o", s=50, color=colour, zorder=4,
                   label="test specimen" if j == 0 else None)
        cr = rows["component_ratio"].iloc[0]
        if np.isfinite(cr):
            y = p.characteristic_strength * cr ** (-1 / p.modulus)
            ax.scatter([cr], [y], marker="*", s=140, color=colour, edgecolors="black", zorder=5,
                       label=f"{component_name} (each population at its own effective size)" if j == 0 else None)
    ax.axvline(1.0, color="#888888", lw=0.8, ls=":")
    ax.set_xscale("log")
    ax.set_yscale("log")
    xlo, xhi = float(table["ratio"].min()), float(table["ratio"].max())
    ax.set_xlim(xlo, xhi)
    ylo, yhi = min(ys) / 1.05, max(ys) * 1.05
    ax.set_ylim(ylo, yhi)
    _log_ticks(ax.xaxis, xlo, xhi)
    _log_ticks(ax.yaxis, ylo, yhi)
    ax.set_xlabel("effective size relative to the test specimen (each population its own measure)")
    ax.set_ylabel(f"characteristic strength ({result.unit})")
    ax.grid(True, which="major", color="#e4e4e4", lw=0.5)
    ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.16), ncol=2, fontsize=8, frameon=False)
    ax.set_title("Size effect: each flaw population weakens at its own rate", fontsize=10)
    return ax


def pair_plot(result, max_points: int = 3000, seed: int = 0):
    """Posterior pairs of every population's modulus and characteristic strength (Bayes fits)."""
    if result.draws is None or result.method != "bayes":
        raise FlawmixError("a pair plot needs a Bayesian fit (method='bayes')")
    d = result.draws
    rng = np.random.default_rng(seed)
    pick = rng.choice(d.size, size=min(max_points, d.size), replace=False)
    cols, labels = [], []
    for j, p in enumerate(result.populations):
        cols += [d.moduli[pick, j], d.scales[pick, j]]
        labels += [f"m {p.name}", f"σθ {p.name} ({result.unit})"]
    n = len(cols)
    plt = _plt()
    fig, axes = plt.subplots(n, n, figsize=(1.9 * n + 1, 1.9 * n + 1), constrained_layout=True)
    for i in range(n):
        for k in range(n):
            ax = axes[i, k]
            if k > i:
                ax.axis("off")
                continue
            if i == k:
                ax.hist(cols[i], bins=40, color=_style(i // 2)[0], alpha=0.8)
                ax.set_yticks([])
            else:
                ax.scatter(cols[k], cols[i], s=2, alpha=0.25, color=_style(k // 2)[0], rasterized=True)
            if i == n - 1:
                ax.set_xlabel(labels[k], fontsize=8)
            else:
                ax.set_xticklabels([])
            if k == 0 and i > 0:
                ax.set_ylabel(labels[i], fontsize=8)
            ax.tick_params(labelsize=7)
    fig.suptitle("Posterior draws", fontsize=10)
    return fig


MIN_CONTOUR_FAILURES = 3


def contour_populations(result) -> list[str]:
    """Populations with a likelihood-contour panel: at least three certain failures."""
    return [p.name for p in result.populations if p.n_failures >= MIN_CONTOUR_FAILURES]


def _contour_window(p, confidence):
    """Axis ranges from the population's own intervals, widened (in logs) so the 95 % joint
    contour fits: χ²₂(0.95)/χ²₁(c) ≈ 2.2 at c = 0.90, so about 1.6 × the half-widths."""
    from scipy import stats

    widen = 1.4 * math.sqrt(stats.chi2.ppf(0.95, 2) / stats.chi2.ppf(confidence, 1))
    out = []
    for est, (lo, hi) in ((p.characteristic_strength, p.strength_interval), (p.modulus, p.modulus_interval)):
        lo = lo if lo and np.isfinite(lo) and lo > 0 else est / 2
        hi = hi if hi and np.isfinite(hi) else est * 2
        out.append((est * (lo / est) ** widen, est * (hi / est) ** widen))
    return out


def likelihood_contour_plot(result, population: str, ax=None, levels=(0.5, 0.9, 0.95)):
    """Contours of the relative log-likelihood of one population's (m, σθ), other parameters at
    their estimates; a contour at confidence c is where it drops by χ²₂(c)/2. Axis ranges
    follow the population's intervals."""
    from scipy import stats

    from .mle import likelihood_surface

    ax = _ax(ax, (6.0, 4.8))
    m, s, values = likelihood_surface(result, population, n=120)
    levels = sorted(levels)
    cuts = sorted(-stats.chi2.ppf(levels, 2) / 2)
    cs = ax.contour(s, m, values, levels=cuts, colors="#1d3f72", linewidths=1.2, linestyles="solid")
    labels = {c: f"{lv:.0%}" for c, lv in zip(cuts, sorted(levels, reverse=True))}
    ax.clabel(cs, fmt=labels, fontsize=8, inline=True, inline_spacing=4)
    p = result.population(population)
    ax.plot([p.characteristic_strength], [p.modulus], marker="+", color="#c2571a", ms=12, mew=2, ls="none",
            label="estimate")
    (xlo, xhi), (ylo, yhi) = _contour_window(p, result.confidence)
    ax.set_xlim(max(xlo, s.min()), min(xhi, s.max()))
    ax.set_ylim(max(ylo, m.min()), min(yhi, m.max()))
    from matplotlib.ticker import MaxNLocator
    # drop the x tick nearest the left corner so its label never meets the lowest m label
    ax.xaxis.set_major_locator(MaxNLocator(nbins=6, prune="lower"))
    ax.set_xlabel(f"characteristic strength σθ ({result.unit})")
    ax.set_ylabel("Weibull modulus m")
    ax.set_title(f"Likelihood contours, '{population}' ({p.n_failures} failures; others at their estimates)",
                 fontsize=9)
    ax.legend(fontsize=8, loc="upper right")
    ax.grid(True, color="#e4e4e4", lw=0.5)
    return ax


def likelihood_contours(result):
    """One likelihood-contour panel per population with at least three failures (a Figure)."""
    names = contour_populations(result)
    if not names:
        raise FlawmixError(f"no population has {MIN_CONTOUR_FAILURES} or more failures to draw contours for")
    plt = _plt()
    fig, axes = plt.subplots(1, len(names), figsize=(5.2 * len(names), 4.4), constrained_layout=True, squeeze=False)
    for ax, name in zip(axes[0], names):
        likelihood_contour_plot(result, name, ax=ax)
    return fig


def plan_plot(plan, ax=None):
    """Precision of each population's modulus against the number of specimens, and the power
    to tell the populations apart (right axis)."""
    ax = _ax(ax, (7.0, 5.2))
    table = plan.table.reset_index()
    for j, name in enumerate(plan.assumptions["population"]):
        colour, marker, filled = _style(j)
        rows = table[table["population"] == name]
        ax.plot(rows["specimens"], rows["modulus ±%"], color=colour, marker=marker, lw=2,
                markerfacecolor=colour if filled else "white", label=f"{name}: modulus ±%")
        ax.plot(rows["specimens"], rows["strength ±%"], color=colour, marker=marker, lw=1, ls=":",
                markerfacecolor=colour if filled else "white", label=f"{name}: characteristic strength ±%")
    ax.set_xlabel("specimens in the campaign")
    ax.set_ylabel(f"half-width of the central {plan.confidence:.0%} range (%)")
    ax.grid(True, color="#e4e4e4", lw=0.5)
    power = table.groupby("specimens")["power (two populations)"].first()
    if power.notna().any():
        right = ax.twinx()
        right.plot(power.index, 100 * power.values, color="black", lw=1.5, ls="--", label="power to detect two populations")
        right.set_ylim(0, 105)
        right.set_ylabel("power to detect two populations (%)")
        handles = ax.get_legend_handles_labels()
        extra = right.get_legend_handles_labels()
        ax.legend(handles[0] + extra[0], handles[1] + extra[1], loc="upper center", bbox_to_anchor=(0.5, -0.15),
                  ncol=2, fontsize=8, frameon=False)
    else:
        ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.15), ncol=2, fontsize=8, frameon=False)
    ax.set_title("How many specimens? Precision and power against campaign size", fontsize=10)
    return ax


def flaw_size_plot(analysis, ax=None, title: str | None = None):
    """Strength against measured flaw size, both logarithmic, by population, with each
    population's σ ∝ a^(−1/2) line at K_Ic (solid) and at the ends of the agreement band
    (dotted); specimens to look at again are ringed. ``analysis``: a
    :class:`flawmix.fracture.FlawAnalysis`."""
    ax = _ax(ax, (7.5, 6.4))
    rows = analysis.specimens
    measured = rows[np.isfinite(rows["flaw size"].astype(float)) & rows["population"].notna()]
    sizes = measured["flaw size"].to_numpy(dtype=float)
    strengths = measured["strength"].to_numpy(dtype=float)
    if not sizes.size:
        raise FlawmixError("no specimen has both a flaw size and one origin population to plot")
    lo, hi = sizes.min() / 1.6, sizes.max() * 1.6
    grid = np.geomspace(lo, hi, 200)
    band = analysis.toughness.band
    names = list(analysis.populations.index)
    for j, name in enumerate(names):
        colour, marker, filled = _style(j)
        mine = measured[measured["population"] == name]
        ax.scatter(mine["flaw size"], mine["strength"], marker=marker, s=38, zorder=4,
                   facecolors=colour if filled else "white", edgecolors=colour, linewidths=1.4,
                   label=f"{name}, {len(mine)} measured ({analysis.models[name].describe})")
        ax.plot(grid, analysis.critical_stress(name, grid), color=colour, lw=1.5, zorder=3,
                label=f"{name}: K_Ic = {analysis.toughness.value:.3g} MPa·√m")
        for edge in band:
            ax.plot(grid, analysis.critical_stress(name, grid, edge), color=colour, lw=1.0, ls=(0, (1.5, 2.5)),
                    zorder=3, label=f"{name}: agreement band, {band[0]:.3g}–{band[1]:.3g} MPa·√m"
                    if edge == band[0] else "_nolegend_")
    flagged = analysis.flagged
    flagged = flagged[np.isfinite(flagged["flaw size"].astype(float))]
    if len(flagged):
        ax.scatter(flagged["flaw size"], flagged["strength"], s=170, facecolors="none", edgecolors="#b0202a",
                   linewidths=1.6, zorder=5, label=f"to look at again (toughness or location), {len(flagged)}")
    ax.set_xscale("log")
    ax.set_yscale("log")
    ax.set_xlim(lo, hi)
    ax.set_ylim(strengths.min() / 1.35, strengths.max() * 1.3)
    _log_ticks(ax.xaxis, lo, hi)
    _log_ticks(ax.yaxis, *ax.get_ylim())
    ax.set_xlabel(f"flaw size a ({analysis.size_unit}), logarithmic")
    ax.set_ylabel(f"strength ({analysis.unit}), logarithmic")
    ax.grid(True, which="major", color="#dddddd", lw=0.6)
    ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.13), ncol=2, fontsize=7.5, frameon=False)
    ax.set_title(title or "Strength against flaw size: K = Y·σ·√a", fontsize=10)
    return ax

def lot_probability_plot(comparison, title: str | None = None):
    """Probability plots of the lots, one panel per population, all on the same axes: each
    lot's failures of that population at adjusted ranks within the lot, with the lot's own
    fitted line (solid: the baseline lot). Returns the Figure."""
    plt = _plt()
    pos = comparison.plotting_positions()
    lines = comparison.lines()
    names = [p.name for p in comparison.populations]
    k = len(names)
    # the same limits on every panel (set one by one: shared log axes would share one locator)
    fig, axes = plt.subplots(1, k, figsize=(3.6 * k + 0.8, 5.4), constrained_layout=True, squeeze=False)
    s = comparison.data.specimens.strength
    lo, hi = s.min() / 1.25, s.max() * 1.12
    grid = np.geomspace(lo, hi, 300)
    weib = _weibit(pos["probability"]) if len(pos) else np.array([-3.0, 1.0])
    ymin, ymax = float(np.min(weib)) - 0.8, max(float(np.max(weib)) + 0.9, 1.4)
    for j, (ax, name) in enumerate(zip(axes[0], names)):
        for l, lot in enumerate(comparison.lots):
            colour, marker, filled = _style(l)
            mine = pos[(pos["population"] == name) & (pos["lot"] == lot)]
            ax.scatter(mine["strength"], _weibit(mine["probability"]), marker=marker, s=34, zorder=4,
                       facecolors=colour if filled else "white", edgecolors=colour, linewidths=1.3,
                       label=f"{lot}: {len(mine)} failures")
            row = lines[(lines["population"] == name) & (lines["lot"] == lot)].iloc[0]
            cdf = -np.expm1(-(grid / row["characteristic_strength"]) ** row["modulus"])
            ax.plot(grid, _weibit(cdf), color=colour, lw=1.4, ls="-" if l == 0 else (0, (5, 3)), zorder=3,
                    label=f"{lot}: m {row['modulus']:.3g}, σθ {row['characteristic_strength']:.4g}")
        ax.set_xlim(lo, hi)
        _stress_axis(ax, comparison.unit)
        # only ticks inside the range: spare tick labels of one panel must not sit over the next
        ax.set_xticks([t for t in ax.xaxis.get_major_locator().tick_values(lo, hi) if lo <= t <= hi])
        ax.set_xlim(lo, hi)
        ax.set_ylim(ymin, ymax)
        ax.grid(True, which="major", color="#dddddd", lw=0.6)
        p = comparison.populations[j]
        ax.set_title(f"{name}: p = {p.same_population['p_value']:.2g}", fontsize=9.5)
        ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.16), ncol=1, fontsize=7.5, frameon=False)
        if j:
            ax.set_xlabel("strength, logarithmic")
            ax.tick_params(labelleft=False)
    axes[0][0].set_ylabel("ln ln 1/(1 − P)")
    right = axes[0][-1].twinx()
    right.set_ylim(ymin, ymax)
    ticks = [t for t in PERCENT_TICKS if ymin <= _weibit(t / 100) <= ymax]
    right.set_yticks([_weibit(t / 100) for t in ticks])
    right.set_yticklabels([f"{t:g}" for t in ticks])
    right.set_ylabel("failure probability (%)")
    fig.suptitle(title or "Lots compared per population (adjusted ranks within each lot, (i − 0.5)/N)", fontsize=10)
    return fig
