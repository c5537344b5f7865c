"""The analysis report: a self-contained HTML file (figures embedded, no scripts), with
results.json, the figures as PNG and SVG, and the tables as CSV, written atomically.

Presentation only: every number comes from fit, compare and predict results.
"""
from __future__ import annotations

import base64
import html
import io
import json
import os
import platform
import shutil
import tempfile
import warnings as _warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from . import formatting as fmt
from .errors import FlawmixError, FlawmixWarning

CSS = """
body { font-family: "DejaVu Sans", Arial, sans-serif; color: #1a1a1a; max-width: 60em; margin: 2em auto;
       padding: 0 1.5em; line-height: 1.45; font-size: 10.5pt; }
h1 { font-size: 17pt; margin-bottom: 0.2em; } h2 { font-size: 13pt; border-bottom: 1px solid #bbb;
     padding-bottom: 0.15em; margin-top: 1.6em; } h3 { font-size: 11pt; }
table { border-collapse: collapse; margin: 0.6em 0 1em; font-size: 9pt; }
th, td { border: 1px solid #c8c8c8; padding: 0.2em 0.5em; text-align: right; }
th { background: #eef1f5; } td.text, th.text { text-align: left; }
figure { margin: 1em 0; page-break-inside: avoid; } figure img { max-width: 100%; height: auto; }
figcaption { font-size: 9pt; color: #444; }
.bottom-line { background: #f3f6fa; border: 2px solid #1d3f72; padding: 0.2em 1em 0.5em; margin: 1em 0; }
.bottom-line h2 { border: none; margin-top: 0.4em; } .caution-item { color: #7a3308; }
.verdict { background: #f3f6fa; border-left: 4px solid #1d3f72; padding: 0.5em 0.8em; }
.caution { background: #fff6ec; border-left: 4px solid #c2571a; padding: 0.5em 0.8em; }
.small { font-size: 9pt; color: #444; }
@media print { body { margin: 0; max-width: none; font-size: 9.5pt; } h2 { page-break-after: avoid; }
  table, figure, .verdict, .caution { page-break-inside: avoid; }
  figure img { max-height: 115mm; width: auto; } }
@page { margin: 14mm; }
"""

REFERENCES = [
    "C. A. Johnson, Fracture statistics of multiple flaw distributions, in Fracture Mechanics of Ceramics vol. 5, "
    "Plenum, 1983 (concurrent, exclusive and partially concurrent flaw populations).",
    "ASTM C1239, Standard practice for reporting uniaxial strength data and estimating Weibull distribution "
    "parameters for advanced ceramics (censored maximum likelihood, unbiasing factors, bounds).",
    "EN ISO 20501, Fine ceramics: Weibull statistics for strength data.",
    "ASTM C1683, Standard practice for size scaling of tensile strengths using Weibull statistics for advanced "
    "ceramics; G. D. Quinn, J. Am. Ceram. Soc. 86 (2003) (effective volume and area).",
    "L. G. Johnson, The Statistical Treatment of Fatigue Experiments, Elsevier, 1964 (adjusted ranks).",
    "A. Vehtari, A. Gelman, J. Gabry, Practical Bayesian model evaluation using leave-one-out cross-validation "
    "and WAIC, Statistics and Computing 27 (2017) (PSIS-LOO).",
    "D. Foreman-Mackey et al., emcee: the MCMC hammer, PASP 125 (2013); C. J. F. ter Braak, A Markov chain Monte "
    "Carlo version of the genetic algorithm Differential Evolution, Statistics and Computing 16 (2006).",
]

CAUTIONS = [
    "Failure probabilities from this report may feed the design of parts whose fracture can hurt people. "
    "They are estimates with sampling uncertainty, shown by the intervals; the uncertainty grows quickly when "
    "extrapolating below the failure probabilities that were tested.",
    "Scaling from test specimens to a component assumes the same flaw populations, the same processing and "
    "finishing, and an accurate stress analysis of the component. Time-dependent effects (slow crack growth, "
    "fatigue, environment) are not included.",
    "This report is an analysis aid. The applicable design codes and standards and licensed engineering "
    "judgement take precedence over it.",
]


def _esc(x) -> str:
    return html.escape(str(x), quote=True)


def _table(frame: pd.DataFrame, index=True, kinds=None, index_kind=None) -> str:
    """An HTML table with every number written by the rules of :mod:`flawmix.formatting`."""
    if index and index_kind is not None:
        frame = fmt.format_frame(frame, kinds, index_kind)
        kinds = {c: "text" for c in frame.columns}
    frame = frame.reset_index() if index else frame
    head = "".join(f'<th class="text">{_esc(c)}</th>' if frame[c].dtype == object else f"<th>{_esc(c)}</th>"
                   for c in frame.columns)
    text = frame if kinds is not None and all(v == "text" for v in kinds.values()) else fmt.format_frame(frame, kinds)
    rows = []
    for (_, row), (_, raw) in zip(text.iterrows(), frame.iterrows()):
        cells = []
        for c in frame.columns:
            cls = ' class="text"' if isinstance(raw[c], str) and not _numeric_text(raw[c]) else ""
            cells.append(f"<td{cls}>{_esc(row[c])}</td>")
        rows.append("<tr>" + "".join(cells) + "</tr>")
    return f"<table><thead><tr>{head}</tr></thead><tbody>{''.join(rows)}</tbody></table>"


def _numeric_text(v: str) -> bool:
    try:
        float(v.replace("> ", ""))
    except ValueError:
        return False
    return True


@dataclass
class _Figures:
    folder: Path
    items: list = field(default_factory=list)

    def add(self, name: str, fig, caption: str) -> str:
        import matplotlib.pyplot as plt

        from .fonts import save

        save(fig, self.folder / f"{name}.svg", bbox_inches="tight")
        buf = io.BytesIO()
        save(fig, buf, format="png", dpi=130, bbox_inches="tight")
        (self.folder / f"{name}.png").write_bytes(buf.getvalue())
        plt.close(fig)
        data = base64.b64encode(buf.getvalue()).decode("ascii")
        return (f'<figure><img alt="{_esc(caption)}" src="data:image/png;base64,{data}">'
                f"<figcaption>{_esc(caption)}</figcaption></figure>")


def _versions() -> dict[str, str]:
    import importlib.metadata as md

    from . import __version__

    out = {"flawmix": __version__, "python": platform.python_version()}
    for pkg in ("numpy", "scipy", "pandas", "emcee", "arviz", "matplotlib"):
        try:
            out[pkg] = md.version(pkg)
        except md.PackageNotFoundError:
            out[pkg] = "not installed"
    return out


def _prepare_folder(out: Path, force: bool, check_only: bool = False) -> Path | None:
    """Check the output folder (before any long computation) and make the temporary one."""
    out = Path(out)
    if out.exists() and not force:
        raise FlawmixError(f"{out}: already exists; choose another --out folder or add --force to replace it")
    if out.exists() and not out.is_dir():
        raise FlawmixError(f"{out}: is a file, not a folder; choose another --out")
    if out.exists() and any(out.iterdir()) and not ((out / "report.html").exists() and (out / "results.json").exists()):
        # --force replaces earlier reports only: never wipe a folder of other files
        raise FlawmixError(f"{out}: exists and is not a flawmix report folder; choose another --out "
                           "(--force only replaces an earlier report)")
    _check_place(out)
    if check_only:
        return None
    try:
        out.parent.mkdir(parents=True, exist_ok=True)
        tmp = Path(tempfile.mkdtemp(prefix=f".{out.name}.", dir=out.parent))
    except OSError as exc:
        raise FlawmixError(f"{out}: cannot create the report folder there ({exc.strerror or exc}); "
                           "choose a writable --out") from None
    umask = os.umask(0)
    os.umask(umask)
    os.chmod(tmp, 0o777 & ~umask)   # mkdtemp makes it private; a report folder is ordinary
    return tmp


def _check_place(out: Path) -> None:
    """--out must lie below folders: name the plain file in the way, if any."""
    for parent in out.parents:
        if parent.exists():
            if not parent.is_dir():
                raise FlawmixError(f"{out}: '{parent}' is a file, not a folder; choose another --out")
            if not os.access(parent, os.W_OK):
                raise FlawmixError(f"{out}: no permission to write in '{parent}'; choose a writable --out")
            try:    # the permission bits do not tell all (root, read-only mounts, /proc): try it, before the long part
                os.rmdir(tempfile.mkdtemp(prefix=".flawmix-probe.", dir=parent))
            except OSError as exc:
                raise FlawmixError(f"{out}: cannot create a folder in '{parent}' ({exc.strerror or exc}); "
                                   "choose a writable --out") from None
            return


def _commit_folder(tmp: Path, out: Path) -> None:
    """Swap the finished temporary folder into place (the old one is removed only after)."""
    old = None
    if out.exists():
        old = out.with_name(f".{out.name}.old-{os.getpid()}")
        out.rename(old)
    tmp.rename(out)
    if old is not None:
        shutil.rmtree(old, ignore_errors=True)


@dataclass
class Analysis:
    """Everything one report shows, computed once by the Python API before any section is
    written. Sections only read it."""

    specimens: object
    study: object
    mle: object
    main: object
    confidence: float
    seed: int
    comparison: object = None
    prediction: object = None
    bottom: object = None
    coupon: object = None
    component: tuple | None = None      # (name, Geometry)
    what_if: pd.DataFrame | None = None
    extra: dict = field(default_factory=dict)


def analyse(specimens, *, study=None, method="mle", compare_models=True, bayes=True, boundary_replicates=199,
            bootstrap=0, seed=0, confidence=None) -> Analysis:
    """Run every fit, comparison and prediction the report shows (progress on stderr)."""
    from . import progress
    from .bottomline import analyse as bottom_line_of, with_draws
    from .compare import compare
    from .fit import fit
    from .predict import predict
    from .scenarios import standard_scenarios, what_if_table

    conf = confidence or (study.confidence if study and study.confidence else 0.90)
    sized = study.fit_geometries(specimens) if study else None
    with _warnings.catch_warnings():
        _warnings.simplefilter("ignore", FlawmixWarning)
        with progress.task("fitting (maximum likelihood)"):
            mle = fit(specimens, confidence=conf, geometries=sized,
                      **({"bootstrap": bootstrap, "seed": seed} if bootstrap and not sized else {}))
        main = fit(specimens, method="bayes", confidence=conf, seed=seed,
                   priors=(study.priors or None) if study else None,
                   geometries=sized) if method == "bayes" else mle
        comparison = None
        if compare_models and len(specimens.populations) > 1 and not sized:
            with progress.task("comparing models"):
                comparison = compare(specimens, bayes=bayes, bootstrap=boundary_replicates, seed=seed, confidence=conf)
    a = Analysis(specimens, study, mle, main, conf, seed, comparison)
    from .lots import comparison_for_report

    a.extra["lots"] = comparison_for_report(specimens, study, conf, seed)   # None without a lot column
    a.extra["flaws"] = _flaws(specimens, study, mle)
    drawn = with_draws(main, seed) if main.model.startswith("concurrent") else main   # intervals on predictions
    a.bottom, _ = bottom_line_of(drawn, study, specimens, comparison, seed=seed)
    comp = study.component_object() if study else None
    coupon = study.specimen_geometry(specimens, mle, required=False) if study and study.geometries else None
    if main.model.startswith("concurrent"):
        a.coupon = coupon
        a.component = comp if comp is not None and coupon is not None else None
        if a.component is not None:
            name, body = a.component
            load = study.component_load().get("stress")
            a.prediction = predict(drawn, coupon, body, component_name=name,
                                   **({"stresses": sorted({load, *_default_stresses(drawn, coupon, body, name)})}
                                      if load else {}))
        names = [p.name for p in main.populations]
        if len(names) > 1:
            a.what_if = what_if_table(drawn, coupon, a.component[1] if a.component else None,
                                      standard_scenarios(names),
                                      component_name=a.component[0] if a.component else "component")
    return a


def _flaws(specimens, study, result):
    """The flaw-size analysis when the table has flaw sizes: a FlawAnalysis, or the one-line
    reason it cannot be made (shown in its section), or None without flaw sizes."""
    from .fracture import analyse_flaws, has_flaw_sizes

    if not has_flaw_sizes(specimens):
        return None
    try:
        return analyse_flaws(specimens, study, fit=result if len(result.populations) > 1 else None)
    except FlawmixError as exc:
        return str(exc)


def _default_stresses(result, coupon, body, name):
    from .predict import predict

    return list(predict(result, coupon, body, component_name=name).probabilities.index)


def write_report(
    specimens,
    out,
    *,
    study=None,
    force: bool = False,
    method: str = "mle",
    compare_models: bool = True,
    bayes: bool = True,
    boundary_replicates: int = 199,
    bootstrap: int = 0,
    seed: int = 0,
    confidence: float | None = None,
    title: str | None = None,
    analysis: Analysis | None = None,
) -> Path:
    """Run the analysis and write the report folder ``out``; returns its path.

    boundary_replicates: parametric-bootstrap replicates of the concurrent-vs-partial test
    (0 skips it); bootstrap: parametric-bootstrap replicates of the fit itself (as
    ``fit(bootstrap=N)``; the bottom line and component use 1000 when 0). The folder holds
    report.html (self-contained), results.json, figures/*.png|svg and tables/*.csv. An
    existing folder is replaced only with ``force=True``."""
    import matplotlib

    matplotlib.use("Agg")
    from . import progress

    out = Path(out)
    _prepare_folder(out, force, check_only=True)
    a = analysis or analyse(specimens, study=study, method=method, compare_models=compare_models, bayes=bayes,
                            boundary_replicates=boundary_replicates, bootstrap=bootstrap, seed=seed,
                            confidence=confidence)
    tmp = _prepare_folder(out, force)
    try:
        (tmp / "figures").mkdir()
        (tmp / "tables").mkdir()
        figs = _Figures(tmp / "figures")
        heading = title or (study.title if study and study.title else "Strength analysis with competing flaw populations")
        body = [f"<h1>{_esc(heading)}</h1>",
                f'<p class="small">flawmix {_esc(_versions()["flawmix"])} report; seed {a.seed}; '
                f"confidence {_esc(fmt.level(a.confidence, 'two-sided'))}</p>"]
        with progress.task("writing the report", len(SECTIONS)) as bar:
            for i, section in enumerate(SECTIONS):
                body += section(a, figs, tmp / "tables")
                bar.step(i + 1, section.__name__.removeprefix("section_").replace("_", " "))
        page = ("<!DOCTYPE html><html lang=\"en\"><head><meta charset=\"utf-8\">"
                "<meta http-equiv=\"Content-Security-Policy\" content=\"default-src 'none'; img-src data:; "
                "style-src 'unsafe-inline'\">"
                f"<title>{_esc(heading)}</title><style>{CSS}</style></head><body>{''.join(body)}</body></html>")
        (tmp / "report.html").write_text(page, encoding="utf-8")
        (tmp / "results.json").write_text(json.dumps(_results(a), indent=2, ensure_ascii=False, default=_json_default),
                                          encoding="utf-8")
        _commit_folder(tmp, out)
    except OSError as exc:      # disk full, folder removed meanwhile...: nothing partial is left
        shutil.rmtree(tmp, ignore_errors=True)
        raise FlawmixError(f"{out}: writing the report failed ({exc.strerror or exc}); nothing was written; "
                           "check free space and permissions") from None
    except BaseException:       # errors and Ctrl-C alike: nothing partial is left
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return out


def _results(a: Analysis) -> dict:
    results = a.main.to_dict()
    if a.main is not a.mle:
        results["maximum_likelihood"] = a.mle.to_dict()
    if a.comparison is not None:
        results["comparison"] = a.comparison.to_dict()
    if a.prediction is not None:
        results["prediction"] = a.prediction.to_dict()
    if a.bottom is not None:
        results["bottom_line"] = a.bottom.to_dict()
    if a.extra.get("lots") is not None and not isinstance(a.extra["lots"], str):
        results["lots"] = a.extra["lots"].to_dict()
    if a.extra.get("flaws") is not None and not isinstance(a.extra["flaws"], str):
        results["flaws"] = a.extra["flaws"].to_dict()
    results["software"] = _versions()
    results["seed"] = a.seed
    return results


# ---- sections: each (analysis, figures, tables folder) -> list of HTML pieces -----------------
# Add a section by writing one small function and listing it in SECTIONS.

def section_bottom_line(a: Analysis, figs, tables) -> list[str]:
    b = a.bottom
    items = "".join(f"<li>{_esc(f)}</li>" for f in b.findings)
    cautions = "".join(f'<li class="caution-item">{_esc(c)}</li>' for c in b.cautions)
    return ['<div class="bottom-line" id="bottom-line"><h2>Bottom line</h2>'
            f"<ul>{items}</ul>" + (f"<p><b>Cautions for this data</b></p><ul>{cautions}</ul>" if cautions else "")
            + '<p class="small">Details: probability plot (section 2), estimates (3), model comparison (4), '
              "limiting flaw and what-if (5), component (6).</p></div>"]


def section_data(a: Analysis, figs, tables) -> list[str]:
    sp = a.specimens
    out = ["<h2>1. The question and the data</h2>",
           "<p>Which flaw populations control the strength of these specimens, how strong is each, "
           "and what does that mean for the component? Each population is fitted as its own Weibull "
           "distribution, with failures from other origins and survivors treated as censored.</p>"]
    src = sp.source or "DataFrame"
    out.append(f"<p>Input: <code>{_esc(Path(src).name if sp.source else src)}</code>"
               + (f", SHA-256 <code>{_esc(sp.checksum)}</code>" if sp.checksum else "")
               + f". Stress unit: {_esc(sp.unit)}.</p>")
    counts = sp.origin_table() if sp.origin_map else _origin_counts(sp)
    counts.to_csv(tables / "origins.csv", index=False)
    out.append(f"<p>{sp.n_specimens} specimens: {sp.n_failed} failed "
               f"({sp.n_unidentified} with the origin unidentified, {sp.n_ambiguous} ambiguous), "
               f"{sp.n_survived} survived.</p>")
    out.append(_accounting_html(sp))
    out.append("<p>Origin as written → how it was read → population:</p>" + _table(counts, index=False))
    return out


def section_probability_plot(a: Analysis, figs, tables) -> list[str]:
    from . import plots

    main = a.main
    marked = _origins_to_reexamine(a)["specimen"].tolist()
    ringed = (" Ringed: origin labels to re-examine (improbable at their strength, see 'Fracture origins')."
              if marked else "")
    return ["<h2>2. Probability plot</h2>",
            figs.add("probability_plot", plots.probability_plot(main, mark=marked).figure,
                     "Every specimen by fracture origin. Each population's failures sit at Johnson adjusted ranks "
                     "(other failures and survivors suspended); each dashed line is that population's own fit, "
                     "with its own band." + ringed),
            figs.add("probability_plot_all", plots.probability_plot(main, view="all").figure,
                     "All failures ranked together, with the combined model curve and its band: the kink of "
                     "competing populations; dotted lines mark where the dominating population changes.")]


def section_estimates(a: Analysis, figs, tables) -> list[str]:
    from . import plots

    main, mle = a.main, a.mle
    out = ["<h2>3. Estimates per population</h2>"]
    main.summary(full=True).to_csv(tables / "estimates.csv")
    out.append(_table(main.summary(), kinds={"failures": "count"}))
    kind = "credible (equal-tailed, posterior)" if main.method == "bayes" else \
        "profile likelihood" if main.populations[0].interval_method == "profile" else main.populations[0].interval_method
    out.append(f"<p>Model: {_esc(main.model)}; method: {_esc(main.method)}; intervals: {_esc(kind)}, "
               f"{_esc(fmt.level(a.confidence, 'two-sided'))}. Log-likelihood {fmt.score(mle.log_likelihood)}, "
               f"AIC {fmt.score(mle.aic)}, BIC {fmt.score(mle.bic)}.</p>")
    if main.method == "bayes":
        d = main.extras["diagnostics"]
        out.append(f"<p>Sampler: {main.extras['walkers']} walkers, {main.extras['steps']} steps kept; "
                   f"largest R-hat {d['r_hat_max']:.3f}, smallest bulk ESS {d['ess_bulk_min']:.0f}, "
                   f"smallest tail ESS {d['ess_tail_min']:.0f}. Priors: "
                   + "; ".join(_esc(f"{p['population']}: m {p['modulus']}, σθ {p['characteristic_strength']}")
                               for p in main.priors) + ".</p>")
        out.append(figs.add("posterior_pairs", plots.pair_plot(main), "Posterior draws of every parameter."))
    for t in mle.tests:
        out.append(f"<p>Test {_esc(t.name)}: statistic {t.statistic:.2f}, {t.df} degrees of freedom, "
                   f"p = {fmt.p_value(t.p_value)}. {_esc(t.meaning)}</p>")
    for name in plots.contour_populations(mle):
        try:
            ax = plots.likelihood_contour_plot(mle, name)
        except FlawmixError:
            continue
        out.append(figs.add(f"likelihood_{_safe(name)}", ax.figure, f"Likelihood contours of population '{name}'."))
    return out


def section_comparison(a: Analysis, figs, tables) -> list[str]:
    c = a.comparison
    if c is None:
        return []
    out = ["<h2>4. One population or several, and how do they share specimens?</h2>"]
    table = c.table.drop(columns=[x for x in ("pareto_k_bad", "degenerate") if x in c.table])
    table.to_csv(tables / "model_comparison.csv")
    out.append(_table(table))
    out.append(f'<p class="verdict">{_esc(c.verdict)}</p>')
    for t in c.tests:
        out.append(f"<p>Test {_esc(t.name)}: statistic {t.statistic:.2f}, p = {fmt.p_value(t.p_value)} "
                   f"({_esc(t.method)}). {_esc(t.meaning)}</p>")
    return out


def section_lots(a: Analysis, figs, tables) -> list[str]:
    from . import plots
    from .lots import reference_text

    c = a.extra.get("lots")
    if c is None:
        return []
    out = ["<h2>Lots compared population by population</h2>"]
    if isinstance(c, str):   # the lots could not be compared: say why
        return out + [f'<p class="caution">{_esc(c)}</p>']
    out.append(f"<p>The table's lots ({_esc(', '.join(c.lots))}; baseline '{_esc(c.lots[0])}') fitted jointly, each "
               "population with its own modulus and characteristic strength in every lot; likelihood-ratio tests of "
               "'the same in every lot' and of 'the same modulus' for each population, the other populations free "
               "per lot.</p>")
    c.summary().to_csv(tables / "lots.csv")
    out.append(_table(c.summary(), kinds={"failures": "count", "p same population": "p_value",
                                          "p same modulus": "p_value"}))
    out.append(f'<p class="small">p-values: {_esc(reference_text(c))}.</p>')
    out.append(f'<p class="verdict">{_esc(c.verdict)}</p>')
    changed = [p.name for p in c.populations if p.changed]
    if changed:
        out.append(f'<p class="caution">The lots differ ({_esc(", ".join(changed))} changed): the fits, figures and '
                   "predictions of the other sections pool every lot and so mix them. Before they serve a design, "
                   "analyse the lot that represents production on its own.</p>")
    out.append(figs.add("lots_probability_plots", plots.lot_probability_plot(c),
                        "Each population's failures lot by lot, at adjusted ranks within the lot, with each lot's own "
                        "fitted line; every panel on the same axes."))
    return out


def section_limits(a: Analysis, figs, tables) -> list[str]:
    from . import plots
    from .bottomline import dominance_changes

    main = a.main
    out = ["<h2>5. Which flaw population limits strength, and what removing it would gain</h2>"]
    if not main.model.startswith("concurrent"):
        return out + [f"<p>Scaling and what-if analyses use the concurrent model; this fit is "
                      f"'{_esc(main.model)}'.</p>"]
    if a.component is not None:
        cname, body = a.component
        out.append(figs.add("failure_shares", plots.failure_share_plot(main, coupon=a.coupon, component=body,
                                                                      component_name=cname).figure,
                            f"Share of failures from each population: test specimen (solid) and {cname} (dashed). "
                            "These are shares of the failures at each stress (hazard rates); the "
                            "'dominates' stresses below are where cumulative risks cross, so they differ."))
    else:
        out.append(figs.add("failure_shares", plots.failure_share_plot(main).figure,
                            "Share of failures from each population across stress (hazard rates); the "
                            "'dominates' stresses below are where cumulative risks cross, so they differ."))
    names = [p.name for p in main.populations]
    s = main.specimens.strength
    sides = [("test specimen", dominance_changes(main.moduli, main.characteristic_strengths, names,
                                                 s.min() / 10, s.max() * 2))]
    if a.prediction is not None:
        p = a.prediction
        sides.append((p.component_name, dominance_changes(p.moduli, p.component_strengths, names,
                                                          s.min() / 100, s.max() * 2)))
    for where, cross in sides:
        for c in cross:
            outside = "" if s.min() <= c["stress"] <= s.max() else " (outside the tested strengths: an extrapolation)"
            out.append(f"<p>{_esc(where)}: <b>{_esc(c['below'])}</b> dominates below "
                       f"{fmt.stress(c['stress'])} {_esc(main.unit)}, <b>{_esc(c['above'])}</b> above{outside}.</p>")
    if a.what_if is not None:
        table = a.what_if.reset_index()
        table.to_csv(tables / "what_if.csv", index=False)
        level = fmt.level(a.confidence)
        table = table.rename(columns={"before": f"stress before ({main.unit})", "after": f"stress after ({main.unit})",
                                      "gain low (%)": f"gain {level} low (%)", "gain high (%)": f"gain {level} high (%)"})
        out.append("<p>Stress at a given failure probability after each change, alone and combined (a population "
                   "removed, e.g. pores by hot isostatic pressing; a risk halved, e.g. grinding damage by a finer "
                   f"finish). Each cell: stress after the change, gain over today in %, its {level} "
                   f"(every column: tables/what_if.csv):</p>")
        wide = _what_if_wide(a.what_if, main.unit)
        out.append(_table(wide, index=False, kinds={c: "text" for c in wide.columns}))
    return out


def _what_if_wide(what_if, unit: str):
    """The what-if table with one row per change and one column per body and failure
    probability, each cell "stress (gain % [low, high])"; the row "today" gives the stresses
    before any change."""
    import pandas as pd

    from .support import short_note

    t = what_if.reset_index()
    columns = list(dict.fromkeys(zip(t["body"], t["failure probability"])))
    def head(body, prob):
        return f"{body}, P = {fmt.probability(prob)} ({unit})"
    rows = [{"change": "today", **{head(b, q): fmt.stress(t[(t["body"] == b) & (t["failure probability"] == q)]
                                                        ["before"].iloc[0]) for b, q in columns}}]
    for change, group in t.groupby("change", sort=False):
        row = {"change": change}
        for b, q in columns:
            r = group[(group["body"] == b) & (group["failure probability"] == q)].iloc[0]
            low, high = r.get("gain low (%)"), r.get("gain high (%)")   # absent when the fit has no draws
            band = "" if low is None or pd.isna(low) else f" [{fmt.percent(low)}, {fmt.percent(high)}]"
            row[head(b, q)] = f"{fmt.stress(r['after'])} ({fmt.percent(r['gain (%)'])} %{band})"
            marker = short_note(r.get("note"))   # a weak population or an extrapolation behind the number
            if marker:
                row[head(b, q)] += f" ← {marker}"
        rows.append(row)
    return pd.DataFrame(rows)


def section_component(a: Analysis, figs, tables) -> list[str]:
    from . import plots

    p = a.prediction
    if p is None:
        return []
    name = p.component_name
    level = fmt.level(p.confidence)
    out = [f"<h2>6. The component: {_esc(name)}</h2>"]
    out.append(_table(pd.DataFrame({"population": p.populations, "modulus": p.moduli,
                                    "σθ test specimen": p.specimen_strengths,
                                    f"σθ {name}": p.component_strengths}), index=False))
    p.probabilities.to_csv(tables / "component_failure_probability.csv")
    p.strengths_at.to_csv(tables / "component_strength_at_probability.csv")
    rename = {c: c.replace(" low", f" {level} low").replace(" high", f" {level} high") for c in p.probabilities}
    out.append("<p>Failure probability at the component's reference (largest) stress"
               + ("" if p.intervals == "none" else f"; intervals from {_esc(p.intervals)} draws") + ":</p>")
    out.append(_table(p.probabilities.rename(columns=rename), kinds={c: "probability" for c in rename.values()},
                      index_kind="stress"))
    out.append("<p>Reference stress at a given failure probability:</p>")
    out.append(_table(p.strengths_at.rename(columns=rename), kinds={c: "stress" for c in rename.values()},
                      index_kind="probability"))
    out.append(figs.add("size_effect", plots.size_effect_plot(a.main, a.coupon, a.component[1],
                                                              component_name=name).figure,
                        "Characteristic strength against effective size: each population scales with its own "
                        "measure and modulus."))
    return out


def _origins_to_reexamine(a: Analysis) -> pd.DataFrame:
    from .origins import specimens_to_reexamine

    return specimens_to_reexamine(a.main)


def section_origins(a: Analysis, figs, tables) -> list[str]:
    names = [p.name for p in a.main.populations]
    if len(names) < 2:
        return []
    frame = a.main.origin_probabilities()
    frame.to_csv(tables / "origin_probabilities.csv", index=False)
    threshold = frame.attrs["threshold"]
    out = ["<h2>Fracture origins: which population, and which labels to re-examine</h2>",
           "<p>For each failure whose origin is unidentified or ambiguous, the probability that each candidate "
           "population caused it, given its strength and the fitted model. For each labelled failure, the "
           "probability of its label when the model is refitted with that label withheld; labels below "
           f"{threshold:.0%} are listed as specimens to re-examine (a mislabelled fracture surface, or a rare "
           "but genuine origin). All rows: tables/origin_probabilities.csv.</p>"]
    flagged = _origins_to_reexamine(a)
    out.append("<h3>Specimens to re-examine</h3>")
    if len(flagged):
        out.append(_table(flagged, index=False, kinds={"strength": "stress", "label probability": "probability",
                                                         **{n: "probability" for n in names}}))
    else:
        out.append(f"<p>None: every written origin has probability {threshold:.0%} or more at its strength.</p>")
    open_rows = frame[frame["reading"].isin(["unidentified", "ambiguous"])]
    if len(open_rows):
        shown = open_rows[["specimen", "strength", "origin", "reading", *names,
                           *[c for c in frame.columns if c.endswith((" low", " high"))]]]
        out.append("<h3>Unidentified and ambiguous origins</h3>"
                   + _table(shown, index=False, kinds={"strength": "stress", **{c: "probability" for c in shown.columns
                                                                                if c in names or " low" in c
                                                                                or " high" in c}}))
    return out


def section_flaws(a: Analysis, figs, tables) -> list[str]:
    from . import plots

    flaws = a.extra.get("flaws")
    if flaws is None:
        return []
    out = ["<h2>Flaw sizes and fracture toughness</h2>"]
    if isinstance(flaws, str):
        return out + [f"<p>The table has flaw sizes, but they cannot be compared with fracture mechanics: "
                      f"{_esc(flaws)}</p>"]
    t = flaws.toughness
    out.append(f"<p>Each measured origin implies a toughness K = Y·σ·√a (Y of its population's crack model, σ the "
               f"strength, a the flaw size). It agrees with K_Ic = {t.value:.3g} MPa·√m"
               + (f" [{t.interval[0]:.3g}, {t.interval[1]:.3g}]" if t.interval else "")
               + f" when within ±{t.tolerance:.0%}. Flaw sizes in {_esc(flaws.size_unit)}.</p>")
    pops = flaws.populations.drop(columns=["critical at stress"])
    out.append(_table(pops, kinds={"measured": "count"}))
    if flaws.component_stress:
        out.append(f"<p>The critical flaw size at the component's analysed stress ({flaws.component_stress:g} "
                   f"{_esc(flaws.unit)}) is the largest flaw of each type the process may leave.</p>")
    flaws.specimens.drop(columns=["notes"]).to_csv(tables / "flaw_sizes.csv", index=False)
    flagged = flaws.flagged
    if len(flagged):
        shown = flagged[["specimen", "strength", "population", "flaw size", "location", "implied toughness"]].copy()
        shown["why"] = ["; ".join(n) for n in flagged["notes"]]
        out.append("<h3>Specimens to look at again</h3>" + _table(shown, index=False))
    out.append(figs.add("flaw_sizes", plots.flaw_size_plot(flaws).figure,
                        "Strength against measured flaw size on logarithmic axes; each line is σ = K_Ic/(Y·√a) for "
                        "that population's crack model (dotted: the agreement band); ringed: specimens to look at "
                        "again."))
    return out


def section_methods(a: Analysis, figs, tables) -> list[str]:
    out = ["<h2>Methods and references</h2><ul>",
           "<li>Competing-risk censored maximum likelihood: each failure contributes the hazard of its "
           "origin population (the sum over candidates when the origin is unidentified or ambiguous), "
           "every specimen the survival of all populations; survivors only the survival.</li>",
           "<li>Intervals: pivotal bounds by seeded Monte Carlo for one complete population, profile "
           "likelihood otherwise; Bayesian equal-tailed credible intervals from emcee draws; component "
           "predictions from parametric-bootstrap or posterior draws.</li>",
           "<li>Model comparison: AIC, BIC and PSIS-LOO on the same data with origin labels; boundary "
           "tests by parametric bootstrap.</li>",
           "<li>Size scaling: each population with its own effective volume, area or edge length; multiaxial "
           "stress states by the principle of independent action or the largest principal stress.</li></ul>",
           "<ol>" + "".join(f"<li>{_esc(r)}</li>" for r in REFERENCES) + "</ol>"]
    return out


def section_software(a: Analysis, figs, tables) -> list[str]:
    return ["<h2>Software</h2><p>" + ", ".join(f"{_esc(k)} {_esc(v)}" for k, v in _versions().items())
            + f"; seed {a.seed}.</p>"]


def section_warnings(a: Analysis, figs, tables) -> list[str]:
    warn = list(dict.fromkeys([*a.mle.warnings, *(a.main.warnings if a.main is not a.mle else [])]))
    if not warn:
        return []
    return ["<h2>Warnings</h2><ul>" + "".join(f"<li>{_esc(w)}</li>" for w in warn) + "</ul>"]


def section_cautions(a: Analysis, figs, tables) -> list[str]:
    return ["<h2>Cautions</h2>" + "".join(f'<p class="caution">{_esc(c)}</p>' for c in CAUTIONS)]


SECTIONS = [section_bottom_line, section_data, section_probability_plot, section_estimates, section_comparison,
            section_lots, section_limits, section_component, section_origins, section_flaws, section_methods,
            section_software, section_warnings, section_cautions]


def _json_default(x):
    if isinstance(x, (np.floating, np.integer)):
        return x.item()
    if isinstance(x, np.ndarray):
        return x.tolist()
    return str(x)


def _safe(name: str) -> str:
    return "".join(ch if ch.isalnum() else "_" for ch in name)[:40]


def _accounting_html(specimens) -> str:
    """Rows read, used and excluded (each excluded row with its reason)."""
    acc = specimens.accounting
    if not acc:
        return ""
    text = f"<p>Rows read: {acc['rows_read']}; used: {acc['used']}; excluded: {acc['excluded']}.</p>"
    if acc["excluded_rows"]:
        text += _table(pd.DataFrame(acc["excluded_rows"]).fillna("—"), index=False)
    return text


def _origin_counts(specimens) -> pd.DataFrame:
    """Failures by the origin label as written, with the population each maps to."""
    names = specimens.population_names
    rows: dict[tuple[str, str], int] = {}
    for i in range(specimens.n_specimens):
        if not specimens.failed[i]:
            key = ("(survived)", "—")
        else:
            label = str(specimens.origin[i]).strip() or "(empty)"
            pops = [n for n, c in zip(names, specimens.candidates[i]) if c]
            if specimens.unidentified is not None and specimens.unidentified[i]:
                target = "unidentified"
            else:
                target = " or ".join(pops)
            key = (label, target)
        rows[key] = rows.get(key, 0) + 1
    return pd.DataFrame([{"origin as written": k[0], "population": k[1], "specimens": v}
                         for k, v in sorted(rows.items(), key=lambda kv: (kv[0][1], kv[0][0]))])
