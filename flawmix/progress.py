"""Progress on stderr for anything that can take more than a couple of seconds: a bar redrawn
in place on a terminal, plain lines in a pipe or CI log, nothing when silenced.

Library code opens a :func:`task` wherever it loops (fits, sampler blocks, bootstrap
replicates, figures); it shows only when the caller asked (``progress=True``) or inside
``with shown():``, which the CLI uses unless ``--quiet``. Our own few lines, not a
dependency: the needs are small and tqdm would be a new install for every user.
"""
from __future__ import annotations

import contextlib
import contextvars
import sys
import time

_SHOWN = contextvars.ContextVar("flawmix_progress_shown", default=False)
_NOTICES = contextvars.ContextVar("flawmix_progress_notices", default=None)
LINE_EVERY = 2.0      # seconds between plain lines in a pipe
BAR_EVERY = 0.1       # seconds between redraws on a terminal
BAR_WIDTH = 24


@contextlib.contextmanager
def shown(on: bool = True):
    """Show every task opened inside this block (the CLI wraps each command in it)."""
    token = _SHOWN.set(bool(on))
    notices = _NOTICES.set(set())
    try:
        yield
    finally:
        _SHOWN.reset(token)
        _NOTICES.reset(notices)


def is_shown(explicit: bool | None = None) -> bool:
    return bool(explicit) or _SHOWN.get()


class Task:
    """One job with an optional known total: ``step(done)`` as it goes, ``close()`` at the end."""

    def __init__(self, what: str, total: int | None = None, show: bool | None = None, stream=None):
        self.what = what
        self.total = total
        self.show = is_shown(show)
        self.stream = stream or sys.stderr
        self.tty = bool(getattr(self.stream, "isatty", lambda: False)())
        self.start = time.monotonic()
        self._last = self.start     # the first count comes one interval in: a quick task prints none
        self._drawn = False
        self.done = 0
        if self.show and not self.tty:
            self._line(f"{what}: started" + (f" ({total})" if total else ""))

    def _line(self, text: str) -> None:
        print(text, file=self.stream, flush=True)

    def step(self, done: int | None = None, note: str = "") -> None:
        self.done = self.done + 1 if done is None else done
        if not self.show:
            return
        now = time.monotonic()
        if now - self._last < (BAR_EVERY if self.tty else LINE_EVERY):
            return
        self._last = now
        self._emit(note)

    def _emit(self, note: str) -> None:
        elapsed = time.monotonic() - self.start
        if self.total:
            frac = min(1.0, self.done / self.total)
            count = f"{self.done}/{self.total}"
        else:
            frac, count = None, f"{self.done}"
        if self.tty:
            bar = "" if frac is None else "[" + "#" * round(frac * BAR_WIDTH) + "." * (BAR_WIDTH - round(frac * BAR_WIDTH)) + "] "
            text = f"\r{self.what}: {bar}{count} {note} {elapsed:.0f} s"
            self.stream.write(text[:119].ljust(80) + "\x1b[K")
            self.stream.flush()
            self._drawn = True
        else:
            self._line(f"{self.what}: {count}" + (f" ({100 * frac:.0f} %)" if frac is not None else "")
                       + (f" {note}" if note else "") + f", {elapsed:.0f} s")

    def close(self, note: str = "done") -> None:
        if not self.show:
            return
        elapsed = time.monotonic() - self.start
        end = f"{self.what}: {note} in {elapsed:.1f} s"
        if self.tty:
            self.stream.write("\r" + end.ljust(80)[:119] + "\x1b[K\n")
            self.stream.flush()
        else:
            self._line(end)

    def __enter__(self):
        return self

    def __exit__(self, exc_type, *_):
        if exc_type is None:
            self.close()
        elif self.show and self.tty and self._drawn:
            self.stream.write("\n")


def task(what: str, total: int | None = None, show: bool | None = None) -> Task:
    return Task(what, total, show)


def notice_once(text: str, stream=None) -> None:
    """Print a message on stderr once per CLI command, however many sub-fits raise it."""
    seen = _NOTICES.get()
    if seen is not None:
        if text in seen:
            return
        seen.add(text)
    print(text, file=stream or sys.stderr, flush=True)
