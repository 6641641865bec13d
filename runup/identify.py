"""Identification: conditioned run -> criticals.

For each speed segment and harmonic order (order ``n`` curves are analysed on the
frequency axis ``n x speed``, so a 2X resonance at shaft speed ``N`` is a mode at ``2N``):

1. resonance candidates on every probe, from amplitude peaks and phase rise, consolidated
   across probes (:mod:`runup.detect`); review additions join them;
2. per probe with an amplitude peak, the API 684 half-power AF on the samples
   (:mod:`runup.fit.half_power`), which also gives a first damping estimate by inverting
   the single-mode AF relation; for phase-only evidence the damping that explains the
   observed phase rise; per probe a Kennedy–Pancu circle fit (:mod:`runup.fit.circle`);
3. a window of ±10 zeta (15 % to 60 %) around each candidate; candidates whose windows
   overlap are fitted together: one least-squares fit of the modal model to the complex
   responses of all probes (dense windows averaged into bins, :mod:`runup.fit.binning`),
   natural speed and damping shared, participations and residual terms per probe
   (:mod:`runup.fit.modal`);
4. a mode the fit cannot confirm (:func:`~runup.fit.selection.mode_is_plausible`,
   :func:`~runup.fit.selection.mode_is_significant`) is dropped and the rest refitted; a
   peak candidate then falls back to its circle fit, then to half-power; a phase-only
   candidate is rejected with the reason kept in ``Identification.rejected`` (a review
   ``accept`` keeps it);
5. model-order selection adds modes the residual asks for (:mod:`runup.fit.selection`);
6. results are assembled (:mod:`runup.assemble`): headline values and intervals, AF
   estimators side by side, per-probe and major-axis detail; close modes seen with
   different weight by the probes are merged into a split critical; windows that
   converged on one mode are reported once; review rejections are applied.
"""

from __future__ import annotations

import math
import os
from collections.abc import Sequence

import numpy as np
from scipy.optimize import brentq

from .assemble import (
    Start,
    critical_from_fallback,
    critical_from_fit,
    deduplicate,
    merge_splits,
)
from .conditioning import condition
from .critical import Critical, Identification
from .detect import PHASE_WINDOW, ModeCandidate, consolidate, find_candidates, noise_scale
from .errors import FitError
from .fit.binning import bin_curve, merge_within_resolution
from .fit.circle import CircleFit, circle_fits
from .fit.half_power import HalfPower, half_power
from .fit.modal import ModalFit, fit_modes
from .fit.models import damping_from_amplification_factor, peak_speed_ratio
from .fit.selection import (
    mode_is_plausible,
    mode_is_significant,
    peak_to_noise,
    select_modes,
    select_residual,
)
from .geometry import probe_pairs
from .io import read_run
from .review import EMPTY_REVIEW, Review
from .run import ConditionedRun, Curve, Run

__all__ = ["identify", "identify_conditioned", "damping_from_phase_rise"]

#: Fallback damping ratio when nothing better is known (typical of fluid-film bearings,
#: common practice).
_DEFAULT_DAMPING = 0.05
#: Least points per probe in a fit window.
_MIN_WINDOW_POINTS = 10


def damping_from_phase_rise(rise_deg: float, *, window: float = PHASE_WINDOW) -> float:
    """Damping ratio whose single-mode lag rises by ``rise_deg`` across ``r = 1 -+ window``.

    Inverts ``phi(1 + h) - phi(1 - h)`` with ``phi(r) = atan2(2 zeta r, 1 - r^2)`` (the
    single-mode phase lag, Rao 2011 sec. 3.7); the rise falls monotonically from 180 deg
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
    review: Review | None = None,
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
    review
        The engineer's accept/reject/add decisions (:func:`runup.review.read_review`).

    Returns
    -------
    Identification
        Criticals sorted by segment, order and speed, with per-probe detail.
    """
    if isinstance(source, ConditionedRun):
        return identify_conditioned(source, review=review)
    if not isinstance(source, Run):
        source = read_run(source)
    return identify_conditioned(condition(source, slow_roll=slow_roll, despike=despike), review=review)


def _analysis_curve(curve: Curve) -> Curve:
    """A conditioned curve as identification sees it.

    An order-n curve is put on the frequency axis ``n x speed`` (rpm-equivalent), and
    points closer than :data:`~runup.fit.binning.SPEED_RESOLUTION` in speed are averaged
    (:func:`~runup.fit.binning.merge_within_resolution`; the curve keeps how many samples
    each point averages).
    """
    speed = curve.speed_rpm * curve.order
    arrays = (curve.response_um_pp, curve.raw_response_um_pp, curve.time_s)
    merged = merge_within_resolution(speed, arrays, curve.sample_counts)
    if merged is None and curve.order == 1:
        return curve
    counts = curve.sample_counts
    if merged is not None:
        speed, arrays, counts = merged
    response, raw, time = arrays
    return Curve(curve.probe, curve.order, curve.segment, curve.direction, speed, response, raw, time,
                 curve.slow_roll, counts)


def identify_conditioned(conditioned: ConditionedRun, *, review: Review | None = None) -> Identification:
    """Identify criticals on a conditioned run (steps in the module notes)."""
    review = review or EMPTY_REVIEW
    criticals: list[Critical] = []
    rejected: list[str] = []
    pairs = probe_pairs(conditioned.metadata)
    groups: dict[tuple[int, int], list[Curve]] = {}
    for curve in conditioned.curves:
        groups.setdefault((curve.segment, curve.order), []).append(_analysis_curve(curve))
    for (segment, order), curves in sorted(groups.items()):
        label = f"segment {segment + 1}, order {order}X"
        candidates = [c for curve in curves for c in find_candidates(curve)]
        modes = _with_review_additions(list(consolidate(candidates)), review, segment, order)
        notes: list[str] = []
        found, fit_notes = _identify_group(curves, modes, review, pairs)
        notes.extend(fit_notes)
        kept = []
        for c in found:
            entry = next((e for e in review.of("reject") if e.matches(c.speed_rpm, segment=segment, order=order)), None)
            if entry is None:
                kept.append(c)
            else:
                notes.append(f"critical at {c.speed_rpm:.0f} rpm rejected by review: {entry.reason}")
        criticals.extend(kept)
        rejected.extend(f"{label}: {n}" for n in notes)
    criticals.sort(key=lambda c: (c.segment, c.order, c.speed_rpm))
    settings = (("review", review.path or "none"),)
    return Identification(conditioned=conditioned, criticals=tuple(criticals), rejected=tuple(rejected), settings=settings)


def _with_review_additions(modes: list[ModeCandidate], review: Review, segment: int, order: int) -> list[ModeCandidate]:
    out = list(modes)
    for entry in review.of("add"):
        if entry.order != order or (entry.segment is not None and entry.segment != segment):
            continue
        if any(entry.matches(m.speed_rpm, segment=segment, order=order) for m in out):
            continue
        out.append(ModeCandidate(order=order, segment=segment, speed_rpm=entry.speed_rpm, evidence="review", members=()))
    return sorted(out, key=lambda m: m.speed_rpm)


# ----------------------------------------------------------------------------------------
def _half_width(damping_ratio: float) -> float:
    """Relative half-width of a fit window: ten half-power half-widths, 15 % to 60 %.

    Wide enough that the flanks, which carry much of the information on damping and on the
    residual terms, are in the fit (the Cramer-Rao bound falls as the window widens); modes
    beyond it are far enough for the residual terms to take them.
    """
    return float(np.clip(10.0 * damping_ratio, 0.15, 0.6))


def _index(curve: Curve, speed_rpm: float) -> int:
    return int(np.clip(np.searchsorted(curve.speed_rpm, speed_rpm), 0, curve.speed_rpm.size - 1))


def _prepare(curves: Sequence[Curve], mode: ModeCandidate, lower: float, upper: float, review: Review) -> Start:
    by_probe = {c.probe: c for c in curves}
    half_powers: dict[str, HalfPower] = {}
    guesses: list[float] = []
    for cand in mode.members:
        curve = by_probe[cand.probe]
        lo_i, hi_i = _index(curve, lower), _index(curve, upper)
        if cand.peak_index is not None and lo_i <= cand.peak_index <= hi_i:
            hp = half_power(
                curve.speed_rpm, curve.amplitude_um_pp, peak_index=cand.peak_index,
                search_from=lo_i, search_to=hi_i,
            )
            half_powers[cand.probe] = hp
            if hp.amplification_factor and "half_power_one_sided" not in hp.flags:
                guesses.append(damping_from_amplification_factor(hp.amplification_factor))
        if math.isfinite(cand.phase_rise_deg):
            z = damping_from_phase_rise(cand.phase_rise_deg)
            if math.isfinite(z):
                guesses.append(z)
    reason = None
    for action, verb in (("accept", "accepted"), ("add", "added")):
        entry = next(
            (e for e in review.of(action) if e.matches(mode.speed_rpm, segment=mode.segment, order=mode.order)),  # type: ignore[arg-type]
            None,
        )
        if entry is not None:
            reason = f"{verb} by review: {entry.reason}"
            if entry.damping_ratio is not None:
                guesses = [entry.damping_ratio]
            break
    zeta = float(np.median(guesses)) if guesses else _DEFAULT_DAMPING
    windows, probes = [], []
    for cand in mode.members:
        curve = by_probe[cand.probe]
        band = max(2.5 * zeta, 0.02)
        inside = (curve.speed_rpm >= lower) & (curve.speed_rpm <= upper)
        sel = inside & (np.abs(curve.speed_rpm / mode.speed_rpm - 1.0) <= band)
        if sel.sum() < 6:  # widen to the six nearest points within the bounds
            idx = np.nonzero(inside)[0]
            sel = np.zeros_like(sel)
            sel[idx[np.argsort(np.abs(curve.speed_rpm[idx] - mode.speed_rpm))[:6]]] = True
        bs, bx, _ = bin_curve(curve.speed_rpm[sel], curve.response_um_pp[sel], counts=curve.sample_counts[sel])
        windows.append((bs, bx))
        probes.append(cand.probe)
    # one batched fit for all probes (failed fits are left out)
    fits = circle_fits(windows, natural_speed_guesses_rpm=[mode.speed_rpm] * len(windows),
                       damping_ratio_guesses=[zeta] * len(windows))
    circles: dict[str, CircleFit] = {p: f for p, f in zip(probes, fits, strict=True) if isinstance(f, CircleFit)}
    width = _half_width(zeta)
    return Start(mode, mode.speed_rpm * (1 - width), mode.speed_rpm * (1 + width), zeta, half_powers,
                 circles, tuple(curves), reason)


def _initial(start: Start) -> tuple[float, float]:
    good = [c for c in start.circles.values() if start.low_rpm <= c.natural_speed_rpm <= start.high_rpm]
    if good:
        return (
            float(np.median([c.natural_speed_rpm for c in good])),
            float(np.median([c.damping_ratio for c in good])),
        )
    z = start.damping_guess
    return (start.mode.speed_rpm / peak_speed_ratio(z), z)


def _window(curves: Sequence[Curve], low: float, high: float, n_linear: int):
    """Binned curves in ``[low, high]``: (data, weights, raw per probe, noise scale)."""
    data, weights, raw, sigmas = [], [], {}, []
    for curve in curves:
        sel = (curve.speed_rpm >= low) & (curve.speed_rpm <= high)
        if sel.sum() >= max(_MIN_WINDOW_POINTS // 2, n_linear + 3):
            s, x, c = curve.speed_rpm[sel], curve.response_um_pp[sel], curve.sample_counts[sel]
            sigmas.append(noise_scale(x, c))
            bs, bx, bw = bin_curve(s, x, counts=c)
            data.append((curve.probe, bs, bx))
            weights.append(bw)
            raw[curve.probe] = (bs, bx, bw)
    sigma = float(np.median(sigmas)) if sigmas else math.nan
    return data, weights, raw, sigma


def _widen(curves: Sequence[Curve], start: Start, lower: float, upper: float) -> None:
    """Widen a window until the best-sampled probe has enough points."""
    for _ in range(8):
        counts = [int(((c.speed_rpm >= start.low_rpm) & (c.speed_rpm <= start.high_rpm)).sum()) for c in curves]
        if max(counts) >= _MIN_WINDOW_POINTS:
            return
        centre = start.mode.speed_rpm
        start.low_rpm = max(lower, centre - 1.3 * (centre - start.low_rpm))
        start.high_rpm = min(upper, centre + 1.3 * (start.high_rpm - centre))


def _identify_group(curves, modes, review: Review, pairs) -> tuple[list[Critical], list[str]]:
    if not modes:
        return [], []
    smin = min(float(c.speed_rpm[0]) for c in curves)
    smax = max(float(c.speed_rpm[-1]) for c in curves)
    speeds = [m.speed_rpm for m in modes]
    starts: list[Start] = []
    for i, mode in enumerate(modes):
        lower = smin if i == 0 else 0.5 * (speeds[i - 1] + speeds[i])
        upper = smax if i == len(modes) - 1 else 0.5 * (speeds[i] + speeds[i + 1])
        start = _prepare(curves, mode, lower, upper, review)
        start.pairs = pairs
        # the fit window may reach past a neighbour's midpoint: neighbours are then fitted jointly
        start.low_rpm, start.high_rpm = max(smin, start.low_rpm), min(smax, start.high_rpm)
        _widen(curves, start, smin, smax)
        starts.append(start)
    clusters: list[list[Start]] = []
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
    found = merge_splits(found, pairs)
    return deduplicate(found, notes), notes


def _keep_reason(start: Start, fit: ModalFit, k: int) -> str:
    if start.review_reason is not None:
        return f"kept: {start.review_reason}"
    probes = len(start.mode.members)
    return (
        f"kept: candidate with {start.mode.evidence} evidence on {probes} probe(s); fitted peak "
        f"{peak_to_noise(fit, k):.0f} times the residual RMS (threshold 6)"
    )


def _fit_cluster(curves: Sequence[Curve], cluster: list[Start]) -> tuple[list[Critical], list[str]]:
    """Fit the modes of overlapping windows together, dropping those the fit cannot confirm."""
    notes: list[str] = []
    found: list[Critical] = []
    active = sorted(cluster, key=lambda s: s.mode.speed_rpm)
    while active:
        low = min(s.low_rpm for s in active)
        high = max(s.high_rpm for s in active)
        data, weights, raw, sigma = _window(curves, low, high, len(active) + 2)
        try:
            if not data:
                raise FitError("no probe has enough points in the window")
            fit = fit_modes(data, initial=[_initial(s) for s in active], weights=weights)
        except FitError as exc:
            notes.append(f"fit of {len(active)} mode(s) in {low:.0f}-{high:.0f} rpm failed: {exc}")
            break
        # modes the residual asks for first: an unresolved neighbour (a split pair, say)
        # inflates the residual and can make a true mode look insignificant
        selection = select_modes(data, weights, select_residual(data, weights, fit), noise_rms_um_pp=sigma)
        fit = selection.fit
        base = [k for k in range(len(fit.modes)) if k not in selection.added]
        # base modes and active starts are both in ascending speed; a mode must stay in its own window
        bad = [
            i
            for i, (k, start) in enumerate(zip(base, active, strict=True))
            if start.review_reason is None
            and not (
                mode_is_plausible(fit, k)
                and mode_is_significant(fit, k)
                and start.low_rpm <= fit.modes[k].natural_speed_rpm <= start.high_rpm
            )
        ]
        if not bad:
            for k, start in zip(base, active, strict=True):
                found.append(critical_from_fit(start, fit, k, reason=_keep_reason(start, fit, k), window=raw))
            for k, drop in zip(selection.added, selection.bic_drops, strict=True):
                host = min(active, key=lambda s: abs(s.mode.speed_rpm - fit.modes[k].natural_speed_rpm))
                extra = Start(
                    ModeCandidate(host.mode.order, host.mode.segment, fit.modes[k].natural_speed_rpm, "fit", ()),
                    host.low_rpm, host.high_rpm, fit.modes[k].damping_ratio, {}, {}, host.curves, None, host.pairs,
                )
                reason = (
                    f"added by model-order selection: BIC fell by {drop:.0f} (at least 10), the mode is "
                    f"significant ({peak_to_noise(fit, k):.0f} times the residual RMS) and stable when the "
                    "window shrinks by 15 %"
                )
                found.append(critical_from_fit(extra, fit, k, reason=reason, window=raw))
            return found, notes
        failing = sorted((active[k] for k in bad), key=lambda s: (s.mode.evidence != "phase", s.mode.speed_rpm))
        drop = failing[0]
        active.remove(drop)
        if drop.mode.evidence == "phase":
            notes.append(
                f"phase-only candidate near {drop.mode.speed_rpm:.0f} rpm not confirmed by the modal fit "
                "(not significant above noise, or not inside its window); not reported"
            )
            continue
        critical, why = _confirmed_fallback(drop)
        if critical is None:
            notes.append(why)
        else:
            found.append(critical)
    for start in active:  # the fit itself failed
        critical, why = _confirmed_fallback(start)
        if critical is None:
            notes.append(why)
        else:
            found.append(critical)
    return found, notes


def _confirmed_fallback(start: Start) -> tuple[Critical | None, str]:
    """The circle-fit or half-power fall-back of a candidate the modal fit could not confirm.

    Reported only with independent support: an amplitude peak and a phase rise (evidence
    ``peak+phase``) with the peak at least three samples wide above 0.707 of its height on
    some probe, or an engineer's review.  A peak the fit of all probes cannot confirm that
    is one or two samples wide, or shows no phase rise, is what an acquisition glitch looks
    like.
    """
    where = f"candidate near {start.mode.speed_rpm:.0f} rpm"
    wide = any(m.peak_samples >= 3 for m in start.mode.members)
    if (start.mode.evidence != "peak+phase" or not wide) and start.review_reason is None:
        return None, (
            f"{where} ({start.mode.evidence} evidence, peak {'wide' if wide else 'one or two samples wide'}) "
            "not confirmed by the modal fit of all probes; not reported (a review [[accept]] can keep it)"
        )
    critical = critical_from_fallback(start)
    return critical, "" if critical is not None else f"{where} could not be fitted; not reported"
