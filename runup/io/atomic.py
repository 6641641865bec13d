"""Atomic file writes: every output file of runup appears whole or not at all.

The content is written to a hidden temporary file in the target's folder and renamed over
the target with :func:`os.replace`, which is atomic on POSIX file systems; an exception
removes the temporary file and leaves any existing target untouched.
"""

from __future__ import annotations

import os
import tempfile
from collections.abc import Callable
from pathlib import Path

__all__ = ["atomic_write", "write_text_atomic"]


def atomic_write(path: str | os.PathLike[str], write: Callable[[str], None]) -> Path:
    """Create ``path`` by calling ``write(temporary_path)`` and renaming the result into place.

    Parameters
    ----------
    path
        The file to create or replace; its folder must exist.
    write
        Writes the whole file at the path it is given (e.g. ``lambda p: df.to_csv(p)``).
    """
    target = Path(path)
    fd, tmp = tempfile.mkstemp(dir=target.parent, prefix=f".{target.name}.", suffix=".tmp")
    os.close(fd)
    try:
        write(tmp)
        os.chmod(tmp, 0o644)  # mkstemp creates 0600; outputs are ordinary files
        os.replace(tmp, target)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
    return target


def write_text_atomic(path: str | os.PathLike[str], text: str) -> Path:
    """Write UTF-8 text (``\\n`` line ends) atomically."""
    return atomic_write(path, lambda tmp: Path(tmp).write_text(text, encoding="utf-8", newline="\n"))
