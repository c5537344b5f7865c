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


def _fmt(x, digits=4) -> str:
    if x is None:
        return "—"
    if isinstance(x, (float, np.floating)):
        if not np.isfinite(x):
            return "unbounded" if np.isinf(x) else "—"
        return f"{x:.{digits}g}"
    return str(x)


def _table(frame: pd.DataFrame, index=True, digits=4) -> str:
    frame = frame.reset_index() if index else frame
    head = "".join(f'<th class="text">{_esc(c)}</th>' if frame[c].dtype == object else f"<th>{_esc(c)}</th>"
                   for c in frame.columns)
    rows = []
    for _, row in frame.iterrows():
        cells = []
        for c in frame.columns:
            v = row[c]
            cls = ' class="text"' if isinstance(v, str) else ""
            cells.append(f"<td{cls}>{_esc(_fmt(v, digits))}</td>")
        rows.append("<tr>" + "".join(cells) + "</tr>")
    return f"<table><thead><tr>{head}</tr></thead><tbody>{''.join(rows)}</tbody></table>"


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


def _prepare_folder(out: Path, force: bool) -> Path:
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


def write_report(
    specimens,
    out,
    *,
    study=None,
    force: bool = False,
    method: str = "mle",
    compare_models: bool = True,
    bayes: bool = True,
    bootstrap: int = 199,
    seed: int = 0,
    confidence: float | None = None,
    title: str | None = None,
) -> Path:
    """Run the analysis and write the report folder ``out``; returns its path.

    The folder holds report.html (self-contained), results.json, figures/*.png|svg and
    tables/*.csv. An existing folder is replaced only with ``force=True``."""
    import matplotlib

    matplotlib.use("Agg")
    from . import plots
    from .compare import compare
    from .fit import fit
    from .predict import predict, what_if

    out = Path(out)
    tmp = _prepare_folder(out, force)
    try:
        (tmp / "figures").mkdir()
        (tmp / "tables").mkdir()
        conf = confidence or (study.confidence if study and study.confidence else 0.90)
        sized = study.fit_geometries(specimens) if study else None
        with _warnings.catch_warnings():
            _warnings.simplefilter("ignore", FlawmixWarning)
            mle = fit(specimens, confidence=conf, geometries=sized)
            main = fit(specimens, method="bayes", confidence=conf, seed=seed,
                       priors=(study.priors or None) if study else None,
                       geometries=sized) if method == "bayes" else mle
            comparison = compare(specimens, bayes=bayes, bootstrap=bootstrap, seed=seed, confidence=conf) \
                if compare_models and len(specimens.populations) > 1 and not sized else None
        figs = _Figures(tmp / "figures")
        body: list[str] = []
        heading = title or (study.title if study and study.title else "Strength analysis with competing flaw populations")
        body.append(f"<h1>{_esc(heading)}</h1>")
        body.append(f'<p class="small">flawmix {_esc(_versions()["flawmix"])} report; seed {seed}; '
                    f"confidence {conf:.0%}</p>")

        # 1. question and data
        body.append("<h2>1. The question and the data</h2>")
        body.append("<p>Which flaw populations control the strength of these specimens, how strong is each, "
                    "and what does that mean for the component? Each population is fitted as its own Weibull "
                    "distribution, with failures from other origins and survivors treated as censored.</p>")
        src = specimens.source or "DataFrame"
        body.append(f"<p>Input: <code>{_esc(Path(src).name if specimens.source else src)}</code>"
                    + (f", SHA-256 <code>{_esc(specimens.checksum)}</code>" if specimens.checksum else "")
                    + f". Stress unit: {_esc(specimens.unit)}.</p>")
        counts = specimens.origin_table() if specimens.origin_map else _origin_counts(specimens)
        counts.to_csv(tmp / "tables" / "origins.csv", index=False)
        body.append(f"<p>{specimens.n_specimens} specimens: {specimens.n_failed} failed "
                    f"({specimens.n_unidentified} with the origin unidentified, {specimens.n_ambiguous} ambiguous), "
                    f"{specimens.n_survived} survived.</p>")
        body.append(_accounting_html(specimens))
        body.append("<p>Origin as written → how it was read → population:</p>" + _table(counts, index=False))

        # 2. probability plot
        body.append("<h2>2. Probability plot</h2>")
        body.append(figs.add("probability_plot", plots.probability_plot(main).figure,
                             "Every specimen by fracture origin. Each population's failures sit at Johnson adjusted "
                             "ranks (other failures and survivors suspended); dashed lines are the populations alone, "
                             "the solid curve is the fitted model with its band."))
        body.append(figs.add("probability_plot_all", plots.probability_plot(main, view="all").figure,
                             "The same data with all failures ranked together: the kink of competing populations."))

        # 3. estimates
        body.append("<h2>3. Estimates per population</h2>")
        summary = main.summary()
        summary.to_csv(tmp / "tables" / "estimates.csv")
        body.append(_table(summary))
        kind = "credible (equal-tailed, posterior)" if main.method == "bayes" else \
            "profile likelihood" if main.populations[0].interval_method == "profile" else main.populations[0].interval_method
        body.append(f"<p>Model: {_esc(main.model)}; method: {_esc(main.method)}; intervals: {_esc(kind)}, "
                    f"{conf:.0%} two-sided. Log-likelihood {mle.log_likelihood:.3f}, AIC {mle.aic:.2f}, "
                    f"BIC {mle.bic:.2f}.</p>")
        if main.method == "bayes":
            d = main.extras["diagnostics"]
            body.append(f"<p>Sampler: {main.extras['walkers']} walkers, {main.extras['steps']} steps kept; "
                        f"largest R-hat {d['r_hat_max']:.4f}, smallest bulk ESS {d['ess_bulk_min']:.0f}, "
                        f"smallest tail ESS {d['ess_tail_min']:.0f}. Priors: "
                        + "; ".join(_esc(f"{p['population']}: m {p['modulus']}, σθ {p['characteristic_strength']}")
                                    for p in main.priors) + ".</p>")
            body.append(figs.add("posterior_pairs", plots.pair_plot(main), "Posterior draws of every parameter."))
        for t in mle.tests:
            body.append(f"<p>Test {_esc(t.name)}: statistic {t.statistic:.3f}, {t.df} df, p = {t.p_value:.3g}. "
                        f"{_esc(t.meaning)}</p>")
        for name in [p.name for p in mle.populations][:4]:
            try:
                ax = plots.likelihood_contour_plot(mle, name)
            except FlawmixError:
                continue
            body.append(figs.add(f"likelihood_{_safe(name)}", ax.figure,
                                 f"Likelihood contours of population '{name}'."))

        # 4. model comparison
        if comparison is not None:
            body.append("<h2>4. One population or several, and how do they share specimens?</h2>")
            table = comparison.table.drop(columns=[c for c in ("pareto_k_bad", "degenerate") if c in comparison.table])
            table.to_csv(tmp / "tables" / "model_comparison.csv")
            body.append(_table(table))
            body.append(f'<p class="verdict">{_esc(comparison.verdict)}</p>')
            for t in comparison.tests:
                body.append(f"<p>Test {_esc(t.name)}: statistic {t.statistic:.3f}, p = {t.p_value:.3g} "
                            f"({_esc(t.method)}). {_esc(t.meaning)}</p>")

        # 5. which flaw limits strength, and the component
        body.append("<h2>5. Which flaw population limits strength, and what removing it would gain</h2>")
        comp = study.component_object() if study else None
        coupon = study.specimen_geometry(specimens, mle, required=False) if study and study.geometries else None
        prediction = None
        if main.model.startswith("concurrent"):
            if comp is not None and coupon is not None:
                cname, component = comp
                prediction = predict(main, coupon, component, component_name=cname)
                body.append(figs.add("failure_shares", plots.failure_share_plot(main, coupon=coupon, component=component,
                                                                                component_name=cname).figure,
                                     f"Share of failures from each population: test specimen (solid) and {cname} "
                                     "(dashed)."))
            else:
                body.append(figs.add("failure_shares", plots.failure_share_plot(main).figure,
                                     "Share of failures from each population across stress."))
            sides = [("test specimen", prediction.specimen_crossovers if prediction else _crossovers(main))]
            if prediction is not None:
                sides.append((prediction.component_name, prediction.component_crossovers))
            for where, cross in sides:
                for c in cross:
                    body.append(f"<p>{_esc(where)}: <b>{_esc(c['below'])}</b> dominates below "
                                f"{c['stress']:.4g} {_esc(main.unit)}, <b>{_esc(c['above'])}</b> above.</p>")
            rows = []
            for p in main.populations:
                table = what_if(main, coupon, comp[1] if comp and coupon else None, {p.name: 0.0},
                                probabilities=[1e-3, 0.01, 1 - np.exp(-1)],
                                component_name=comp[0] if comp else "component")
                rows.append(table.reset_index().assign(removed=p.name))
            gains = pd.concat(rows)[["removed", "body", "failure probability", "before", "after", "gain (%)",
                                     *[c for c in ("gain low (%)", "gain high (%)") if c in rows[0]]]]
            gains.to_csv(tmp / "tables" / "what_if_removed.csv", index=False)
            body.append("<p>Stress at a given failure probability with each population removed "
                        "(e.g. pores by hot isostatic pressing, grinding damage by a finer finish):</p>")
            body.append(_table(gains, index=False, digits=3))
        else:
            body.append(f"<p>Scaling and what-if analyses use the concurrent model; this fit is "
                        f"'{_esc(main.model)}'.</p>")

        if prediction is not None:
            body.append(f"<h2>6. The component: {_esc(prediction.component_name)}</h2>")
            body.append(_table(pd.DataFrame({"population": prediction.populations, "modulus": prediction.moduli,
                                             "σθ test specimen": prediction.specimen_strengths,
                                             f"σθ {prediction.component_name}": prediction.component_strengths}),
                               index=False))
            prediction.probabilities.to_csv(tmp / "tables" / "component_failure_probability.csv")
            prediction.strengths_at.to_csv(tmp / "tables" / "component_strength_at_probability.csv")
            body.append("<p>Failure probability at the component's reference (largest) stress:</p>")
            body.append(_table(prediction.probabilities, digits=3))
            body.append("<p>Reference stress at a given failure probability:</p>")
            body.append(_table(prediction.strengths_at))
            body.append(figs.add("size_effect", plots.size_effect_plot(main, coupon, comp[1],
                                                                       component_name=prediction.component_name).figure,
                                 "Characteristic strength against effective size: each population scales with its "
                                 "own measure and modulus."))
            if prediction.intervals == "none":
                body.append('<p class="small">Intervals on component predictions need posterior or bootstrap draws: '
                            "run the report with --method bayes, or flawmix predict --bootstrap N.</p>")

        # methods, software, cautions
        body.append("<h2>Methods and references</h2><ul>")
        body.append("<li>Competing-risk censored maximum likelihood: each failure contributes the hazard of its "
                    "origin population (the sum over candidates when the origin is unidentified or ambiguous), "
                    "every specimen the survival of all populations; survivors only the survival.</li>")
        body.append("<li>Intervals: pivotal bounds by seeded Monte Carlo for one complete population, profile "
                    "likelihood otherwise; Bayesian equal-tailed credible intervals from emcee draws.</li>")
        body.append("<li>Model comparison: AIC, BIC and PSIS-LOO on the same data with origin labels; boundary "
                    "tests by parametric bootstrap.</li>")
        body.append("<li>Size scaling: each population with its own effective volume, area or edge length.</li></ul>")
        body.append("<ol>" + "".join(f"<li>{_esc(r)}</li>" for r in REFERENCES) + "</ol>")
        body.append("<h2>Software</h2><p>" + ", ".join(f"{_esc(k)} {_esc(v)}" for k, v in _versions().items())
                    + f"; seed {seed}.</p>")
        warn = list(dict.fromkeys([*mle.warnings, *(main.warnings if main is not mle else [])]))
        if warn:
            body.append("<h2>Warnings</h2><ul>" + "".join(f"<li>{_esc(w)}</li>" for w in warn) + "</ul>")
        body.append("<h2>Cautions</h2>" + "".join(f'<p class="caution">{_esc(c)}</p>' for c in CAUTIONS))

        page = ("<!DOCTYPE html><html lang=\"en\"><head><meta charset=\"utf-8\">"
                "<meta http-equiv=\"Content-Security-Policy\" content=\"default-src 'none'; img-src data:; "
                "style-src 'unsafe-inline'\">"
                f"<title>{_esc(heading)}</title><style>{CSS}</style></head><body>{''.join(body)}</body></html>")
        (tmp / "report.html").write_text(page, encoding="utf-8")
        results = main.to_dict()
        if main is not mle:
            results["maximum_likelihood"] = mle.to_dict()
        if comparison is not None:
            results["comparison"] = comparison.to_dict()
        if prediction is not None:
            results["prediction"] = prediction.to_dict()
        results["software"] = _versions()
        results["seed"] = seed
        (tmp / "results.json").write_text(json.dumps(results, indent=2, ensure_ascii=False, default=_json_default),
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


def _json_default(x):
    if isinstance(x, (np.floating, np.integer)):
        return x.item()
    if isinstance(x, np.ndarray):
        return x.tolist()
    return str(x)


def _safe(name: str) -> str:
    return "".join(ch if ch.isalnum() else "_" for ch in name)[:40]


def _crossovers(result):
    from .predict import crossovers

    return crossovers(result.moduli, result.characteristic_strengths, [p.name for p in result.populations])


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
