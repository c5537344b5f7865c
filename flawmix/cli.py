"""The ``flawmix`` command line: presentation only, every number comes from the Python API.

Errors are one line on stderr starting ``error:`` and exit status 2; never a traceback.
"""
from __future__ import annotations

import argparse
import json
import os
import sys
import warnings
from pathlib import Path

from .errors import FlawmixError, FlawmixWarning

EXIT_USAGE = 2


class _Parser(argparse.ArgumentParser):
    def error(self, message):  # one line, exit 2, like every other flawmix error
        raise FlawmixError(f"{message} (see '{self.prog} --help')")


def _add_grouping(p: argparse.ArgumentParser) -> None:
    p.add_argument("--study", metavar="FILE", help="study file (TOML) with populations, unit, geometries")
    p.add_argument("--group", metavar="NAME[:KIND]=LABELS", action="append", default=[],
                   help="group origin labels into a population, e.g. pores:volume=pore,agglomerate "
                        "(repeat per population; overrides the study file's populations)")
    p.add_argument("--unit", help="stress unit of the strength column: Pa, kPa, MPa, GPa, psi, ksi "
                                  "(default: the unit in its header, else MPa)")
    p.add_argument("--sheet", metavar="NAME|INDEX", help="Excel: the sheet with the specimens (default the first)")
    p.add_argument("--unidentified-word", metavar="WORD", action="append", default=[],
                   help="another word your lab writes for 'origin not identified' (repeat); n.d., unknown, ?, "
                        "none, - and empty are built in")
    p.add_argument("--origin-separator", metavar="SEP", action="append", default=[],
                   help="what separates the alternatives of an ambiguous origin (repeat; replaces the default "
                        "'|', '/' and ' or ')")
    p.add_argument("--uncertain-origins", choices=["count", "unidentified"],
                   help="an origin with a trailing '?' (inclusion?): count it as that label (default) or treat it "
                        "as unidentified")


def _table_command(sub, name: str, help: str, specimens_help: str) -> argparse.ArgumentParser:
    """A subcommand that reads a specimen table (positional, or from the study file)."""
    p = sub.add_parser(name, help=help)
    p.add_argument("specimens", nargs="?", help=specimens_help)
    _add_grouping(p)
    return p


def _add_fit_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("--method", default="mle", choices=["mle", "bayes"],
                   help="maximum likelihood (default) or Bayesian (emcee) fit")
    p.add_argument("--model", default="concurrent", choices=["concurrent", "exclusive", "partial"],
                   help="how populations share specimens (default concurrent: every specimen carries all)")
    p.add_argument("--seed", type=int, help="seed of the sampler (default: the study file's, else 0)")
    p.add_argument("--progress", action="store_true",
                   help="kept for old scripts: progress now shows on stderr by default (silence it with --quiet)")
    p.add_argument("--reference-prior", action="store_true",
                   help="Bayes: prior 1/(σθ m) instead of the weak defaults (improper; see README)")
    p.add_argument("--confidence", type=float, help="two-sided interval level (default 0.90)")
    p.add_argument("--intervals", default="auto", choices=["auto", "calibrated", "profile", "wald", "pivotal", "bootstrap", "none"],
                   help="interval method (default auto: pivotal for one complete population, else profile)")
    p.add_argument("--positions", default="hazen", choices=["hazen", "mean-rank", "median-rank"],
                   help="plotting positions of the graphical comparison estimate (default hazen, (i-0.5)/N)")
    p.add_argument("--common-modulus", action="store_true", help="impose one modulus on all populations")
    _add_bootstrap(p)


BOOTSTRAP_HELP = ("parametric-bootstrap replicates of the fit (maximum likelihood, concurrent model): intervals on "
                  "failure probabilities and component predictions, bias-corrected estimates; with --intervals "
                  "bootstrap they also set the population intervals (default 0: none; the bottom line then uses 1000)")


def _add_bootstrap(p: argparse.ArgumentParser) -> None:
    p.add_argument("--bootstrap", type=int, default=0, metavar="N", help=BOOTSTRAP_HELP)


def _add_quiet(p: argparse.ArgumentParser) -> None:
    p.add_argument("--quiet", action="store_true", help="no progress messages on stderr (warnings and errors still show)")


def _load(args):
    """Read study file and specimen table as the options say."""
    from .specimens import read_specimens
    from .study import Study, parse_group_option, read_study

    study = read_study(args.study) if getattr(args, "study", None) else Study()
    populations = study.populations
    if args.group:
        populations = dict(parse_group_option(g) for g in args.group)
    path = getattr(args, "specimens", None) or study.specimens
    if path is None:
        raise FlawmixError("no specimen table given; name a .csv/.xlsx file or set 'specimens' in the study file")
    specimens = read_specimens(
        path, populations, args.unit or study.unit,
        sheet=getattr(args, "sheet", None) if getattr(args, "sheet", None) is not None else study.sheet,
        unidentified_words=[*study.unidentified_words, *getattr(args, "unidentified_word", [])],
        origin_separators=getattr(args, "origin_separator", None) or study.origin_separators,
        uncertain_origins=getattr(args, "uncertain_origins", None) or study.uncertain_origins or "count")
    return study, specimens


def _fit_from_args(args, study, specimens):
    from .fit import fit

    confidence = args.confidence if args.confidence is not None else (study.confidence or 0.90)
    seed = args.seed if getattr(args, "seed", None) is not None else (study.seed if study.seed is not None else 0)
    options = {}
    geometries = study.fit_geometries(specimens)
    if geometries:
        options["geometries"] = geometries
    if getattr(args, "method", "mle") == "bayes":
        options.update({"priors": study.priors or None, "reference_prior": args.reference_prior, "seed": seed,
                        "progress": args.progress})
    elif getattr(args, "bootstrap", 0) or args.intervals == "bootstrap":
        options.update({"bootstrap": args.bootstrap, "seed": seed, "progress": args.progress})
    return fit(specimens, method=getattr(args, "method", "mle"), model=getattr(args, "model", "concurrent"),
               confidence=confidence, intervals=args.intervals, positions=args.positions,
               common_modulus=args.common_modulus, **options)


def _print_warnings(*results) -> None:
    """Each warning once on stderr, however many fits (or sub-fits) carry it."""
    from .progress import notice_once

    for result in results:
        for w in getattr(result, "warnings", ()):
            notice_once(f"warning: {w}")


def _text(obj) -> str:
    """A result's readable text without its warnings (the CLI prints those once, on stderr)."""
    from .result import FitResult, format_result

    return format_result(obj, warnings=False) if isinstance(obj, FitResult) else str(obj)


def _emit(args, obj, warnings_from=None, bottom=None) -> int:
    """Print a result as JSON (--json) or as its readable text (bottom line first), then its warnings."""
    if args.json:
        data = obj.to_dict()
        if bottom is not None:
            data["bottom_line"] = bottom.to_dict()
        print(json.dumps(data, indent=2, ensure_ascii=False))
    else:
        if bottom is not None:
            print(bottom.text())
            print()
        print(_text(obj))
    if warnings_from is not None:
        _print_warnings(warnings_from)
    return 0


def _bottom_line(args, study, specimens, result):
    from .bottomline import analyse

    seed = args.seed if getattr(args, "seed", None) is not None else (study.seed if study.seed is not None else 0)
    return analyse(result, study, specimens, seed=seed)[0]


def _reexamine_text(result) -> str:
    """The labelled failures whose label is improbable at their strength, for the text output."""
    from .origins import CHECK_THRESHOLD, specimens_to_reexamine

    if len(result.populations) < 2:
        return ""
    flagged = specimens_to_reexamine(result)
    if not len(flagged):
        return ""
    lines = [f"origin labels to re-examine (probability of the label at its strength, label withheld, below "
             f"{CHECK_THRESHOLD:.0%}):"]
    lines += [f"  {r['specimen']}: {r['strength']:.4g} {result.unit}, written '{r['origin']}', probability "
              f"{r['label probability']:.2g}; most probable {r['most probable']}" for _, r in flagged.iterrows()]
    return "\n".join(lines)


def _unresolved_text(result, shown: int = 15) -> str:
    """The failures whose origin is unidentified or ambiguous, each with its candidates'
    probabilities at its strength (largest first), for the text output."""
    from . import formatting as fmt
    from .origins import origin_probabilities

    if len(result.populations) < 2:
        return ""
    table = origin_probabilities(result)
    table = table[table["reading"].isin(["unidentified", "ambiguous"])]
    if not len(table):
        return ""
    names = [p.name for p in result.populations]
    lines = ["origins not identified or ambiguous: probability of each population at the specimen's strength"]
    for _, r in table.head(shown).iterrows():
        ranked = sorted(((r[n], n) for n in names if r[n] >= 0.005), reverse=True)
        lines.append(f"  {r['specimen']}: {fmt.stress(r['strength'])} {result.unit}, written '{r['origin']}': "
                     + ", ".join(f"{n} {p:.2f}" for p, n in ranked))
    if len(table) > shown:
        lines.append(f"  ... and {len(table) - shown} more (all of them: --json, key origin_probabilities)")
    return "\n".join(lines)


def cmd_fit(args) -> int:
    study, specimens = _load(args)
    result = _fit_from_args(args, study, specimens)
    code = _emit(args, result, bottom=_bottom_line(args, study, specimens, result))
    for text in ([] if args.json else [_unresolved_text(result), _reexamine_text(result)]):
        if text:
            print()
            print(text)
    _print_warnings(result)
    return code


def cmd_compare(args) -> int:
    from .compare import compare

    study, specimens = _load(args)
    seed = args.seed if args.seed is not None else (study.seed if study.seed is not None else 0)
    result = compare(specimens, bayes=not args.no_bayes, bootstrap=args.boundary_replicates, seed=seed)
    return _emit(args, result)


def cmd_size(args) -> int:
    from .scaling import effective_size, read_elements

    dims = {k: getattr(args, k) for k in ("width", "depth", "outer_span", "inner_span", "diameter", "gauge_length",
                                          "load_radius", "support_radius", "disc_radius", "thickness", "poisson")
            if getattr(args, k) is not None}
    if args.geometry == "elements":
        if not args.table:
            raise FlawmixError("geometry 'elements' needs --table FILE (columns volume or area, stress_1..stress_3)")
        dims["table"] = read_elements(args.table, args.length_unit)
    if args.geometry == "flexure-3pt" and "inner_span" in dims:
        raise FlawmixError("flexure-3pt has no inner span; drop --inner-span or use flexure-4pt")
    size = effective_size(args.geometry, args.modulus, unit=args.length_unit, rule=args.rule, **dims)
    if args.json:
        print(json.dumps(size.to_dict(), indent=2))
    else:
        u = size.unit
        print(f"{size.geometry}, modulus {size.modulus:g}" + (f", multiaxial rule: {size.rule}" if size.rule else ""))
        if size.effective_volume is not None:
            print(f"  effective volume  {size.effective_volume:.6g} {u}³")
        if size.effective_area is not None:
            print(f"  effective area    {size.effective_area:.6g} {u}²")
        if size.effective_length is not None:
            print(f"  effective length  {size.effective_length:.6g} {u}")
    return 0


def cmd_predict(args) -> int:
    from .predict import predict

    if not args.study:
        raise FlawmixError("predict needs --study FILE with the specimen geometry and a [component] table")
    study, specimens = _load(args)
    result = _fit_from_args(args, study, specimens)
    comp = study.component_object()
    if comp is None:
        raise FlawmixError(f"{study.path}: no [component] table; describe the part (type = ..., sizes or element tables)")
    name, component = comp
    changes = {}
    for item in args.what_if:
        if "=" not in item:
            raise FlawmixError(f"--what-if '{item}': write POPULATION=FACTOR (0 removes it, 0.5 halves its risk)")
        pop, value = item.split("=", 1)
        try:
            changes[pop.strip()] = float(value)
        except ValueError:
            raise FlawmixError(f"--what-if '{item}': '{value}' is not a number") from None
    kwargs = {}
    if args.stress:
        kwargs["stresses"] = args.stress
    if args.probability:
        kwargs["probabilities"] = args.probability
    coupon = study.specimen_geometry(specimens, result)
    load = study.component_load()
    if "stresses" not in kwargs and "stress" in load:
        kwargs["stresses"] = [load["stress"]]
    if "probabilities" not in kwargs and "target_probability" in load:
        kwargs["probabilities"] = [load["target_probability"]]
    from .bottomline import with_draws

    seed = args.seed if args.seed is not None else (study.seed if study.seed is not None else 0)
    result = with_draws(result, seed)    # intervals by default (bootstrap, or the fit's own draws)
    pred = predict(result, coupon, component, component_name=name, **kwargs)
    if changes:
        from dataclasses import replace

        from .scenarios import alone_and_together, what_if_table

        probs = kwargs.get("probabilities", list(pred.strengths_at.index))
        pred = replace(pred, what_if=what_if_table(result, coupon, component, alone_and_together(changes),
                                                   probabilities=probs, component_name=name))
    return _emit(args, pred, result, bottom=None if args.json else _bottom_line(args, study, specimens, result))


def _parse_population(text: str) -> dict:
    parts = text.split(":")
    if len(parts) != 3:
        raise FlawmixError(f"--population '{text}': write NAME:MODULUS:CHARACTERISTIC_STRENGTH (e.g. pores:6:530)")
    try:
        return {"name": parts[0].strip(), "modulus": float(parts[1]), "characteristic_strength": float(parts[2])}
    except ValueError:
        raise FlawmixError(f"--population '{text}': modulus and characteristic strength must be numbers") from None


def cmd_plan(args) -> int:
    from .outputs import check_output_file
    from .plan import plan, plan_from_fit

    if args.plot:   # before the simulation, not after it
        from matplotlib.backend_bases import FigureCanvasBase

        check_output_file(args.plot, args.force, kinds=set(FigureCanvasBase.get_supported_filetypes()))

    options = {"replicates": args.replicates, "seed": args.seed or 0, "confidence": args.confidence or 0.90,
               "progress": args.progress}
    if args.censor_at is not None:
        options["censor_at"] = args.censor_at
    if args.population:
        if args.specimens or args.study:
            raise FlawmixError("give either assumed --population values or a specimen table to plan from, not both")
        if args.unidentified is not None:
            options["unidentified"] = args.unidentified
        result = plan([_parse_population(p) for p in args.population], args.sizes, **options)
    else:
        if not (args.specimens or args.study):
            raise FlawmixError("plan needs assumed populations (--population NAME:M:SIGMA, repeat) "
                               "or a specimen table whose fit to plan from")
        study, specimens = _load(args)
        from .fit import fit

        if args.unidentified is not None:
            options["unidentified"] = args.unidentified
        result = plan_from_fit(fit(specimens, intervals="none"), args.sizes, **options)
    if args.plot:
        from . import plots

        from .fonts import save
        from .outputs import write_atomically

        figure = plots.plan_plot(result).figure
        kind = Path(args.plot).suffix.lstrip(".").lower() or "png"
        write_atomically(args.plot, lambda path: save(figure, path, dpi=130, bbox_inches="tight", format=kind))
    return _emit(args, result)


def cmd_flaws(args) -> int:
    from .fracture import analyse_flaws

    study, specimens = _load(args)
    result = None
    if not args.no_fit and len(specimens.populations) > 1:
        from .fit import fit

        result = fit(specimens, intervals="none")
    analysis = analyse_flaws(specimens, study, stress=args.stress, tolerance=args.tolerance, size_unit=args.size_unit,
                             fit=result)
    if args.json:
        print(json.dumps(analysis.to_dict(), indent=2, ensure_ascii=False))
    else:
        print(analysis)
    return 0


def demo_paths() -> tuple[Path, Path]:
    from importlib.resources import files

    base = files("flawmix") / "data"
    return Path(str(base / "seal_rings.csv")), Path(str(base / "seal_rings.toml"))


def cmd_lots(args) -> int:
    from .lots import compare_lots, read_lots_for_study
    from .study import Study, parse_group_option, read_study

    study = read_study(args.study) if args.study else Study()
    populations = dict(parse_group_option(g) for g in args.group) if args.group else None
    if args.plot and Path(args.plot).exists() and not args.force:   # refuse before the long part
        raise FlawmixError(f"{args.plot}: already exists; choose another --plot file or add --force")
    lots = read_lots_for_study(args.specimens, study, populations, order=args.lot or None, unit=args.unit,
                               sheet=args.sheet if args.sheet is not None else study.sheet,
                               unidentified_words=[*study.unidentified_words, *args.unidentified_word],
                               origin_separators=args.origin_separator or study.origin_separators,
                               uncertain_origins=args.uncertain_origins or study.uncertain_origins or "count")
    seed = args.seed if args.seed is not None else (study.seed if study.seed is not None else 0)
    result = compare_lots(lots, study=study, method=args.method, confidence=args.confidence,
                          probability=args.probability, seed=seed, progress=not args.quiet, calibrate=args.calibrate)
    if args.plot:
        from . import plots
        from .fonts import save

        save(plots.lot_probability_plot(result), Path(args.plot), dpi=130, bbox_inches="tight")
    return _emit(args, result, result)


def cmd_report(args) -> int:
    from .report import analyse, write_report

    study, specimens = _load(args)
    seed = args.seed if args.seed is not None else (study.seed if study.seed is not None else 0)
    from .report import _prepare_folder

    _prepare_folder(Path(args.out), args.force, check_only=True)   # refuse before the long part
    a = analyse(specimens, study=study, method=args.method, compare_models=not args.no_compare,
                bayes=not args.no_bayes, boundary_replicates=args.boundary_replicates, bootstrap=args.bootstrap,
                seed=seed, confidence=args.confidence)
    out = write_report(specimens, args.out, study=study, force=args.force, seed=seed, analysis=a)
    print(a.bottom.text())
    print(f"\nreport written to {out}/report.html (with results.json, figures/, tables/)")
    _print_warnings(a.mle, a.main)
    return 0


def cmd_demo(args) -> int:
    from .report import _prepare_folder, analyse, write_report

    csv, toml = demo_paths()
    ns = argparse.Namespace(study=str(toml), group=[], unit=None, specimens=str(csv), confidence=None,
                            intervals="auto", positions="hazen", common_modulus=False)
    study, specimens = _load(ns)
    _prepare_folder(Path(args.out), args.force, check_only=True)
    seed = study.seed or 0
    a = analyse(specimens, study=study, seed=seed)
    out = write_report(specimens, args.out, study=study, force=args.force, seed=seed, analysis=a)
    print(f"Demo data (invented): {study.title}\n")
    print(a.bottom.text())
    print()
    print(_text(a.mle))
    _print_warnings(a.mle)
    page = Path(out) / "report.html"
    print(f"\nFull report: {page}")
    print("Look first at the bottom-line box at the top of the report (the same as above), then at section 2, "
          "the probability plot (figures/probability_plot.png): each flaw population's points should follow its "
          "own dashed line. Section 5 says which flaw limits the seal ring and what removing it would gain.")
    return 0


EXAMPLES = """examples:
  flawmix demo --out demo-report
      analyse the invented demo data and write its report (look at the bottom line first)
  flawmix fit bars.csv --group pores:volume=pore,void --group grinding:surface="grinding damage"
      fit each flaw population of a specimen table (origins grouped on the command line)
  flawmix report --study study.toml --out report --method bayes
      the whole analysis of a study file (populations, geometry, component) as an HTML report
"""


def build_parser() -> argparse.ArgumentParser:
    from . import __version__

    parser = _Parser(prog="flawmix", description="Strength statistics of brittle materials with competing flaw populations.",
                     epilog=EXAMPLES, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--version", action="version", version=f"flawmix {__version__}", help="print the version and exit")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    table_help = "specimen table (.csv or .xlsx); may come from the study file's 'specimens'"

    p = _table_command(sub, "fit", "fit every flaw population of a specimen table", table_help)
    _add_fit_options(p)
    p.add_argument("--json", action="store_true", help="print the result as JSON (schema in README), bottom line included")
    _add_quiet(p)
    p.set_defaults(func=cmd_fit)

    p = _table_command(sub, "compare", "compare single, concurrent, exclusive and partial models", table_help)
    p.add_argument("--no-bayes", action="store_true", help="skip the Bayesian fits (no PSIS-LOO; faster)")
    p.add_argument("--boundary-replicates", type=int, default=199, metavar="N",
                   help="simulated campaigns for the concurrent-vs-partial test, whose null sits on a boundary "
                        "(default 199, 0 = skip the test)")
    p.add_argument("--seed", type=int, help="seed (default: the study file's, else 0)")
    p.add_argument("--json", action="store_true", help="print the comparison as JSON")
    _add_quiet(p)
    p.set_defaults(func=cmd_compare)

    p = sub.add_parser("size", help="effective volume, area and edge length of a test geometry")
    p.add_argument("geometry", choices=["flexure-3pt", "flexure-4pt", "rod-flexure-3pt", "rod-flexure-4pt",
                                        "tension-rect", "tension-round", "ring-on-ring", "elements"],
                   help="test geometry: bar or rod in three- or four-point flexure, tension bar or rod, "
                        "ring-on-ring disc, or an element table from a stress analysis")
    p.add_argument("--modulus", type=float, required=True, help="Weibull modulus m (required)")
    dimension_help = {"width": "bar width b", "depth": "bar depth d (in the loading direction)",
                      "outer-span": "flexure: outer (support) span L", "inner-span": "four-point flexure: inner (load) span",
                      "diameter": "rod diameter D", "gauge-length": "tension: length of the uniformly stressed gauge",
                      "load-radius": "ring-on-ring: load ring radius", "support-radius": "ring-on-ring: support ring radius",
                      "disc-radius": "ring-on-ring: disc radius", "thickness": "ring-on-ring: disc thickness"}
    for name, text in dimension_help.items():
        p.add_argument(f"--{name}", type=float, help=f"{text} (in --length-unit)")
    p.add_argument("--poisson", type=float, help="Poisson's ratio (ring-on-ring, default 0.25)")
    p.add_argument("--rule", default="independent-action", type=_rule,
                   help="multiaxial rule: independent-action (principle of independent action, default; also 'pia') "
                        "or largest-principal (largest principal stress only; also 'largest')")
    p.add_argument("--table", help="element table for 'elements' (volume or area, stress_1[, stress_2, stress_3])")
    p.add_argument("--length-unit", default="mm", help="unit of the lengths (default mm)")
    p.add_argument("--json", action="store_true", help="print the sizes as JSON")
    p.set_defaults(func=cmd_size)

    p = _table_command(sub, "predict", "carry a fit to a component: failure probability, limiting flaw, what-if",
                       table_help)
    p.description = ("Required: --study FILE with the specimen geometry and a [component] table (its optional "
                     "'stress' key is the analysed load). Intervals come from a parametric bootstrap (1000 "
                     "replicates) unless --bootstrap N or --method bayes says otherwise.")
    for action in p._actions:
        if action.dest == "study":
            action.required = True
            action.help = "study file (TOML) with populations, the specimen geometry and a [component] table (required)"
    _add_fit_options(p)
    p.add_argument("--stress", type=float, action="append",
                   help="component reference stress to report (repeat; default the study's [component] stress)")
    p.add_argument("--probability", type=float, action="append",
                   help="failure probability at which to report the stress (repeat)")
    p.add_argument("--what-if", action="append", default=[], metavar="POPULATION=FACTOR",
                   help="scale a population's risk: 0 removes it, 0.5 halves it (repeat; each change is shown "
                        "alone and all together)")
    p.add_argument("--json", action="store_true", help="print the prediction as JSON")
    _add_quiet(p)
    p.set_defaults(func=cmd_predict)

    p = _table_command(sub, "plan", "how many specimens: precision, bias and power by simulation",
                       "specimen table whose fitted populations to assume (optional)")
    p.add_argument("--population", action="append", default=[], metavar="NAME:M:SIGMA",
                   help="assumed population: name, modulus, characteristic strength (repeat)")
    p.add_argument("--sizes", type=int, nargs="+", default=[10, 15, 20, 30, 40, 60, 80],
                   help="numbers of specimens to simulate (default 10 15 20 30 40 60 80)")
    p.add_argument("--unidentified", type=float, help="share of failures whose origin will not be found")
    p.add_argument("--censor-at", type=float, help="run-out or proof stress: specimens reaching it survive")
    p.add_argument("--replicates", type=int, default=2000, help="campaigns simulated per size (default 2000)")
    p.add_argument("--confidence", type=float, help="central range reported (default 0.90)")
    p.add_argument("--seed", type=int, help="seed of the simulation (default 0)")
    p.add_argument("--progress", action="store_true",
                   help="kept for old scripts: progress now shows on stderr by default (silence it with --quiet)")
    p.add_argument("--plot", help="save the precision-and-power figure to this PNG/SVG file")
    p.add_argument("--force", action="store_true", help="replace an existing --plot file")
    p.add_argument("--json", action="store_true", help="print the plan as JSON")
    _add_quiet(p)
    p.set_defaults(func=cmd_plan)

    p = _table_command(sub, "flaws", "measured flaw sizes against fracture toughness: implied K_Ic, critical sizes",
                       table_help)
    p.description = ("Needs a flaw_size column (µm unless its header says, e.g. 'flaw_size (mm)'; optional flaw_width "
                     "= 2c and location) and the study file's toughness = K_Ic (MPa·√m); crack models per "
                     "population from the study (default: volume penny, surface semi-elliptical, edge corner).")
    p.add_argument("--stress", type=float, help="stress (in the strength unit) of the critical flaw sizes")
    p.add_argument("--tolerance", type=float, help="relative agreement with K_Ic (default the study's, else 0.25)")
    p.add_argument("--size-unit", help="unit of the flaw sizes shown (default as written in the table, else µm)")
    p.add_argument("--no-fit", action="store_true",
                   help="skip the fit whose origin-label checks are shown beside the fracture-mechanics ones")
    p.add_argument("--json", action="store_true", help="print the analysis as JSON (schema in README)")
    _add_quiet(p)
    p.set_defaults(func=cmd_flaws)

    p = sub.add_parser("lots", help="did a process change help? lots compared flaw population by flaw population")
    p.add_argument("specimens", nargs="*", help="one table with a 'lot' column, or one table per lot (named after "
                                                "its file); may come from the study file ('specimens' or [lots])")
    _add_grouping(p)
    p.add_argument("--lot", action="append", default=[], metavar="NAME",
                   help="lot names in order, the first the baseline (repeat; default the study's lots, else the "
                        "order they appear)")
    p.add_argument("--method", default="mle", choices=["mle", "bayes"],
                   help="mle (default; profile-likelihood intervals) or bayes (posterior estimates and the "
                        "probability that each population got stronger); the tests are likelihood-ratio tests")
    p.add_argument("--confidence", type=float, help="two-sided interval level (default 0.90)")
    p.add_argument("--probability", type=float,
                   help="failure probability at which stresses are also compared (default the study's [component] "
                        "target_probability, else 0.01)")
    p.add_argument("--calibrate", type=int, default=None, metavar="N",
                   help="parametric-bootstrap replicates per test (default: 999 when every origin is identified, "
                        "299 otherwise; lots on several geometries use χ²; 0: χ² always, which is a little "
                        "liberal at 30 specimens per lot, see README)")
    p.add_argument("--seed", type=int, help="seed of the sampler and the calibration (default: the study file's, else 0)")
    p.add_argument("--plot", help="save the probability plots of the lots, population by population, to this PNG/SVG")
    p.add_argument("--force", action="store_true", help="replace an existing --plot file")
    p.add_argument("--json", action="store_true", help="print the comparison as JSON (schema in README)")
    _add_quiet(p)
    p.set_defaults(func=cmd_lots)

    p = _table_command(sub, "report", "run the whole analysis and write an HTML report folder", table_help)
    p.add_argument("--out", required=True, help="report folder to create (required; refuses to replace one without --force)")
    p.add_argument("--force", action="store_true", help="replace an existing report folder")
    p.add_argument("--method", default="mle", choices=["mle", "bayes"], help="estimates shown (default mle)")
    p.add_argument("--confidence", type=float, help="two-sided interval level (default 0.90)")
    p.add_argument("--no-compare", action="store_true", help="skip the model comparison")
    p.add_argument("--no-bayes", action="store_true", help="model comparison without Bayesian fits (no PSIS-LOO)")
    _add_bootstrap(p)
    p.add_argument("--boundary-replicates", type=int, default=199, metavar="N",
                   help="simulated campaigns for the concurrent-vs-partial test (default 199, 0 = skip)")
    p.add_argument("--seed", type=int, help="seed (default: the study file's, else 0)")
    _add_quiet(p)
    p.set_defaults(func=cmd_report)

    p = sub.add_parser("demo", help="analyse the embedded, invented demo data and write its report")
    p.add_argument("--out", default="flawmix-demo-report", help="report folder (default flawmix-demo-report)")
    p.add_argument("--force", action="store_true", help="replace an existing report folder")
    _add_quiet(p)
    p.set_defaults(func=cmd_demo)
    return parser


def _rule(text: str) -> str:
    from .scaling import multiaxial_rule

    try:
        return multiaxial_rule(text)
    except FlawmixError as exc:
        raise argparse.ArgumentTypeError(str(exc)) from None


def main(argv=None) -> int:
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
        if not getattr(args, "command", None):
            parser.print_help()
            return EXIT_USAGE
        from .progress import shown

        with warnings.catch_warnings(), shown(not getattr(args, "quiet", False)):
            # Results carry their own warnings; the CLI prints them once, as one line each.
            warnings.simplefilter("ignore", FlawmixWarning)
            return args.func(args)
    except FlawmixError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return EXIT_USAGE
    except KeyboardInterrupt:
        print("error: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:   # the reader went away (`flawmix fit ... | head`): stop quietly
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())   # so the interpreter's final flush cannot fail again
        return 0
    except Exception as exc:  # a bug, not a user error: one line, details on request
        if os.environ.get("FLAWMIX_DEBUG"):
            raise
        print(f"error: internal error ({type(exc).__name__}: {exc}); rerun with FLAWMIX_DEBUG=1 for details "
              "and report it", file=sys.stderr)
        return 1


if __name__ == "__main__":
    sys.exit(main())
