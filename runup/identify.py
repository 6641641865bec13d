"""Identification: conditioned run -> criticals.

For each speed segment and harmonic order:

1. resonance candidates on every probe, from amplitude peaks and phase rise, consolidated
   across probes (:mod:`runup.detect`);
2. per probe with an amplitude peak, the API 684 half-power AF on the samples
   (:mod:`runup.fit.half_power`), which also gives a first damping estimate by inverting
   the single-mode AF relation; for phase-only evidence the damping that explains the
   observed phase rise;
3. per probe, a Kennedy–Pancu circle fit on ``X / speed`` around the candidate
   (:mod:`runup.fit.circle`);
4. one least-squares fit of the modal model to the complex responses of all probes in a
   window around the candidate (modes whose windows overlap are fitted together), with
   shared natural speed and damping and per-probe participations and residual terms
   (:mod:`runup.fit.modal`).  Its natural speed and damping are the headline, with 95 %
   intervals from the fit covariance; the headline AF is the API half-power AF of the
   fitted mode (the value half-power gives on the noise-free response of that mode);
5. a mode the fit cannot confirm (natural speed outside the window, damping at its bound,
   or a fitted peak response below the detection threshold) falls back to the circle fit,
   then to half-power, and says so in ``method`` and ``flags``; a phase-only candidate
   that the fit cannot confirm is rejected, with the reason kept in
   ``Identification.rejected``.
"""

from __future__ import annotations

import math
import os
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy.optimize import brentq

from .conditioning import condition
from .critical import CRITICALLY_DAMPED_AF, Critical, Identification, Interval, ProbeDetail
from .detect import (
    AMPLITUDE_PROMINENCE_SIGMAS,
    PHASE_WINDOW,
    Candidate,
    ModeCandidate,
    consolidate,
    find_candidates,
)
from .errors import FitError
from .fit.circle import CircleFit, circle_fit
from .fit.half_power import HalfPower, half_power
from .fit.modal import ModalFit, fit_modes
from .fit.models import (
    amplification_factor_from_damping,
    damping_from_amplification_factor,
    half_power_speed_ratios,
    peak_speed_ratio,
)
from .run import ConditionedRun, Curve, Run

__all__ = ["identify", "identify_conditioned", "damping_from_phase_rise"]

#: Fallback damping ratio when nothing better is known (typical of fluid-film bearings,
#: common practice).
_DEFAULT_DAMPING = 0.05
#: z-value of a two-sided 95 % interval.
_Z95 = 1.959963984540054
#: Least points per probe in a fit window.
_MIN_WINDOW_POINTS = 10


def damping_from_phase_rise(rise_deg: float, *, window: float = PHASE_WINDOW) -> float:
    """Damping ratio whose single-mode lag rises by ``rise_deg`` across ``r = 1 -+ window``.

    Inverts ``phi(1 + h) - phi(1 - h)`` with ``phi(r) = atan2(2 zeta r, 1 - r^2)`` (the
    single-mode phase lag, Rao 2011 eq. 3.83); the rise falls monotonically from 180 deg
    at ``zeta -> 0``.  Returns ``nan`` when the rise is outside the attainable range.
    """

    def rise(z: float) -> float:
        hi, lo = 1.0 + window, 1.0 - window
        return math.degrees(math.atan2(2 * z * hi, 1 - hi * hi) - math.atan2(2 * z * lo, 1 - lo * lo))

    lo, hi = 1e-4, 0.7
    if not (rise(hi) < rise_deg < rise(lo)):
        return math.nan
    return brentq(lambda z: rise(z) - rise_deg, lo, hi, xtol=1e-10)


def identify(
    source: str | os.PathLike[str] | Run | ConditionedRun,
    *,
    slow_roll: str | tuple[float, float] = "auto",
    despike: bool = True,
) -> Identification:
    """Identify the critical speeds of a run.

    Parameters
    ----------
    source
        A data file (read with :func:`runup.io.read_run`, sidecar found automatically), an
        imported :class:`~runup.run.Run`, or an already conditioned run.
    slow_roll, despike
        Conditioning options (see :func:`runup.conditioning.condition`); ignored for a
        conditioned run.

    Returns
    -------
    Identification
        Criticals sorted by segment and speed, with per-probe detail.
    """
    if isinstance(source, ConditionedRun):
        return identify_conditioned(source)
    if not isinstance(source, Run):
        from .io import read_run

        source = read_run(source)
    return identify_conditioned(condition(source, slow_roll=slow_roll, despike=despike))


def identify_conditioned(conditioned: ConditionedRun) -> Identification:
    """Identify criticals on a conditioned run (steps in the module notes)."""
    criticals: list[Critical] = []
    rejected: list[str] = []
    groups: dict[tuple[int, int], list[Curve]] = {}
    for curve in conditioned.curves:
        groups.setdefault((curve.segment, curve.order), []).append(curve)
    for (segment, order), curves in sorted(groups.items()):
        candidates = [c for curve in curves for c in find_candidates(curve)]
        modes = consolidate(candidates)
        found, notes = _identify_group(curves, modes)
        criticals.extend(found)
        label = f"segment {segment + 1}, order {order}X"
        rejected.extend(f"{label}: {n}" for n in notes)
    criticals.sort(key=lambda c: (c.segment, c.order, c.speed_rpm))
    return Identification(conditioned=conditioned, criticals=tuple(criticals), rejected=tuple(rejected))


# ----------------------------------------------------------------------------------------
@dataclass
class _Start:
    """Working state for one mode candidate."""

    mode: ModeCandidate
    low_rpm: float
    high_rpm: float
    damping_guess: float
    half_powers: dict[str, HalfPower]
    circles: dict[str, CircleFit]
    curves: tuple[Curve, ...]


def _half_width(damping_ratio: float) -> float:
    """Relative half-width of a fit window: five half-power half-widths, 8 % to 60 %."""
    return float(np.clip(5.0 * damping_ratio, 0.08, 0.6))


def _index(curve: Curve, speed_rpm: float) -> int:
    return int(np.clip(np.searchsorted(curve.speed_rpm, speed_rpm), 0, curve.speed_rpm.size - 1))


def _prepare(curves: Sequence[Curve], mode: ModeCandidate, lower: float, upper: float) -> _Start:
    by_probe = {c.probe: c for c in curves}
    half_powers: dict[str, HalfPower] = {}
    guesses: list[float] = []
    for cand in mode.members:
        curve = by_probe[cand.probe]
        if cand.peak_index is not None:
            hp = half_power(
                curve.speed_rpm,
                curve.amplitude_um_pp,
                peak_index=cand.peak_index,
                search_from=_index(curve, lower),
                search_to=_index(curve, upper),
            )
            half_powers[cand.probe] = hp
            if hp.amplification_factor and "half_power_one_sided" not in hp.flags:
                guesses.append(damping_from_amplification_factor(hp.amplification_factor))
        if math.isfinite(cand.phase_rise_deg):
            z = damping_from_phase_rise(cand.phase_rise_deg)
            if math.isfinite(z):
                guesses.append(z)
    zeta = float(np.median(guesses)) if guesses else _DEFAULT_DAMPING
    width = _half_width(zeta)
    low = max(mode.speed_rpm * (1.0 - width), lower)
    high = min(mode.speed_rpm * (1.0 + width), upper)
    circles: dict[str, CircleFit] = {}
    for cand in mode.members:
        curve = by_probe[cand.probe]
        band = max(2.5 * zeta, 0.02)
        sel = np.abs(curve.speed_rpm / mode.speed_rpm - 1.0) <= band
        sel &= (curve.speed_rpm >= lower) & (curve.speed_rpm <= upper)
        if sel.sum() < 6:  # widen to the six nearest points within the bounds
            inside = np.nonzero((curve.speed_rpm >= lower) & (curve.speed_rpm <= upper))[0]
            nearest = inside[np.argsort(np.abs(curve.speed_rpm[inside] - mode.speed_rpm))[:6]]
            sel = np.zeros_like(sel)
            sel[nearest] = True
        try:
            circles[cand.probe] = circle_fit(
                curve.speed_rpm[sel],
                curve.response_um_pp[sel],
                natural_speed_guess_rpm=mode.speed_rpm,
                damping_ratio_guess=zeta,
            )
        except FitError:
            pass
    return _Start(mode, low, high, zeta, half_powers, circles, tuple(curves))


def _initial(start: _Start) -> tuple[float, float]:
    good = [c for c in start.circles.values() if start.low_rpm <= c.natural_speed_rpm <= start.high_rpm]
    if good:
        return (
            float(np.median([c.natural_speed_rpm for c in good])),
            float(np.median([c.damping_ratio for c in good])),
        )
    z = start.damping_guess
    return (start.mode.speed_rpm / peak_speed_ratio(z), z)


def _window(curves: Sequence[Curve], low: float, high: float, n_linear: int) -> list[tuple[str, np.ndarray, np.ndarray]]:
    out = []
    for curve in curves:
        sel = (curve.speed_rpm >= low) & (curve.speed_rpm <= high)
        if sel.sum() >= max(_MIN_WINDOW_POINTS // 2, n_linear + 3):
            out.append((curve.probe, curve.speed_rpm[sel], curve.response_um_pp[sel]))
    return out


def _widen(curves: Sequence[Curve], start: _Start, lower: float, upper: float) -> None:
    """Widen a window until the best-sampled probe has enough points (bounded by neighbours)."""
    for _ in range(8):
        counts = [int(((c.speed_rpm >= start.low_rpm) & (c.speed_rpm <= start.high_rpm)).sum()) for c in curves]
        if max(counts) >= _MIN_WINDOW_POINTS:
            return
        centre = start.mode.speed_rpm
        start.low_rpm = max(lower, centre - 1.3 * (centre - start.low_rpm))
        start.high_rpm = min(upper, centre + 1.3 * (start.high_rpm - centre))


def _significant(fit: ModalFit, k: int) -> bool:
    mode = fit.modes[k]
    peak = max(abs(a) for a in mode.modal_constants_um_pp) / (2.0 * mode.damping_ratio)
    return peak >= AMPLITUDE_PROMINENCE_SIGMAS * fit.noise_rms_um_pp


def _plausible(fit: ModalFit, k: int) -> bool:
    mode = fit.modes[k]
    return (
        fit.low_rpm <= mode.natural_speed_rpm <= fit.high_rpm
        and 2e-4 < mode.damping_ratio < 0.69
        and math.isfinite(mode.natural_speed_stderr_rpm)
    )


def _identify_group(curves: Sequence[Curve], modes: Sequence[ModeCandidate]) -> tuple[list[Critical], list[str]]:
    if not modes:
        return [], []
    smin = min(float(c.speed_rpm[0]) for c in curves)
    smax = max(float(c.speed_rpm[-1]) for c in curves)
    speeds = [m.speed_rpm for m in modes]
    starts: list[_Start] = []
    for i, mode in enumerate(modes):
        lower = smin if i == 0 else 0.5 * (speeds[i - 1] + speeds[i])
        upper = smax if i == len(modes) - 1 else 0.5 * (speeds[i] + speeds[i + 1])
        start = _prepare(curves, mode, lower, upper)
        # the fit window may reach past a neighbour's midpoint: neighbours are then fitted jointly
        start.low_rpm = max(smin, mode.speed_rpm * (1 - float(_half_width(start.damping_guess))))
        start.high_rpm = min(smax, mode.speed_rpm * (1 + float(_half_width(start.damping_guess))))
        _widen(curves, start, smin, smax)
        starts.append(start)
    # clusters of overlapping windows
    clusters: list[list[_Start]] = []
    for start in starts:
        if clusters and start.low_rpm <= clusters[-1][-1].high_rpm:
            clusters[-1].append(start)
        else:
            clusters.append([start])
    found: list[Critical] = []
    notes: list[str] = []
    for cluster in clusters:
        f, n = _fit_cluster(curves, cluster)
        found.extend(f)
        notes.extend(n)
    return _deduplicate(found, notes)


def _deduplicate(found: list[Critical], notes: list[str]) -> tuple[list[Critical], list[str]]:
    """Keep one critical where two windows converged on the same mode.

    Two criticals are the same mode when their natural speeds differ by less than half the
    half-power bandwidth of the narrower one; the one seen by more probes (then the modal
    fit, then the narrower interval) is kept.
    """

    def rank(c: Critical) -> tuple[int, int, float]:
        ci = c.natural_speed_ci95_rpm
        return (len(c.probes), c.method == "modal_fit", -(ci.width if ci else math.inf))

    kept: list[Critical] = []
    for c in sorted(found, key=lambda c: c.natural_speed_rpm):
        if kept:
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
    return kept, notes


def _fit_cluster(curves: Sequence[Curve], cluster: list[_Start]) -> tuple[list[Critical], list[str]]:
    """Fit the modes of overlapping windows together, dropping those the fit cannot confirm."""
    notes: list[str] = []
    found: list[Critical] = []
    active = sorted(cluster, key=lambda s: s.mode.speed_rpm)
    while active:
        low = min(s.low_rpm for s in active)
        high = max(s.high_rpm for s in active)
        data = _window(curves, low, high, len(active) + 2)
        try:
            if not data:
                raise FitError("no probe has enough points in the window")
            fit = fit_modes(data, initial=[_initial(s) for s in active])
        except FitError as exc:
            notes.append(f"fit of {len(active)} mode(s) in {low:.0f}-{high:.0f} rpm failed: {exc}")
            break
        # fit.modes and active are both in ascending speed; a mode must stay in its own window
        bad = [
            k
            for k, start in enumerate(active)
            if not (
                _plausible(fit, k)
                and _significant(fit, k)
                and start.low_rpm <= fit.modes[k].natural_speed_rpm <= start.high_rpm
            )
        ]
        if not bad:
            found.extend(_critical_from_fit(start, fit, k) for k, start in enumerate(active))
            return found, notes
        # drop one failing candidate (phase-only first, then the lowest) and refit the others
        failing = sorted((active[k] for k in bad), key=lambda s: (s.mode.evidence != "phase", s.mode.speed_rpm))
        drop = failing[0]
        active.remove(drop)
        if drop.mode.evidence == "phase":
            notes.append(
                f"phase-only candidate near {drop.mode.speed_rpm:.0f} rpm not confirmed by the modal fit "
                "(not significant above noise, or not inside its window); not reported"
            )
            continue
        critical = _fallback(drop)
        if critical is None:
            notes.append(f"candidate near {drop.mode.speed_rpm:.0f} rpm could not be fitted; not reported")
        else:
            found.append(critical)
    for start in active:  # the fit itself failed
        if start.mode.evidence == "phase":
            notes.append(f"phase-only candidate near {start.mode.speed_rpm:.0f} rpm could not be fitted; not reported")
            continue
        critical = _fallback(start)
        if critical is None:
            notes.append(f"candidate near {start.mode.speed_rpm:.0f} rpm could not be fitted; not reported")
        else:
            found.append(critical)
    return found, notes


def _log_interval(value: float, stderr: float) -> Interval | None:
    """95 % interval of a positive parameter fitted on a log scale (as fit_modes does)."""
    if not (math.isfinite(stderr) and value > 0):
        return None
    spread = math.exp(_Z95 * stderr / value)
    return Interval(value / spread, value * spread)


def _headline(zeta: float) -> tuple[float, float, float, float, tuple[str, ...]]:
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


def _details(start: _Start, fit: ModalFit | None, k: int | None) -> tuple[ProbeDetail, ...]:
    """Per-probe detail: probes with a candidate, and probes the fit gives a clear participation."""
    members = {c.probe: c for c in start.mode.members}
    details = []
    for curve in start.curves:
        cand: Candidate | None = members.get(curve.probe)
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
    return tuple(details)


def _edge_flags(start: _Start, natural_speed_rpm: float) -> tuple[str, ...]:
    smin = min(float(c.speed_rpm[0]) for c in start.curves)
    smax = max(float(c.speed_rpm[-1]) for c in start.curves)
    flags = []
    if not smin <= natural_speed_rpm <= smax:
        flags.append("outside_record")
    hps = list(start.half_powers.values())
    if hps and all("peak_at_range_edge" in h.flags for h in hps):
        flags.append("peak_at_range_edge")
    return tuple(flags)


def _make_critical(
    start: _Start,
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
) -> Critical:
    r_peak, r1, r2, af, flags = _headline(damping_ratio)
    af_ci = None
    if damping_ci is not None:
        bounds = [amplification_factor_from_damping(z) for z in (damping_ci.high, damping_ci.low)]
        if all(math.isfinite(b) for b in bounds):
            af_ci = Interval(bounds[0], bounds[1])
    first = start.curves[0]
    return Critical(
        speed_rpm=natural_speed_rpm * r_peak,
        natural_speed_rpm=natural_speed_rpm,
        damping_ratio=damping_ratio,
        amplification_factor=af,
        lower_half_power_rpm=natural_speed_rpm * r1,
        upper_half_power_rpm=natural_speed_rpm * r2,
        natural_speed_ci95_rpm=natural_speed_ci,
        damping_ratio_ci95=damping_ci,
        amplification_factor_ci95=af_ci,
        probes=start.mode.probes,
        evidence=start.mode.evidence,
        order=first.order,
        segment=first.segment,
        direction=first.direction,
        method=method,  # type: ignore[arg-type]
        af_method=f"API 684 half-power AF of the identified single-mode response ({method})",
        flags=flags + extra_flags + _edge_flags(start, natural_speed_rpm),
        notes=tuple(notes),
        detail=_details(start, fit, k),
        fit_low_rpm=fit.low_rpm if fit else start.low_rpm,
        fit_high_rpm=fit.high_rpm if fit else start.high_rpm,
        fit_points=fit.n_points if fit else 0,
    )


def _critical_from_fit(start: _Start, fit: ModalFit, k: int) -> Critical:
    mode = fit.modes[k]
    notes = [
        f"natural speed and damping from one least-squares fit of {len(fit.modes)} mode(s) shared by "
        f"{len(fit.probes)} probe(s), {fit.n_points} points in {fit.low_rpm:.0f}-{fit.high_rpm:.0f} rpm"
    ]
    return _make_critical(
        start,
        natural_speed_rpm=mode.natural_speed_rpm,
        damping_ratio=mode.damping_ratio,
        natural_speed_ci=_log_interval(mode.natural_speed_rpm, mode.natural_speed_stderr_rpm),
        damping_ci=_log_interval(mode.damping_ratio, mode.damping_ratio_stderr),
        method="modal_fit",
        notes=notes,
        extra_flags=(),
        fit=fit,
        k=k,
    )


def _fallback(start: _Start) -> Critical | None:
    """Critical from the circle fit, else from half-power, when the modal fit fails."""
    inside = [c for c in start.circles.values() if start.low_rpm <= c.natural_speed_rpm <= start.high_rpm]
    if inside:
        best = max(inside, key=lambda c: c.radius_um_pp)
        return _make_critical(
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
    return _make_critical(
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
