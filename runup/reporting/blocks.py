"""The pieces a report is built from, and the number formats they use.

:mod:`.content` turns the JSON documents of one run into a sequence of blocks;
:mod:`.html` and :mod:`.markdown` write the same blocks in their own syntax, so the two
formats never diverge.  All cells are text, formatted here and only here.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

__all__ = ["Heading", "Paragraph", "Bullets", "Table", "FigureRef", "Caution", "Block", "num", "rpm", "ci", "MISSING"]

#: Shown for a value that is missing (JSON ``null``).
MISSING = "–"


@dataclass(frozen=True)
class Heading:
    """A section heading; ``level`` 2 for a section, 3 for a subsection; ``key`` the anchor."""

    text: str
    key: str
    level: int = 2


@dataclass(frozen=True)
class Paragraph:
    """A paragraph of plain text (``strong`` draws it emphasised)."""

    text: str
    strong: bool = False


@dataclass(frozen=True)
class Bullets:
    """A list of plain-text items; with a ``summary`` it is folded under that line (HTML)."""

    items: tuple[str, ...]
    summary: str = ""


@dataclass(frozen=True)
class Table:
    """A table of text cells; ``key`` names it (HTML ``id``); ``status`` marks a pass/fail column."""

    key: str
    caption: str
    headers: tuple[str, ...]
    rows: tuple[tuple[str, ...], ...]
    status: int | None = None


@dataclass(frozen=True)
class FigureRef:
    """A place for the figure of :class:`runup.reporting.figures.ReportFigure` ``key``."""

    key: str


@dataclass(frozen=True)
class Caution:
    """The caution of :data:`runup.report.CAUTION`, drawn prominently."""

    text: str


Block = Heading | Paragraph | Bullets | Table | FigureRef | Caution


def num(value: float | None, digits: int = 0, *, sign: bool = False) -> str:
    """``value`` with thousands separators and ``digits`` decimals; :data:`MISSING` for None/nan."""
    if value is None or not math.isfinite(value):
        return MISSING
    return f"{value:+,.{digits}f}" if sign else f"{value:,.{digits}f}"


def rpm(value: float | None) -> str:
    """A speed in whole rpm."""
    return num(value, 0)


def ci(interval: Sequence[float | None] | None, digits: int = 0) -> str:
    """A 95 % interval ``" [low, high]"``, or nothing when there is none."""
    if interval is None:
        return ""
    return f" [{num(interval[0], digits)}, {num(interval[1], digits)}]"
