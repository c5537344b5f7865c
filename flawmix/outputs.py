"""Single output files (``plan --plot``): checked before the long work, written under a
temporary name and moved into place, so an error or Ctrl-C never leaves half a file and an
existing file is replaced only when asked."""
from __future__ import annotations

import os
import tempfile
from pathlib import Path

from .errors import FlawmixError


def check_output_file(target, force: bool, option: str = "--plot", kinds=None) -> Path:
    """Raise FlawmixError unless ``target`` can be written: not an existing file without
    ``force``, not a folder, in an existing folder where files can be created, and (when
    ``kinds`` lists file name endings) of a kind that can be written."""
    target = Path(target)
    if target.is_dir():
        raise FlawmixError(f"{target}: is a folder; give a file name for {option}, like {target / 'plan.png'}")
    kind = target.suffix.lstrip(".").lower()
    if kinds is not None and kind not in kinds:
        raise FlawmixError(f"{target}: cannot write a '{target.suffix or 'file without an ending'}' file; end the "
                           f"{option} name with one of {', '.join('.' + k for k in sorted(kinds))}")
    if target.exists() and not force:
        raise FlawmixError(f"{target}: already exists; choose another {option} file or add --force")
    parent = target.parent
    for folder in (parent, *parent.parents):
        if folder.exists():
            if not folder.is_dir():
                raise FlawmixError(f"{target}: '{folder}' is a file, not a folder; choose another {option}")
            break
    if not parent.is_dir():
        raise FlawmixError(f"{target}: the folder '{parent}' does not exist; create it or choose another {option}")
    try:
        probe = tempfile.NamedTemporaryFile(prefix=f".{target.name}.", dir=parent, delete=True)
        probe.close()
    except OSError as exc:
        raise FlawmixError(f"{target}: cannot create a file in '{parent}' ({exc.strerror or exc}); choose a writable "
                           f"{option}") from None
    return target


def write_atomically(target, write) -> None:
    """Call ``write(path)`` on a temporary file beside ``target``, then move it into place;
    on any error (or Ctrl-C) the temporary file is removed and ``target`` is untouched."""
    target = Path(target)
    handle, name = tempfile.mkstemp(prefix=f".{target.stem}.", suffix=target.suffix, dir=target.parent)
    os.close(handle)
    try:
        write(Path(name))
        os.replace(name, target)
    except OSError as exc:
        Path(name).unlink(missing_ok=True)
        raise FlawmixError(f"{target}: writing failed ({exc.strerror or exc}); nothing was written") from None
    except BaseException:
        Path(name).unlink(missing_ok=True)
        raise
