"""Resonance candidates on conditioned curves, and their consolidation across probes.

A critical shows on a probe in two ways (API RP 684, 2nd ed., 2005, sec. 2.8 and Fig. 2-9,
from memory; common practice): a peak of the 1X amplitude, and a rise of the 1X phase lag
(about 180 degrees for an isolated mode, 90 of them across the half-power band).  Either
can be missing: a mode whose response is masked by a stronger neighbour or by the probe's
orientation may give little amplitude peak but a plain phase rise.  runup looks for both:

*amplitude evidence*
    local maxima of ``|X|`` with a prominence (``scipy.signal.find_peaks``) of at least
    ``k_amp`` times the noise scale ``sigma_i`` of the points that form it (the largest of
    the peak's and its two bases');
*phase evidence*
    local maxima of the lag rise over a relative speed window,
    ``dphi(N) = phi(N (1 + h)) - phi(N (1 - h))`` with ``h = 0.15``, of at least 45 degrees,
    computed only from points whose amplitude exceeds ``k_phase * sigma`` (so that the
    phase is known to better than about 7 degrees).  A single mode gives 143 degrees for
    ``zeta = 0.05`` and 74 degrees for ``zeta = 0.2`` (from ``phi = atan2(2 zeta r, 1 - r^2)``).

The noise scale is estimated robustly from the complex second differences:
``sigma = median |X[i+1] - 2 X[i] + X[i-1]| / sqrt(6 ln 2)`` (for complex circular
Gaussian noise of variance ``sigma^2`` the second difference has variance ``6 sigma^2`` and
the median of its modulus is ``sqrt(6 sigma^2 ln 2)``; a smooth response adds little).
A point that averages ``c_i`` samples (:attr:`runup.run.Curve.sample_counts`) has the noise
scale ``sigma_i = sigma / sqrt(c_i)``, and the second differences are normalised by their
own variance, ``sigma^2 (1/c[i-1] + 4/c[i] + 1/c[i+1])``, before the median
(:func:`noise_scale`); for single samples this is the rule above.

Candidates on one probe that lie within the consolidation tolerance of each other are one
candidate (evidence ``peak+phase``); across probes the same rule groups candidates into
modes (:func:`consolidate`).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Literal

import numpy as np
from numpy.typing import NDArray
from scipy.signal import find_peaks

from .fit.half_power import half_power
from .run import Curve

__all__ = ["Candidate", "ModeCandidate", "noise_scale", "find_candidates", "consolidate"]

Evidence = Literal["peak+phase", "peak", "phase"]

#: Prominence of an amplitude peak, in noise scales, to count as a candidate.
AMPLITUDE_PROMINENCE_SIGMAS = 6.0
#: Amplitude, in noise scales, above which phase is trusted (phase noise <= 1/8 rad).
PHASE_RELIABLE_SIGMAS = 8.0
#: Half-width of the relative speed window of the phase-rise test.
PHASE_WINDOW = 0.15
#: Lag rise over that window that counts as phase evidence, degrees.
PHASE_RISE_DEG = 45.0
#: Fall of the rise between two phase events for them to count as two.
PHASE_PROMINENCE_DEG = 30.0
#: Relative speed tolerance within which candidates are the same resonance.
SAME_MODE_TOLERANCE = 0.03


@dataclass(frozen=True)
class Candidate:
    """A resonance candidate on one curve.

    Attributes
    ----------
    probe, order, segment
        Which curve.
    speed_rpm
        Speed of the amplitude peak, or of the steepest phase rise for phase-only evidence.
    evidence
        ``"peak+phase"``, ``"peak"`` or ``"phase"``.
    peak_index
        Index of the amplitude peak in the curve (``None`` for phase-only).
    prominence_sigmas
        Amplitude prominence in noise scales (0 for phase-only).
    phase_rise_deg
        Lag rise over the window around the candidate (``nan`` where phase is unreliable).
    bandwidth_rpm
        Half-power bandwidth ``N_2 - N_1`` of an amplitude peak on this probe (``nan`` when
        a half-power point is missing).
    peak_samples
        Contiguous samples at or above 0.707 of the peak, the peak included (0 for
        phase-only evidence).
    """

    probe: str
    order: int
    segment: int
    speed_rpm: float
    evidence: Evidence
    peak_index: int | None
    prominence_sigmas: float
    phase_rise_deg: float
    bandwidth_rpm: float = math.nan
    peak_samples: int = 0


@dataclass(frozen=True)
class ModeCandidate:
    """Candidates from one or more probes that belong to one resonance."""

    order: int
    segment: int
    speed_rpm: float
    evidence: Evidence
    members: tuple[Candidate, ...]

    @property
    def probes(self) -> tuple[str, ...]:
        return tuple(dict.fromkeys(m.probe for m in self.members))


def noise_scale(
    response_um_pp: NDArray[np.complex128], counts: NDArray[np.float64] | None = None
) -> float:
    """Robust RMS of the complex measurement noise of one sample of a curve (see module notes).

    ``counts`` are the samples each point averages (default 1 each): a mean of ``c``
    samples has ``1/c`` of a sample's noise variance, so each second difference is divided
    by ``sqrt(1/c[i-1] + 4/c[i] + 1/c[i+1])`` (``sqrt(6)`` for single samples) before the
    median is taken.
    """
    x = np.asarray(response_um_pp, dtype=complex)
    if x.size < 3:
        return math.nan
    d2 = np.abs(x[2:] - 2.0 * x[1:-1] + x[:-2])
    if counts is None or np.all(np.asarray(counts) == 1.0):  # single samples: the rule above
        return float(np.median(d2) / math.sqrt(6.0 * math.log(2.0)))
    c = np.asarray(counts, dtype=float)
    scale = np.sqrt(1.0 / c[2:] + 4.0 / c[1:-1] + 1.0 / c[:-2])
    return float(np.median(d2 / scale) / math.sqrt(math.log(2.0)))


def _phase_rise(curve: Curve, sigma: NDArray[np.float64]) -> tuple[NDArray, NDArray]:
    """Lag rise ``phi(N(1+h)) - phi(N(1-h))`` (deg) at each reliable point; speeds and rises.

    ``sigma`` is the noise scale of each point.
    """
    amp = curve.amplitude_um_pp
    ok = amp > PHASE_RELIABLE_SIGMAS * sigma
    if ok.sum() < 3:
        return np.empty(0), np.empty(0)
    speed = curve.speed_rpm[ok]
    lag = np.rad2deg(np.unwrap(-np.angle(curve.response_um_pp[ok])))
    lo, hi = speed * (1.0 - PHASE_WINDOW), speed * (1.0 + PHASE_WINDOW)
    inside = (lo >= speed[0]) & (hi <= speed[-1])
    rise = np.full(speed.size, np.nan)
    rise[inside] = np.interp(hi[inside], speed, lag) - np.interp(lo[inside], speed, lag)
    return speed, rise


def find_candidates(curve: Curve) -> tuple[Candidate, ...]:
    """Resonance candidates on one conditioned curve (see module notes).

    Returns candidates sorted by speed; an empty tuple when the curve shows no resonance.
    """
    n = curve.speed_rpm.size
    if n < 5:
        return ()
    sigma = noise_scale(curve.response_um_pp, curve.sample_counts)
    amp = curve.amplitude_um_pp
    # noise scale of each point: a mean of c samples has 1/sqrt(c) of a sample's noise
    floor = np.maximum(sigma / np.sqrt(curve.sample_counts), max(1e-9 * float(amp.max()), 1e-12))
    # amplitude evidence: prominence in units of the noise scale of the points that form it,
    # the peak and its two bases (the larger of their scales; sigma itself for single samples)
    peaks, props = find_peaks(amp, prominence=AMPLITUDE_PROMINENCE_SIGMAS * float(floor.min()))
    scale = np.maximum(floor[peaks], np.maximum(floor[props["left_bases"]], floor[props["right_bases"]]))
    strong = props["prominences"] >= AMPLITUDE_PROMINENCE_SIGMAS * scale
    peaks, prominences, scale = peaks[strong], props["prominences"][strong], scale[strong]
    found: list[Candidate] = []
    p_speed, p_rise = _phase_rise(curve, floor)

    def rise_at(speed: float) -> float:
        if p_speed.size == 0:
            return math.nan
        valid = np.isfinite(p_rise)
        if not valid.any():
            return math.nan
        near = valid & (np.abs(p_speed - speed) <= SAME_MODE_TOLERANCE * speed)
        if not near.any():
            return float(np.interp(speed, p_speed[valid], p_rise[valid]))
        return float(np.nanmax(p_rise[near]))

    for idx, prom, sigma_k in zip(peaks, prominences, scale, strict=True):
        s = float(curve.speed_rpm[idx])
        rise = rise_at(s)
        evidence: Evidence = "peak+phase" if rise >= PHASE_RISE_DEG else "peak"
        hp = half_power(curve.speed_rpm, amp, peak_index=int(idx))
        # only a two-sided band is a width; a one-sided one may run to a neighbouring mode
        width = hp.bandwidth_rpm if hp.bandwidth_rpm is not None else math.nan
        level = amp[idx] / math.sqrt(2.0)
        below = np.nonzero(amp[:idx] < level)[0]
        above = np.nonzero(amp[idx + 1 :] < level)[0]
        first = below[-1] + 1 if below.size else 0
        last = idx + above[0] if above.size else amp.size - 1
        found.append(
            Candidate(curve.probe, curve.order, curve.segment, s, evidence, int(idx), float(prom / sigma_k), rise,
                      width, int(last - first + 1))
        )
    # phase evidence: local maxima of the rise that are not near an amplitude peak
    if p_speed.size >= 3 and np.isfinite(p_rise).any():
        filled = np.where(np.isfinite(p_rise), p_rise, -np.inf)
        padded = np.concatenate([[-np.inf], filled, [-np.inf]])
        # a distinct phase event: the rise must fall back by PHASE_PROMINENCE_DEG on both sides
        # (or the data end) before another counts, so one broad mode gives one candidate
        phase_peaks, _ = find_peaks(padded, height=PHASE_RISE_DEG, prominence=PHASE_PROMINENCE_DEG)
        phase_peaks = phase_peaks - 1
        for idx in phase_peaks:
            s = float(p_speed[idx])
            if any(abs(c.speed_rpm - s) <= max(PHASE_WINDOW, SAME_MODE_TOLERANCE) * s for c in found):
                continue
            found.append(
                Candidate(curve.probe, curve.order, curve.segment, s, "phase", None, 0.0, float(p_rise[idx]))
            )
    return tuple(sorted(found, key=lambda c: c.speed_rpm))


def _combined(evidences: Sequence[str]) -> Evidence:
    kinds = set(evidences)
    has_peak = bool(kinds & {"peak", "peak+phase"})
    has_phase = bool(kinds & {"phase", "peak+phase"})
    if has_peak and has_phase:
        return "peak+phase"
    return "peak" if has_peak else "phase"


def consolidate(candidates: Sequence[Candidate], *, tolerance: float = SAME_MODE_TOLERANCE) -> tuple[ModeCandidate, ...]:
    """Group candidates of one segment and order into modes.

    Amplitude-evidence candidates are sorted by speed and chained: one joins the current
    group when it lies within ``tolerance`` (relative) of the group's median speed, or
    within half the half-power bandwidth of any member (a damped mode's peak moves between
    probes by a fraction of its bandwidth as neighbouring modes and residuals add to it;
    two peaks closer than that cannot be told apart by their amplitude); a group holds at
    most one candidate per probe.  A
    phase-only candidate then joins the nearest group within the phase window
    (``PHASE_WINDOW``, the resolution of the phase-rise test); the others are chained among
    themselves with that same tolerance.
    """
    peaks = sorted((c for c in candidates if c.evidence != "phase"), key=lambda c: c.speed_rpm)
    phases = sorted((c for c in candidates if c.evidence == "phase"), key=lambda c: c.speed_rpm)
    groups = _chain(peaks, tolerance)
    alone: list[Candidate] = []
    for cand in phases:
        near = [g for g in groups if abs(_group_speed(g) - cand.speed_rpm) <= PHASE_WINDOW * cand.speed_rpm]
        if near:
            min(near, key=lambda g: abs(_group_speed(g) - cand.speed_rpm)).append(cand)
        else:
            alone.append(cand)
    groups += _chain(alone, PHASE_WINDOW)
    groups.sort(key=_group_speed)
    return tuple(
        ModeCandidate(
            order=g[0].order,
            segment=g[0].segment,
            speed_rpm=_group_speed(g),
            evidence=_combined([c.evidence for c in g]),
            members=tuple(g),
        )
        for g in groups
    )


def _chain(candidates: Sequence[Candidate], tolerance: float) -> list[list[Candidate]]:
    groups: list[list[Candidate]] = []
    for cand in candidates:
        # a probe shows one resonance once: its second candidate starts a new group
        if groups and all(c.probe != cand.probe for c in groups[-1]):
            ref = _group_speed(groups[-1])
            widths = [c.bandwidth_rpm for c in groups[-1] + [cand] if math.isfinite(c.bandwidth_rpm)]
            limit = max([tolerance * ref] + [0.5 * w for w in widths])
            if abs(cand.speed_rpm - ref) <= limit:
                groups[-1].append(cand)
                continue
        groups.append([cand])
    return groups


def _group_speed(group: Sequence[Candidate]) -> float:
    peaks = [c.speed_rpm for c in group if c.evidence != "phase"]
    return float(np.median(peaks if peaks else [c.speed_rpm for c in group]))
