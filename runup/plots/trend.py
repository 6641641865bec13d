"""Trend of one fingerprint quantity over time."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from matplotlib.axes import Axes
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from numpy.typing import ArrayLike

from ..errors import DataFormatError
from ._style import COLOURS, new_axes, style_axes

__all__ = ["TrendPlot", "trend"]


@dataclass(frozen=True)
class TrendPlot:
    """What :func:`trend` drew: the trend line of one quantity."""

    figure: Figure
    ax: Axes
    line: Line2D


def trend(
    times: ArrayLike,
    values: ArrayLike,
    *,
    label: str,
    unit: str,
    ax: Axes | None = None,
) -> TrendPlot:
    """Trend of one fingerprint quantity (e.g. a critical speed or AF) over time.

    Parameters
    ----------
    times
        Dates (``datetime64``, ``datetime`` or pandas timestamps) or seconds.
    values
        The quantity at each time; ``nan`` leaves a gap.
    label, unit
        Name and unit of the quantity, for the axis label ``"label (unit)"``; use ``"–"``
        for a dimensionless one.
    ax
        Axes to draw on; default a new figure.
    """
    raw_t = np.asarray(times)
    if raw_t.dtype.kind == "O" or raw_t.dtype.kind == "M":
        try:
            t = pd.to_datetime(raw_t.ravel()).to_numpy()
        except (ValueError, TypeError) as exc:
            raise DataFormatError(f"times must be dates or seconds; could not read them as dates ({exc})") from None
        dated = True
    else:
        try:
            t = raw_t.astype(float).ravel()
        except (ValueError, TypeError):
            raise DataFormatError("times must be dates or seconds, found text; pass datetimes or numbers") from None
        dated = False
    v = np.asarray(values, dtype=float).ravel()
    if t.size != v.size:
        raise DataFormatError(f"times and values must have the same length; got {t.size} and {v.size}")
    fig, ax = new_axes(ax, figsize=(8.0, 4.0))
    style_axes(ax)
    order = np.argsort(t, kind="stable")
    (line,) = ax.plot(t[order], v[order], color=COLOURS[0], marker="o", markersize=4.5, lw=1.2, label=label)
    ax.set_xlabel("date" if dated else "time (s)")
    ax.set_ylabel(f"{label} ({unit})")
    if dated:
        for tick in ax.get_xticklabels():
            tick.set_rotation(30)
            tick.set_horizontalalignment("right")
    return TrendPlot(figure=fig, ax=ax, line=line)
