"""Shared look of every plot: colours, markers, guide greys, axes styling, rpm formatting.

Each probe keeps one colour and one marker throughout (the markers make the probes
distinguishable in grayscale print); the line style says what a line is (solid: slow-roll
compensated data, dotted: uncompensated, dashed: fitted model, dash-dot: predicted
critical).  Colours are Paul Tol's "high-contrast" and "bright" schemes (Tol, *Colour
Schemes*, SRON/EPS/TN/09-002, 2021), chosen to survive grayscale.
"""

from __future__ import annotations

from matplotlib.axes import Axes
from matplotlib.figure import Figure
from matplotlib.ticker import FuncFormatter

from ..critical import Identification

COLOURS = ("#004488", "#BB5566", "#DDAA33", "#228833", "#AA3377", "#66CCEE", "#555555")
MARKERS = ("o", "s", "^", "D", "v", "P", "X")
GUIDE = "0.35"  # grey of guide lines (criticals, brackets, diagonal)
SHADE = "0.88"  # grey fill of the operating range
FIT = "0.1"  # fitted curves: thin near-black dashes on top of the probe's own curve
FIT_DASH = (0, (4.0, 2.0))
AMPLITUDE_UNIT = "µm pk-pk"
RPM_FORMAT = FuncFormatter(lambda v, _pos: f"{v:,.0f}")


def new_axes(ax: Axes | None, *, figsize: tuple[float, float]) -> tuple[Figure, Axes]:
    """The figure of ``ax``, or a new constrained-layout figure with one axes."""
    if ax is not None:
        return ax.get_figure(root=True), ax
    fig = Figure(figsize=figsize, layout="constrained")
    return fig, fig.add_subplot()


def style_axes(ax: Axes) -> None:
    """Light grid behind the data, no top and right spines."""
    ax.grid(True, color="0.85", linewidth=0.6)
    ax.set_axisbelow(True)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)


def probe_styles(identification: Identification) -> dict[str, tuple[str, str]]:
    """Colour and marker per probe, fixed by the probe's position in the whole run."""
    names = list(dict.fromkeys(c.probe for c in identification.conditioned.curves))
    return {n: (COLOURS[i % len(COLOURS)], MARKERS[i % len(MARKERS)]) for i, n in enumerate(names)}


def markevery(n: int, index: int) -> tuple[int, int] | None:
    """About 12 markers per curve, staggered between probes so that they do not coincide."""
    if n < 2:
        return None
    step = max(1, n // 12)
    return (int(index * step / 4) % step, step)
