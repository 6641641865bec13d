"""Writing a figure to PNG, SVG or PDF, atomically."""

from __future__ import annotations

import os
from pathlib import Path

from matplotlib.figure import Figure

from ..errors import DataFormatError
from ..io.atomic import atomic_write

__all__ = ["SAVE_FORMATS", "save_figure"]

#: File formats :func:`save_figure` writes, by extension.
SAVE_FORMATS = ("png", "svg", "pdf")


def save_figure(fig: Figure, path: str | os.PathLike[str], *, dpi: float = 150.0) -> Path:
    """Write a figure to PNG, SVG or PDF, chosen by the file extension, atomically.

    The figure is written to a temporary file beside ``path`` and renamed over it, so a
    reader never sees a half-written file and a failure leaves any existing file intact.

    Parameters
    ----------
    fig
        The figure (e.g. ``BodePlot.figure``).
    path
        Output file ending in ``.png``, ``.svg`` or ``.pdf``.
    dpi
        Resolution of PNG output, dots per inch.

    Returns
    -------
    pathlib.Path
        The path written.

    Raises
    ------
    DataFormatError
        For another extension, or a directory that does not exist.
    """
    out = Path(path)
    ext = out.suffix.lower().lstrip(".")
    if ext not in SAVE_FORMATS:
        raise DataFormatError(
            f"cannot write a figure as '{out.suffix or '(no extension)'}'; use a file name ending in "
            + ", ".join(f".{e}" for e in SAVE_FORMATS),
            file=str(out),
        )
    folder = out.parent if str(out.parent) else Path(".")
    if not folder.is_dir():
        raise DataFormatError(f"directory '{folder}' does not exist; create it or choose another path",
                              file=str(out))
    return atomic_write(out, lambda tmp: fig.savefig(tmp, format=ext, dpi=dpi))
