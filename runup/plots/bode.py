"""Bode plot: 1X amplitude and phase lag against speed, with the identified criticals."""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from types import MappingProxyType
from typing import Literal

import numpy as np
from matplotlib.artist import Artist
from matplotlib.axes import Axes
from matplotlib.figure import Figure
from matplotlib.legend import Legend
from matplotlib.lines import Line2D
from matplotlib.patches import Patch
from matplotlib.text import Annotation
from matplotlib.ticker import MultipleLocator

from ..critical import Critical, Identification
from ..errors import DataFormatError
from ..run import Curve, OperatingSpeeds
from ..units import amplitude_of
from ._data import (
    PHASE_RELIABLE_FRACTION,
    align_phase,
    check_speeds,
    display_phase,
    fitted_curves,
    reliable,
    select_criticals,
    select_curves,
)
from ._style import (
    AMPLITUDE_UNIT,
    FIT,
    FIT_DASH,
    GUIDE,
    RPM_FORMAT,
    SHADE,
    markevery,
    probe_styles,
    style_axes,
)

__all__ = ["BodePlot", "bode"]


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
        Speed and AF annotation of each critical (both branch speeds and AFs for a split
        critical).
    split_markers
        For each split critical (``Critical.split``), in order, the dotted vertical lines at
        its lower and upper branch's ``speed_rpm`` on the amplitude axes.
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
    split_markers: tuple[tuple[Line2D, Line2D], ...]
    half_power_brackets: tuple[Line2D | None, ...]
    operating_span: Artist | None
    margin_spans: tuple[Artist, ...]
    predicted_lines: tuple[Line2D, ...]
    legend: Legend


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
    sec. 2.8 — from memory).  A split critical is also marked by dotted lines at both
    branch speeds and labelled with both.  The phase lag is unwrapped along speed; the
    uncompensated and fitted phases are shifted by whole turns to meet the compensated
    one.  Phase is drawn only where the curve's amplitude is at least
    :data:`~runup.plots._data.PHASE_RELIABLE_FRACTION` (10 %) of its own peak: the angle
    of a weaker vector (slow-roll region after compensation) is noise, and would fill the
    phase axes; the line then holds ``nan`` there.
    """
    if amplitude_scale not in ("linear", "log"):
        raise DataFormatError(
            f"amplitude_scale must be 'linear' or 'log', got {amplitude_scale!r}"
        )
    curves = select_curves(identification, segment=segment, order=order, probes=probes)
    crits = select_criticals(identification, segment=segment, order=order)
    bands = [tuple(check_speeds(b, "margin_bands")) for b in margin_bands]
    if any(len(b) != 2 for b in bands):
        raise DataFormatError("margin_bands must be (low_rpm, high_rpm) pairs; pass two speeds per band")
    predicted = check_speeds(predicted_speeds_rpm, "predicted_speeds_rpm")
    meta = identification.conditioned.metadata
    operating = meta.operating if operating is None else operating

    if axes is None:
        fig = Figure(figsize=(10.5, 6.8), layout="constrained")
        amp_ax, ph_ax = fig.subplots(2, 1, sharex=True, height_ratios=(3, 2))
    else:
        amp_ax, ph_ax = axes
        fig = amp_ax.get_figure(root=True)
    for ax in (amp_ax, ph_ax):
        style_axes(ax)
    styles = probe_styles(identification)

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
        phase = display_phase(curve.response_um_pp)
        ref = int(np.argmax(amp)) if amp.size else 0
        every = markevery(s.size, k)
        common = {"color": colour, "marker": marker, "markevery": every, "markersize": 4.5}
        (lines[curve.probe],) = amp_ax.plot(s, amp, lw=1.4, label=curve.probe, **common)
        # phase of weak vectors is noise: not drawn (PHASE_RELIABLE_FRACTION of the curve's peak)
        shown = np.where(reliable(curve.response_um_pp), phase, np.nan)
        (phase_lines[curve.probe],) = ph_ax.plot(s, shown, lw=1.2, label=curve.probe, **common)
        if show_raw and curve.slow_roll is not None:
            raw = curve.raw_response_um_pp
            raw_phase = align_phase(display_phase(raw), phase[ref] if phase.size else math.nan, ref)
            raw_style = {"color": colour, "lw": 0.9, "ls": ":", "alpha": 0.9}
            (raw_lines[curve.probe],) = amp_ax.plot(s, curve.raw_amplitude_um_pp, **raw_style)
            (raw_phase_lines[curve.probe],) = ph_ax.plot(s, np.where(reliable(raw), raw_phase, np.nan), **raw_style)
        f_amp, f_ph, f_modal = [], [], []
        for fs, fx, modal_part in fitted_curves(crits, curve.probe):
            f_phase = display_phase(fx)
            if s.size:
                i = int(np.clip(np.searchsorted(s, fs[fs.size // 2]), 0, s.size - 1))
                f_phase = align_phase(f_phase, phase[i], fs.size // 2)
            fit_style = {"color": FIT, "lw": 0.8, "ls": FIT_DASH, "zorder": 4}
            f_phase = np.where(reliable(fx), f_phase, np.nan)  # the fit's angle swings where it passes zero
            f_amp.append(amp_ax.plot(fs, amplitude_of(fx), **fit_style)[0])
            f_ph.append(ph_ax.plot(fs, f_phase, **fit_style)[0])
            f_modal.append(modal_part)
        fit_lines[curve.probe], fit_phase_lines[curve.probe] = tuple(f_amp), tuple(f_ph)
        fit_modal[curve.probe] = tuple(f_modal)

    op_span = None
    lo, hi = operating.min_operating_rpm, operating.max_continuous_rpm
    if lo is not None and hi is not None:
        op_span = amp_ax.axvspan(lo, hi, color=SHADE, lw=0, zorder=0)
        ph_ax.axvspan(lo, hi, color=SHADE, lw=0, zorder=0)
    margin_spans = []
    for b_lo, b_hi in bands:
        for ax in (amp_ax, ph_ax):
            span = ax.axvspan(min(b_lo, b_hi), max(b_lo, b_hi), facecolor="none", edgecolor="0.55",
                              hatch="////", lw=0, zorder=0)
            if ax is amp_ax:
                margin_spans.append(span)
    predicted_lines = []
    for p in predicted[np.isfinite(predicted)]:
        predicted_lines.append(amp_ax.axvline(p, color=GUIDE, lw=1.0, ls="-."))
        ph_ax.axvline(p, color=GUIDE, lw=1.0, ls="-.")

    markers, ph_markers, brackets = [], [], []
    x_range = float(np.ptp(np.concatenate([c.speed_rpm for c in curves]))) or 1.0
    labels, split_markers = _mark_criticals(amp_ax, ph_ax, crits, x_range=x_range)
    for c in crits:
        markers.append(amp_ax.axvline(c.speed_rpm, color=GUIDE, lw=0.9, zorder=1))
        ph_markers.append(ph_ax.axvline(c.speed_rpm, color=GUIDE, lw=0.9, zorder=1))
        brackets.append(_half_power_bracket(amp_ax, c, curves))

    amp_ax.set_yscale(amplitude_scale)
    if amplitude_scale == "linear":
        amp_ax.set_ylim(bottom=0.0)
    amp_ax.set_ylabel(f"{order}X amplitude ({AMPLITUDE_UNIT})")
    ph_ax.set_ylabel(f"{order}X phase lag (deg)")
    ph_ax.set_xlabel("speed (rpm)")
    ph_lo, ph_hi = ph_ax.get_ylim()
    ph_ax.yaxis.set_major_locator(MultipleLocator(90.0 if ph_hi - ph_lo <= 900 else 180.0))
    ph_ax.xaxis.set_major_formatter(RPM_FORMAT)
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
    handles.append(Line2D([], [], color=GUIDE, lw=1.4, label="compensated (slow roll removed)"
                          if any(c.slow_roll is not None for c in curves) else "measured"))
    if raw_lines:
        handles.append(Line2D([], [], color=GUIDE, lw=0.9, ls=":", label="uncompensated"))
    if any(not m for ms in fit_modal.values() for m in ms):
        handles.append(Line2D([], [], color=FIT, lw=0.8, ls=FIT_DASH, label="fitted model"))
    if any(m for ms in fit_modal.values() for m in ms):
        handles.append(Line2D([], [], color=FIT, lw=0.8, ls=FIT_DASH,
                              label="fitted mode alone\n(no residual terms)"))
    if markers:
        handles.append(Line2D([], [], color=GUIDE, lw=0.9, label="critical (peak response)"))
    if split_markers:
        handles.append(Line2D([], [], color=GUIDE, lw=1.0, ls=_SPLIT_DOTS, label="split critical:\nbranch speeds"))
    if any(b is not None for b in brackets):
        handles.append(Line2D([], [], color=GUIDE, lw=1.0, marker="|", markersize=9,
                              label="half-power band (0.707)"))
    if op_span is not None:
        handles.append(Patch(color=SHADE, label=f"operating range\n{lo:,.0f}–{hi:,.0f} rpm"))
    if margin_spans:
        handles.append(Patch(facecolor="none", edgecolor="0.55", hatch="////", lw=0,
                             label="separation margin\nrequired"))
    if predicted_lines:
        handles.append(Line2D([], [], color=GUIDE, lw=1.0, ls="-.", label="predicted critical"))
    handles.append(Line2D([], [], ls="none", label=f"phase drawn where amplitude\n≥ {PHASE_RELIABLE_FRACTION:.0%}"
                          " of the curve's peak"))
    legend = amp_ax.legend(handles=handles, loc="upper left", bbox_to_anchor=(1.01, 1.0),
                           frameon=False, fontsize=8, borderaxespad=0.0)

    return BodePlot(
        figure=fig, amplitude_ax=amp_ax, phase_ax=ph_ax,
        lines=MappingProxyType(lines), phase_lines=MappingProxyType(phase_lines),
        raw_lines=MappingProxyType(raw_lines), raw_phase_lines=MappingProxyType(raw_phase_lines),
        fit_lines=MappingProxyType(fit_lines), fit_phase_lines=MappingProxyType(fit_phase_lines),
        fit_is_modal_part=MappingProxyType(fit_modal), criticals=crits,
        critical_markers=tuple(markers), phase_critical_markers=tuple(ph_markers),
        critical_labels=tuple(labels), split_markers=tuple(split_markers),
        half_power_brackets=tuple(brackets),
        operating_span=op_span, margin_spans=tuple(margin_spans),
        predicted_lines=tuple(predicted_lines), legend=legend,
    )


_SPLIT_DOTS = (0, (1.0, 1.5))


def _af_text(af: float) -> str:
    return f"{af:.1f}" if math.isfinite(af) else "n/a"


def _mark_criticals(
    amp_ax: Axes, ph_ax: Axes, crits: Sequence[Critical], *, x_range: float
) -> tuple[list[Annotation], list[tuple[Line2D, Line2D]]]:
    """Speed-and-AF label above the plot per critical; dotted lines at split branch speeds.

    Labels of criticals closer than 12 % of the shown speed range alternate between two
    heights so that they do not overlap.
    """
    labels, split_markers = [], []
    lift, last_x = 0, -math.inf
    for c in crits:
        lift = 1 - lift if c.speed_rpm - last_x < 0.12 * x_range else 0
        last_x = c.speed_rpm
        if c.split is not None:
            lo_b, hi_b = c.split.lower, c.split.upper
            text = (f"split: {lo_b.speed_rpm:,.0f} / {hi_b.speed_rpm:,.0f} rpm\n"
                    f"AF {_af_text(lo_b.amplification_factor)} / {_af_text(hi_b.amplification_factor)}")
            pair = tuple(amp_ax.axvline(b.speed_rpm, color=GUIDE, lw=1.0, ls=_SPLIT_DOTS, zorder=1)
                         for b in (lo_b, hi_b))
            for b in (lo_b, hi_b):
                ph_ax.axvline(b.speed_rpm, color=GUIDE, lw=1.0, ls=_SPLIT_DOTS, zorder=1)
            split_markers.append(pair)
        else:
            text = f"{c.speed_rpm:,.0f} rpm\nAF {_af_text(c.amplification_factor)}"
        text += " (critically damped)" if c.critically_damped else ""
        labels.append(
            amp_ax.annotate(
                text, xy=(c.speed_rpm, 1.0), xycoords=("data", "axes fraction"),
                xytext=(3, 2 + 22 * lift), textcoords="offset points", fontsize=8, color="0.2",
                va="bottom", ha="left", annotation_clip=False,
            )
        )
    return labels, split_markers


def _half_power_bracket(amp_ax: Axes, c: Critical, curves: Sequence[Curve]) -> Line2D | None:
    """Bracket ``N_1``..``N_2`` at 0.707 of the largest peak of the probes shown.

    A half-power speed outside the record (heavy damping) is cut at the record's end and
    gets no end tick, so the bracket never suggests data that is not there.
    """
    n1, n2 = c.lower_half_power_rpm, c.upper_half_power_rpm
    if not (math.isfinite(n1) or math.isfinite(n2)):
        return None
    peak_top = max((float(np.nanmax(cv.amplitude_um_pp)) for cv in curves if cv.speed_rpm.size), default=1.0)
    shown = [d.peak_amplitude_um_pp for d in c.detail if any(d.probe == cv.probe for cv in curves)]
    level = 0.707 * (max(shown) if shown else peak_top)  # API 684 half-power level (0.707)
    s_lo = min(float(cv.speed_rpm[0]) for cv in curves)
    s_hi = max(float(cv.speed_rpm[-1]) for cv in curves)
    ends = [n1 if math.isfinite(n1) else c.speed_rpm, n2 if math.isfinite(n2) else c.speed_rpm]
    ticks = [i for i, (e, n) in enumerate(zip(ends, (n1, n2), strict=True))
             if math.isfinite(n) and s_lo <= e <= s_hi]
    ends = [float(np.clip(e, s_lo, s_hi)) for e in ends]
    return amp_ax.plot(ends, [level, level], color=GUIDE, lw=1.0, marker="|", markersize=9,
                       markevery=ticks, zorder=3)[0]
