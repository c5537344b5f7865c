"""Specimen tables: read, validate and map fracture origins to flaw populations.

The output, :class:`Specimens`, is what every estimator consumes: strengths, which specimens
failed, and for each failure the set of populations that could have caused it.
"""
from __future__ import annotations

import hashlib
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Mapping

import numpy as np
import pandas as pd

from .errors import FlawmixError, where
from .units import stress_unit

FLAW_KINDS = ("volume", "surface", "edge", "unspecified")
UNKNOWN_LABELS = {"", "?", "unknown", "unidentified", "nan"}
FAILED_WORDS = {"", "failed", "fail", "f", "failure", "fractured", "broken", "nan"}
SURVIVED_WORDS = {"survived", "survivor", "s", "runout", "run-out", "censored", "suspended"}


def normalise_label(text: str) -> str:
    """Labels match ignoring case and runs of white space: ' Machining  Damage' == 'machining damage'."""
    return re.sub(r"\s+", " ", str(text)).strip().lower()


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

    @property
    def n_candidates(self) -> np.ndarray:
        """(N,) number of candidate populations of each specimen (0 for survivors)."""
        return self.candidates.sum(axis=1)

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
                unknown = set(spec) - {"kind", "labels", "prior"}
                if unknown:
                    raise FlawmixError(
                        f"population '{name}': unknown setting(s) {', '.join(sorted(unknown))}; use 'kind' and 'labels'"
                    )
                labels = spec.get("labels", [name])
                if isinstance(labels, str):
                    labels = [labels]
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
            if lab in UNKNOWN_LABELS:
                raise FlawmixError(
                    f"population '{p.name}': label '{lab}' means 'unidentified' and cannot belong to a population"
                )
            if lab in seen and seen[lab] != p.name:
                raise FlawmixError(
                    f"origin label '{lab}' is given to both '{seen[lab]}' and '{p.name}'; give it to one population"
                )
            seen[lab] = p.name
    return pops


# ---- reading ---------------------------------------------------------------------------

def _load_table(path_or_frame, sheet=None) -> tuple[pd.DataFrame, str | None, str, str | None]:
    """Return (table as text, source name, row word, checksum)."""
    if isinstance(path_or_frame, pd.DataFrame):
        return path_or_frame.copy(), None, "dataframe", None
    path = Path(path_or_frame)
    if not path.exists():
        raise FlawmixError(f"{path}: no such file; check the path")
    if path.is_dir():
        raise FlawmixError(f"{path}: is a folder; give the specimen table file (.csv or .xlsx)")
    data = path.read_bytes()
    checksum = hashlib.sha256(data).hexdigest()
    suffix = path.suffix.lower()
    if suffix in (".xlsx", ".xlsm"):
        try:
            import openpyxl  # noqa: F401
        except ImportError:
            raise FlawmixError(
                f"{path}: reading Excel workbooks needs openpyxl; run: pip install 'flawmix[excel]'"
            ) from None
        try:
            frame = pd.read_excel(path, sheet_name=sheet or 0, dtype=str, keep_default_na=False)
        except Exception as exc:  # openpyxl raises many types for damaged files
            raise FlawmixError(f"{path}: cannot read the workbook ({exc}); save it again as .xlsx or .csv") from None
        return frame, str(path), "row", checksum
    try:
        frame = pd.read_csv(path, dtype=str, keep_default_na=False, skipinitialspace=True,
                            comment=None, encoding="utf-8-sig")
    except pd.errors.EmptyDataError:
        raise FlawmixError(f"{path}: the file is empty; it needs a header line with at least 'strength'") from None
    except (pd.errors.ParserError, UnicodeDecodeError) as exc:
        raise FlawmixError(f"{path}: not a readable CSV table ({str(exc).splitlines()[0]}); save it as UTF-8 CSV") from None
    return frame, str(path), "line", checksum


def read_specimens(
    path_or_frame,
    populations=None,
    unit: str = "MPa",
    *,
    sheet: str | None = None,
) -> Specimens:
    """Read a specimen table and map its fracture origins to flaw populations.

    Args:
        path_or_frame: a ``.csv`` or ``.xlsx`` path, or a pandas DataFrame. Columns:
            ``strength`` (required), ``specimen``, ``origin``, ``status`` (``failed`` or
            ``survived``), ``geometry`` (optional); other columns are kept.
        populations: how origin labels group into populations: a mapping
            ``{name: {"kind": "volume", "labels": ["pore", ...]}}`` or a sequence of
            :class:`Population`. Without it each distinct label is its own population.
        unit: stress unit of the ``strength`` column (Pa, kPa, MPa, GPa, psi, ksi).

    Origins: empty, ``?`` or ``unknown`` means unidentified; ``a|b`` means a or b.
    Raises FlawmixError naming file, line and column for every problem found.
    """
    unit = stress_unit(unit)
    pops = make_populations(populations)
    raw, source, row_word, checksum = _load_table(path_or_frame, sheet)
    frame = raw.copy()
    frame.columns = [normalise_label(c) for c in frame.columns]
    dup_cols = frame.columns[frame.columns.duplicated()].tolist()
    if dup_cols:
        raise FlawmixError(f"{where(source)}column '{dup_cols[0]}' appears twice in the header; keep one")
    if "strength" not in frame.columns:
        raise FlawmixError(
            f"{where(source)}no 'strength' column (found: {', '.join(map(str, frame.columns)) or 'none'}); "
            "name the failure-stress column 'strength'"
        )
    if len(frame) == 0:
        raise FlawmixError(f"{where(source)}the table has no specimens; add one row per specimen")

    def loc(i: int) -> int | str:
        if row_word == "dataframe":
            return f"row index {frame.index[i]!r}"
        return i + 2  # header is line 1

    def at(i: int, column: str) -> str:
        pos = loc(i)
        if isinstance(pos, str):
            return f"{source + ', ' if source else ''}{pos}, column '{column}': "
        return f"{source}, {row_word} {pos}, column '{column}': "

    # strength
    text = frame["strength"].astype(str).str.strip()
    strength = np.empty(len(frame))
    for i, s in enumerate(text):
        if s == "" or s.lower() in ("nan", "na", "none", "null"):
            raise FlawmixError(f"{at(i, 'strength')}missing value; enter the failure stress (or withstood stress) in {unit}")
        try:
            value = float(s.replace("_", ""))
        except ValueError:
            raise FlawmixError(f"{at(i, 'strength')}'{s}' is not a number; write the stress as a plain number in {unit}") from None
        if not np.isfinite(value):
            raise FlawmixError(f"{at(i, 'strength')}'{s}' is not a finite number; enter the measured stress in {unit}")
        if value <= 0:
            raise FlawmixError(f"{at(i, 'strength')}{s} is not positive; strengths must be > 0 {unit}")
        strength[i] = value

    # status
    failed = np.ones(len(frame), dtype=bool)
    if "status" in frame.columns:
        for i, s in enumerate(frame["status"].astype(str)):
            w = normalise_label(s)
            if w in FAILED_WORDS:
                continue
            if w in SURVIVED_WORDS:
                failed[i] = False
                continue
            raise FlawmixError(f"{at(i, 'status')}unknown status '{s}'; write 'failed' or 'survived'")

    # ids
    if "specimen" in frame.columns:
        ids = frame["specimen"].astype(str).str.strip().to_numpy()
        seen: dict[str, int] = {}
        for i, s in enumerate(ids):
            if s == "":
                raise FlawmixError(f"{at(i, 'specimen')}empty specimen id; give every specimen an id or drop the column")
            if s in seen:
                first = loc(seen[s])
                raise FlawmixError(
                    f"{at(i, 'specimen')}duplicate specimen id '{s}' (first at {row_word} {first}); make ids unique"
                )
            seen[s] = i
    else:
        ids = np.array([str(i + 1) for i in range(len(frame))], dtype=object)

    # origins
    origin = frame["origin"].astype(str).to_numpy() if "origin" in frame.columns else np.array([""] * len(frame), dtype=object)
    parsed: list[list[str] | None] = []  # None = unidentified
    for s in origin:
        parts = [normalise_label(p) for p in str(s).split("|")]
        if any(p in UNKNOWN_LABELS for p in parts):
            parsed.append(None)
        else:
            parsed.append(parts)

    if pops is None:
        labels = sorted({p for i, parts in enumerate(parsed) if parts and failed[i] for p in parts})
        if not labels:
            pops = (Population("all", "unspecified", ("all",)),)
        else:
            pops = tuple(Population(lab, "unspecified", (lab,)) for lab in labels)
    label_to_index = {lab: j for j, p in enumerate(pops) for lab in p.labels}

    k = len(pops)
    candidates = np.zeros((len(frame), k), dtype=bool)
    unmatched: dict[str, int] = {}
    for i, parts in enumerate(parsed):
        if not failed[i]:
            continue
        if parts is None:
            candidates[i, :] = True
            continue
        for p in parts:
            j = label_to_index.get(p)
            if j is None:
                unmatched.setdefault(p, i)
            else:
                candidates[i, j] = True
    if unmatched:
        listing = "; ".join(f"'{lab}' ({row_word} {loc(i)})" for lab, i in unmatched.items())
        raise FlawmixError(
            f"{where(source, column='origin')}origin label(s) not in any population: {listing}; "
            "add them to a population's labels or mark them unknown"
        )

    geometry = None
    if "geometry" in frame.columns:
        geometry = frame["geometry"].astype(str).str.strip().to_numpy()

    return Specimens(
        strength=strength,
        failed=failed,
        candidates=candidates,
        populations=pops,
        unit=unit,
        ids=ids,
        origin=origin,
        table=raw,
        source=source,
        checksum=checksum,
        geometry=geometry,
        unidentified=np.array([p is None for p in parsed]) & failed,
    )


def check_estimable(specimens: Specimens) -> list[str]:
    """Raise for populations with no failures; return warnings for weakly identified ones."""
    warnings: list[str] = []
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
    return warnings
