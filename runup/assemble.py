"""From fitted modes to :class:`~runup.critical.Critical` results.

Headline values of a mode (see ``docs/methods.md``): ``speed_rpm = Omega_n r_peak``,
half-power speeds ``Omega_n r_1,2`` and the API half-power AF of the identified mode, all
from the single-mode relations of :mod:`runup.fit.models`; 95 % intervals of natural
speed and damping from the fit on the log scale the fit uses, the AF interval mapped
through ``AF(zeta)``.  Per-probe detail keeps what each probe showed on its own, plus the
major axis of each X–Y pair (whose half-power AF does not depend on how the probes are
mounted).  Close modes of one fit that the probes see with different weight are merged
into one split critical.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field, replace

import numpy as np

from .critical import CRITICALLY_DAMPED_AF, Critical, Interval, ProbeDetail, SplitBranch, SplitPair
from .detect import AMPLITUDE_PROMINENCE_SIGMAS, Candidate, ModeCandidate
from .estimators import EstimatorTable, compare_estimators
from .fit.binning import resolution_labels
from .fit.circle import CircleFit
from .fit.half_power import HalfPower, half_power
from .fit.modal import ModalFit
from .fit.models import (
    amplification_factor_from_damping,
    damping_from_amplification_factor,
    half_power_speed_ratios,
    peak_speed_ratio,
)
from .geometry import ProbePair, major_axis_response, orbit
from .run import Curve

__all__ = ["Start", "headline", "critical_from_fit", "critical_from_fallback", "merge_splits", "deduplicate"]

_Z95 = 1.959963984540054
#: Two modes of one fit closer than this (relative) may be the branches of a split critical.
SPLIT_MAX_SEPARATION = 0.15
#: Branch directions must differ by more than this to count as split (degrees).
SPLIT_MIN_ANGLE_DEG = 45.0


@dataclass
class Start:
    """Working state of one mode candidate through windowing and fitting."""

    mode: ModeCandidate
    low_rpm: float
    high_rpm: float
    damping_guess: float
    half_powers: dict[str, HalfPower]
    circles: dict[str, CircleFit]
    curves: tuple[Curve, ...]
    review_reason: str | None = None
    pairs: tuple[ProbePair, ...] = field(default=())


def _log_interval(value: float, stderr: float) -> Interval | None:
    """95 % interval of a positive parameter fitted on a log scale."""
    if not (math.isfinite(stderr) and value > 0):
        return None
    spread = math.exp(_Z95 * stderr / value)
    return Interval(value / spread, value * spread)


def headline(zeta: float) -> tuple[float, float, float, float, tuple[str, ...]]:
    """Peak speed ratio, half-power speed ratios, API AF and flags of one mode."""
    r_peak = peak_speed_ratio(zeta)
    r1, r2 = half_power_speed_ratios(zeta)
    af = amplification_factor_from_damping(zeta)
    flags: list[str] = []
    if not math.isfinite(af):
        if math.isfinite(r1) and math.isfinite(r_peak):
            af = r_peak / (2.0 * (r_peak - r1))  # the one-sided rule of runup.fit.half_power
            flags.append("half_power_one_sided")
        else:
            flags.append("no_half_power_points")
    if not af >= CRITICALLY_DAMPED_AF:  # nan included: a mode with no peak is critically damped
        flags.append("critically_damped")
    return r_peak, r1, r2, af, tuple(flags)


def _af_interval(z_ci: Interval | None) -> Interval | None:
    if z_ci is None:
        return None
    bounds = [amplification_factor_from_damping(z) for z in (z_ci.high, z_ci.low)]
    return Interval(bounds[0], bounds[1]) if all(math.isfinite(b) for b in bounds) else None


def _major_axis_details(start: Start, low: float, high: float, peak_rpm: float) -> list[ProbeDetail]:
    out = []
    by_probe = {c.probe: c for c in start.curves}
    for pair in start.pairs:
        a, b = by_probe.get(pair.first.name), by_probe.get(pair.second.name)
        if a is None or b is None:
            continue
        # points pair up by their 0.1 % speed bin: a merged point's mean speed depends on the
        # rows it holds, which one dropped or despiked row on one probe changes
        _, ia, ib = np.intersect1d(resolution_labels(a.speed_rpm), resolution_labels(b.speed_rpm),
                                   return_indices=True)
        common = 0.5 * (a.speed_rpm[ia] + b.speed_rpm[ib])
        sel = (common >= low) & (common <= high)
        if sel.sum() < 5:
            continue
        orb = orbit(
            common[sel], a.response_um_pp[ia[sel]], b.response_um_pp[ib[sel]],
            first_angle_deg=pair.first.angle_deg, second_angle_deg=pair.second.angle_deg,  # type: ignore[arg-type]
        )
        major = np.abs(major_axis_response(orb))
        # the peak of this mode: the highest point within 5 % of its expected peak speed
        near = np.nonzero(np.abs(orb.speed_rpm / peak_rpm - 1.0) <= 0.05)[0]
        k = int(near[np.argmax(major[near])]) if near.size else int(np.argmin(np.abs(orb.speed_rpm - peak_rpm)))
        hp = half_power(orb.speed_rpm, major, peak_index=k)
        out.append(
            ProbeDetail(
                probe=f"{pair.plane} major axis",
                evidence="major_axis",
                peak_speed_rpm=hp.peak_speed_rpm,
                peak_amplitude_um_pp=hp.peak_amplitude_um_pp,
                phase_rise_deg=math.nan,
                half_power=hp,
                circle=None,
                modal_constant_um_pp=complex(math.nan, math.nan),
                flags=hp.flags,
            )
        )
    return out


def _details(start: Start, fit: ModalFit | None, k: int | None, peak_rpm: float) -> tuple[ProbeDetail, ...]:
    """Per-probe detail: probes with a candidate, probes the fit gives a clear participation,
    and the major axis of each X–Y pair."""
    members: dict[str, Candidate] = {c.probe: c for c in start.mode.members}
    details = []
    for curve in start.curves:
        cand = members.get(curve.probe)
        participation = complex(math.nan, math.nan)
        if fit is not None and k is not None and curve.probe in fit.probes:
            participation = fit.modes[k].modal_constants_um_pp[fit.probes.index(curve.probe)]
        if cand is None:
            if not math.isfinite(abs(participation)) or fit is None or k is None:
                continue
            peak = abs(participation) / (2 * fit.modes[k].damping_ratio)
            if peak < AMPLITUDE_PROMINENCE_SIGMAS * fit.noise_rms_um_pp:
                continue
        sel = (curve.speed_rpm >= start.low_rpm) & (curve.speed_rpm <= start.high_rpm)
        idx = np.nonzero(sel)[0]
        j = int(idx[np.argmax(curve.amplitude_um_pp[idx])]) if idx.size else 0
        hp = start.half_powers.get(curve.probe)
        details.append(
            ProbeDetail(
                probe=curve.probe,
                evidence=cand.evidence if cand else "fit",
                peak_speed_rpm=hp.peak_speed_rpm if hp else float(curve.speed_rpm[j]),
                peak_amplitude_um_pp=hp.peak_amplitude_um_pp if hp else float(curve.amplitude_um_pp[j]),
                phase_rise_deg=cand.phase_rise_deg if cand else math.nan,
                half_power=hp,
                circle=start.circles.get(curve.probe),
                modal_constant_um_pp=participation,
                flags=hp.flags if hp else (),
            )
        )
    details.extend(_major_axis_details(start, start.low_rpm, start.high_rpm, peak_rpm))
    return tuple(details)


def _edge_flags(start: Start, natural_speed_rpm: float) -> tuple[str, ...]:
    smin = min(float(c.speed_rpm[0]) for c in start.curves)
    smax = max(float(c.speed_rpm[-1]) for c in start.curves)
    flags = []
    if not smin <= natural_speed_rpm <= smax:
        flags.append("outside_record")
    hps = list(start.half_powers.values())
    if hps and all("peak_at_range_edge" in h.flags for h in hps):
        flags.append("peak_at_range_edge")
    return tuple(flags)


def _make(
    start: Start,
    *,
    natural_speed_rpm: float,
    damping_ratio: float,
    natural_speed_ci: Interval | None,
    damping_ci: Interval | None,
    method: str,
    notes: list[str],
    extra_flags: tuple[str, ...],
    fit: ModalFit | None,
    k: int | None,
    estimators: EstimatorTable | None = None,
) -> Critical:
    r_peak, r1, r2, af, flags = headline(damping_ratio)
    first = start.curves[0]
    if first.order > 1:
        extra_flags = extra_flags + (f"seen_in_{first.order}X",)
    if start.review_reason is not None:
        extra_flags = extra_flags + ("review_accepted" if start.review_reason.startswith("accepted") else "review_added",)
    if estimators is not None and estimators.disagree:
        extra_flags = extra_flags + ("estimators_disagree",)
    return Critical(
        speed_rpm=natural_speed_rpm * r_peak,
        natural_speed_rpm=natural_speed_rpm,
        damping_ratio=damping_ratio,
        amplification_factor=af,
        lower_half_power_rpm=natural_speed_rpm * r1,
        upper_half_power_rpm=natural_speed_rpm * r2,
        natural_speed_ci95_rpm=natural_speed_ci,
        damping_ratio_ci95=damping_ci,
        amplification_factor_ci95=_af_interval(damping_ci),
        probes=start.mode.probes,
        evidence=start.mode.evidence,
        order=first.order,
        segment=first.segment,
        direction=first.direction,
        method=method,  # type: ignore[arg-type]
        af_method=f"API 684 half-power AF of the identified single-mode response ({method})",
        flags=flags + extra_flags + _edge_flags(start, natural_speed_rpm),
        notes=tuple(notes),
        detail=_details(start, fit, k, natural_speed_rpm * r_peak),
        fit_low_rpm=fit.low_rpm if fit else start.low_rpm,
        fit_high_rpm=fit.high_rpm if fit else start.high_rpm,
        fit_points=fit.n_points if fit else 0,
        fit=fit,
        estimators=estimators,
    )


def critical_from_fit(
    start: Start,
    fit: ModalFit,
    k: int,
    *,
    reason: str,
    window: dict[str, tuple[np.ndarray, np.ndarray, np.ndarray]],
    extra_flags: tuple[str, ...] = (),
) -> Critical:
    """The critical of mode ``k`` of ``fit``; ``reason`` says why the mode was kept."""
    mode = fit.modes[k]
    z_ci = _log_interval(mode.damping_ratio, mode.damping_ratio_stderr)
    af_ci = _af_interval(z_ci)
    table = compare_estimators(fit, k, window, af_ci95=(af_ci.low, af_ci.high) if af_ci else None)
    notes = [
        reason,
        f"natural speed and damping from one least-squares fit of {len(fit.modes)} mode(s) shared by "
        f"{len(fit.probes)} probe(s), {fit.n_points} samples in {fit.low_rpm:.0f}-{fit.high_rpm:.0f} rpm",
        f"headline AF from the {table.headline.replace('_', ' ')}: {table.reason}",
    ]
    if table.disagree:
        notes.append(f"estimators that disagree with it beyond their uncertainty: {', '.join(table.disagree)}")
    return _make(
        start,
        natural_speed_rpm=mode.natural_speed_rpm,
        damping_ratio=mode.damping_ratio,
        natural_speed_ci=_log_interval(mode.natural_speed_rpm, mode.natural_speed_stderr_rpm),
        damping_ci=z_ci,
        method="modal_fit",
        notes=notes,
        extra_flags=extra_flags,
        fit=fit,
        k=k,
        estimators=table,
    )


def critical_from_fallback(start: Start) -> Critical | None:
    """Critical from the circle fit, else from half-power, when the modal fit fails."""
    inside = [c for c in start.circles.values() if start.low_rpm <= c.natural_speed_rpm <= start.high_rpm]
    if inside:
        best = max(inside, key=lambda c: c.radius_um_pp)
        return _make(
            start,
            natural_speed_rpm=best.natural_speed_rpm,
            damping_ratio=best.damping_ratio,
            natural_speed_ci=None,
            damping_ci=None,
            method="circle_fit",
            notes=["the modal fit could not confirm this mode; values from the circle fit of the probe "
                   "with the largest circle"],
            extra_flags=("fit_failed",),
            fit=None,
            k=None,
        )
    afs = [h.amplification_factor for h in start.half_powers.values() if h.amplification_factor]
    if not afs:
        return None
    hp = max(start.half_powers.values(), key=lambda h: h.peak_amplitude_um_pp)
    af = hp.amplification_factor or float(np.median(afs))
    zeta = damping_from_amplification_factor(af)
    return _make(
        start,
        natural_speed_rpm=hp.peak_speed_rpm / peak_speed_ratio(zeta),
        damping_ratio=zeta,
        natural_speed_ci=None,
        damping_ci=None,
        method="half_power",
        notes=["neither the modal fit nor a circle fit could be made; damping from the half-power AF "
               "of the probe with the highest peak, inverted with the single-mode relation"],
        extra_flags=("fit_failed",),
        fit=None,
        k=None,
    )


def _branch(c: Critical, pairs: Sequence[ProbePair]) -> SplitBranch:
    fit = c.fit
    assert fit is not None
    k = int(np.argmin([abs(m.natural_speed_rpm - c.natural_speed_rpm) for m in fit.modes]))
    consts = fit.modes[k].modal_constants_um_pp
    dominant = fit.probes[int(np.argmax([abs(a) for a in consts]))]
    direction = math.nan
    best = -1.0
    for pair in pairs:
        if pair.first.name in fit.probes and pair.second.name in fit.probes:
            a1 = consts[fit.probes.index(pair.first.name)]
            a2 = consts[fit.probes.index(pair.second.name)]
            size = abs(a1) + abs(a2)
            if size > best:
                orb = orbit([c.natural_speed_rpm], [a1], [a2], first_angle_deg=pair.first.angle_deg,  # type: ignore[arg-type]
                            second_angle_deg=pair.second.angle_deg)  # type: ignore[arg-type]
                direction, best = float(orb.major_axis_angle_deg[0]), size
    return SplitBranch(
        speed_rpm=c.speed_rpm,
        natural_speed_rpm=c.natural_speed_rpm,
        damping_ratio=c.damping_ratio,
        amplification_factor=c.amplification_factor,
        natural_speed_ci95_rpm=c.natural_speed_ci95_rpm,
        dominant_probe=dominant,
        direction_deg=direction,
    )


def _angle_apart(a: float, b: float) -> float:
    d = abs((a - b + 90.0) % 180.0 - 90.0)
    return d


def merge_splits(criticals: list[Critical], pairs: Sequence[ProbePair]) -> list[Critical]:
    """Merge adjacent modes of one fit into a split critical where the probes see them with
    different weight: different dominant probe, or modal-orbit directions more than 45 deg
    apart, and natural speeds within 15 % (the split of one mode by unequal support
    stiffness; the thresholds are runup's, documented in ``docs/methods.md``)."""
    out: list[Critical] = []
    for c in sorted(criticals, key=lambda c: (c.segment, c.order, c.natural_speed_rpm)):
        prev = out[-1] if out else None
        if (
            prev is not None
            and prev.fit is not None
            and prev.fit is c.fit
            and prev.split is None
            and (prev.segment, prev.order) == (c.segment, c.order)
            and c.natural_speed_rpm / prev.natural_speed_rpm - 1.0 < SPLIT_MAX_SEPARATION
        ):
            lo, hi = _branch(prev, pairs), _branch(c, pairs)
            apart = _angle_apart(lo.direction_deg, hi.direction_deg)
            if lo.dominant_probe != hi.dominant_probe or (math.isfinite(apart) and apart > SPLIT_MIN_ANGLE_DEG):
                strong = prev if _peak(prev) >= _peak(c) else c
                note = (
                    f"split critical: {lo.natural_speed_rpm:.0f} rpm (dominant {lo.dominant_probe}"
                    + (f", {lo.direction_deg:.0f} deg" if math.isfinite(lo.direction_deg) else "")
                    + f") and {hi.natural_speed_rpm:.0f} rpm (dominant {hi.dominant_probe}"
                    + (f", {hi.direction_deg:.0f} deg" if math.isfinite(hi.direction_deg) else "")
                    + "); headline values are those of the stronger branch"
                )
                merged = replace(
                    strong,
                    probes=tuple(dict.fromkeys(prev.probes + c.probes)),
                    flags=tuple(dict.fromkeys(strong.flags + ("split_critical",))),
                    notes=strong.notes + (note,),
                    # per-probe detail of the headline (stronger) branch; the other's where it has none
                    detail=tuple({d.probe: d for d in (c.detail + prev.detail if strong is prev else prev.detail + c.detail)}.values()),
                    split=SplitPair(lo, hi),
                )
                out[-1] = merged
                continue
        out.append(c)
    return out


def _peak(c: Critical) -> float:
    if c.fit is None:
        return 0.0
    k = int(np.argmin([abs(m.natural_speed_rpm - c.natural_speed_rpm) for m in c.fit.modes]))
    mode = c.fit.modes[k]
    return max(abs(a) for a in mode.modal_constants_um_pp) / (2 * mode.damping_ratio)


def deduplicate(found: list[Critical], notes: list[str]) -> list[Critical]:
    """Keep one critical where two windows converged on the same mode.

    Two criticals are the same mode when their natural speeds differ by less than half the
    half-power bandwidth of the narrower one; the one seen by more probes (then the modal
    fit, then the narrower interval) is kept.  A sentence is added to ``notes``.
    """

    def rank(c: Critical) -> tuple[int, int, float]:
        ci = c.natural_speed_ci95_rpm
        return (len(c.probes), c.method == "modal_fit", -(ci.width if ci else math.inf))

    kept: list[Critical] = []
    for c in sorted(found, key=lambda c: (c.segment, c.order, c.natural_speed_rpm)):
        if kept and (kept[-1].segment, kept[-1].order) == (c.segment, c.order):
            prev = kept[-1]
            widths = [
                x.upper_half_power_rpm - x.lower_half_power_rpm
                for x in (prev, c)
                if math.isfinite(x.upper_half_power_rpm - x.lower_half_power_rpm)
            ]
            limit = 0.5 * min(widths) if widths else 0.0
            if abs(c.natural_speed_rpm - prev.natural_speed_rpm) < limit:
                keep, drop = (c, prev) if rank(c) > rank(prev) else (prev, c)
                kept[-1] = keep
                notes.append(
                    f"candidate near {drop.speed_rpm:.0f} rpm converged on the same mode as the one "
                    f"at {keep.speed_rpm:.0f} rpm; reported once"
                )
                continue
        kept.append(c)
    return kept
