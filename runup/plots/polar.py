"""Polar plot: the complex 1X vector of one probe in the plane, speed along the curve."""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Literal

import numpy as np
from matplotlib.artist import Artist
from matplotlib.axes import Axes
from matplotlib.figure import Figure
from matplotlib.legend import Legend
from matplotlib.lines import Line2D
from matplotlib.patches import FancyArrowPatch
from matplotlib.text import Annotation
from matplotlib.transforms import Bbox
from numpy.typing import NDArray

from ..critical import Critical, Identification
from ..errors import DataFormatError
from ..fit.circle import CircleFit
from ._data import fitted_curves, interp_complex, select_criticals, select_curves
from ._style import AMPLITUDE_UNIT, FIT, FIT_DASH, markevery, new_axes, probe_styles, style_axes

__all__ = ["PolarPlot", "polar"]


@dataclass(frozen=True)
class PolarPlot:
    """What :func:`polar` drew.

    Attributes
    ----------
    figure, ax
        The figure and its axes (equal aspect; x = real part, y = imaginary part).
    probe, order, segment
        What is shown.
    line
        Compensated response.
    raw_line
        Uncompensated response, or ``None`` when no slow roll was removed.
    slow_roll_arrow, slow_roll_vector_um_pp
        Arrow from the origin to the slow-roll vector (``Curve.slow_roll.vector_um_pp``),
        and that vector; ``None`` when no slow roll was removed.
    speed_arrow
        Arrow along the compensated curve in the direction of increasing speed.
    speed_label_rpm, speed_labels
        Round speeds labelled along the curve and their annotations (labels that would
        overlap a larger-amplitude one are left out).
    criticals, critical_markers
        Criticals of the segment and order, and a marker at each one's ``speed_rpm``.
    critical_labels
        The "critical N rpm" label of each marker, placed clear of the lag labels of the
        grid and of each other.
    fit
        Which fitted curve was drawn (``"circle"``, ``"modal"`` or ``"none"``).
    fit_lines
        Fitted curves, one per critical (circle) or per fit window (modal).
    legend
        The legend.
    """

    figure: Figure
    ax: Axes
    probe: str
    order: int
    segment: int
    line: Line2D
    raw_line: Line2D | None
    slow_roll_arrow: FancyArrowPatch | None
    slow_roll_vector_um_pp: complex | None
    speed_arrow: FancyArrowPatch | None
    speed_label_rpm: tuple[float, ...]
    speed_labels: tuple[Annotation, ...]
    criticals: tuple[Critical, ...]
    critical_markers: tuple[Line2D, ...]
    critical_labels: tuple[Annotation, ...]
    fit: Literal["circle", "modal", "none"]
    fit_lines: tuple[Line2D, ...]
    legend: Legend




def _circle_curve(circle: CircleFit, speed_rpm: NDArray) -> NDArray[np.complex128]:
    """The fitted circle of :mod:`runup.fit.circle` mapped back to the plane of ``X``.

    The fit lives in the plane of ``Y = X / (speed / reference_rpm)``; a point at speed
    ``s`` lies at ``Y(s) = c + R exp(j (alpha - 2 phi(s)))`` with ``alpha = arg A + 90 deg``
    and ``phi = atan2(2 zeta r, 1 - r^2)``, ``r = s / natural speed`` (Kennedy & Pancu 1947;
    Ewins 2000, sec. 4.3.2, as derived in :mod:`runup.fit.circle`).  Then ``X = Y s / ref``.
    """
    r = speed_rpm / circle.natural_speed_rpm
    phi = np.arctan2(2.0 * circle.damping_ratio * r, 1.0 - r**2)
    alpha = np.angle(circle.modal_constant_um_pp) + math.pi / 2.0
    y = circle.center_um_pp + circle.radius_um_pp * np.exp(1j * (alpha - 2.0 * phi))
    return y * (speed_rpm / circle.reference_rpm)


def _round_speeds(low: float, high: float, *, most: int = 12) -> NDArray[np.float64]:
    """Round speeds (multiples of 1, 2, 2.5 or 5 times a power of ten) inside [low, high]."""
    span = high - low
    if not span > 0:
        return np.array([])
    base = 10.0 ** math.floor(math.log10(span / most))
    step = next(m * base for m in (1.0, 2.0, 2.5, 5.0, 10.0) if span / (m * base) <= most)
    return np.arange(math.ceil(low / step) * step, high + 1e-9, step)


def _draw_polar_grid(ax: Axes, radius: float) -> list[Artist]:
    """Light amplitude rings and lag spokes (lag 0 right, growing clockwise); the lag labels."""
    ticks = _round_speeds(0.0, radius, most=4)  # same rounding rule, used for amplitudes
    ticks = ticks[ticks > 0]
    t = np.linspace(0.0, 2.0 * math.pi, 181)
    for r in ticks:
        ax.plot(r * np.cos(t), r * np.sin(t), color="0.85", lw=0.6, zorder=0)
    outer = max(float(ticks[-1]) if ticks.size else 0.0, radius)
    texts: list[Artist] = []
    for lag in range(0, 360, 30):
        z = outer * np.exp(-1j * math.radians(lag))
        ax.plot([0.0, z.real], [0.0, z.imag], color="0.9", lw=0.5, zorder=0)
        if lag % 90 == 0:
            zl = 1.1 * z
            texts.append(ax.text(zl.real, zl.imag, f"{lag}°", fontsize=8, color="0.4", ha="center", va="center"))
    return texts


#: Directions tried for a critical's label, degrees from "away from the curve's centre",
#: nearest first; each at two distances (points).
_LABEL_TURNS_DEG = (0, 30, -30, 60, -60, 90, -90, 120, -120, 150, -150, 180)
_LABEL_DISTANCES_PT = (12.0, 26.0)


def _aim(label: Annotation, direction: complex, distance_pt: float) -> None:
    """Offset a label from its point along ``direction``, anchored on the near side."""
    label.xyann = (distance_pt * direction.real, distance_pt * direction.imag)
    label.set_ha("left" if direction.real > 0.3 else "right" if direction.real < -0.3 else "center")
    label.set_va("bottom" if direction.imag > 0.3 else "top" if direction.imag < -0.3 else "center")


def _place_critical_labels(
    ax: Axes, labels: Sequence[tuple[Annotation, complex]], obstacles: Sequence[Artist]
) -> list[Annotation]:
    """Put each critical label where it overlaps no lag label, marker or earlier label.

    Directions are tried from "away from the curve's centre" outwards in turns of 30 deg,
    near then far; the first free one inside the axes wins (the first tried when none is
    free).  Judged on the laid-out figure, in display units.
    """
    if not labels:
        return []
    fig = ax.get_figure(root=True)
    for label, _ in labels:
        label.set_in_layout(False)  # moving a label must not move the axes
    fig.draw_without_rendering()
    inside = ax.get_window_extent()
    taken: list[Bbox] = [a.get_window_extent().expanded(1.15, 1.3) for a in obstacles]
    placed = []
    for label, away in labels:
        options = [(away * complex(math.cos(math.radians(t)), math.sin(math.radians(t))), d)
                   for d in _LABEL_DISTANCES_PT for t in _LABEL_TURNS_DEG]
        for direction, distance in options:
            _aim(label, direction, distance)
            box = label.get_window_extent()
            fits = inside.containsx(box.x0) and inside.containsx(box.x1) and inside.containsy(box.y0) \
                and inside.containsy(box.y1)
            if fits and not any(box.overlaps(b) for b in taken):
                break
        else:
            _aim(label, *options[0])
            box = label.get_window_extent()
        taken.append(box)
        placed.append(label)
    return placed


def _place_speed_labels(
    ax: Axes, s: NDArray, x: NDArray, obstacles: Sequence[Artist]
) -> tuple[list[float], list[Annotation]]:
    """Label round speeds along the curve; drop labels that would overlap one already kept.

    Candidates are taken from the largest response down (the loops around criticals
    matter most; the crowd near the origin at low speed matters least).  Overlap is judged
    on the laid-out figure (``Figure.draw_without_rendering``), in display units.
    """
    if s.size < 2:
        return [], []
    rounds = _round_speeds(float(s[0]), float(s[-1]))
    pts = interp_complex(rounds, s, x)
    centre = complex(np.mean(x))
    made: list[tuple[float, Annotation, Line2D]] = []
    for j in np.argsort(-np.abs(pts)):
        z = complex(pts[j])
        k = int(np.clip(np.searchsorted(s, rounds[j]), 1, s.size - 1))
        tangent = complex(x[k] - x[k - 1])
        normal = tangent * 1j / abs(tangent) if abs(tangent) > 0 else 1.0 + 0j
        if (normal.conjugate() * (z - centre)).real < 0:  # put the label outside the loop
            normal = -normal
        (dot,) = ax.plot(z.real, z.imag, ".", color="0.2", markersize=4, zorder=4)
        text = ax.annotate(f"{rounds[j]:,.0f}", (z.real, z.imag), xytext=(10 * normal.real, 10 * normal.imag),
                           textcoords="offset points", fontsize=7.5, color="0.2", ha="center", va="center",
                           bbox={"boxstyle": "round,pad=0.1", "fc": "white", "ec": "none", "alpha": 0.8})
        made.append((float(rounds[j]), text, dot))
    ax.get_figure(root=True).draw_without_rendering()
    kept_boxes = [a.get_window_extent() for a in obstacles]
    kept: list[tuple[float, Annotation]] = []
    for rpm, text, dot in made:
        box = text.get_window_extent().expanded(1.1, 1.2)
        if any(box.overlaps(b) for b in kept_boxes):
            text.remove()
            dot.remove()
            continue
        kept_boxes.append(box)
        kept.append((rpm, text))
    kept.sort(key=lambda item: item[0])
    return [k[0] for k in kept], [k[1] for k in kept]


def polar(
    identification: Identification,
    *,
    probe: str,
    segment: int = 0,
    order: int = 1,
    fit: Literal["circle", "modal", "none"] = "circle",
    ax: Axes | None = None,
) -> PolarPlot:
    """Polar plot: the complex 1X response of one probe in the plane, speed along the curve.

    Parameters
    ----------
    identification
        Result of :func:`runup.identify`.
    probe, segment, order
        Which curve.
    fit
        Fitted curve to overlay: ``"circle"`` the Kennedy–Pancu circle of each critical
        mapped back to ``X`` over its fit window, ``"modal"`` the least-squares modal fit
        (with residual terms) over its window, ``"none"``.
    ax
        Axes to draw on; default a new figure.

    Returns
    -------
    PolarPlot

    Notes
    -----
    x is the real and y the imaginary part of ``X = A exp(-j phi)`` (:mod:`runup.units`),
    so a lag ``phi`` of 0 deg points right, 90 deg down: **phase lag grows clockwise**, and
    a forward critical turns the curve clockwise through about 180 deg of lag.  The
    compensated curve starts near the origin; the uncompensated one starts at the slow-roll
    vector, drawn as an arrow from the origin.  The speed arrow points toward increasing
    speed (for a coastdown, against the direction of time).
    """
    if fit not in ("circle", "modal", "none"):
        raise DataFormatError(f"fit must be 'circle', 'modal' or 'none', got {fit!r}")
    (curve,) = select_curves(identification, segment=segment, order=order, probes=[probe])
    crits = select_criticals(identification, segment=segment, order=order)
    fig, ax = new_axes(ax, figsize=(9.5, 6.5))
    colour, marker = probe_styles(identification)[probe]
    s, x = curve.speed_rpm, curve.response_um_pp
    raw = curve.raw_response_um_pp if curve.slow_roll is not None else None
    extent = max(float(np.max(np.abs(x), initial=0.0)),
                 float(np.max(np.abs(raw), initial=0.0)) if raw is not None else 0.0) or 1.0
    grid_labels = _draw_polar_grid(ax, extent)
    lim = 1.2 * max(float(_round_speeds(0.0, extent, most=4)[-1]), extent)
    ax.set_xlim(-lim, lim)
    ax.set_ylim(-lim, lim)
    ax.set_aspect("equal", adjustable="box")
    ax.axhline(0.0, color="0.6", lw=0.6, zorder=0)
    ax.axvline(0.0, color="0.6", lw=0.6, zorder=0)

    (line,) = ax.plot(x.real, x.imag, color=colour, lw=1.3, marker=marker, markersize=3,
                      markevery=markevery(s.size, 0), label="compensated" if raw is not None else "measured")
    raw_line = sr_arrow = None
    if raw is not None and curve.slow_roll is not None:
        (raw_line,) = ax.plot(raw.real, raw.imag, color=colour, lw=0.9, ls=":", label="uncompensated")
        v = curve.slow_roll.vector_um_pp
        sr_arrow = FancyArrowPatch((0.0, 0.0), (v.real, v.imag), arrowstyle="-|>", mutation_scale=12,
                                   color="0.25", lw=1.2, zorder=4)
        ax.add_patch(sr_arrow)

    speed_arrow = None
    if s.size >= 3:
        # just above the largest response, clear of the critical's marker
        i = int(np.clip(np.searchsorted(s, 1.03 * s[int(np.argmax(np.abs(x)))]), 0, s.size - 2))
        speed_arrow = FancyArrowPatch((x[i].real, x[i].imag), (x[i + 1].real, x[i + 1].imag),
                                      arrowstyle="-|>", mutation_scale=16, color=colour, lw=0, zorder=5)
        ax.add_patch(speed_arrow)

    crit_markers, crit_labels = [], []
    for c in crits:
        if s.size >= 2 and s[0] <= c.speed_rpm <= s[-1]:
            z = complex(interp_complex(np.array([c.speed_rpm]), s, x)[0])
            crit_markers.append(ax.plot(z.real, z.imag, marker="D", color="white", markeredgecolor="0.1",
                                        markersize=7, ls="none", zorder=6)[0])
            away = z - complex(np.mean(x))
            crit_labels.append((ax.annotate(
                f"critical {c.speed_rpm:,.0f} rpm", (z.real, z.imag), xytext=(0.0, 0.0), textcoords="offset points",
                fontsize=8, color="0.1", fontweight="bold",
                bbox={"boxstyle": "round,pad=0.15", "fc": "white", "ec": "none", "alpha": 0.85}, zorder=7,
            ), away / abs(away) if abs(away) > 0 else 1.0 + 0j))

    fit_lines = []
    fit_style = {"color": FIT, "lw": 0.9, "ls": FIT_DASH, "zorder": 3}
    if fit == "circle":
        for c in crits:
            d = next((d for d in c.detail if d.probe == probe), None)
            if d is not None and d.circle is not None:
                fs = np.linspace(d.circle.low_rpm, d.circle.high_rpm, 300)
                fx = _circle_curve(d.circle, fs)
                fit_lines.append(ax.plot(fx.real, fx.imag, **fit_style)[0])
    elif fit == "modal":
        for _fs, fx, _modal_part in fitted_curves(crits, probe):
            fit_lines.append(ax.plot(fx.real, fx.imag, **fit_style)[0])
    handles: list[Artist] = [line] + ([raw_line] if raw_line is not None else [])
    if fit_lines:
        name = "circle fit (over its window)" if fit == "circle" else "modal fit"
        handles.append(Line2D([], [], label=name, **fit_style))
    if crit_markers:
        handles.append(Line2D([], [], marker="D", color="white", markeredgecolor="0.1", ls="none",
                              label="critical (peak response)"))
    if curve.slow_roll is not None:
        sr = curve.slow_roll
        handles.append(Line2D([0, 1], [0, 0], color="0.25", lw=1.2, marker=">", markersize=5, markevery=[1],
                              label=f"slow-roll vector {sr.amplitude_um_pp:.1f} µm pk-pk,\n"
                              f"lag {sr.phase_lag_deg:.0f}° ({sr.low_rpm:,.0f}–{sr.high_rpm:,.0f} rpm)"))
    handles.append(Line2D([], [], ls="none", marker=".", color="0.2", label="speed (rpm) along the curve"))
    legend = ax.legend(handles=handles, loc="upper left", bbox_to_anchor=(1.02, 1.0), frameon=False, fontsize=8)

    style_axes(ax)
    ax.grid(False)
    ax.set_xlabel(f"real part of {order}X vector ({AMPLITUDE_UNIT})")
    ax.set_ylabel(f"imaginary part of {order}X vector ({AMPLITUDE_UNIT})")
    meta = identification.conditioned.metadata
    seg = next((sg.label for sg in identification.conditioned.segments if sg.index == segment), f"segment {segment}")
    ax.set_title(f"{meta.machine_id} — {meta.run_id} — {seg}, {order}X, {probe}\n"
                 "phase lag 0° right, increasing clockwise", loc="left", fontsize=10)
    placed = _place_critical_labels(ax, crit_labels, [*grid_labels, *crit_markers])
    label_rpm, label_artists = _place_speed_labels(ax, s, x, [*grid_labels, *placed, *crit_markers])
    return PolarPlot(
        figure=fig, ax=ax, probe=probe, order=order, segment=segment, line=line, raw_line=raw_line,
        slow_roll_arrow=sr_arrow,
        slow_roll_vector_um_pp=curve.slow_roll.vector_um_pp if curve.slow_roll is not None else None,
        speed_arrow=speed_arrow, speed_label_rpm=tuple(label_rpm),
        speed_labels=tuple(label_artists), criticals=crits, critical_markers=tuple(crit_markers), critical_labels=tuple(placed),
        fit=fit, fit_lines=tuple(fit_lines), legend=legend,
    )


