"""One self-contained HTML file: inline CSS, plots as inline SVG, no script, no external asset."""

from __future__ import annotations

import html
import io
import re
from collections.abc import Sequence

from matplotlib import rc_context
from matplotlib.figure import Figure

from .blocks import Block, Bullets, Caution, FigureRef, Heading, Paragraph, Table
from .figures import ReportFigure

__all__ = ["figure_svg", "render_html"]

_CSS = """
body { font-family: system-ui, -apple-system, "Segoe UI", Roboto, "DejaVu Sans", sans-serif; color: #1a1a1a;
       margin: 0 auto; padding: 1.5rem 2rem 3rem; max-width: 1280px; line-height: 1.4; font-size: 15px; }
h1 { font-size: 1.6rem; margin: 0.2rem 0 0.6rem; }
h2 { font-size: 1.25rem; margin: 2rem 0 0.6rem; border-bottom: 2px solid #004488; padding-bottom: 0.2rem; }
h3 { font-size: 1.05rem; margin: 1.4rem 0 0.4rem; }
p.strong { font-weight: 600; }
.caution { border: 2px solid #996600; background: #fff7e0; padding: 0.7rem 1rem; margin: 1rem 0;
           font-weight: 600; border-radius: 4px; }
.caution::before { content: "Caution. "; color: #7a4f00; }
table { border-collapse: collapse; margin: 0.4rem 0 1rem; font-size: 13px; }
caption { text-align: left; font-weight: 600; padding: 0.3rem 0; }
th, td { border: 1px solid #c8c8c8; padding: 0.25rem 0.5rem; vertical-align: top; text-align: left; }
th { background: #eef2f7; }
td.n { text-align: right; white-space: nowrap; font-variant-numeric: tabular-nums; }
td.pass { color: #1d6b2a; font-weight: 700; }
td.fail { color: #a4161a; font-weight: 700; background: #fbe9e9; }
td.hash { font-family: ui-monospace, "DejaVu Sans Mono", monospace; font-size: 12px; word-break: break-all; }
figure { margin: 1rem 0 1.6rem; }
figure svg { max-width: 100%; height: auto; display: block; }
figcaption { font-size: 13px; color: #333; margin-top: 0.3rem; }
nav a { margin-right: 1rem; }
details { margin: 0.3rem 0 1rem; }
summary { cursor: pointer; color: #004488; }
ul { margin: 0.3rem 0 1rem; padding-left: 1.3rem; }
li { margin: 0.15rem 0; }
"""

#: A cell that is a number, possibly signed, with an interval or a unit-free range.
_NUMERIC = re.compile(r"^[−+\-–]?[\d,.]+( \[[\d,.\-–−]+, [\d,.\-–−]+\])?$|^[\d,.]+[–→ ]+[\d,.]+$|^–$")
_REF = re.compile(r'(\bid="|href="#|url\(#)')


def figure_svg(fig: Figure, prefix: str) -> str:
    """The figure as an ``<svg>`` element for inline use, its ids prefixed to stay unique.

    Text is drawn as paths (matplotlib's default ``svg.fonttype``), so the figure looks the
    same in every browser whatever fonts it has; the ids are salted deterministically so
    the same figure gives the same SVG.
    """
    buf = io.StringIO()
    with rc_context({"svg.hashsalt": prefix}):
        fig.savefig(buf, format="svg", metadata={"Date": None})
    text = buf.getvalue()
    text = text[text.index("<svg"):]
    # every id, href="#..." and url(#...) of matplotlib's SVG is internal: prefix them all
    text = _REF.sub(lambda m: f"{m.group(1)}{prefix}-", text)
    return text.strip()


def _cell(text: str, status: bool) -> str:
    cls = ""
    if status:
        cls = "pass" if text == "pass" else "fail" if text == "FAIL" else ""
    elif _NUMERIC.match(text):
        cls = "n"
    elif re.fullmatch(r"[0-9a-f]{64}", text):
        cls = "hash"
    return f'<td class="{cls}">{html.escape(text)}</td>' if cls else f"<td>{html.escape(text)}</td>"


def _table(t: Table) -> str:
    head = "".join(f"<th>{html.escape(h)}</th>" for h in t.headers)
    body = "".join("<tr>" + "".join(_cell(c, i == t.status) for i, c in enumerate(row)) + "</tr>\n" for row in t.rows)
    if not t.rows:
        body = f'<tr><td colspan="{len(t.headers)}">none</td></tr>\n'
    return (f'<table id="{t.key}"><caption>{html.escape(t.caption)}</caption>\n<thead><tr>{head}</tr></thead>\n'
            f"<tbody>\n{body}</tbody></table>")


def _block(b: Block, figures: dict[str, ReportFigure]) -> str:
    if isinstance(b, Heading):
        return f'<h{b.level} id="sec-{b.key}">{html.escape(b.text)}</h{b.level}>'
    if isinstance(b, Paragraph):
        return f'<p class="strong">{html.escape(b.text)}</p>' if b.strong else f"<p>{html.escape(b.text)}</p>"
    if isinstance(b, Bullets):
        if not b.items:
            return ""
        items = "<ul>\n" + "".join(f"<li>{html.escape(i)}</li>\n" for i in b.items) + "</ul>"
        return f"<details><summary>{html.escape(b.summary)}</summary>\n{items}</details>" if b.summary else items
    if isinstance(b, Table):
        return _table(b)
    if isinstance(b, Caution):
        return f'<div class="caution" role="note">{html.escape(b.text)}</div>'
    if isinstance(b, FigureRef):
        f = figures[b.key]
        return (f'<figure id="fig-{f.key}">\n{figure_svg(f.figure, f.key)}\n'
                f"<figcaption>{html.escape(f.caption)}</figcaption></figure>")
    raise TypeError(f"unknown report block {b!r}")


def render_html(title: str, blocks: Sequence[Block], figures: Sequence[ReportFigure]) -> str:
    """The whole report as one HTML document."""
    by_key = {f.key: f for f in figures}
    sections = [b for b in blocks if isinstance(b, Heading) and b.level == 2]
    nav = "<nav>" + "".join(f'<a href="#sec-{h.key}">{html.escape(h.text)}</a>' for h in sections) + "</nav>"
    body = "\n".join(s for s in (_block(b, by_key) for b in blocks) if s)
    return (
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
        "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n"
        f"<title>{html.escape(title)}</title>\n<style>{_CSS}</style>\n</head>\n<body>\n"
        f"<h1>{html.escape(title)}</h1>\n{nav}\n{body}\n</body>\n</html>\n"
    )
