"""Specimen tables: read, validate and map fracture origins to flaw populations.

The output, :class:`Specimens`, is what every estimator consumes: strengths, which specimens
failed, and for each failure the set of populations that could have caused it.
"""
from __future__ import annotations

import difflib
import re
from functools import cached_property
from pathlib import Path
from dataclasses import dataclass, field
from typing import Mapping

import numpy as np
import pandas as pd

from .errors import FlawmixError, where
from .vocabulary import UNIDENTIFIED_WORDS, OriginVocabulary, label_advice, normalise_label, read_origin
from .tables import RawTable, read_table
from .units import plausibility_warning, split_header_unit, stress_unit

FLAW_KINDS = ("volume", "surface", "edge", "unspecified")
UNKNOWN_LABELS = set(UNIDENTIFIED_WORDS)
FAILED_WORDS = {"", "failed", "fail", "f", "failure", "fractured", "broken", "nan"}
SURVIVED_WORDS = {"survived", "survivor", "s", "runout", "run-out", "censored", "suspended"}
# Rows a lab marks as not a valid test (broke at a load point, wrong fixture...): read, kept
# out of the fit, and listed with the reason in the accounting.
EXCLUDED_WORDS = {"excluded", "exclude", "invalid", "void", "discarded"}
STRENGTH_NAMES = {"strength", "σf", "σ_f", "sigma_f", "fracture strength", "fracture stress", "failure stress"}
COLUMNS = ("strength", "specimen", "origin", "status", "geometry")
# headers a lab writes for the other known columns (compared after normalise_label, with any
# bracketed note such as '(fractography)' or '[SEM]' dropped): common practice
COLUMN_NAMES = {
    "specimen": {"specimen", "specimen id", "specimen no", "specimen no.", "specimen number", "specimen name",
                 "sample", "sample id", "sample no", "sample no.", "id"},
    "origin": {"origin", "fracture origin", "failure origin", "origin type", "fracture origin type", "flaw type",
               "origin label"},   # not 'flaw': 'flaw (µm)' is a size
    "status": {"status"},
    "geometry": {"geometry"},
}
_COLUMN_OF = {name: column for column, names in COLUMN_NAMES.items() for name in names}
POPULATION_SETTINGS = ("kind", "labels", "prior", "crack", "shape_factor")   # the last two: flawmix.fracture


@dataclass(frozen=True)
class Population:
    """A named flaw population, the origin labels that belong to it, and its flaw kind."""

    name: str
    kind: str = "unspecified"
    labels: tuple[str, ...] = ()

    def __post_init__(self):
        if self.kind not in FLAW_KINDS:
            raise FlawmixError(
                f"population '{self.name}': unknown flaw kind '{self.kind}'; use one of {', '.join(FLAW_KINDS)}"
            )
        object.__setattr__(self, "labels", tuple(normalise_label(x) for x in self.labels) or (normalise_label(self.name),))


def _read_only(a: np.ndarray) -> np.ndarray:
    a = np.ascontiguousarray(a)
    a.setflags(write=False)
    return a


@dataclass(frozen=True)
class Specimens:
    """Validated specimen data.

    Attributes (N specimens, k populations):
        strength: (N,) failure stress, or the stress a survivor withstood, in ``unit``.
        failed: (N,) True where the specimen broke.
        candidates: (N, k) True where population j may be the origin of failure i
            (all False for survivors).
        populations: the k populations, in a fixed order (sorted by name unless given).
        ids: (N,) specimen identifiers as text.
        origin: (N,) origin labels as written.
        table: the input table with all its columns (pass-through of extra columns).
        geometry: (N,) name of each specimen's test geometry, or None.
        unidentified: (N,) True where a failure's origin was written as unknown
            (None: every failure with all populations as candidates counts).
        uncertain: (N,) True where the origin was written with a trailing '?' and counted as
            that label.
        origin_map: one entry per distinct origin as written: how it was read (``label``,
            ``uncertain``, ``ambiguous``, ``unidentified``), the populations it maps to and the
            failures that carry it (one last entry counts the survivors); see :meth:`origin_table`.
        accounting: every row read: how many were used and each one excluded, with the reason.
        warnings: doubts found while reading (labels that look alike, an implausible unit).
    """

    strength: np.ndarray
    failed: np.ndarray
    candidates: np.ndarray
    populations: tuple[Population, ...]
    unit: str = "MPa"
    ids: np.ndarray | None = None
    origin: np.ndarray | None = None
    table: pd.DataFrame | None = field(default=None, repr=False, compare=False)
    source: str | None = None
    checksum: str | None = None
    geometry: np.ndarray | None = None
    unidentified: np.ndarray | None = None
    uncertain: np.ndarray | None = None
    origin_map: tuple[dict, ...] = field(default=(), compare=False)
    accounting: dict | None = field(default=None, compare=False)
    warnings: tuple[str, ...] = field(default=(), compare=False)

    def __repr__(self) -> str:
        pops = ", ".join(f"{p.name} ({p.kind})" for p in self.populations)
        src = f" from {Path(self.source).name}" if self.source else ""
        return (f"<Specimens{src}: {self.n_specimens} specimens ({self.n_failed} failed, {self.n_survived} survived; "
                f"origin unidentified {self.n_unidentified}, ambiguous {self.n_ambiguous}), unit {self.unit}; "
                f"populations {pops}>")

    def __post_init__(self):
        for name in ("strength", "failed", "candidates"):
            object.__setattr__(self, name, _read_only(np.asarray(getattr(self, name))))

    # ---- counts -------------------------------------------------------------------------
    @property
    def n_specimens(self) -> int:
        return int(self.strength.size)

    @property
    def n_failed(self) -> int:
        return int(self.failed.sum())

    @property
    def n_survived(self) -> int:
        return self.n_specimens - self.n_failed

    @property
    def population_names(self) -> tuple[str, ...]:
        return tuple(p.name for p in self.populations)

    @cached_property
    def n_candidates(self) -> np.ndarray:
        """(N,) number of candidate populations of each specimen (0 for survivors); computed
        once (candidates are read-only), since a fit asks for it many times."""
        return _read_only(self.candidates.sum(axis=1))

    @property
    def n_unidentified(self) -> int:
        """Failures whose origin was not identified at all (every population is a candidate)."""
        if self.unidentified is not None:
            return int((self.unidentified & self.failed).sum())
        return int((self.failed & (self.n_candidates == len(self.populations))).sum())

    @property
    def n_ambiguous(self) -> int:
        """Failures whose origin was written as one of two or more populations."""
        c = self.n_candidates
        if self.unidentified is not None:
            return int((self.failed & (c > 1) & ~self.unidentified).sum())
        return int((self.failed & (c > 1) & (c < len(self.populations))).sum())

    def certain_failures(self) -> np.ndarray:
        """(k,) failures attributed to each population with certainty."""
        single = self.failed & (self.n_candidates == 1)
        return self.candidates[single].sum(axis=0)

    def possible_failures(self) -> np.ndarray:
        """(k,) failures that each population may have caused."""
        return self.candidates[self.failed].sum(axis=0)

    def in_unit(self, unit: str) -> "Specimens":
        """The same specimens with strengths expressed in another stress unit."""
        from .units import stress_factor

        return _replace(self, strength=self.strength * stress_factor(self.unit, unit), unit=stress_unit(unit))

    @property
    def n_uncertain(self) -> int:
        """Failures whose origin was written with a trailing '?' and counted as that label."""
        return 0 if self.uncertain is None else int((self.uncertain & self.failed).sum())

    def origin_table(self) -> pd.DataFrame:
        """Origin as written -> how it was read and the population(s) it maps to, with counts."""
        columns = ["origin as written", "read as", "population", "specimens"]
        return pd.DataFrame(list(self.origin_map), columns=columns)

    def to_frame(self) -> pd.DataFrame:
        """One row per specimen with the parsed fields and the candidate populations."""
        names = self.population_names
        return pd.DataFrame(
            {
                "specimen": self.ids,
                "strength": self.strength,
                "failed": self.failed,
                "origin": self.origin,
                "candidates": ["|".join(n for n, c in zip(names, row) if c) for row in self.candidates],
            }
        )


def _replace(s: Specimens, **changes) -> Specimens:
    from dataclasses import replace

    return replace(s, **changes)


# ---- grouping --------------------------------------------------------------------------

def make_populations(groups) -> tuple[Population, ...] | None:
    """Accept populations as Population objects, or a mapping name -> {kind, labels}."""
    if groups is None:
        return None
    if isinstance(groups, Mapping):
        out = []
        for name, spec in groups.items():
            if isinstance(spec, Population):
                out.append(spec)
            elif isinstance(spec, Mapping):
                unknown = sorted(set(spec) - set(POPULATION_SETTINGS))
                if unknown:
                    raise FlawmixError(f"population '{name}': unknown setting '{unknown[0]}'"
                                       f"{suggest(unknown[0], POPULATION_SETTINGS)}; the settings are 'kind', "
                                       "'labels', 'prior', 'crack' and 'shape_factor'")
                labels = spec.get("labels", [name])
                if isinstance(labels, str):
                    labels = [labels]
                if not isinstance(labels, (list, tuple)) or not labels or \
                        not all(isinstance(x, str) and x.strip() for x in labels):
                    raise FlawmixError(f"population '{name}': 'labels' must list its origin labels as text, e.g. "
                                       "labels = [\"pore\", \"porous region\"]")
                out.append(Population(str(name), spec.get("kind", "unspecified"), tuple(labels)))
            else:
                raise FlawmixError(f"population '{name}': expected a table with 'kind' and 'labels'")
        pops = tuple(out)
    else:
        pops = tuple(groups)
    if not pops:
        raise FlawmixError("no populations given; name at least one population or leave the grouping out")
    seen: dict[str, str] = {}
    names = set()
    for p in pops:
        if p.name in names:
            raise FlawmixError(f"population '{p.name}' is defined twice; give each population one entry")
        names.add(p.name)
        for lab in p.labels:
            if OriginVocabulary().is_unidentified(lab):
                raise FlawmixError(
                    f"population '{p.name}': label '{lab}' means 'unidentified' and cannot belong to a population"
                )
            if lab in seen and seen[lab] != p.name:
                raise FlawmixError(
                    f"origin label '{lab}' is given to both '{seen[lab]}' and '{p.name}'; give it to one population"
                )
            seen[lab] = p.name
    return pops


def suggest(word: str, choices) -> str:
    """' (did you mean 'labels'?)' for a near miss, else ''."""
    close = difflib.get_close_matches(str(word), list(choices), n=1, cutoff=0.6)
    return f" (did you mean '{close[0]}'?)" if close else ""


# ---- reading ---------------------------------------------------------------------------

def read_specimens(
    path_or_frame,
    populations=None,
    unit: str | None = None,
    *,
    sheet: str | int | None = None,
    unidentified_words=(),
    origin_separators=None,
    uncertain_origins: str = "count",
) -> Specimens:
    """Read a specimen table and map its fracture origins to flaw populations.

    Args:
        path_or_frame: a ``.csv`` (comma, semicolon with decimal commas, or tab; UTF-8 or
            UTF-16 with byte-order mark) or ``.xlsx`` path, a pandas DataFrame, or a 1-D
            sequence of strengths (every specimen failed, one population). Columns:
            ``strength`` (required; its header may carry the unit: ``Strength (MPa)``),
            ``specimen``, ``origin``, ``status`` (``failed``, ``survived`` or ``excluded``),
            ``geometry`` (optional); other columns are kept.
        populations: how origin labels group into populations: a mapping
            ``{name: {"kind": "volume", "labels": ["pore", ...]}}`` or a sequence of
            :class:`Population`. Without it each distinct label is its own population.
        unit: stress unit of the strength column (Pa, kPa, MPa, GPa, psi, ksi); default the
            header's unit, else MPa. A unit that contradicts the header's is an error.
        sheet: the workbook sheet, by name or number (0 = first).
        unidentified_words: more words meaning "origin not identified" (besides ``n.d.``,
            ``unknown``, ``?``, empty ...).
        origin_separators: what separates the alternatives of an ambiguous origin
            (default ``|``, ``/``, `` or ``).
        uncertain_origins: ``count`` ("inclusion?" counts as inclusion, listed as uncertain)
            or ``unidentified``.

    Raises FlawmixError naming file, line and column for every problem found.
    """
    vocabulary = OriginVocabulary(tuple(unidentified_words or ()),
                                  tuple(origin_separators) if origin_separators else OriginVocabulary.separators,
                                  uncertain_origins)
    unit = None if unit is None else stress_unit(unit)      # a misspelt unit is named before any file
    pops = make_populations(populations)
    table = read_table(path_or_frame, sheet)
    columns, header_unit = _find_columns(table)
    unit = _resolve_unit(table, columns, header_unit, unit)
    rows = _validate_rows(table, columns, unit)
    origin = rows["origin"]
    candidates, pops, readings = _map_origins(table, rows, pops, vocabulary)
    warnings = [*_missing_column_warnings(table, columns),
                *_origin_warnings(readings, rows, populations is None, vocabulary),
                *plausibility_warning(rows["strength"], unit, table.source),
                *_outlier_warnings(table, rows, columns["strength"])]
    used = rows["used"]
    return Specimens(
        strength=rows["strength"], failed=rows["failed"], candidates=candidates, populations=pops, unit=unit,
        ids=rows["ids"], origin=origin, table=_pass_through(table, used), source=table.source,
        checksum=table.checksum, geometry=rows["geometry"],
        unidentified=readings["unidentified"] & rows["failed"], uncertain=readings["uncertain"] & rows["failed"],
        origin_map=tuple(readings["map"]), accounting=_accounting(table, rows, readings),
        warnings=tuple(warnings),
    )


def _find_columns(table: RawTable) -> tuple[dict[str, int], str | None]:
    """Which header cell holds each known column; the unit written in the strength header."""
    where_header = f"{table.source + ', ' if table.source else ''}" + \
        ("header" if table.row_word == "dataframe" else f"{table.row_word} {table.header_line} (the header)")
    names, header_unit, seen = {}, None, {}
    exact = {normalise_label(c) for c in table.header} & set(COLUMNS)   # a column named exactly wins
    for j, cell in enumerate(table.header):
        name, unit_text = split_header_unit(cell)
        key = normalise_label(name)
        if key in STRENGTH_NAMES:
            key = "strength"
            if unit_text is not None:
                try:
                    header_unit = stress_unit(unit_text)
                except FlawmixError as exc:
                    raise FlawmixError(f"{where_header}: column '{cell}': {exc}; or drop the unit from the header "
                                       "and give --unit") from None
        elif (known := _COLUMN_OF.get(normalise_label(cell)) or _COLUMN_OF.get(key)) and known not in exact:
            key = known                           # 'Origin (fractography)', 'Specimen ID'; two such
                                                  # columns for one name are the duplicate below
        elif key != normalise_label(cell):
            key = normalise_label(cell)           # units on other columns stay part of their name
        if key == "":
            filled = table.cells[j].fillna("").astype(str).str.strip() != ""
            if filled.any():
                first = int(np.flatnonzero(filled.to_numpy())[0])
                raise FlawmixError(f"{table.at(first, f'#{j + 1}')}a value in column {j + 1}, which has no name in "
                                   "the header; name the column or remove the value")
            continue
        if key in seen:
            first = table.header[seen[key]]
            raise FlawmixError(f"{where_header}: columns {seen[key] + 1} ('{first}') and {j + 1} ('{cell}') are both "
                               f"'{key}'; rename or remove one of them")
        seen[key] = j
        if key in COLUMNS:
            names[key] = j
    if "strength" not in names:
        found = ", ".join(c for c in table.header if c) or "none"
        if table.sheets is not None and len(table.sheets) > 1:
            from .tables import _sheet_listing
            raise FlawmixError(f"{table.source}: no 'strength' column (found: {found}); sheets and their headers: "
                               f"{_sheet_listing(table.sheets)}; choose the sheet with --sheet NAME (or 'sheet' in "
                               "the study file)")
        raise FlawmixError(f"{where(table.source)}no 'strength' column (found: {found}); name the failure-stress "
                           "column 'strength' (a unit may follow: 'strength (MPa)')")
    if len(table.cells) == 0 or table.blank.all():
        raise FlawmixError(f"{where(table.source)}the table has no specimens; add one row per specimen")
    return names, header_unit


_SURVIVOR_HINT = re.compile(r"\b(?:surviv\w*|run-?outs?|did not (?:fail|break)|no (?:failure|fracture)|unbroken)\b",
                            re.IGNORECASE)


def _missing_column_warnings(table: RawTable, columns: dict) -> list[str]:
    """Warnings for a table whose origins or survivors may sit in a column not read as such:
    without an 'origin' column every failure counts as of unidentified origin, and without a
    'status' column every specimen counts as failed."""
    others = [j for j, cell in enumerate(table.header) if cell and j not in columns.values()]
    out = []
    if "origin" not in columns and others:
        names = ", ".join(f"'{table.header[j]}'" for j in others)
        out.append(f"{where(table.source)}no 'origin' column (not read: {names}): every failure counts as of "
                   "unidentified origin, one population; if a column holds the fracture origins, name it 'origin'")
    if "status" not in columns:
        for j in others:
            text = table.cells[j].fillna("").astype(str)
            hits = np.flatnonzero(text.str.contains(_SURVIVOR_HINT).to_numpy())
            if hits.size:
                rows = ", ".join(table.position(int(r)) for r in hits[:3]) + (" ..." if hits.size > 3 else "")
                out.append(f"{table.at(int(hits[0]), table.header[j])}'{text.iloc[hits[0]].strip()}' ({hits.size} "
                           f"record(s): {rows}) reads like a survivor, but the table has no 'status' column, so every "
                           "specimen counts as failed; add a 'status' column (failed / survived / excluded)")
    return out


def _resolve_unit(table: RawTable, columns: dict, header_unit: str | None, unit: str | None) -> str:
    if unit is None:
        return header_unit or "MPa"
    unit = stress_unit(unit)
    if header_unit is not None and header_unit != unit:
        cell = table.header[columns["strength"]]
        raise FlawmixError(f"{where(table.source)}the header '{cell}' says {header_unit} but the unit {unit} was "
                           "asked for (--unit or the study file's 'unit'); remove one of the two")
    return unit


def _column(table: RawTable, j: int, records: np.ndarray) -> np.ndarray:
    """Raw cells of column j for the given records, as an object array."""
    values = table.cells[j].to_numpy(dtype=object)
    return values if records.size == values.size else values[records]


def _text(table: RawTable, j: int | None, records: np.ndarray) -> np.ndarray:
    """Column j of the given records as stripped text ('' where missing). A list comprehension:
    several times faster than pandas' string methods on a million cells."""
    if j is None:
        return np.full(records.size, "", dtype=object)
    out = np.empty(records.size, dtype=object)
    out[:] = [v.strip() if type(v) is str else ("" if v is None or v != v else str(v).strip())
              for v in _column(table, j, records)]
    return out


def _words(table: RawTable, j: int | None, records: np.ndarray) -> tuple[np.ndarray, list[str], list[str]]:
    """Factorised column: codes (N,), the distinct cells as written (stripped) and normalised.
    Matching is done once per distinct value: a million rows hold a handful of status words."""
    if j is None:
        return np.zeros(records.size, dtype=np.intp), [""], [""]
    codes, uniques = pd.factorize(_column(table, j, records), use_na_sentinel=True)
    written = [u.strip() if isinstance(u, str) else str(u).strip() for u in uniques]
    if (codes < 0).any():                     # missing cells: one more distinct value, ''
        codes = np.where(codes < 0, len(written), codes)
        written.append("")
    return codes, written, [normalise_label(w) for w in written]


def _validate_rows(table: RawTable, columns: dict, unit: str) -> dict:
    """Strength, status, ids and geometry of every record, vectorised; first problem raises."""
    records = np.flatnonzero(~table.blank)
    codes, _, words = _words(table, columns.get("status"), records)
    kind = np.empty(len(words), dtype=object)
    for u, w in enumerate(words):
        if w in FAILED_WORDS:
            kind[u] = "failed"
        elif w in SURVIVED_WORDS:
            kind[u] = "survived"
        elif w in EXCLUDED_WORDS:
            kind[u] = "excluded"
        else:
            i = int(records[np.flatnonzero(codes == u)[0]])
            raise FlawmixError(f"{table.at(i, 'status')}unknown status '{table.cells[columns['status']].iloc[i]}'; "
                               "write 'failed', 'survived' (run-out, censored) or 'excluded' (not a valid test)")
    row_kind = kind[codes] if len(codes) else np.empty(0, dtype=object)
    excluded = records[row_kind == "excluded"]
    records = records[row_kind != "excluded"]
    failed = (row_kind[row_kind != "excluded"] == "failed")
    if records.size == 0:
        raise FlawmixError(f"{where(table.source)}every row is excluded or blank; no specimens are left to fit")
    strength = _strengths(table, columns["strength"], records, unit)
    ids = _ids(table, columns.get("specimen"), records)
    geometry = _text(table, columns["geometry"], records) if "geometry" in columns else None
    origin_codes, origin_written, _ = _words(table, columns.get("origin"), records)
    origin = np.asarray(origin_written, dtype=object)[origin_codes]
    return {"origin_codes": origin_codes, "origin_written": origin_written, "records": records, "excluded": excluded, "strength": strength, "failed": failed, "ids": ids,
            "geometry": geometry, "origin": origin, "used": records,
            "excluded_ids": _text(table, columns.get("specimen"), excluded)}


_MISSING = {"", "nan", "na", "n/a", "none", "null", "-"}


def _strengths(table: RawTable, j: int, records: np.ndarray, unit: str) -> np.ndarray:
    if pd.api.types.is_numeric_dtype(table.cells[j].dtype):
        values = table.cells[j].to_numpy(dtype=float)[records]
    else:
        text = _column(table, j, records)
        if table.delimiter not in (None, ","):       # decimal commas (semicolon and tab tables)
            text = np.array([v.replace(",", ".") if type(v) is str else v for v in text], dtype=object)
        values = pd.to_numeric(text, errors="coerce").astype(float)
        for r in np.flatnonzero(np.isnan(values)):     # the few cells the fast path refused
            try:
                values[r] = float(str(text[r]).strip().replace("_", ""))
            except ValueError:
                pass
    bad = ~(np.isfinite(values) & (values > 0))
    if bad.any():
        r = int(np.flatnonzero(bad)[0])
        raise FlawmixError(table.at(int(records[r]), table.header[j]) +
                           _strength_problem(table.cells[j].iloc[records[r]], values[r], unit, table.delimiter))
    return values


OUTLIER_RATIO = 1e3    # a strength this many times above or below the median is most likely a typo


def _outlier_warnings(table: RawTable, rows: dict, j: int) -> list[str]:
    """Strengths a thousand times above or below the median (1e300 among 400s): named by place,
    since no brittle material spans three decades within one table."""
    strength = rows["strength"]
    if strength.size < 3:
        return []
    median = float(np.median(strength))
    far = np.flatnonzero((strength > median * OUTLIER_RATIO) | (strength < median / OUTLIER_RATIO))
    out = [f"{table.at(int(rows['records'][r]), table.header[j])}strength {strength[r]:.4g} is "
           f"{'above' if strength[r] > median else 'below'} the median {median:.4g} by a factor of "
           f"{max(strength[r] / median, median / strength[r]):.3g}; check it for a typo (or a unit)"
           for r in far[:3]]
    if far.size > 3:
        out.append(f"{where(table.source)}{far.size - 3} more strengths lie over {OUTLIER_RATIO:g} times from the "
                   "median; check the strength column")
    return out


def _strength_problem(cell, value: float, unit: str, delimiter: str | None) -> str:
    s = "" if cell is None or (isinstance(cell, float) and np.isnan(cell)) else str(cell).strip()
    if s.lower() in _MISSING:
        return f"missing value; enter the failure stress (or withstood stress) in {unit}, or mark the row excluded"
    if np.isnan(value):
        number, _, rest = s.partition(" ")
        if rest and _is_number(number) and not any(ch.isdigit() for ch in rest):
            return (f"'{s}' is not a number; write the unit once in the header ('strength ({rest.strip()})' or "
                    "--unit) and only numbers in the cells")
        plain = s.replace(".", "").replace(",", "")
        if "," in s and "." in s and _is_number(plain):
            return (f"'{s}' is not a number (thousands separators?); write the stress without them, with a point "
                    f"for decimals, like {s.replace('.', '').replace(',', '.') if s.rfind(',') > s.rfind('.') else s.replace(',', '')}")
        if "," in s and _is_number(s.replace(",", ".")):
            digits_after = len(s) - s.rfind(",") - 1
            if digits_after == 3 and s.count(",") >= 1 and _is_number(plain):
                return (f"'{s}' is not a number (a thousands separator, or a decimal comma?); write "
                        f"{plain} or {s.replace(',', '.')}, without separators")
            return (f"'{s}' is not a number (a decimal comma?); write {s.replace(',', '.')}, or save the table "
                    "with semicolons between cells so decimal commas are read")
        return f"'{s}' is not a number; write the stress as a plain number in {unit}"
    if not np.isfinite(value):
        return f"'{s}' is not a finite number; enter the measured stress in {unit}"
    return f"{s} is not positive; strengths must be > 0 {unit}"


def _is_number(s: str) -> bool:
    try:
        float(s)
        return True
    except ValueError:
        return False


def _ids(table: RawTable, j: int | None, records: np.ndarray) -> np.ndarray:
    if j is None:
        return np.array([str(i + 1) for i in range(records.size)], dtype=object)
    ids = _text(table, j, records)
    empty = np.flatnonzero(ids == "")
    if empty.size:
        raise FlawmixError(f"{table.at(int(records[empty[0]]), table.header[j])}empty specimen id; give every "
                           "specimen an id or drop the column")
    duplicated = pd.Series(ids).duplicated().to_numpy()
    if duplicated.any():
        r = int(np.flatnonzero(duplicated)[0])
        first = int(np.flatnonzero(ids == ids[r])[0])
        raise FlawmixError(f"{table.at(int(records[r]), table.header[j])}duplicate specimen id '{ids[r]}' (first at "
                           f"{table.position(int(records[first]))}); make ids unique")
    return ids


def _map_origins(table: RawTable, rows: dict, pops, vocabulary: OriginVocabulary):
    """Candidates (N, k) from the origins as written; each distinct origin is read once."""
    failed, records = rows["failed"], rows["records"]
    codes, uniques = rows["origin_codes"], rows["origin_written"]
    counts = np.bincount(codes[failed], minlength=len(uniques)) if len(uniques) else np.zeros(0, int)
    readings = []
    for u, text in enumerate(uniques):
        try:
            readings.append(read_origin(text, vocabulary))
        except FlawmixError as exc:
            if counts[u] == 0:        # a survivor's origin is not used
                readings.append(None)
                continue
            raise FlawmixError(f"{table.at(int(records[np.flatnonzero(codes == u)[0]]), 'origin')}{exc}") from None
    if pops is None:
        labels = sorted({lab for r, c in zip(readings, counts) if r is not None and c and r.decision != "unidentified"
                         for lab in r.labels})
        pops = tuple(Population(lab, "unspecified", (lab,)) for lab in labels) or \
            (Population("all", "unspecified", ("all",)),)
    _check_user_words(pops, vocabulary)
    index = {lab: j for j, p in enumerate(pops) for lab in p.labels}
    names = [p.name for p in pops]
    per_origin = np.zeros((len(uniques), len(pops)), dtype=bool)
    decision = np.empty(len(uniques), dtype=object)
    origin_map, unmatched = [], {}
    for u, r in enumerate(readings):
        if r is None or counts[u] == 0:
            decision[u] = "survivor"
            continue
        decision[u] = r.decision
        if r.decision == "unidentified":
            per_origin[u] = True
        for lab in (r.labels if r.decision != "unidentified" else ()):
            if lab in index:
                per_origin[u, index[lab]] = True
            else:
                unmatched.setdefault(lab, int(records[np.flatnonzero((codes == u) & failed)[0]]))
        target = "any (unidentified)" if r.decision == "unidentified" else \
            " or ".join(n for n, c in zip(names, per_origin[u]) if c)
        origin_map.append({"origin as written": _as_written(r.written),
                           "read as": r.decision, "population": target, "specimens": int(counts[u])})
    if unmatched:
        listing = "; ".join(f"'{lab}' ({table.position(i)})" for lab, i in unmatched.items())
        raise FlawmixError(f"{where(table.source, column='origin')}origin label(s) not in any population: {listing}; "
                           "add them to a population's labels or mark them unknown")
    survivors = int((~failed).sum())
    if survivors:
        origin_map.append({"origin as written": "(survived)", "read as": "survivor", "population": "—",
                           "specimens": survivors})
    origin_map.sort(key=lambda e: (e["read as"] == "survivor", e["population"], e["origin as written"]))
    candidates = per_origin[codes] & failed[:, None] if len(codes) else np.zeros((0, len(pops)), dtype=bool)
    return candidates, pops, {"unidentified": decision[codes] == "unidentified" if len(codes) else np.zeros(0, bool),
                              "uncertain": decision[codes] == "uncertain" if len(codes) else np.zeros(0, bool),
                              "map": origin_map, "readings": readings, "counts": counts}


def _as_written(text: str) -> str:
    """An origin as written, for the origin table: '(empty)' for nothing, and a note when its
    accents are combining characters (it then looks like, and is read as, the precomposed one)."""
    import unicodedata

    if not text.strip():
        return "(empty)"
    return text if unicodedata.is_normalized("NFC", text) else f"{text} (combining accents)"


def _check_user_words(pops, vocabulary: OriginVocabulary) -> None:
    for p in pops:
        for lab in p.labels:
            if vocabulary.is_unidentified(lab):
                raise FlawmixError(f"population '{p.name}': label '{lab}' is one of the words for 'unidentified' "
                                   "and cannot belong to a population; remove it from one of the two")


def _origin_warnings(readings: dict, rows: dict, ungrouped: bool, vocabulary: OriginVocabulary) -> list[str]:
    out = []
    n_uncertain = int((readings["uncertain"] & rows["failed"]).sum())
    if n_uncertain:
        how = "counted as the label before the '?'" if vocabulary.uncertain == "count" else "treated as unidentified"
        out.append(f"{n_uncertain} failure origin(s) written with a trailing '?' are uncertain and {how}; "
                   "see the origin table (--uncertain-origins chooses)")
    if not ungrouped:
        return out
    counts: dict[str, int] = {}
    written: dict[str, str] = {}
    for r, c in zip(readings["readings"], readings["counts"]):
        if r is None or not c or r.decision == "unidentified":
            continue
        for lab in r.labels:
            counts[lab] = counts.get(lab, 0) + int(c)
            written.setdefault(lab, lab)
    out.extend(label_advice(counts, written))
    if len(counts) > 12:
        out.append(f"{len(counts)} distinct origin labels, each fitted as its own population; group them into the "
                   "few flaw types they stand for (--group or [populations] in the study file)")
    return out


def _pass_through(table: RawTable, records: np.ndarray) -> pd.DataFrame:
    """The used rows with every column, under the header as written."""
    frame = table.cells.iloc[records]
    keep = [j for j, c in enumerate(table.header) if c or j < frame.shape[1] and frame[j].notna().any()]
    frame = frame[keep]
    frame.columns = [table.header[j] for j in keep]
    return frame


def _accounting(table: RawTable, rows: dict, readings: dict) -> dict:
    """Every record read: used (failed or survived) or excluded, each excluded one with its reason."""
    excluded = [{"where": table.position(int(i)), "specimen": None, "reason": "blank line" if table.row_word == "line"
                 else "blank row"} for i in np.flatnonzero(table.blank)]
    for i, sid in zip(rows["excluded"], rows["excluded_ids"]):
        excluded.append({"where": table.position(int(i)), "specimen": sid or None,
                         "reason": "status says excluded (not a valid test)"})
    excluded.sort(key=lambda e: int(e["where"].split()[-1]) if e["where"].split()[-1].isdigit() else 0)
    failed = rows["failed"]
    unidentified = int((readings["unidentified"] & failed).sum())
    return {
        "rows_read": int(len(table.cells)),
        "used": int(rows["records"].size),
        "failed": int(failed.sum()),
        "survived": int((~failed).sum()),
        "excluded": len(excluded),
        "excluded_rows": excluded,
        "origins": {"unidentified": unidentified, "uncertain": int((readings["uncertain"] & failed).sum())},
    }
FEW_FAILURES = 5     # below this many certain failures a population's estimate is flagged (common practice)


def check_estimable(specimens: Specimens) -> list[str]:
    """Raise for populations with no failures; return warnings for weakly identified ones."""
    warnings: list[str] = list(specimens.warnings)   # doubts found while reading the table
    possible = specimens.possible_failures()
    certain = specimens.certain_failures()
    names = specimens.population_names
    empty = [names[j] for j in range(len(names)) if possible[j] == 0]
    if empty:
        raise FlawmixError(
            f"{where(specimens.source)}population(s) {', '.join(repr(n) for n in empty)} have no failures, "
            "so no finite Weibull estimate exists; remove them from the grouping or merge them with another population"
        )
    top = specimens.strength.max()
    for j, name in enumerate(names):
        mine = specimens.failed & specimens.candidates[:, j] & (specimens.n_candidates == 1)
        if certain[j] == 0:
            warnings.append(
                f"population '{name}' has no failure attributed to it with certainty; its estimate rests on "
                "unidentified or ambiguous origins and is weakly determined"
            )
        elif certain[j] == 1 and possible[j] == 1:
            if specimens.strength[mine][0] >= top:
                warnings.append(
                    f"population '{name}' has one failure, at the highest stress of all specimens: its modulus is "
                    "unbounded (the likelihood grows without limit); the reported value is the search bound"
                )
            else:
                warnings.append(f"population '{name}' has only one failure; its estimate is unreliable")
        elif certain[j] < FEW_FAILURES:
            warnings.append(f"population '{name}' has only {int(certain[j])} failure{'s' if certain[j] > 1 else ''} attributed to it with certainty "
                            f"(fewer than {FEW_FAILURES}); its modulus and characteristic strength are weakly "
                            "determined, and conclusions resting on it are not supported by the data")
    return warnings
