"""The report as Markdown (GitHub-flavoured tables), plots as PNG files in a folder beside it."""

from __future__ import annotations

from collections.abc import Mapping, Sequence

from .blocks import Block, Bullets, Caution, FigureRef, Heading, Paragraph, Table
from .figures import ReportFigure

__all__ = ["render_markdown"]


def _escape(text: str) -> str:
    return text.replace("\\", "\\\\").replace("|", "\\|").replace("*", "\\*").replace("_", "\\_")


def _table(t: Table) -> str:
    lines = [f"**{_escape(t.caption)}**", "", "| " + " | ".join(_escape(h) for h in t.headers) + " |",
             "|" + "---|" * len(t.headers)]
    lines += ["| " + " | ".join(_escape(c) for c in row) + " |" for row in t.rows]
    if not t.rows:
        lines.append("| none |" + " |" * (len(t.headers) - 1))
    return "\n".join(lines)


def _block(b: Block, figures: Mapping[str, ReportFigure], images: Mapping[str, str]) -> str:
    if isinstance(b, Heading):
        return f"{'#' * b.level} {b.text}"
    if isinstance(b, Paragraph):
        return f"**{_escape(b.text)}**" if b.strong else _escape(b.text)
    if isinstance(b, Bullets):
        head = f"*{_escape(b.summary)}:*\n\n" if b.summary and b.items else ""
        return head + "\n".join(f"- {_escape(i)}" for i in b.items)
    if isinstance(b, Table):
        return _table(b)
    if isinstance(b, Caution):
        return f"> **Caution.** {_escape(b.text)}"
    if isinstance(b, FigureRef):
        f = figures[b.key]
        return f"![{_escape(f.title)}]({images[b.key]})\n\n*{_escape(f.caption)}*"
    raise TypeError(f"unknown report block {b!r}")


def render_markdown(
    title: str, blocks: Sequence[Block], figures: Sequence[ReportFigure], images: Mapping[str, str]
) -> str:
    """The report as Markdown; ``images`` maps each figure key to its relative PNG path."""
    by_key = {f.key: f for f in figures}
    parts = [f"# {title}"] + [s for s in (_block(b, by_key, images) for b in blocks) if s]
    return "\n\n".join(parts) + "\n"
