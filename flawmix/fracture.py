"""What the measured fracture origins say: the toughness each flaw implies (K = Y·σ·√a) against
K_Ic, whether its location fits its population, and each population's flaw sizes and critical
flaw size. Reads the optional columns flaw_size, flaw_width and location of a specimen table.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from .cracks import CRACK_NAMES, CrackModel
from .errors import FlawmixError
from .units import length_factor, length_unit, split_header_unit, stress_factor
from .vocabulary import normalise_label

DEFAULT_SIZE_UNIT = "µm"
TOLERANCE = 0.25
LOCATIONS = ("surface", "interior", "edge", "corner")
LOCATION_WORDS = {"surface": "surface", "interior": "interior", "volume": "interior", "internal": "interior",
                  "subsurface": "interior", "bulk": "interior", "edge": "edge", "chamfer": "edge", "corner": "corner"}
COLUMN_NAMES = {"flaw_size": {"flaw_size", "flaw size", "flaw depth", "flaw_depth"},
                "flaw_width": {"flaw_width", "flaw width", "2c"},
                "location": {"location", "origin location", "origin_location"}}
TOUGHNESS_UNIT = "MPa·√m"
KSI_SQRT_IN_IN_MPA_SQRT_M = 6.894757293168 * math.sqrt(0.0254)   # 1 ksi·√in = 1.0988 MPa·√m (NIST SP 811)

# Why an implied toughness can differ from K_Ic (common practice of fractography, ASTM C1322).
HIGH_REASONS = ("the flaw was measured too large (the mirror or damage around it counted in)",
                "compressive residual stress at the origin (a ground or tempered surface)",
                "the origin sat where the stress is below the nominal strength (inside a flexure bar, outside "
                "the inner span)", "rising crack resistance (R-curve) of the material",
                "the origin is not this flaw (a mislabelled origin)")
LOW_REASONS = ("slow crack growth enlarged the flaw before fracture (moisture, sustained load)",
               "tensile residual stress at the origin",
               "the flaw was measured too small (tight cracks around it missed)",
               "the origin is not this flaw: a larger one elsewhere caused the fracture (a mislabelled origin)",
               "locally lower toughness (a weak grain-boundary phase, an interface)")


@dataclass(frozen=True)
class Toughness:
    """Fracture toughness K_Ic (MPa·√m), its interval if known, and the relative tolerance
    within which an implied toughness counts as agreeing."""

    value: float
    interval: tuple[float, float] | None = None
    tolerance: float = TOLERANCE

    @property
    def band(self) -> tuple[float, float]:
        lo, hi = self.interval or (self.value, self.value)
        return lo * (1 - self.tolerance), hi * (1 + self.tolerance)

    def to_dict(self) -> dict:
        return {"value": self.value, "interval": list(self.interval) if self.interval else None,
                "tolerance": self.tolerance, "unit": TOUGHNESS_UNIT}


def _positive(value, what: str, where: str) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not value > 0 or not math.isfinite(value):
        raise FlawmixError(f"{where}: {what} = {value!r}: write a positive number")
    return float(value)


def read_toughness(spec, where: str = "study file", tolerance: float | None = None) -> Toughness:
    """``toughness = 4.2`` or a table ``{value = 4.2, interval = [3.9, 4.5], tolerance = 0.25,
    unit = "MPa*sqrt(m)" | "ksi*sqrt(in)"}``."""
    if spec is None:
        raise FlawmixError(f"{where}: no 'toughness'; add toughness = K_Ic in MPa·√m (e.g. toughness = 4.2) "
                           "to compare flaw sizes with fracture mechanics")
    table = spec if isinstance(spec, dict) else {"value": spec}
    unknown = sorted(set(table) - {"value", "interval", "tolerance", "unit"})
    if unknown:
        raise FlawmixError(f"{where}: [toughness] unknown key '{unknown[0]}'; use value, interval, tolerance, unit")
    unit = str(table.get("unit", "MPa*sqrt(m)")).replace(" ", "").lower()
    factors = {"mpa*sqrt(m)": 1.0, "mpa√m": 1.0, "mpa·√m": 1.0, "ksi*sqrt(in)": KSI_SQRT_IN_IN_MPA_SQRT_M,
               "ksi√in": KSI_SQRT_IN_IN_MPA_SQRT_M}
    if unit not in factors:
        raise FlawmixError(f"{where}: toughness unit '{table['unit']}'; use \"MPa*sqrt(m)\" or \"ksi*sqrt(in)\"")
    f = factors[unit]
    value = _positive(table.get("value"), "toughness", where) * f
    interval = table.get("interval")
    if interval is not None:
        if not isinstance(interval, (list, tuple)) or len(interval) != 2:
            raise FlawmixError(f"{where}: toughness interval must be [low, high], e.g. [3.9, 4.5]")
        lo, hi = (_positive(x, "toughness interval", where) * f for x in interval)
        if not lo <= value <= hi:
            raise FlawmixError(f"{where}: toughness interval [{lo:g}, {hi:g}] must contain the value {value:g}")
        interval = (lo, hi)
    tol = tolerance if tolerance is not None else table.get("tolerance", TOLERANCE)
    if isinstance(tol, bool) or not isinstance(tol, (int, float)) or not 0 < tol < 1:
        raise FlawmixError(f"{where}: toughness tolerance {tol!r} must lie between 0 and 1 (0.25 = ±25 %)")
    return Toughness(value, interval, float(tol))


# ---- crack models of the populations ------------------------------------------------------------

DEFAULT_CRACK = {"volume": "embedded", "surface": "surface", "edge": "corner"}


def _section(study) -> tuple[float | None, float | None, bool]:
    """(thickness t, half-width b) in mm of the specimens' section from the study's flexure
    geometry, and whether that geometry is flexure (so surface cracks are in bending)."""
    if study is None or not study.geometries:
        return None, None, False
    name = study.geometry or (next(iter(study.geometries)) if len(study.geometries) == 1 else None)
    spec = study.geometries.get(name) if name else None
    if not isinstance(spec, dict):
        return None, None, False
    flexure = "flexure" in str(spec.get("type", ""))
    factor = length_factor(study.length_unit or "mm", "mm")
    depth, width = spec.get("depth"), spec.get("width")
    return (depth * factor if isinstance(depth, (int, float)) else None,
            width * factor / 2 if isinstance(width, (int, float)) else None, flexure)


def crack_models(specimens, study=None) -> dict[str, CrackModel]:
    """The crack model of each population: [populations.NAME] ``crack = "penny"`` (or
    ``"semi-elliptical"``, ``"corner"``), or a table ``crack = {model = "semi-elliptical",
    loading = "bending", aspect_ratio = 0.8, thickness = 3}``, or ``shape_factor = 1.3``;
    default by flaw kind (volume: penny, surface: semi-elliptical, edge: corner)."""
    where = str(study.path) if study is not None and study.path else "study file"
    settings = study.cracks if study is not None else {}
    thickness, half_width, flexure = _section(study)
    out = {}
    for pop in specimens.populations:
        spec = dict(settings.get(pop.name, {}))
        here = f"{where}: [populations.{pop.name}]"
        if "shape_factor" in spec:
            out[pop.name] = CrackModel("constant", shape_factor=_positive(spec["shape_factor"], "shape_factor", here))
            continue
        crack = spec.get("crack", DEFAULT_CRACK.get(pop.kind))
        if crack is None:
            raise FlawmixError(f"{here}: kind 'unspecified' gives no crack model; add crack = \"penny\", "
                               "\"semi-elliptical\" or \"corner\", or shape_factor = Y")
        table = crack if isinstance(crack, dict) else {"model": crack}
        unknown = sorted(set(table) - {"model", "loading", "aspect_ratio", "thickness", "half_width"})
        if unknown:
            raise FlawmixError(f"{here}: crack setting '{unknown[0]}'; use model, loading, aspect_ratio, thickness, "
                               "half_width")
        kind = CRACK_NAMES.get(normalise_label(str(table.get("model", ""))))
        if kind is None:
            raise FlawmixError(f"{here}: crack model {table.get('model')!r}; use penny, semi-elliptical or corner")
        loading = table.get("loading", "bending" if flexure and kind == "surface" else "tension")
        try:
            out[pop.name] = CrackModel(kind, str(loading), float(table.get("aspect_ratio", 1.0)),
                                       table.get("thickness", thickness), table.get("half_width", half_width))
        except FlawmixError as exc:
            raise FlawmixError(f"{here}: {exc}") from None
    return out


# ---- the optional columns ----------------------------------------------------------------------

def _find(specimens, name: str):
    """(header as written, unit written in it) of optional column ``name``, or (None, None)."""
    table = specimens.table
    if table is None:
        return None, None
    for header in table.columns:
        base, unit = split_header_unit(str(header))
        if normalise_label(base) in COLUMN_NAMES[name] or normalise_label(str(header)) in COLUMN_NAMES[name]:
            return header, unit if normalise_label(base) in COLUMN_NAMES[name] else None
    return None, None


def has_flaw_sizes(specimens) -> bool:
    """True when the specimen table has a flaw_size column with at least one value."""
    header, _ = _find(specimens, "flaw_size")
    return header is not None and specimens.table[header].notna().any()


def _where(specimens, i: int, header) -> str:
    return (f"{specimens.source + ', ' if specimens.source else ''}specimen '{specimens.ids[i]}', "
            f"column '{header}': ")


def _lengths(specimens, name: str, unit: str | None):
    """(values in mm (N,), NaN where empty; the unit they were written in)."""
    header, written = _find(specimens, name)
    n = specimens.n_specimens
    if header is None:
        return np.full(n, np.nan), unit
    try:
        unit = length_unit((written or unit or DEFAULT_SIZE_UNIT).replace("μ", "µ"))
    except FlawmixError as exc:
        raise FlawmixError(f"{_where(specimens, 0, header).split(', specimen')[0]}, column '{header}': {exc}") from None
    cells = specimens.table[header].to_numpy(dtype=object)
    values = np.full(n, np.nan)
    for i, cell in enumerate(cells):
        text = "" if cell is None or (isinstance(cell, float) and math.isnan(cell)) else str(cell).strip()
        if text.lower() in ("", "nan", "-", "n/a", "na"):
            continue
        try:
            value = float(text.replace(",", "."))
        except ValueError:
            raise FlawmixError(f"{_where(specimens, i, header)}'{text}' is not a number; write the size as a plain "
                               f"number in {unit} (the unit once in the header) or leave it empty") from None
        if not (value > 0 and math.isfinite(value)):
            raise FlawmixError(f"{_where(specimens, i, header)}{text} is not a positive size; correct it or leave "
                               "it empty")
        values[i] = value
    return values * length_factor(unit, "mm"), unit


def _locations(specimens) -> np.ndarray:
    header, _ = _find(specimens, "location")
    out = np.full(specimens.n_specimens, None, dtype=object)
    if header is None:
        return out
    for i, cell in enumerate(specimens.table[header].to_numpy(dtype=object)):
        text = "" if cell is None or (isinstance(cell, float) and math.isnan(cell)) else normalise_label(str(cell))
        if not text:
            continue
        if text not in LOCATION_WORDS:
            raise FlawmixError(f"{_where(specimens, i, header)}unknown location '{cell}'; write surface, interior, "
                               "edge or corner (or leave it empty)")
        out[i] = LOCATION_WORDS[text]
    return out


# ---- the analysis ------------------------------------------------------------------------------

def _location_note(kind: str, location) -> tuple[bool | None, str]:
    """(consistent, note) of an origin's location against its population's flaw kind
    (DOMAIN.md section 6: a population's distribution is not the location of one origin)."""
    if location is None or kind == "unspecified":
        return None, ""
    if kind == "surface" and location == "interior":
        return False, "found in the interior, yet its population is surface-distributed: check the label or location"
    if kind == "edge" and location == "interior":
        return False, "found in the interior, yet its population is edge-distributed: check the label or location"
    if kind == "volume" and location != "interior":
        return True, (f"a volume flaw that lies at the {location}: it stays in its population, but cut by the "
                      "surface it acts as a surface crack with a larger Y")
    return True, ""


@dataclass(frozen=True)
class FlawAnalysis:
    """Per specimen (``specimens``) and per population (``populations``) results; sizes in
    ``size_unit``, strengths in ``unit``, toughness in MPa·√m. ``stress``: the stress (in
    ``unit``) of the critical flaw sizes asked for; ``component_stress``: the study's
    [component] stress."""

    unit: str
    size_unit: str
    toughness: Toughness
    specimens: pd.DataFrame
    populations: pd.DataFrame
    models: dict = field(default_factory=dict)
    stress: float | None = None
    component_stress: float | None = None

    def critical_stress(self, population: str, sizes, toughness: float | None = None) -> np.ndarray:
        """Stress (in ``unit``) at which flaws of the given sizes (``size_unit``) of a population
        reach ``toughness`` (default K_Ic): σ = K/(Y(a)·√a), the σ ∝ a^(−1/2) line (bent by a/t)."""
        if population not in self.models:
            raise FlawmixError(f"no population '{population}'; the analysis has {', '.join(self.models)}")
        model = self.models[population]
        aspect = float(self.populations.loc[population, "aspect a/c"])
        model = CrackModel(model.kind, model.loading, aspect, model.thickness, model.half_width, model.shape_factor)
        a_mm = np.asarray(sizes, dtype=float) * length_factor(self.size_unit, "mm")
        y, _ = model.factor(a_mm)
        k = self.toughness.value if toughness is None else toughness
        return k / (y * np.sqrt(a_mm * 1e-3)) * stress_factor("MPa", self.unit)

    @property
    def flagged(self) -> pd.DataFrame:
        """Specimens whose implied toughness disagrees with K_Ic, whose location does not fit, or
        (when a fit was given) whose origin label is improbable at its strength."""
        s = self.specimens
        return s[(s["consistent"] == False) | (s["location consistent"] == False)   # noqa: E712 (None stays out)
                 | (s["label check"] == True)]   # noqa: E712

    def to_dict(self) -> dict[str, Any]:
        num = lambda x: None if x is None or not np.isfinite(x) else float(x)
        rows = [{"specimen": str(r["specimen"]), "strength": float(r["strength"]), "population": r["population"],
                 "flaw_size": num(r["flaw size"]), "shape_factor": num(r["shape factor"]),
                 "implied_toughness": num(r["implied toughness"]),
                 "consistent": None if r["consistent"] is None else bool(r["consistent"]),
                 "location": r["location"],
                 "location_consistent": None if r["location consistent"] is None else bool(r["location consistent"]),
                 "label_check": None if r["label check"] is None else bool(r["label check"]),
                 "notes": list(r["notes"])}
                for _, r in self.specimens.iterrows()]
        pops = [{"name": name, "crack_model": r["crack model"], "measured": int(r["measured"]),
                 "flaw_size_median": num(r["median"]), "flaw_size_quartiles": [num(r["25%"]), num(r["75%"])],
                 "implied_toughness_median": num(r["implied toughness median"]),
                 "critical_flaw_size": num(r["critical at stress"]),
                 "critical_flaw_size_component": num(r["critical at component stress"])}
                for name, r in self.populations.iterrows()]
        return {"unit": self.unit, "size_unit": self.size_unit, "toughness": self.toughness.to_dict(),
                "stress": self.stress, "component_stress": self.component_stress, "specimens": rows,
                "populations": pops}

    def __str__(self) -> str:
        from .formatting import stress as fmt_stress

        t = self.toughness
        lines = [f"flaw sizes against fracture toughness K_Ic = {t.value:.3g} {TOUGHNESS_UNIT}"
                 + (f" [{t.interval[0]:.3g}, {t.interval[1]:.3g}]" if t.interval else "")
                 + f"; agreement within ±{t.tolerance:.0%}; sizes in {self.size_unit}, stress in {self.unit}", ""]
        for name, r in self.populations.iterrows():
            crit = "" if not np.isfinite(r["critical at stress"]) else \
                f"; critical flaw at {fmt_stress(self.stress)} {self.unit}: {r['critical at stress']:.3g}"
            comp = "" if not np.isfinite(r["critical at component stress"]) else \
                (f"; at the component's {fmt_stress(self.component_stress)} {self.unit}: "
                 f"{r['critical at component stress']:.3g} (the largest flaw the process may leave)")
            lines.append(f"{name} ({r['crack model']}): {int(r['measured'])} measured, median {r['median']:.3g} "
                         f"(quartiles {r['25%']:.3g}–{r['75%']:.3g}), implied K median "
                         f"{r['implied toughness median']:.3g}{crit}{comp}")
        flagged = self.flagged
        lines.append("")
        lines.append(f"{len(flagged)} specimen(s) to look at again" + (":" if len(flagged) else ""))
        for _, r in flagged.iterrows():
            k = "" if not np.isfinite(r["implied toughness"]) else f", implied K {r['implied toughness']:.3g}"
            lines.append(f"  {r['specimen']}: {fmt_stress(r['strength'])} {self.unit}, {r['population']}, flaw "
                         f"{r['flaw size']:.3g}{k}. " + "; ".join(r["notes"]))
        return "\n".join(lines)


def _population_of(specimens) -> np.ndarray:
    names = np.array(specimens.population_names, dtype=object)
    single = specimens.failed & (specimens.n_candidates == 1)
    out = np.full(specimens.n_specimens, None, dtype=object)
    out[single] = names[specimens.candidates[single].argmax(axis=1)]
    return out


def _specimen_rows(specimens, models, toughness, sizes, widths, locations, size_unit) -> pd.DataFrame:
    to_mpa = stress_factor(specimens.unit, "MPa")
    population = _population_of(specimens)
    kinds = {p.name: p.kind for p in specimens.populations}
    y = np.full(specimens.n_specimens, np.nan)
    point = np.full(specimens.n_specimens, "", dtype=object)
    for name, model in models.items():
        mine = (population == name) & np.isfinite(sizes)
        if mine.any():
            y[mine], point[mine] = model.factor(sizes[mine], widths[mine])
    implied = y * specimens.strength * to_mpa * np.sqrt(sizes * 1e-3)
    lo, hi = toughness.band
    consistent = np.array([bool(lo <= k <= hi) if np.isfinite(k) else None for k in implied], dtype=object)
    notes, loc_ok = [], []
    for i in range(specimens.n_specimens):
        ok, note = _location_note(kinds.get(population[i], "unspecified"), locations[i]) \
            if population[i] is not None else (None, "")
        loc_ok.append(ok)
        text = [note] if note else []
        if point[i] == "outside the model's range":
            text.append("flaw outside the crack model's range of validity (no shape factor)")
        if consistent[i] is False:
            reasons = HIGH_REASONS if implied[i] > hi else LOW_REASONS
            text.append(f"implied toughness {implied[i] / toughness.value:.2f} × K_Ic; possible: "
                        + "; ".join(reasons))
        notes.append(tuple(text))
    size_out = length_factor("mm", size_unit)
    return pd.DataFrame({"specimen": specimens.ids, "strength": specimens.strength, "population": population,
                         "flaw size": sizes * size_out, "flaw width": widths * size_out, "location": locations,
                         "shape factor": y, "governing point": point, "implied toughness": implied,
                         "consistent": consistent, "location consistent": np.array(loc_ok, dtype=object),
                         "notes": notes})


def _median_aspect(model: CrackModel, sizes, widths) -> float:
    """Median a/c of the measured flaws with a width, else the model's a/c."""
    ok = np.isfinite(sizes) & np.isfinite(widths) & (widths > 0)
    if not ok.any() or model.kind == "constant":
        return model.aspect
    half = widths[ok] if model.kind == "corner" else widths[ok] / 2
    return float(np.median(sizes[ok] / half))


def _population_rows(specimens, models, toughness, rows, sizes, widths, stresses, size_unit) -> pd.DataFrame:
    to_mpa = stress_factor(specimens.unit, "MPa")
    out = {}
    for name, model in models.items():
        mine = (rows["population"] == name).to_numpy() & np.isfinite(sizes)
        a = sizes[mine] * length_factor("mm", size_unit)
        aspect = _median_aspect(model, sizes[mine], widths[mine])
        critical = [model.critical_size(toughness.value, s * to_mpa, aspect) * length_factor("mm", size_unit)
                    if s else np.nan for s in stresses]
        quart = np.quantile(a, [0.25, 0.5, 0.75]) if a.size else np.full(3, np.nan)
        implied = rows.loc[mine, "implied toughness"].to_numpy(dtype=float)
        out[name] = {"crack model": model.describe, "measured": int(mine.sum()), "median": quart[1],
                     "25%": quart[0], "75%": quart[2], "largest": a.max() if a.size else np.nan,
                     "aspect a/c": aspect,
                     "implied toughness median": np.nanmedian(implied) if np.isfinite(implied).any() else np.nan,
                     "critical at stress": critical[0], "critical at component stress": critical[1]}
    frame = pd.DataFrame.from_dict(out, orient="index")
    frame.index.name = "population"
    return frame


def _label_checks(rows: pd.DataFrame, fit) -> pd.DataFrame:
    """Add the origin check of a fit (flawmix.origins): ``label check`` True where the written
    label is improbable at that strength, with a note; the two routes to a mislabel side by side."""
    from .origins import specimens_to_reexamine

    rows = rows.copy()
    rows["label check"] = np.array([None] * len(rows), dtype=object)
    if fit is None:
        return rows
    flagged = specimens_to_reexamine(fit).set_index("specimen")
    labelled = rows["population"].notna().to_numpy()
    rows.loc[labelled, "label check"] = False
    for i in np.flatnonzero(rows["specimen"].isin(flagged.index).to_numpy()):
        f = flagged.loc[rows.at[i, "specimen"]]
        rows.at[i, "label check"] = True
        rows.at[i, "notes"] = rows.at[i, "notes"] + (
            f"its origin label is improbable at this strength under the fitted model (p = "
            f"{f['label probability']:.2g} with the label withheld; most probable: {f['most probable']})",)
    return rows


def analyse_flaws(specimens, study=None, *, toughness=None, stress: float | None = None,
                  tolerance: float | None = None, size_unit: str | None = None, fit=None) -> FlawAnalysis:
    """Fracture mechanics of the measured origins of ``specimens``.

    toughness: a :class:`Toughness`, a number (MPa·√m) or None for the study's ``toughness``;
    stress: the stress (specimens' unit) of the critical flaw sizes (also the study's
    [component] stress, when it gives one); tolerance: relative agreement band (default the
    study's, else 0.25); size_unit: unit of the sizes shown (default as written, else µm).
    Crack models come from the study (see :func:`crack_models`). fit: a FitResult of the same
    specimens, whose origin checks are shown beside the fracture-mechanics ones."""
    where = str(study.path) if study is not None and study.path else "study file"
    if not has_flaw_sizes(specimens):
        raise FlawmixError(f"{specimens.source or 'the specimen table'}: no 'flaw_size' column with values; add one "
                           "(the crack depth a of a surface flaw or the radius of an embedded one, µm by default, "
                           "or with its unit in the header: 'flaw_size (mm)')")
    if not isinstance(toughness, Toughness):
        spec = toughness if toughness is not None else (study.toughness if study is not None else None)
        toughness = read_toughness(spec, where, tolerance)
    elif tolerance is not None:
        toughness = Toughness(toughness.value, toughness.interval, tolerance)
    sizes, written_unit = _lengths(specimens, "flaw_size", None)
    widths, _ = _lengths(specimens, "flaw_width", written_unit)
    shown = length_unit(size_unit.replace("μ", "µ")) if size_unit else written_unit
    models = crack_models(specimens, study)
    rows = _label_checks(_specimen_rows(specimens, models, toughness, sizes, widths, _locations(specimens), shown), fit)
    component = study.component_load().get("stress") if study is not None and study.component else None
    if stress is not None:
        stress = _positive(stress, "stress", "--stress")
    pops = _population_rows(specimens, models, toughness, rows, sizes, widths, (stress, component), shown)
    return FlawAnalysis(specimens.unit, shown, toughness, rows, pops, models, stress, component)
