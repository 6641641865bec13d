"""Reports of one run: a self-contained HTML file, or Markdown with PNG plots beside it.

The flow: :func:`gather` judges and compares an identification and keeps the results with
their JSON documents (:class:`ReportInputs`); :func:`report_figures` draws the plots with
:mod:`runup.plots`; :func:`report_blocks` formats the JSON documents into blocks; the
HTML and Markdown writers put the same blocks into their syntax.  Nothing is computed
after :func:`gather`: the tables show the JSON's numbers, formatted.  ``docs/report.md``
describes the contents.

Examples
--------
>>> import runup
>>> from runup.criteria import load_rules
>>> from runup.reporting import gather, write_report
>>> result = runup.identify("sample_runs/compressor_startup.csv")  # doctest: +SKIP
>>> write_report(gather(result, rules=load_rules("api617")), "startup.html")  # doctest: +SKIP
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import Literal

from ..errors import DataFormatError
from ..io.atomic import write_text_atomic
from ..plots import save_figure
from .content import report_blocks, report_title
from .figures import ReportFigure, comparison_plot, plane_groups, report_figures, speed_map_plot
from .html import figure_svg, render_html
from .inputs import Progress, ReportInputs, compare_run, gather, margin_bands_rpm
from .markdown import render_markdown

__all__ = [
    "ReportInputs",
    "ReportFigure",
    "Progress",
    "gather",
    "compare_run",
    "margin_bands_rpm",
    "plane_groups",
    "report_figures",
    "comparison_plot",
    "speed_map_plot",
    "write_text_atomic",
    "report_blocks",
    "figure_svg",
    "render_html",
    "render_markdown",
    "write_report",
    "images_folder",
]

ReportFormat = Literal["html", "md"]


def images_folder(path: str | os.PathLike[str]) -> Path:
    """Folder of a Markdown report's PNGs: ``<stem>_files`` beside the report."""
    p = Path(path)
    return p.with_name(f"{p.stem}_files")


def write_report(
    inputs: ReportInputs,
    path: str | os.PathLike[str],
    *,
    format: ReportFormat = "html",
    progress: Progress | None = None,
) -> tuple[Path, tuple[ReportFigure, ...]]:
    """Draw the plots and write the report, atomically.

    Parameters
    ----------
    inputs
        From :func:`gather`.
    path
        Report file (``.html`` or ``.md`` as ``format`` says; the extension is not forced).
    format
        ``"html"``: one self-contained file, plots as inline SVG.  ``"md"``: Markdown, the
        plots as PNG files in :func:`images_folder` beside it.
    progress
        Called with the name of each step.

    Returns
    -------
    (pathlib.Path, tuple of ReportFigure)
        The report written and the figures it holds.

    Raises
    ------
    DataFormatError
        For an unknown format or a folder that does not exist.
    """
    if format not in ("html", "md"):
        raise DataFormatError(f"report format must be 'html' or 'md', got {format!r}")
    out = Path(path)
    if not out.parent.is_dir():
        raise DataFormatError(f"directory '{out.parent}' does not exist; create it or choose another path",
                              file=str(out))
    step = progress or (lambda _text: None)
    figures = report_figures(inputs, progress=step)
    blocks = report_blocks(inputs, figures)
    title = report_title(inputs)
    if format == "html":
        step("writing the HTML report")
        write_text_atomic(out, render_html(title, blocks, figures))
        return out, figures
    folder = images_folder(out)
    folder.mkdir(exist_ok=True)
    images = {}
    for f in figures:
        step(f"writing {f.key}.png")
        save_figure(f.figure, folder / f"{f.key}.png")
        images[f.key] = f"{folder.name}/{f.key}.png"
    step("writing the Markdown report")
    write_text_atomic(out, render_markdown(title, blocks, figures, images))
    return out, figures
