"""Study files (TOML): how origin labels group into populations, units and other settings.

Example::

    unit = "MPa"
    confidence = 0.90

    [populations.pores]
    kind = "volume"
    labels = ["pore", "porous region"]

    [populations.grinding]
    kind = "surface"
    labels = ["grinding damage", "machining damage"]
"""
from __future__ import annotations

import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from .errors import FlawmixError
from .vocabulary import UNCERTAIN_CHOICES
from .specimens import Population, make_populations, suggest
from .units import stress_unit

LOAD_KEYS = ("stress", "target_probability")   # [component] keys that describe the analysed load
KNOWN_KEYS = {"unit", "confidence", "specimens", "populations", "geometries", "component",
              "seed", "title", "length_unit", "geometry", "sheet", "unidentified_words", "origin_separators",
              "uncertain_origins", "toughness", "lots"}


@dataclass(frozen=True)
class Study:
    """Settings read from a study file; every field optional."""

    populations: tuple[Population, ...] | None = None
    unit: str | None = None
    confidence: float | None = None
    specimens: Path | None = None
    title: str | None = None
    seed: int | None = None
    length_unit: str | None = None
    geometries: dict[str, dict[str, Any]] = field(default_factory=dict)
    component: dict[str, Any] | None = None
    priors: dict[str, dict[str, Any]] = field(default_factory=dict)
    toughness: Any = None                # K_Ic in MPa·√m, or a table (flawmix.fracture reads it)
    cracks: dict[str, Any] = field(default_factory=dict)   # population -> crack model settings
    path: Path | None = None
    geometry: str | None = None          # geometry of every specimen when the table has no column
    sheet: str | int | None = None       # the workbook sheet with the specimens
    unidentified_words: tuple[str, ...] = ()
    origin_separators: tuple[str, ...] | None = None
    uncertain_origins: str | None = None
    lots: dict[str, dict[str, Any]] | None = None   # lot name -> {"specimens": Path, "geometry": name}

    def geometry_objects(self) -> dict:
        """The [geometries.NAME] tables as :class:`flawmix.geometry.Geometry` objects (built
        once per study: element tables are read and tabulated over m)."""
        cached = self.__dict__.get("_geometry_cache")
        if cached is None:
            cached = self._build_geometries()
            object.__setattr__(self, "_geometry_cache", cached)
        return cached

    def fit_geometries(self, specimens) -> dict | None:
        """The geometries to fit jointly, when the specimens span several; else None."""
        if specimens.geometry is None or len(set(specimens.geometry)) < 2 or not self.geometries:
            return None
        return self.geometry_objects()

    def specimen_geometry(self, specimens, result, required: bool = True):
        """The geometry the fitted characteristic strengths refer to: the reference geometry
        of a joint fit, the study's ``geometry``, or the one geometry of the table. None (or
        an error when ``required``) when the study does not say."""
        geoms = self.geometry_objects()
        if "reference_geometry" in result.extras:
            return geoms[result.extras["reference_geometry"]]
        name = self.geometry
        if name is None and specimens.geometry is not None and len(set(specimens.geometry)) == 1:
            name = specimens.geometry[0]
        if name is None or name not in geoms:
            if not required:
                return None
            if name is None:
                raise FlawmixError(f"{self.path or 'study file'}: say which geometry the specimens have "
                                   "(geometry = \"NAME\" with a [geometries.NAME] table, or a 'geometry' column)")
            raise FlawmixError(f"{self.path}: geometry '{name}' is not defined; add a [geometries.{name}] table")
        return geoms[name]

    def _build_geometries(self) -> dict:
        from .geometry import Geometry

        base = self.path.parent if self.path else None
        out = {}
        for name, spec in self.geometries.items():
            if not isinstance(spec, dict):
                raise FlawmixError(f"{self.path}: [geometries.{name}] must be a table with a 'type'")
            try:
                out[name] = Geometry.from_spec(name, spec, base, self.length_unit or "mm")
            except FlawmixError as exc:
                raise FlawmixError(f"{self.path}: {exc}") from None
        return out

    def component_load(self) -> dict:
        """The analysed load of the [component] table: ``stress`` (its reference, largest,
        stress) and/or ``target_probability``; empty when the study gives neither."""
        out = {}
        for key in LOAD_KEYS:
            if self.component and key in self.component:
                value = self.component[key]
                ok = isinstance(value, (int, float)) and not isinstance(value, bool) and value > 0
                if not ok or (key == "target_probability" and not value < 1):
                    raise FlawmixError(f"{self.path}: [component] {key} = {value!r}: write a positive number"
                                       + (" below 1, like 1e-4" if key == "target_probability" else
                                          " in the study's stress unit, like 150"))
                out[key] = float(value)
        return out

    def component_object(self):
        """The [component] table as a Geometry (None when the study has none)."""
        from .geometry import Geometry

        if not self.component:
            return None
        spec = dict(self.component)
        name = spec.pop("name", "component")
        for key in LOAD_KEYS:   # the analysed load, not a dimension of the part
            spec.pop(key, None)
        try:
            return name, Geometry.from_spec(name, spec, self.path.parent if self.path else None,
                                            self.length_unit or "mm")
        except FlawmixError as exc:
            raise FlawmixError(f"{self.path}: [component]: {exc}") from None


def read_study(path) -> Study:
    """Read and check a study file; errors name the file and the offending key."""
    path = Path(path)
    if not path.exists():
        raise FlawmixError(f"{path}: no such study file; check the path")
    try:
        raw = tomllib.loads(path.read_text(encoding="utf-8"))
    except tomllib.TOMLDecodeError as exc:
        raise FlawmixError(f"{path}: not valid TOML ({exc}); fix the line it names") from None
    except UnicodeDecodeError:
        raise FlawmixError(f"{path}: not UTF-8 text; save the study file as UTF-8") from None
    unknown = sorted(set(raw) - KNOWN_KEYS)
    if unknown:
        raise FlawmixError(f"{path}: unknown key '{unknown[0]}'{suggest(unknown[0], KNOWN_KEYS)}; "
                           f"known keys are {', '.join(sorted(KNOWN_KEYS))}")
    pops = None
    priors: dict[str, dict[str, Any]] = {}
    cracks: dict[str, Any] = {}
    if "populations" in raw:
        table = raw["populations"]
        if not isinstance(table, dict) or not table:
            raise FlawmixError(f"{path}: [populations.NAME] tables expected, each with kind and labels")
        try:
            pops = make_populations(table)
        except FlawmixError as exc:
            raise FlawmixError(f"{path}: {exc}") from None
        for name, spec in table.items():
            if isinstance(spec, dict) and "prior" in spec:
                priors[name] = dict(spec["prior"])
            if isinstance(spec, dict) and ("crack" in spec or "shape_factor" in spec):
                cracks[name] = {key: spec[key] for key in ("crack", "shape_factor") if key in spec}
    unit = None
    if "unit" in raw:
        try:
            unit = stress_unit(raw["unit"])
        except FlawmixError as exc:
            raise FlawmixError(f"{path}: key 'unit': {exc}") from None
    confidence = raw.get("confidence")
    if confidence is not None and not (isinstance(confidence, (int, float)) and 0 < confidence < 1):
        raise FlawmixError(f"{path}: key 'confidence' must be a number between 0 and 1, like 0.90")
    specimens = raw.get("specimens")
    if specimens is not None:
        specimens = (path.parent / specimens).resolve()
    geometries = raw.get("geometries", {})
    if not isinstance(geometries, dict):
        raise FlawmixError(f"{path}: 'geometries' must be tables [geometries.NAME]")
    component = raw.get("component")
    study = Study(**_table_keys(path, raw), populations=pops, unit=unit, confidence=confidence, specimens=specimens,
                  title=raw.get("title"), seed=raw.get("seed"), length_unit=raw.get("length_unit"),
                  geometries=geometries, component=component, priors=priors, path=path,
                  toughness=raw.get("toughness"), cracks=cracks,
                  geometry=raw.get("geometry"), lots=_lots(path, raw.get("lots")))
    # a mistake in a geometry or the component must stop the run now, not after the fits
    study.geometry_objects()
    study.component_object()
    study.component_load()
    return study


def _lots(path: Path, raw) -> dict[str, dict[str, Any]] | None:
    """``lots = ["before", "after"]`` (names and order of a lot column), or ``[lots]`` with
    ``NAME = "table.csv"`` or ``[lots.NAME]`` tables (``specimens``, ``geometry``)."""
    if raw is None:
        return None
    if isinstance(raw, list) and raw and all(isinstance(x, str) for x in raw):
        return {x: {} for x in raw}
    if not isinstance(raw, dict) or not raw:
        raise FlawmixError(f"{path}: 'lots' must list lot names (lots = [\"before\", \"after\"]) or be a [lots] "
                           "table of NAME = \"table.csv\"")
    out = {}
    for name, spec in raw.items():
        spec = {"specimens": spec} if isinstance(spec, str) else spec
        if not isinstance(spec, dict):
            raise FlawmixError(f"{path}: [lots] {name} = {spec!r}: write the lot's table as text "
                               f"({name} = \"table.csv\") or a [lots.{name}] table")
        bad = sorted(set(spec) - {"specimens", "geometry"})
        if bad:
            raise FlawmixError(f"{path}: [lots.{name}]: unknown key '{bad[0]}'; use 'specimens' (its table) and "
                               "'geometry' (its geometry name)")
        table = spec.get("specimens")
        out[str(name)] = {"specimens": (path.parent / table).resolve() if table else None,
                          "geometry": spec.get("geometry")}
    return out


def _table_keys(path: Path, raw: dict) -> dict:
    """The keys that say how to read the specimen table: sheet and the origin vocabulary."""
    out: dict[str, Any] = {}
    sheet = raw.get("sheet")
    if sheet is not None and (not isinstance(sheet, (str, int)) or isinstance(sheet, bool)):
        raise FlawmixError(f"{path}: key 'sheet' must be a sheet name (\"Bars\") or number (0 = first)")
    out["sheet"] = sheet
    for key in ("unidentified_words", "origin_separators"):
        value = raw.get(key)
        if value is None:
            continue
        if isinstance(value, str):
            value = [value]
        if not isinstance(value, list) or not all(isinstance(v, str) for v in value) or \
                (key == "origin_separators" and (not value or not all(v.strip() for v in value))):
            raise FlawmixError(f"{path}: key '{key}' must be a list of text, e.g. {key} = "
                               + ('["n.e.", "no origin"]' if key == "unidentified_words" else '["|", " or "]'))
        out[key] = tuple(value)
    uncertain = raw.get("uncertain_origins")
    if uncertain is not None and uncertain not in UNCERTAIN_CHOICES:
        raise FlawmixError(f"{path}: key 'uncertain_origins' must be \"count\" or \"unidentified\"")
    out["uncertain_origins"] = uncertain
    return out


def parse_group_option(text: str) -> tuple[str, dict[str, Any]]:
    """Parse a command-line grouping ``NAME[:KIND]=label,label``."""
    if "=" not in text:
        raise FlawmixError(f"--group '{text}': write NAME[:KIND]=label,label (for example pores:volume=pore,agglomerate)")
    head, labels = text.split("=", 1)
    name, _, kind = head.partition(":")
    name = name.strip()
    if not name:
        raise FlawmixError(f"--group '{text}': the population needs a name before '='")
    items = [x.strip() for x in labels.split(",") if x.strip()]
    if not items:
        raise FlawmixError(f"--group '{text}': list at least one origin label after '='")
    return name, {"kind": kind.strip() or "unspecified", "labels": items}
