"""Measured against predicted critical speeds, and the undamped critical speed map."""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from types import MappingProxyType

import numpy as np
from matplotlib.artist import Artist
from matplotlib.axes import Axes
from matplotlib.figure import Figure
from matplotlib.legend import Legend
from matplotlib.lines import Line2D
from matplotlib.ticker import FuncFormatter
from numpy.typing import ArrayLike

from ..errors import DataFormatError
from ..run import OperatingSpeeds
from ._data import check_speeds
from ._style import COLOURS, GUIDE, MARKERS, RPM_FORMAT, SHADE, markevery, new_axes, style_axes

__all__ = ["ComparisonPlot", "CriticalSpeedMapPlot", "comparison", "critical_speed_map"]


@dataclass(frozen=True)
class ComparisonPlot:
    """What :func:`comparison` drew.

    Attributes
    ----------
    figure, ax
        The figure and its axes.
    points
        One marker line per compared mode (x = predicted, y = measured), aligned with
        ``labels``; modes missing either speed are not drawn and not listed.
    labels
        Mode labels of the points drawn.
    error_percent
        ``100 (measured - predicted) / predicted`` per point drawn.
    outside
        Labels of points outside the tolerance band (drawn as open markers).
    diagonal, band
        The line ``measured = predicted`` and the tolerance band about it.
    """

    figure: Figure
    ax: Axes
    points: tuple[Line2D, ...]
    labels: tuple[str, ...]
    error_percent: tuple[float, ...]
    outside: tuple[str, ...]
    diagonal: Line2D
    band: Artist


@dataclass(frozen=True)
class CriticalSpeedMapPlot:
    """What :func:`critical_speed_map` drew: one line per predicted mode, measured lines."""

    figure: Figure
    ax: Axes
    mode_lines: Mapping[str, Line2D]
    measured_lines: tuple[Line2D, ...]
    operating_span: Artist | None
    legend: Legend


def comparison(
    measured_speeds_rpm: Sequence[float] | ArrayLike,
    predicted_speeds_rpm: Sequence[float] | ArrayLike,
    *,
    labels: Sequence[str] | None = None,
    tolerance_percent: float = 5.0,
    ax: Axes | None = None,
) -> ComparisonPlot:
    """Measured against predicted critical speeds, with a tolerance band about the diagonal.

    Parameters
    ----------
    measured_speeds_rpm, predicted_speeds_rpm
        Paired speeds, rpm, one pair per mode; ``nan`` where a mode has no partner (such
        pairs are not drawn).
    labels
        Mode labels (default ``"mode 1"``, ``"mode 2"``, ...).
    tolerance_percent
        Half-width of the band ``predicted (1 +- tolerance/100)``.  The default 5 % is the
        usual verification-test tolerance (common practice; API 617 8th ed., 2014 — from
        memory).
    ax
        Axes to draw on; default a new figure.

    Returns
    -------
    ComparisonPlot
    """
    meas = check_speeds(measured_speeds_rpm, "measured_speeds_rpm")
    pred = check_speeds(predicted_speeds_rpm, "predicted_speeds_rpm")
    if meas.size != pred.size:
        raise DataFormatError(
            f"measured and predicted speeds must pair up; got {meas.size} measured and "
            f"{pred.size} predicted; pass nan for a mode without a partner"
        )
    names = [f"mode {i + 1}" for i in range(meas.size)] if labels is None else [str(v) for v in labels]
    if len(names) != meas.size:
        raise DataFormatError(f"labels must give one name per pair; got {len(names)} for {meas.size} pairs")
    if not (math.isfinite(tolerance_percent) and 0 < tolerance_percent < 100):
        raise DataFormatError(f"tolerance_percent must lie between 0 and 100, got {tolerance_percent!r}")
    fig, ax = new_axes(ax, figsize=(6.5, 6.0))
    style_axes(ax)
    ok = np.isfinite(meas) & np.isfinite(pred)
    both = np.concatenate([meas[ok], pred[ok]])
    lo = 0.8 * float(both.min()) if both.size else 0.0
    hi = 1.15 * float(both.max()) if both.size else 1.0
    grid = np.array([lo, hi])
    tol = tolerance_percent / 100.0
    band = ax.fill_between(grid, grid * (1 - tol), grid * (1 + tol), color=SHADE, lw=0,
                           label=f"±{tolerance_percent:g} % of predicted")
    (diagonal,) = ax.plot(grid, grid, color=GUIDE, lw=0.9, label="measured = predicted")
    points, drawn, errors, outside = [], [], [], []
    for m, p, name in zip(meas[ok], pred[ok], np.array(names, dtype=object)[ok], strict=True):
        err = 100.0 * (m - p) / p
        inside = abs(err) <= tolerance_percent
        points.append(ax.plot(p, m, ls="none", marker="o", markersize=7, color=COLOURS[0],
                              markerfacecolor=COLOURS[0] if inside else "white")[0])
        ax.annotate(f"{name}\n{err:+.1f} %", (p, m), xytext=(8, -4), textcoords="offset points",
                    fontsize=8, va="top")
        drawn.append(str(name))
        errors.append(float(err))
        if not inside:
            outside.append(str(name))
    ax.set_xlim(lo, hi)
    ax.set_ylim(lo, hi)
    ax.set_aspect("equal", adjustable="box")
    ax.xaxis.set_major_formatter(RPM_FORMAT)
    ax.yaxis.set_major_formatter(RPM_FORMAT)
    ax.set_xlabel("predicted critical speed (rpm)")
    ax.set_ylabel("measured critical speed (rpm)")
    handles: list[Artist] = [diagonal, band]
    handles.append(Line2D([], [], ls="none", marker="o", color=COLOURS[0], label="within tolerance"))
    if outside:
        handles.append(Line2D([], [], ls="none", marker="o", color=COLOURS[0], markerfacecolor="white",
                              label="outside tolerance"))
    ax.legend(handles=handles, loc="upper left", frameon=False, fontsize=8)
    return ComparisonPlot(figure=fig, ax=ax, points=tuple(points), labels=tuple(drawn),
                          error_percent=tuple(errors), outside=tuple(outside), diagonal=diagonal, band=band)


def critical_speed_map(
    stiffness_ratio: ArrayLike,
    speeds_rpm_by_mode: Mapping[str, ArrayLike],
    *,
    measured_speeds_rpm: Sequence[float] = (),
    operating: OperatingSpeeds | None = None,
    ax: Axes | None = None,
) -> CriticalSpeedMapPlot:
    """Undamped critical speed map: predicted critical speeds against support stiffness.

    Parameters
    ----------
    stiffness_ratio
        Support stiffness relative to a reference (typically the design bearing stiffness),
        positive; drawn on a logarithmic axis (the map is usually given from 0.1 to 10).
    speeds_rpm_by_mode
        Predicted undamped critical speed of each mode at each stiffness ratio, rpm.
    measured_speeds_rpm
        Measured critical speeds, drawn as horizontal lines with their value.
    operating
        Operating speeds; MOS to MCS is shaded as a horizontal band.
    ax
        Axes to draw on; default a new figure.

    Returns
    -------
    CriticalSpeedMapPlot

    Notes
    -----
    Where a measured critical crosses a mode's line reads the support stiffness the
    machine effectively has (the undamped critical speed map of API RP 684, 2nd ed., 2005
    — from memory).
    """
    k = np.asarray(stiffness_ratio, dtype=float).ravel()
    if k.size == 0 or not np.all(np.isfinite(k) & (k > 0)):
        raise DataFormatError("stiffness_ratio must be positive finite numbers; a ratio is k / k_reference > 0")
    measured = check_speeds(measured_speeds_rpm, "measured_speeds_rpm")
    fig, ax = new_axes(ax, figsize=(7.5, 5.5))
    style_axes(ax)
    ax.grid(True, which="minor", color="0.93", linewidth=0.4)
    op_span = None
    if operating is not None and operating.min_operating_rpm is not None and operating.max_continuous_rpm is not None:
        op_span = ax.axhspan(operating.min_operating_rpm, operating.max_continuous_rpm, color=SHADE, lw=0,
                             zorder=0, label=f"operating range {operating.min_operating_rpm:,.0f}–"
                             f"{operating.max_continuous_rpm:,.0f} rpm")
    mode_lines: dict[str, Line2D] = {}
    for i, (name, values) in enumerate(speeds_rpm_by_mode.items()):
        v = check_speeds(values, f"speeds of mode {name!r}")
        if v.size != k.size:
            raise DataFormatError(
                f"mode {name!r} has {v.size} speeds for {k.size} stiffness ratios; give one speed per ratio"
            )
        (mode_lines[name],) = ax.plot(k, v, color=COLOURS[i % len(COLOURS)], marker=MARKERS[i % len(MARKERS)],
                                      markevery=markevery(k.size, i), markersize=5, lw=1.4, label=str(name))
    measured_lines = []
    for m in measured[np.isfinite(measured)]:
        measured_lines.append(ax.axhline(m, color=GUIDE, lw=1.0, ls=(0, (5, 2.5))))
        ax.annotate(f"measured {m:,.0f}", (1.0, m), xycoords=("axes fraction", "data"), xytext=(-3, 3),
                    textcoords="offset points", ha="right", va="bottom", fontsize=8, color="0.25")
    ax.set_xscale("log")
    ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _pos: f"{v:g}"))
    ax.set_xlabel("support stiffness ratio k / k_ref (–)")
    ax.set_ylabel("undamped critical speed (rpm)")
    ax.yaxis.set_major_formatter(RPM_FORMAT)
    ax.set_ylim(bottom=0.0)
    handles: list[Artist] = list(mode_lines.values())
    if measured_lines:
        handles.append(Line2D([], [], color=GUIDE, lw=1.0, ls=(0, (5, 2.5)), label="measured critical"))
    if op_span is not None:
        handles.append(op_span)
    legend = ax.legend(handles=handles, loc="upper left", bbox_to_anchor=(1.02, 1.0), frameon=False, fontsize=8)
    return CriticalSpeedMapPlot(figure=fig, ax=ax, mode_lines=MappingProxyType(mode_lines),
                                measured_lines=tuple(measured_lines), operating_span=op_span, legend=legend)
