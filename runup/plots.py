"""Plots of run-up results: Bode, polar, measured-versus-predicted, critical speed map, trend.

The only module of runup that imports matplotlib.  It builds figures with
:class:`matplotlib.figure.Figure` directly (no ``pyplot`` state, no backend switch), so it
is safe in scripts, servers and notebooks alike.  Every function is a leaf: it takes
results, draws them on the axes given (or on a new figure) and returns a frozen record of
what it drew, so that tests and callers can check lines, markers and labels without
looking at pixels.  Nothing is computed here beyond evaluating the fitted models that the
results already hold.

Conventions (see ``docs/plots.md``): speed in rpm, 1X amplitude in micrometres
peak-to-peak, phase as lag in degrees (:mod:`runup.units`).  On the polar plot the
complex vector ``X = A exp(-j phi)`` is drawn in the ordinary complex plane, so a lag of
0 deg points right and the lag grows clockwise.

Styling: each probe keeps one colour and one marker throughout (the markers make the
probes distinguishable in grayscale print); the line style says what a line is
(solid: slow-roll compensated data, dotted: uncompensated, dashed: fitted model,
dash-dot: predicted critical).  Colours are Paul Tol's "high-contrast" and "bright"
schemes (Tol, *Colour Schemes*, SRON/EPS/TN/09-002, 2021), chosen to survive grayscale.
"""

from __future__ import annotations

import math
import os
import tempfile
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from types import MappingProxyType
from typing import Literal

import numpy as np
import pandas as pd
from matplotlib.artist import Artist
from matplotlib.axes import Axes
from matplotlib.figure import Figure
from matplotlib.legend import Legend
from matplotlib.lines import Line2D
from matplotlib.patches import FancyArrowPatch, Patch
from matplotlib.text import Annotation
from matplotlib.ticker import FuncFormatter, MultipleLocator
from numpy.typing import ArrayLike, NDArray

from .critical import Critical, Identification
from .errors import DataFormatError
from .fit.circle import CircleFit
from .fit.models import unbalance_response
from .run import Curve, OperatingSpeeds
from .units import amplitude_of

__all__ = [
    "BodePlot",
    "PolarPlot",
    "ComparisonPlot",
    "CriticalSpeedMapPlot",
    "TrendPlot",
    "bode",
    "polar",
    "comparison",
    "critical_speed_map",
    "trend",
    "save_figure",
    "SAVE_FORMATS",
]

#: File formats :func:`save_figure` writes, by extension.
SAVE_FORMATS = ("png", "svg", "pdf")

_COLOURS = ("#004488", "#BB5566", "#DDAA33", "#228833", "#AA3377", "#66CCEE", "#555555")
_MARKERS = ("o", "s", "^", "D", "v", "P", "X")
_GUIDE = "0.35"  # grey of guide lines (criticals, brackets, diagonal)
_SHADE = "0.88"  # grey fill of the operating range
_FIT = "0.1"  # fitted curves: thin near-black dashes on top of the probe's own curve
_FIT_DASH = (0, (4.0, 2.0))
_AMPLITUDE_UNIT = "µm pk-pk"


@dataclass(frozen=True)
class BodePlot:
    """What :func:`bode` drew.

    Attributes
    ----------
    figure, amplitude_ax, phase_ax
        The figure and its two axes (amplitude above, phase lag below, shared speed axis).
    lines, phase_lines
        Compensated amplitude and phase-lag line per probe.
    raw_lines, raw_phase_lines
        Uncompensated lines per probe (only probes whose curve had a slow roll removed,
        and only with ``show_raw``).
    fit_lines, fit_phase_lines
        Fitted-model lines per probe, one per fit window.
    fit_is_modal_part
        Per probe, aligned with ``fit_lines``: ``True`` where the line is the modal part
        alone (a fall-back critical without a stored least-squares fit).
    criticals
        The criticals drawn (those of the segment and order), aligned with the markers.
    critical_markers, phase_critical_markers
        Vertical line at each critical's ``speed_rpm`` on each axis.
    critical_labels
        Speed and AF annotation of each critical.
    half_power_brackets
        Bracket from ``lower_half_power_rpm`` to ``upper_half_power_rpm`` at 0.707 of the
        largest probe peak (``None`` where neither half-power speed is known).
    operating_span, margin_spans, predicted_lines
        Operating range (MOS to MCS), separation-margin bands, predicted criticals.
    legend
        The legend (outside the data, right of the amplitude axes).
    """

    figure: Figure
    amplitude_ax: Axes
    phase_ax: Axes
    lines: Mapping[str, Line2D]
    phase_lines: Mapping[str, Line2D]
    raw_lines: Mapping[str, Line2D]
    raw_phase_lines: Mapping[str, Line2D]
    fit_lines: Mapping[str, tuple[Line2D, ...]]
    fit_phase_lines: Mapping[str, tuple[Line2D, ...]]
    fit_is_modal_part: Mapping[str, tuple[bool, ...]]
    criticals: tuple[Critical, ...]
    critical_markers: tuple[Line2D, ...]
    phase_critical_markers: tuple[Line2D, ...]
    critical_labels: tuple[Annotation, ...]
    half_power_brackets: tuple[Line2D | None, ...]
    operating_span: Artist | None
    margin_spans: tuple[Artist, ...]
    predicted_lines: tuple[Line2D, ...]
    legend: Legend


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
    fit: Literal["circle", "modal", "none"]
    fit_lines: tuple[Line2D, ...]
    legend: Legend


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


@dataclass(frozen=True)
class TrendPlot:
    """What :func:`trend` drew: the trend line of one quantity."""

    figure: Figure
    ax: Axes
    line: Line2D


# ----------------------------------------------------------------------------- helpers


def _new_axes(ax: Axes | None, *, figsize: tuple[float, float]) -> tuple[Figure, Axes]:
    if ax is not None:
        return ax.get_figure(root=True), ax
    fig = Figure(figsize=figsize, layout="constrained")
    return fig, fig.add_subplot()


def _style(ax: Axes) -> None:
    ax.grid(True, color="0.85", linewidth=0.6)
    ax.set_axisbelow(True)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)


_RPM_FORMAT = FuncFormatter(lambda v, _pos: f"{v:,.0f}")


def _curves(
    identification: Identification, *, segment: int, order: int, probes: Sequence[str] | None
) -> tuple[Curve, ...]:
    cond = identification.conditioned
    available = [c for c in cond.curves if c.segment == segment and c.order == order]
    if not available:
        have = sorted({(c.segment, c.order) for c in cond.curves})
        raise DataFormatError(
            f"no curves for segment {segment}, order {order}; the run has (segment, order) "
            f"{have}; choose one of those"
        )
    if probes is None:
        return tuple(available)
    if isinstance(probes, str) or not probes:
        raise DataFormatError(
            f"probes must be a list of probe names, got {probes!r}; e.g. probes=['{available[0].probe}']"
        )
    by_name = {c.probe: c for c in available}
    unknown = [p for p in probes if p not in by_name]
    if unknown:
        raise DataFormatError(
            f"probe(s) {', '.join(map(repr, unknown))} not in segment {segment}, order {order}; "
            f"valid probes: {', '.join(by_name)}"
        )
    return tuple(by_name[p] for p in probes)


def _criticals(identification: Identification, *, segment: int, order: int) -> tuple[Critical, ...]:
    return tuple(c for c in identification.criticals if c.segment == segment and c.order == order)


def _probe_styles(identification: Identification) -> dict[str, tuple[str, str]]:
    """Colour and marker per probe, fixed by the probe's position in the whole run."""
    names = list(dict.fromkeys(c.probe for c in identification.conditioned.curves))
    return {n: (_COLOURS[i % len(_COLOURS)], _MARKERS[i % len(_MARKERS)]) for i, n in enumerate(names)}


def _markevery(n: int, index: int) -> tuple[int, int] | None:
    """About 12 markers per curve, staggered between probes so that they do not coincide."""
    if n < 2:
        return None
    step = max(1, n // 12)
    return (int(index * step / 4) % step, step)


#: Points weaker than this fraction of a curve's peak amplitude do not steer the unwrapping
#: of its displayed phase (their angle is mostly noise: at 10 % of the peak, 1.5 % noise of
#: the peak moves the angle by about 9 deg; below it the errors grow and can slip turns).
_PHASE_RELIABLE_FRACTION = 0.1


def _display_phase(response_um_pp: NDArray) -> NDArray[np.float64]:
    """Phase lag for display, deg: unwrapped over the reliable points only.

    The points of at least :data:`_PHASE_RELIABLE_FRACTION` of the peak amplitude are
    unwrapped along speed (first one placed in [0, 360)); each weaker point is wrapped to
    within +-180 deg of the reliable phase interpolated at its position, so noise near
    zero amplitude scatters about the trend instead of adding whole turns to it.
    """
    x = np.asarray(response_um_pp, dtype=complex)
    lag = np.rad2deg(-np.angle(x))
    amp = np.abs(x)
    if x.size == 0 or not np.any(amp > 0):
        return lag
    good = amp >= _PHASE_RELIABLE_FRACTION * amp.max()
    idx = np.flatnonzero(good)
    trend = np.rad2deg(np.unwrap(np.deg2rad(lag[idx])))
    trend -= 360.0 * math.floor(trend[0] / 360.0)
    guide = np.interp(np.arange(x.size), idx, trend)
    return guide + (lag - guide + 180.0) % 360.0 - 180.0


def _align_phase(phase_deg: NDArray, reference_deg: float, at: int) -> NDArray:
    """Shift an unwrapped phase by a whole number of turns to meet ``reference_deg`` at ``at``."""
    if phase_deg.size == 0 or not math.isfinite(reference_deg):
        return phase_deg
    return phase_deg - 360.0 * round((phase_deg[at] - reference_deg) / 360.0)


def _fitted_curves(
    critical_list: Sequence[Critical], probe: str
) -> list[tuple[NDArray, NDArray, bool]]:
    """(speed, complex response, is modal part only) of the fitted models for one probe.

    Criticals fitted together share one least-squares fit (``Critical.fit``); its
    prediction includes the residual terms.  A fall-back critical without a stored fit
    gives the modal part ``A r^2 / (1 - r^2 + 2 j zeta r)`` alone.
    """
    out: list[tuple[NDArray, NDArray, bool]] = []
    seen: set[int] = set()
    for c in critical_list:
        fit = c.fit
        if fit is not None:
            if id(fit) in seen or probe not in fit.probes:
                continue
            seen.add(id(fit))
            s = np.linspace(fit.low_rpm, fit.high_rpm, 400)
            out.append((s, fit.predict(probe, s), False))
            continue
        detail = next((d for d in c.detail if d.probe == probe), None)
        a = detail.modal_constant_um_pp if detail is not None else complex(math.nan)
        if not np.isfinite(a) and detail is not None and detail.circle is not None:
            a = detail.circle.modal_constant_um_pp
        if np.isfinite(a) and math.isfinite(c.natural_speed_rpm) and c.fit_high_rpm > c.fit_low_rpm:
            s = np.linspace(c.fit_low_rpm, c.fit_high_rpm, 400)
            x = unbalance_response(
                s, natural_speed_rpm=c.natural_speed_rpm, damping_ratio=c.damping_ratio, modal_constant=a
            )
            out.append((s, x, True))
    return out


def _check_speeds(values: Sequence[float] | ArrayLike, name: str) -> NDArray[np.float64]:
    arr = np.asarray(values, dtype=float).ravel()
    bad = np.isfinite(arr) & (arr <= 0)
    if bad.any():
        raise DataFormatError(
            f"{name} must be positive speeds in rpm, found {arr[bad][0]:g}; pass rpm values > 0"
        )
    return arr


# ----------------------------------------------------------------------------- Bode


def bode(
    identification: Identification,
    *,
    probes: Sequence[str] | None = None,
    segment: int = 0,
    order: int = 1,
    amplitude_scale: Literal["linear", "log"] = "linear",
    show_raw: bool = True,
    operating: OperatingSpeeds | None = None,
    margin_bands: Sequence[tuple[float, float]] = (),
    predicted_speeds_rpm: Sequence[float] = (),
    axes: tuple[Axes, Axes] | None = None,
) -> BodePlot:
    """Bode plot: 1X amplitude and phase lag against speed, with the identified criticals.

    Parameters
    ----------
    identification
        Result of :func:`runup.identify`.
    probes
        Probes to show, in this order (default: all probes of the segment and order).
    segment, order
        Speed segment index and harmonic order.
    amplitude_scale
        ``"linear"`` (from zero) or ``"log"``.
    show_raw
        Also draw the uncompensated response (thin, dotted) of curves that had a slow-roll
        vector removed.
    operating
        Operating speeds; the range from minimum operating to maximum continuous speed is
        shaded.  Default: the run's metadata.
    margin_bands
        Speed bands ``(low_rpm, high_rpm)`` that the separation-margin rules keep clear of
        criticals (computed elsewhere), drawn hatched.
    predicted_speeds_rpm
        Predicted critical speeds, drawn as vertical dash-dot lines.
    axes
        ``(amplitude_ax, phase_ax)`` to draw on; default a new figure.

    Returns
    -------
    BodePlot

    Raises
    ------
    DataFormatError
        For a segment, order or probe that the identification does not hold, or a
        non-positive speed among the bands or predictions.

    Notes
    -----
    Each critical is marked at its peak-response speed ``Critical.speed_rpm`` (API 684's
    ``N_c``) with a bracket between its half-power speeds ``N_1``, ``N_2`` drawn at 0.707
    of the largest probe peak, the half-power construction of API RP 684 (2nd ed., 2005,
    sec. 2.8 — from memory).  The phase lag is unwrapped along speed; the uncompensated
    and fitted phases are shifted by whole turns to meet the compensated one.
    """
    if amplitude_scale not in ("linear", "log"):
        raise DataFormatError(
            f"amplitude_scale must be 'linear' or 'log', got {amplitude_scale!r}"
        )
    curves = _curves(identification, segment=segment, order=order, probes=probes)
    crits = _criticals(identification, segment=segment, order=order)
    bands = [tuple(_check_speeds(b, "margin_bands")) for b in margin_bands]
    if any(len(b) != 2 for b in bands):
        raise DataFormatError("margin_bands must be (low_rpm, high_rpm) pairs; pass two speeds per band")
    predicted = _check_speeds(predicted_speeds_rpm, "predicted_speeds_rpm")
    meta = identification.conditioned.metadata
    operating = meta.operating if operating is None else operating

    if axes is None:
        fig = Figure(figsize=(10.5, 6.8), layout="constrained")
        amp_ax, ph_ax = fig.subplots(2, 1, sharex=True, height_ratios=(3, 2))
    else:
        amp_ax, ph_ax = axes
        fig = amp_ax.get_figure(root=True)
    for ax in (amp_ax, ph_ax):
        _style(ax)
    styles = _probe_styles(identification)

    lines: dict[str, Line2D] = {}
    phase_lines: dict[str, Line2D] = {}
    raw_lines: dict[str, Line2D] = {}
    raw_phase_lines: dict[str, Line2D] = {}
    fit_lines: dict[str, tuple[Line2D, ...]] = {}
    fit_phase_lines: dict[str, tuple[Line2D, ...]] = {}
    fit_modal: dict[str, tuple[bool, ...]] = {}
    for k, curve in enumerate(curves):
        colour, marker = styles[curve.probe]
        s = curve.speed_rpm
        amp = curve.amplitude_um_pp
        phase = _display_phase(curve.response_um_pp)
        ref = int(np.argmax(amp)) if amp.size else 0
        every = _markevery(s.size, k)
        common = {"color": colour, "marker": marker, "markevery": every, "markersize": 4.5}
        (lines[curve.probe],) = amp_ax.plot(s, amp, lw=1.4, label=curve.probe, **common)
        (phase_lines[curve.probe],) = ph_ax.plot(s, phase, lw=1.2, label=curve.probe, **common)
        if show_raw and curve.slow_roll is not None:
            raw_phase = _align_phase(_display_phase(curve.raw_response_um_pp), phase[ref] if phase.size else math.nan, ref)
            raw_style = {"color": colour, "lw": 0.9, "ls": ":", "alpha": 0.9}
            (raw_lines[curve.probe],) = amp_ax.plot(s, curve.raw_amplitude_um_pp, **raw_style)
            (raw_phase_lines[curve.probe],) = ph_ax.plot(s, raw_phase, **raw_style)
        f_amp, f_ph, f_modal = [], [], []
        for fs, fx, modal_part in _fitted_curves(crits, curve.probe):
            f_phase = _display_phase(fx)
            if s.size:
                i = int(np.clip(np.searchsorted(s, fs[fs.size // 2]), 0, s.size - 1))
                f_phase = _align_phase(f_phase, phase[i], fs.size // 2)
            fit_style = {"color": _FIT, "lw": 0.8, "ls": _FIT_DASH, "zorder": 4}
            f_amp_values = amplitude_of(fx)
            weak = f_amp_values < _PHASE_RELIABLE_FRACTION * f_amp_values.max(initial=0.0)
            f_phase = np.where(weak, np.nan, f_phase)  # the fit's angle swings where it passes zero
            f_amp.append(amp_ax.plot(fs, f_amp_values, **fit_style)[0])
            f_ph.append(ph_ax.plot(fs, f_phase, **fit_style)[0])
            f_modal.append(modal_part)
        fit_lines[curve.probe], fit_phase_lines[curve.probe] = tuple(f_amp), tuple(f_ph)
        fit_modal[curve.probe] = tuple(f_modal)

    op_span = None
    lo, hi = operating.min_operating_rpm, operating.max_continuous_rpm
    if lo is not None and hi is not None:
        op_span = amp_ax.axvspan(lo, hi, color=_SHADE, lw=0, zorder=0)
        ph_ax.axvspan(lo, hi, color=_SHADE, lw=0, zorder=0)
    margin_spans = []
    for b_lo, b_hi in bands:
        for ax in (amp_ax, ph_ax):
            span = ax.axvspan(min(b_lo, b_hi), max(b_lo, b_hi), facecolor="none", edgecolor="0.55",
                              hatch="////", lw=0, zorder=0)
            if ax is amp_ax:
                margin_spans.append(span)
    predicted_lines = []
    for p in predicted[np.isfinite(predicted)]:
        predicted_lines.append(amp_ax.axvline(p, color=_GUIDE, lw=1.0, ls="-."))
        ph_ax.axvline(p, color=_GUIDE, lw=1.0, ls="-.")

    markers, ph_markers, labels, brackets = [], [], [], []
    peak_top = max((float(np.nanmax(c.amplitude_um_pp)) for c in curves if c.speed_rpm.size), default=1.0)
    x_range = np.ptp(np.concatenate([c.speed_rpm for c in curves])) or 1.0
    lift, last_x = 0, -math.inf
    for c in crits:
        lift = 1 - lift if c.speed_rpm - last_x < 0.12 * x_range else 0
        last_x = c.speed_rpm
        markers.append(amp_ax.axvline(c.speed_rpm, color=_GUIDE, lw=0.9, zorder=1))
        ph_markers.append(ph_ax.axvline(c.speed_rpm, color=_GUIDE, lw=0.9, zorder=1))
        af = f"AF {c.amplification_factor:.1f}" if math.isfinite(c.amplification_factor) else "AF n/a"
        af += " (critically damped)" if c.critically_damped else ""
        labels.append(
            amp_ax.annotate(
                f"{c.speed_rpm:,.0f} rpm\n{af}", xy=(c.speed_rpm, 1.0), xycoords=("data", "axes fraction"),
                xytext=(3, 2 + 22 * lift), textcoords="offset points", fontsize=8, color="0.2",
                va="bottom", ha="left", annotation_clip=False,
            )
        )
        shown = [d.peak_amplitude_um_pp for d in c.detail if any(d.probe == cv.probe for cv in curves)]
        level = 0.707 * (max(shown) if shown else peak_top)  # API 684 half-power level (0.707)
        n1, n2 = c.lower_half_power_rpm, c.upper_half_power_rpm
        if math.isfinite(n1) or math.isfinite(n2):
            # a half-power speed outside the record (heavy damping) is cut at the record's
            # end and gets no end tick, so the bracket never suggests data that is not there
            s_lo, s_hi = min(float(cv.speed_rpm[0]) for cv in curves), max(float(cv.speed_rpm[-1]) for cv in curves)
            ends = [n1 if math.isfinite(n1) else c.speed_rpm, n2 if math.isfinite(n2) else c.speed_rpm]
            ticks = [i for i, (e, n) in enumerate(zip(ends, (n1, n2), strict=True))
                     if math.isfinite(n) and s_lo <= e <= s_hi]
            ends = [float(np.clip(e, s_lo, s_hi)) for e in ends]
            brackets.append(amp_ax.plot(ends, [level, level], color=_GUIDE, lw=1.0, marker="|", markersize=9,
                                        markevery=ticks, zorder=3)[0])
        else:
            brackets.append(None)

    amp_ax.set_yscale(amplitude_scale)
    if amplitude_scale == "linear":
        amp_ax.set_ylim(bottom=0.0)
    amp_ax.set_ylabel(f"{order}X amplitude ({_AMPLITUDE_UNIT})")
    ph_ax.set_ylabel(f"{order}X phase lag (deg)")
    ph_ax.set_xlabel("speed (rpm)")
    ph_lo, ph_hi = ph_ax.get_ylim()
    ph_ax.yaxis.set_major_locator(MultipleLocator(90.0 if ph_hi - ph_lo <= 900 else 180.0))
    ph_ax.xaxis.set_major_formatter(_RPM_FORMAT)
    seg = identification.conditioned.segment(segment) if any(
        s.index == segment for s in identification.conditioned.segments
    ) else None
    seg_label = seg.label if seg is not None else f"segment {segment}"
    amp_ax.set_title(f"{meta.machine_id} — {meta.run_id} — {seg_label}, {order}X", loc="left",
                     pad=34 if any(a.xyann[1] > 2 for a in labels) else 22)

    handles: list[Artist] = [
        Line2D([], [], color=styles[c.probe][0], marker=styles[c.probe][1], lw=1.4, label=c.probe)
        for c in curves
    ]
    handles.append(Line2D([], [], color=_GUIDE, lw=1.4, label="compensated (slow roll removed)"
                          if any(c.slow_roll is not None for c in curves) else "measured"))
    if raw_lines:
        handles.append(Line2D([], [], color=_GUIDE, lw=0.9, ls=":", label="uncompensated"))
    if any(not m for ms in fit_modal.values() for m in ms):
        handles.append(Line2D([], [], color=_FIT, lw=0.8, ls=_FIT_DASH, label="fitted model"))
    if any(m for ms in fit_modal.values() for m in ms):
        handles.append(Line2D([], [], color=_FIT, lw=0.8, ls=_FIT_DASH,
                              label="fitted mode alone\n(no residual terms)"))
    if markers:
        handles.append(Line2D([], [], color=_GUIDE, lw=0.9, label="critical (peak response)"))
    if any(b is not None for b in brackets):
        handles.append(Line2D([], [], color=_GUIDE, lw=1.0, marker="|", markersize=9,
                              label="half-power band (0.707)"))
    if op_span is not None:
        handles.append(Patch(color=_SHADE, label=f"operating range\n{lo:,.0f}–{hi:,.0f} rpm"))
    if margin_spans:
        handles.append(Patch(facecolor="none", edgecolor="0.55", hatch="////", lw=0,
                             label="separation margin\nrequired"))
    if predicted_lines:
        handles.append(Line2D([], [], color=_GUIDE, lw=1.0, ls="-.", label="predicted critical"))
    legend = amp_ax.legend(handles=handles, loc="upper left", bbox_to_anchor=(1.01, 1.0),
                           frameon=False, fontsize=8, borderaxespad=0.0)

    return BodePlot(
        figure=fig, amplitude_ax=amp_ax, phase_ax=ph_ax,
        lines=MappingProxyType(lines), phase_lines=MappingProxyType(phase_lines),
        raw_lines=MappingProxyType(raw_lines), raw_phase_lines=MappingProxyType(raw_phase_lines),
        fit_lines=MappingProxyType(fit_lines), fit_phase_lines=MappingProxyType(fit_phase_lines),
        fit_is_modal_part=MappingProxyType(fit_modal), criticals=crits,
        critical_markers=tuple(markers), phase_critical_markers=tuple(ph_markers),
        critical_labels=tuple(labels), half_power_brackets=tuple(brackets),
        operating_span=op_span, margin_spans=tuple(margin_spans),
        predicted_lines=tuple(predicted_lines), legend=legend,
    )


# ----------------------------------------------------------------------------- polar


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


def _interp_complex(x: NDArray, xp: NDArray, fp: NDArray) -> NDArray[np.complex128]:
    return np.interp(x, xp, fp.real) + 1j * np.interp(x, xp, fp.imag)


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
    pts = _interp_complex(rounds, s, x)
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
    (curve,) = _curves(identification, segment=segment, order=order, probes=[probe])
    crits = _criticals(identification, segment=segment, order=order)
    fig, ax = _new_axes(ax, figsize=(9.5, 6.5))
    colour, marker = _probe_styles(identification)[probe]
    s, x = curve.speed_rpm, curve.response_um_pp
    raw = curve.raw_response_um_pp if curve.slow_roll is not None else None
    extent = max(float(np.max(np.abs(x), initial=0.0)),
                 float(np.max(np.abs(raw), initial=0.0)) if raw is not None else 0.0) or 1.0
    obstacles = _draw_polar_grid(ax, extent)
    lim = 1.2 * max(float(_round_speeds(0.0, extent, most=4)[-1]), extent)
    ax.set_xlim(-lim, lim)
    ax.set_ylim(-lim, lim)
    ax.set_aspect("equal", adjustable="box")
    ax.axhline(0.0, color="0.6", lw=0.6, zorder=0)
    ax.axvline(0.0, color="0.6", lw=0.6, zorder=0)

    (line,) = ax.plot(x.real, x.imag, color=colour, lw=1.3, marker=marker, markersize=3,
                      markevery=_markevery(s.size, 0), label="compensated" if raw is not None else "measured")
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

    crit_markers = []
    for c in crits:
        if s.size >= 2 and s[0] <= c.speed_rpm <= s[-1]:
            z = complex(_interp_complex(np.array([c.speed_rpm]), s, x)[0])
            crit_markers.append(ax.plot(z.real, z.imag, marker="D", color="white", markeredgecolor="0.1",
                                        markersize=7, ls="none", zorder=6)[0])
            away = z - complex(np.mean(x))
            away = away / abs(away) if abs(away) > 0 else 1.0 + 0j
            obstacles.append(ax.annotate(
                f"critical {c.speed_rpm:,.0f} rpm", (z.real, z.imag), xytext=(12 * away.real, 12 * away.imag),
                textcoords="offset points", fontsize=8, color="0.1", fontweight="bold",
                ha="left" if away.real > 0.3 else "right" if away.real < -0.3 else "center",
                va="bottom" if away.imag > 0.3 else "top" if away.imag < -0.3 else "center",
                bbox={"boxstyle": "round,pad=0.15", "fc": "white", "ec": "none", "alpha": 0.85}, zorder=7,
            ))

    fit_lines = []
    fit_style = {"color": _FIT, "lw": 0.9, "ls": _FIT_DASH, "zorder": 3}
    if fit == "circle":
        for c in crits:
            d = next((d for d in c.detail if d.probe == probe), None)
            if d is not None and d.circle is not None:
                fs = np.linspace(d.circle.low_rpm, d.circle.high_rpm, 300)
                fx = _circle_curve(d.circle, fs)
                fit_lines.append(ax.plot(fx.real, fx.imag, **fit_style)[0])
    elif fit == "modal":
        for _fs, fx, _modal_part in _fitted_curves(crits, probe):
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

    _style(ax)
    ax.grid(False)
    ax.set_xlabel(f"real part of {order}X vector ({_AMPLITUDE_UNIT})")
    ax.set_ylabel(f"imaginary part of {order}X vector ({_AMPLITUDE_UNIT})")
    meta = identification.conditioned.metadata
    seg = next((sg.label for sg in identification.conditioned.segments if sg.index == segment), f"segment {segment}")
    ax.set_title(f"{meta.machine_id} — {meta.run_id} — {seg}, {order}X, {probe}\n"
                 "phase lag 0° right, increasing clockwise", loc="left", fontsize=10)
    label_rpm, label_artists = _place_speed_labels(ax, s, x, [*obstacles, *crit_markers])
    return PolarPlot(
        figure=fig, ax=ax, probe=probe, order=order, segment=segment, line=line, raw_line=raw_line,
        slow_roll_arrow=sr_arrow,
        slow_roll_vector_um_pp=curve.slow_roll.vector_um_pp if curve.slow_roll is not None else None,
        speed_arrow=speed_arrow, speed_label_rpm=tuple(label_rpm),
        speed_labels=tuple(label_artists), criticals=crits, critical_markers=tuple(crit_markers),
        fit=fit, fit_lines=tuple(fit_lines), legend=legend,
    )


# ----------------------------------------------------------------------------- comparison


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
    meas = _check_speeds(measured_speeds_rpm, "measured_speeds_rpm")
    pred = _check_speeds(predicted_speeds_rpm, "predicted_speeds_rpm")
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
    fig, ax = _new_axes(ax, figsize=(6.5, 6.0))
    _style(ax)
    ok = np.isfinite(meas) & np.isfinite(pred)
    both = np.concatenate([meas[ok], pred[ok]])
    lo = 0.8 * float(both.min()) if both.size else 0.0
    hi = 1.15 * float(both.max()) if both.size else 1.0
    grid = np.array([lo, hi])
    tol = tolerance_percent / 100.0
    band = ax.fill_between(grid, grid * (1 - tol), grid * (1 + tol), color=_SHADE, lw=0,
                           label=f"±{tolerance_percent:g} % of predicted")
    (diagonal,) = ax.plot(grid, grid, color=_GUIDE, lw=0.9, label="measured = predicted")
    points, drawn, errors, outside = [], [], [], []
    for m, p, name in zip(meas[ok], pred[ok], np.array(names, dtype=object)[ok], strict=True):
        err = 100.0 * (m - p) / p
        inside = abs(err) <= tolerance_percent
        points.append(ax.plot(p, m, ls="none", marker="o", markersize=7, color=_COLOURS[0],
                              markerfacecolor=_COLOURS[0] if inside else "white")[0])
        ax.annotate(f"{name}\n{err:+.1f} %", (p, m), xytext=(8, -4), textcoords="offset points",
                    fontsize=8, va="top")
        drawn.append(str(name))
        errors.append(float(err))
        if not inside:
            outside.append(str(name))
    ax.set_xlim(lo, hi)
    ax.set_ylim(lo, hi)
    ax.set_aspect("equal", adjustable="box")
    ax.xaxis.set_major_formatter(_RPM_FORMAT)
    ax.yaxis.set_major_formatter(_RPM_FORMAT)
    ax.set_xlabel("predicted critical speed (rpm)")
    ax.set_ylabel("measured critical speed (rpm)")
    handles: list[Artist] = [diagonal, band]
    handles.append(Line2D([], [], ls="none", marker="o", color=_COLOURS[0], label="within tolerance"))
    if outside:
        handles.append(Line2D([], [], ls="none", marker="o", color=_COLOURS[0], markerfacecolor="white",
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
    measured = _check_speeds(measured_speeds_rpm, "measured_speeds_rpm")
    fig, ax = _new_axes(ax, figsize=(7.5, 5.5))
    _style(ax)
    ax.grid(True, which="minor", color="0.93", linewidth=0.4)
    op_span = None
    if operating is not None and operating.min_operating_rpm is not None and operating.max_continuous_rpm is not None:
        op_span = ax.axhspan(operating.min_operating_rpm, operating.max_continuous_rpm, color=_SHADE, lw=0,
                             zorder=0, label=f"operating range {operating.min_operating_rpm:,.0f}–"
                             f"{operating.max_continuous_rpm:,.0f} rpm")
    mode_lines: dict[str, Line2D] = {}
    for i, (name, values) in enumerate(speeds_rpm_by_mode.items()):
        v = _check_speeds(values, f"speeds of mode {name!r}")
        if v.size != k.size:
            raise DataFormatError(
                f"mode {name!r} has {v.size} speeds for {k.size} stiffness ratios; give one speed per ratio"
            )
        (mode_lines[name],) = ax.plot(k, v, color=_COLOURS[i % len(_COLOURS)], marker=_MARKERS[i % len(_MARKERS)],
                                      markevery=_markevery(k.size, i), markersize=5, lw=1.4, label=str(name))
    measured_lines = []
    for m in measured[np.isfinite(measured)]:
        measured_lines.append(ax.axhline(m, color=_GUIDE, lw=1.0, ls=(0, (5, 2.5))))
        ax.annotate(f"measured {m:,.0f}", (1.0, m), xycoords=("axes fraction", "data"), xytext=(-3, 3),
                    textcoords="offset points", ha="right", va="bottom", fontsize=8, color="0.25")
    ax.set_xscale("log")
    ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _pos: f"{v:g}"))
    ax.set_xlabel("support stiffness ratio k / k_ref (–)")
    ax.set_ylabel("undamped critical speed (rpm)")
    ax.yaxis.set_major_formatter(_RPM_FORMAT)
    ax.set_ylim(bottom=0.0)
    handles: list[Artist] = list(mode_lines.values())
    if measured_lines:
        handles.append(Line2D([], [], color=_GUIDE, lw=1.0, ls=(0, (5, 2.5)), label="measured critical"))
    if op_span is not None:
        handles.append(op_span)
    legend = ax.legend(handles=handles, loc="upper left", bbox_to_anchor=(1.02, 1.0), frameon=False, fontsize=8)
    return CriticalSpeedMapPlot(figure=fig, ax=ax, mode_lines=MappingProxyType(mode_lines),
                                measured_lines=tuple(measured_lines), operating_span=op_span, legend=legend)


# ----------------------------------------------------------------------------- trend


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
    fig, ax = _new_axes(ax, figsize=(8.0, 4.0))
    _style(ax)
    order = np.argsort(t, kind="stable")
    (line,) = ax.plot(t[order], v[order], color=_COLOURS[0], marker="o", markersize=4.5, lw=1.2, label=label)
    ax.set_xlabel("date" if dated else "time (s)")
    ax.set_ylabel(f"{label} ({unit})")
    if dated:
        for tick in ax.get_xticklabels():
            tick.set_rotation(30)
            tick.set_horizontalalignment("right")
    return TrendPlot(figure=fig, ax=ax, line=line)


# ----------------------------------------------------------------------------- saving


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
    fd, tmp = tempfile.mkstemp(prefix=f".{out.name}.", suffix=f".{ext}", dir=folder)
    try:
        with os.fdopen(fd, "wb") as fh:
            fig.savefig(fh, format=ext, dpi=dpi)
        os.replace(tmp, out)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
    return out
