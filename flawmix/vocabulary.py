"""The vocabulary of fracture-origin labels: words for "not identified", separators of
ambiguous origins ("pore or inclusion"), uncertain labels ("inclusion?"), and the decision
taken for every origin as written, so that a report can show each one.
"""
from __future__ import annotations

import re
import unicodedata
from dataclasses import dataclass

from .errors import FlawmixError

# What labs write when fractography found no origin; compared without case or spaces.
UNIDENTIFIED_WORDS = ("", "?", "-", "--", "unknown", "unidentified", "n.d.", "nd", "n.d", "not determined",
                      "not found", "none", "nan", "n/a", "na")
SEPARATORS = ("|", "/", " or ")
MAX_PAIR_WARNINGS = 10      # look-alike label pairs named one by one; the rest are counted
UNCERTAIN_CHOICES = ("count", "unidentified")
# Fragments of labels that look like "not identified" written another way (a warning, not a rule).
_UNKNOWN_HINTS = ("unknown", "unident", "undeterm", "not det", "not ident", "not visible", "not seen", "unclear",
                  "n/d", "n. d", "indeterm", "?")


def normalise_label(text) -> str:
    """Labels match ignoring case, runs of white space and Unicode composition:
    ' Machining  Damage' == 'machining damage', and 'inclusión' typed with a combining accent
    == the precomposed one (NFC); invisible format characters (zero-width space, soft hyphen)
    are dropped."""
    text = "".join(ch for ch in unicodedata.normalize("NFC", str(text)) if unicodedata.category(ch) != "Cf")
    return re.sub(r"\s+", " ", text).strip().lower()


def _squeeze(text: str) -> str:
    return re.sub(r"\s+", "", text)


@dataclass(frozen=True)
class OriginVocabulary:
    """How origin labels are read.

    Args:
        unidentified_words: words meaning "origin not identified", added to the built-in ones.
        separators: strings separating the alternatives of an ambiguous origin.
        uncertain: what a trailing ``?`` ("inclusion?") means: ``count`` (that label, listed as
            uncertain) or ``unidentified``.
    """

    unidentified_words: tuple[str, ...] = ()
    separators: tuple[str, ...] = SEPARATORS
    uncertain: str = "count"

    def __post_init__(self):
        if self.uncertain not in UNCERTAIN_CHOICES:
            raise FlawmixError(f"uncertain origins: '{self.uncertain}' is not a choice; use 'count' or 'unidentified'")
        if not self.separators or any(not str(s).strip() for s in self.separators):
            raise FlawmixError("origin separators: give at least one non-blank separator, e.g. '|'")
        object.__setattr__(self, "unidentified_words", tuple(str(w) for w in self.unidentified_words))
        object.__setattr__(self, "separators", tuple(str(s) for s in self.separators))

    def is_unidentified(self, label: str) -> bool:
        """True when a (normalised) label is one of the words for "not identified"."""
        words = {_squeeze(normalise_label(w)) for w in (*UNIDENTIFIED_WORDS, *self.unidentified_words)}
        return _squeeze(label) in words

    def split(self, text: str) -> list[str]:
        """The alternatives of one origin as written (one item when it is not ambiguous). A
        separator written with spaces around it (' or ') only splits between words."""
        patterns = [rf"\s+{re.escape(sep.strip().lower())}\s+" if sep != sep.strip() else re.escape(sep.lower())
                    for sep in self.separators]
        return [normalise_label(p) for p in re.split("|".join(patterns), normalise_label(text))]


@dataclass(frozen=True)
class OriginReading:
    """How one origin as written is read: ``decision`` is ``label``, ``uncertain``,
    ``ambiguous`` or ``unidentified``; ``labels`` are the (normalised) labels it names."""

    written: str
    decision: str
    labels: tuple[str, ...] = ()


def read_origin(text: str, vocabulary: OriginVocabulary) -> OriginReading:
    """Read one origin as written; raises FlawmixError (without a location) for empty alternatives."""
    label = normalise_label(text)
    if vocabulary.is_unidentified(label):
        return OriginReading(text, "unidentified")
    parts = vocabulary.split(text)
    if len(parts) > 1 and any(not p for p in parts):
        raise FlawmixError(f"origin '{text}' has an empty alternative; write one label, labels joined by "
                           f"'{vocabulary.separators[0]}', or leave the cell empty for unidentified")
    if any(vocabulary.is_unidentified(p) for p in parts):
        return OriginReading(text, "unidentified")   # "pore or unknown": any population may be the origin
    uncertain = False
    if len(parts) == 1 and parts[0].endswith("?"):
        bare = parts[0].rstrip("?").strip()
        if vocabulary.uncertain == "unidentified":
            return OriginReading(text, "unidentified", (bare,))
        parts, uncertain = [bare], True
    labels = tuple(dict.fromkeys(parts))
    if len(labels) > 1:
        return OriginReading(text, "ambiguous", labels)
    return OriginReading(text, "uncertain" if uncertain else "label", labels)


# ---- advice when there is no grouping ----------------------------------------------------

def edit_distance(a: str, b: str, limit: int = 3) -> int:
    """Levenshtein distance (insert, delete, substitute), stopping early above ``limit``."""
    if abs(len(a) - len(b)) > limit:
        return limit + 1
    previous = list(range(len(b) + 1))
    for i, ca in enumerate(a, 1):
        current = [i]
        for j, cb in enumerate(b, 1):
            current.append(min(previous[j] + 1, current[j - 1] + 1, previous[j - 1] + (ca != cb)))
        if min(current) > limit:
            return limit + 1
        previous = current
    return previous[-1]


def _variants(a: str, b: str) -> bool:
    """Labels that are likely one origin written two ways: plural, or a small typo. Labels whose
    numbers differ ('zone 1', 'zone 2') are told apart on purpose."""
    if re.findall(r"\d+", a) != re.findall(r"\d+", b):
        return False
    for x, y in ((a, b), (b, a)):
        if y in (x + "s", x + "es") or (x.endswith("y") and y == x[:-1] + "ies"):
            return True
    shortest = min(len(a), len(b))
    if shortest < 4:
        return False
    return edit_distance(a, b, 2) <= (1 if shortest < 8 else 2)


def label_advice(counts: dict[str, int], written: dict[str, str]) -> list[str]:
    """Warnings for labels, used without a grouping, that look like an unknown-marker or like
    another label written differently; each says how to group them."""
    out = []
    for label in counts:
        if any(h in label for h in _UNKNOWN_HINTS):
            out.append(f"origin label '{written[label]}' ({counts[label]} failure(s)) looks like 'not identified'; "
                       f"if it is, add it to the unidentified words (--unidentified-word '{written[label]}' or "
                       "unidentified_words in the study file), else name its population with --group")
    labels = sorted(counts, key=lambda x: (-counts[x], x))
    if len(labels) > 300:
        return out      # a pairwise comparison of this many labels says little; the count warning does
    pairs = [(a, b) for i, a in enumerate(labels) for b in labels[i + 1:] if _variants(a, b)]
    for a, b in pairs[:MAX_PAIR_WARNINGS]:
        out.append(f"origin labels '{written[a]}' ({counts[a]}) and '{written[b]}' ({counts[b]}) look like "
                   f"one origin written two ways and are fitted as two populations; if they are one, group "
                   f"them: --group '{a}={a},{b}' (or [populations] in the study file)")
    if len(pairs) > MAX_PAIR_WARNINGS:
        out.append(f"{len(pairs) - MAX_PAIR_WARNINGS} more pairs of origin labels look alike; see the origin table "
                   "and group them (--group or [populations] in the study file)")
    return out
