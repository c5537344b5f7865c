"""User-facing errors and warnings.

Everything a user can get wrong raises :class:`FlawmixError` with one sentence that names the
place (file, line, column) and the fix; the command line prints it as one line, exit status 2.
"""
from __future__ import annotations


class FlawmixError(ValueError):
    """A problem with the user's input or request, described in one actionable line."""


class FlawmixWarning(UserWarning):
    """A result that exists but deserves doubt (few failures, an estimate at its bound...)."""


def where(source: str | None, line: int | None = None, column: str | None = None) -> str:
    """Format a location prefix such as ``bars.csv, line 7, column 'strength': ``."""
    parts = []
    if source:
        parts.append(str(source))
    if line is not None:
        parts.append(f"line {line}")
    if column is not None:
        parts.append(f"column '{column}'")
    return (", ".join(parts) + ": ") if parts else ""
