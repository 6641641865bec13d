"""Conditioning: from an imported :class:`~runup.run.Run` to analysis-ready curves.

:func:`condition` applies, in this order and recording every change as a
:class:`~runup.run.Correction`:

1. drop rows with a missing speed, amplitude or phase;
2. split the record into monotonic speed segments with hysteresis (:func:`split_segments`);
3. per probe, order and segment: sort by speed and merge equal speeds (complex mean);
4. remove isolated spikes (:func:`find_spikes`, a Hampel-type rule on complex vectors);
5. (phase unwrapping follows speed order; :class:`~runup.run.Curve` unwraps on access);
6. subtract the slow-roll vector (explicit window or :func:`auto_slow_roll_window`);
7. drop curves left with fewer than ``min_points`` points.

The rules, their parameters and their sources are described in ``docs/conditioning.md``.
"""

from __future__ import annotations

import functools
import math
import os
from collections.abc import Iterator
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from typing import Literal

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike, NDArray
from scipy.ndimage import median_filter

from .errors import DataFormatError
from .run import ConditionedRun, Correction, Curve, Run, Segment, SlowRoll
from .units import to_response

__all__ = [
    "condition",
    "split_segments",
    "default_segment_tolerance_rpm",
    "find_spikes",
    "auto_slow_roll_window",
    "SlowRollChoice",
]

#: Reversal tolerance, part 1: fraction of the record's speed span.
TOLERANCE_SPAN_FRACTION = 0.02
#: Reversal tolerance, part 2: multiple of the robust speed-jitter scale.  The range of
#: N Gaussian samples is about 2*sqrt(2 ln N) sigma, 9.3 sigma for N = 50 000.
TOLERANCE_JITTER_MULTIPLE = 10.0
#: Segments spanning less than this fraction of the record's speed range are dropped.
MIN_SEGMENT_SPAN_FRACTION = 0.05
#: Half-width (points) of the moving window of the local noise scale in despiking.
HAMPEL_HALF_WINDOW = 10
#: A spike deviates from its neighbours' interpolation by more than this many times the
#: change across the neighbours.  The peak of a single mode sampled at spacing h (in
#: frequency ratio) scores at most h / (2 zeta), so 2 keeps every mode sampled with at
#: least one point per two half-power bandwidths.
ISOLATION_RATIO = 2.0
#: Median of a Rayleigh variable in units of its per-component standard deviation.
_RAYLEIGH_MEDIAN = math.sqrt(2.0 * math.log(2.0))
#: Consistency of the MAD with the standard deviation of a Gaussian (Rousseeuw & Croux 1993).
_MAD_TO_SIGMA = 1.4826

#: Automatic slow-roll window: at most this fraction of the curve's speed span ...
SLOW_ROLL_SPAN_FRACTION = 0.2
#: ... and at most this fraction of the speed of the dynamic peak (4.2 % dynamic, single mode).
SLOW_ROLL_PEAK_FRACTION = 0.2
#: A window whose top is above this fraction of the peak-response speed draws a warning.
SLOW_ROLL_WARN_PEAK_FRACTION = 0.25
#: The automatic window grows while each vector stays within this fraction of the running mean.
SLOW_ROLL_TOLERANCE_FRACTION = 0.1
#: Compensated amplitude at the window top above this fraction of the slow roll: warning.
SLOW_ROLL_OVERLAP_FRACTION = 0.2
MIN_SLOW_ROLL_POINTS = 3
#: Noise multiple for "beyond noise" tests (per-component sigma; Rayleigh tail exp(-k^2/2)).
NOISE_SIGMAS = 5.0
#: A dynamic peak counts only if it stands this many noise sigmas above the lowest points.
PEAK_SIGNIFICANCE_SIGMAS = 8.0

SlowRollOption = Literal["auto", "off"] | tuple[float, float]


# --------------------------------------------------------------------------- segments
def _change(values: NDArray) -> NDArray[np.bool_]:
    """True at the first value and wherever a value differs from the one before it."""
    change = np.empty(values.size, dtype=bool)
    change[:1] = True
    change[1:] = values[1:] != values[:-1]
    return change


def _collapse(speed: NDArray[np.float64]) -> tuple[NDArray[np.float64], NDArray[np.int64]]:
    """Remove consecutive repeats: (distinct-consecutive values, index of each input in them)."""
    change = _change(speed)
    return speed[change], np.cumsum(change) - 1


def default_segment_tolerance_rpm(speed_rpm: ArrayLike) -> float:
    """Default reversal tolerance of :func:`split_segments`, rpm.

    ``max(0.02 * span, 10 * sigma_jitter)`` where ``span`` is the peak-to-peak of the
    finite speeds and ``sigma_jitter = 1.4826 * MAD(second differences) / sqrt(6)``, the
    robust standard deviation of white speed jitter (a second difference of white noise
    has variance ``6 sigma**2``; MAD scaling from Rousseeuw & Croux, JASA 88, 1993).
    Ten sigma exceeds the range of 50 000 Gaussian samples (about 9.3 sigma), so a
    jittery dwell does not reverse.
    """
    s = np.asarray(speed_rpm, dtype=float)
    finite = np.isfinite(s)
    if not finite.all():
        s = s[finite]
    if s.size == 0:
        return 0.0
    c = s[_change(s)]  # consecutive repeats removed: the same extremes, so the same span
    jitter = 0.0
    if c.size >= 3:
        dd = np.diff(c, 2)
        jitter = _MAD_TO_SIGMA * float(np.median(np.abs(dd - np.median(dd)))) / math.sqrt(6.0)
    return max(TOLERANCE_SPAN_FRACTION * float(np.ptp(c)), TOLERANCE_JITTER_MULTIPLE * jitter)


def _first_reversal(c: NDArray[np.float64], start: int, sign: int, tol: float) -> int | None:
    """First index after ``start`` where ``c`` moved back by more than ``tol`` from its
    running extreme (maximum when ``sign`` is +1, minimum when -1), or ``None``."""
    width = 1024
    while True:
        part = sign * c[start : start + width]
        hit = np.flatnonzero(np.maximum.accumulate(part) - part > tol)
        if hit.size:
            return start + int(hit[0])
        if start + width >= c.size:
            return None
        width *= 4


def _segment_ends(c: NDArray[np.float64], tol: float) -> tuple[list[int], int]:
    """Last index (into ``c``) of every segment but the last, and the first direction."""
    up = np.flatnonzero(c - np.minimum.accumulate(c) > tol)
    down = np.flatnonzero(np.maximum.accumulate(c) - c > tol)
    if up.size == 0 and down.size == 0:
        return [], int(np.sign(c[-1] - c[0]))
    first = 1 if down.size == 0 or (up.size and up[0] < down[0]) else -1
    ends: list[int] = []
    start, sign = 0, first
    while (trigger := _first_reversal(c, start, sign, tol)) is not None:
        part = sign * c[start:trigger]
        extreme = start + part.size - 1 - int(np.argmax(part[::-1]))  # last occurrence
        ends.append(extreme)
        start, sign = extreme, -sign
    return ends, first


def _segment_labels(
    speed: NDArray[np.float64], tol: float
) -> tuple[NDArray[np.int64], list[int]]:
    """Labels per element (-1 for NaN) and the direction sign (+1, -1, 0) per segment."""
    labels = np.full(speed.size, -1, dtype=np.int64)
    finite = np.isfinite(speed)
    if not finite.any():
        return labels, []
    c, where = _collapse(speed[finite])
    ends, first = _segment_ends(c, tol)
    labels[finite] = np.searchsorted(np.asarray(ends, dtype=np.int64), where, side="left")
    signs = [first * (-1) ** k for k in range(len(ends) + 1)]
    return labels, signs


def split_segments(
    speed_rpm: ArrayLike, *, tolerance_rpm: float | None = None
) -> NDArray[np.int64]:
    """Label each sample with the monotonic speed segment it belongs to.

    Parameters
    ----------
    speed_rpm
        Speeds in acquisition order, rpm.  Consecutive equal values (interleaved probes
        of one sample, or a dwell) are one sample for this purpose.
    tolerance_rpm
        Hysteresis: a reversal counts only once the speed has moved back from the running
        extreme (maximum while rising, minimum while falling) by more than this.  Default
        :func:`default_segment_tolerance_rpm`.

    Returns
    -------
    numpy.ndarray of int64
        Segment label per sample, ``0, 1, ...`` in acquisition order; ``-1`` for NaN.
        The sample at a turning point ends the segment it closes.

    Raises
    ------
    DataFormatError
        If ``tolerance_rpm`` is negative or not finite.
    """
    speed = np.asarray(speed_rpm, dtype=float).ravel()
    tol = _check_tolerance(speed, tolerance_rpm)
    return _segment_labels(speed, tol)[0]


def _check_tolerance(speed: NDArray[np.float64], tolerance_rpm: float | None) -> float:
    if tolerance_rpm is None:
        return default_segment_tolerance_rpm(speed)
    if not (math.isfinite(tolerance_rpm) and tolerance_rpm >= 0):
        raise DataFormatError(
            f"segment tolerance must be a non-negative number of rpm, got {tolerance_rpm!r}"
        )
    return float(tolerance_rpm)


# --------------------------------------------------------------------------- spikes
def _interpolation_residual(
    speed: NDArray[np.float64], x: NDArray[np.complex128]
) -> NDArray[np.complex128]:
    """``x_i`` minus the linear interpolation (in speed) of ``x_{i-1}`` and ``x_{i+1}``."""
    w = (speed[1:-1] - speed[:-2]) / (speed[2:] - speed[:-2])
    return x[1:-1] - (x[:-2] + w * (x[2:] - x[:-2]))


def _floor(x: NDArray[np.complex128]) -> float:
    return max(1e-9 * float(np.max(np.abs(x), initial=0.0)), np.finfo(float).tiny)


def _noise_sigma(speed: NDArray[np.float64], x: NDArray[np.complex128]) -> float:
    """Robust per-component noise sigma of one point of a curve, um pp.

    From the median of the interpolation residual (Rayleigh median ``sigma*sqrt(2 ln 2)``)
    and ``Var d = 1.5 Var n`` for evenly spaced points.
    """
    if x.size < 3:
        return _floor(x)
    d = np.abs(_interpolation_residual(speed, x))
    return max(float(np.median(d)) / _RAYLEIGH_MEDIAN / math.sqrt(1.5), _floor(x))


def find_spikes(
    speed_rpm: ArrayLike, response_um_pp: ArrayLike, *, threshold: float = 6.0
) -> tuple[NDArray[np.bool_], NDArray[np.float64]]:
    """Find isolated spikes in a curve of complex 1X vectors.

    Parameters
    ----------
    speed_rpm
        Strictly increasing speeds, rpm.
    response_um_pp
        Complex vectors, um pp (see :func:`runup.units.to_response`).
    threshold
        Deviation, in robust noise sigmas, above which an isolated point is a spike.

    Returns
    -------
    spike : numpy.ndarray of bool
        True for the points to remove.
    score : numpy.ndarray of float
        Deviation of each flagged or interior point in noise sigmas.

    Notes
    -----
    For an interior point, ``d_i = x_i - [x_{i-1} + w_i (x_{i+1} - x_{i-1})]`` with
    ``w_i = (s_i - s_{i-1}) / (s_{i+1} - s_{i-1})``.  The noise scale is Hampel's robust
    scale (Hampel, JASA 69, 1974; median/MAD, Rousseeuw & Croux, JASA 88, 1993) applied to
    ``|d|``: ``sigma_i = max(median_window(|d|), median_all(|d|)) / sqrt(2 ln 2)`` over a
    moving window of 21 points.  Point ``i`` is a spike when both

    * ``|d_i| > threshold * sigma_i`` (beyond noise; false rate ``exp(-threshold**2/2)``
      for complex Gaussian noise), and
    * ``|d_i| > 2 |x_{i+1} - x_{i-1}|`` (isolated: its neighbours agree with each other).

    The second rule keeps resonance peaks on sparse data: on the modal circle a peak
    sampled at spacing ``h`` in frequency ratio scores ``h / (2 zeta)``.

    A second pass applies the same two rules to two consecutive points against the line
    through their outer neighbours, and to the first and last one or two points against the
    line through the next two points (extrapolated; the change across them is scaled by the
    extrapolation distance), on curves of at least six points.
    """
    spike, score, _ = _spikes(speed_rpm, response_um_pp, threshold, every_score=True)
    return spike, score


class _NoiseScale:
    """Hampel's noise scale ``sigma_i`` of the interior points of one curve (see
    :func:`find_spikes`), evaluated where it is needed.

    The moving median of ``|d|`` is the costliest step of despiking, yet few points need
    it: every ``sigma_i`` is at least :attr:`lower` (the scale with the curve's median in
    place of the window's), so a point whose deviation is within ``threshold * lower`` is
    no spike whatever its window.  :meth:`at` takes the window median of given points only
    (the same 21 values scipy's ``median_filter`` takes, so the same value); :meth:`full`
    the whole moving median, when a rule needs every point.
    """

    def __init__(self, d: NDArray[np.float64], median_d: float, floor: float) -> None:
        self.d, self.median_d, self.floor = d, median_d, floor
        self.lower = float(np.maximum(median_d / _RAYLEIGH_MEDIAN, floor))
        self._full: NDArray[np.float64] | None = None
        # windows clipped by a short curve, or NaN (pointwise and scipy medians could then
        # disagree): take the whole moving median from scipy
        self._pointwise = (
            d.size >= 2 * HAMPEL_HALF_WINDOW + 1 and math.isfinite(self.lower) and _all_finite(d)
        )

    def _scale(self, local: NDArray[np.float64]) -> NDArray[np.float64]:
        return np.maximum(np.maximum(local, self.median_d) / _RAYLEIGH_MEDIAN, self.floor)

    def full(self) -> NDArray[np.float64]:
        """``sigma`` of every interior point."""
        if self._full is None:
            size = min(2 * HAMPEL_HALF_WINDOW + 1, self.d.size)
            self._full = self._scale(median_filter(self.d, size=size, mode="nearest"))
        return self._full

    def at(self, i: NDArray[np.intp]) -> NDArray[np.float64]:
        """``sigma`` of the interior points ``i`` (indices into ``d``)."""
        if self._full is not None or not self._pointwise:
            return self.full()[i]
        h = HAMPEL_HALF_WINDOW
        # the window of 21 points around each, edge values repeated ("nearest", as scipy)
        window = self.d[np.clip(i[:, None] + np.arange(-h, h + 1), 0, self.d.size - 1)]
        return self._scale(np.partition(window, h, axis=1)[:, h])


def _spikes(
    speed_rpm: ArrayLike, response_um_pp: ArrayLike, threshold: float, *, every_score: bool = False
) -> tuple[NDArray[np.bool_], NDArray[np.float64], float | None]:
    """:func:`find_spikes`, plus the curve's noise sigma as :func:`_noise_sigma` would
    compute it (``None`` for fewer than three points).

    The spikes are the same either way; the score of a point that is no spike is given
    only with ``every_score`` (else 0), which spares the moving median of most points.
    The noise sigma comes from the same median of ``|d|`` that sets the global scale here;
    returning it spares :func:`condition` a second residual and median when no spike is
    removed (the curve is then unchanged, so the value is exactly the same).
    """
    s = np.asarray(speed_rpm, dtype=float)
    x = np.asarray(response_um_pp, dtype=complex)
    spike = np.zeros(x.size, dtype=bool)
    score = np.zeros(x.size, dtype=float)
    if x.size < 3:
        return spike, score, None
    d = np.abs(_interpolation_residual(s, x))
    median_d, floor = np.median(d), _floor(x)
    scale = _NoiseScale(d, median_d, floor)
    isolated = d > ISOLATION_RATIO * np.abs(x[2:] - x[:-2])
    if every_score:
        score[1:-1] = d / scale.full()
        spike[1:-1] = (score[1:-1] > threshold) & isolated
    else:
        # d / sigma > threshold needs d / lower > threshold (sigma >= lower, and rounding
        # keeps the order), so only those points are scored
        maybe = np.flatnonzero((d / scale.lower > threshold) & isolated)
        hit = d[maybe] / scale.at(maybe)
        over = hit > threshold
        spike[maybe[over] + 1] = True
        score[maybe[over] + 1] = hit[over]
    if x.size >= 6:
        _pairs_and_ends(s, x, scale, threshold, spike, score)
    noise = max(float(median_d) / _RAYLEIGH_MEDIAN / math.sqrt(1.5), floor)
    return spike, score, noise


def _pairs_and_ends(
    s: NDArray[np.float64],
    x: NDArray[np.complex128],
    scale: _NoiseScale,
    threshold: float,
    spike: NDArray[np.bool_],
    score: NDArray[np.float64],
) -> None:
    """Second pass of :func:`find_spikes` (in place): two consecutive glitches, and glitches
    at the ends of a curve, judged by the same two rules against the line through the
    nearest two good points (interpolated across a pair, extrapolated at an end)."""

    @functools.cache
    def median_sigma() -> float:
        """The curve's median scale (the end points take their neighbours' scale), for
        the end judgements: it needs every point's scale, so it is computed once and only
        when a judgement gets to need it."""
        sigma = scale.full()
        return float(np.median(np.concatenate([[sigma[0]], sigma, [sigma[-1]]])))

    def judge(idx: list[int], a: int, b: int) -> None:
        if spike[a] or spike[b] or any(spike[i] for i in idx):
            return
        slope = (x[b] - x[a]) / (s[b] - s[a])
        dev = np.array([abs(x[i] - (x[a] + slope * (s[i] - s[a]))) for i in idx])
        change = abs(x[b] - x[a]) * max(1.0, max(abs(s[i] - s[a]) for i in idx) / abs(s[b] - s[a]))
        if not np.all(dev > ISOLATION_RATIO * change):  # not isolated: no glitch, any scale
            return
        # the local scale at an end is itself inflated by the glitch: use the curve's median
        # scale, widened for extrapolation: x_i - [x_a + t (x_b - x_a)] has variance
        # (1 + (1 - t)^2 + t^2) sigma_point^2 against 1.5 sigma_point^2 for the interior rule
        t = np.array([(s[i] - s[a]) / (s[b] - s[a]) for i in idx])
        sig = median_sigma() * np.sqrt((1.0 + (1.0 - t) ** 2 + t**2) / 1.5)
        if np.all(dev > threshold * sig):
            for i, d_i, g in zip(idx, dev, sig, strict=True):
                spike[i] = True
                score[i] = d_i / g

    n = x.size
    judge([0, 1], 2, 3)  # the first two points, extrapolated from the next two
    judge([n - 2, n - 1], n - 4, n - 3)
    judge([0], 1, 2)  # the first point alone
    judge([n - 1], n - 3, n - 2)
    # interior pairs (points k + 1, k + 2): both stand off the line through their outer
    # neighbours, beyond the larger scale of the two (interior scales k and k + 1)
    ds, dx = s[3:] - s[:-3], x[3:] - x[:-3]
    w1 = (s[1:-2] - s[:-3]) / ds
    w2 = (s[2:-1] - s[:-3]) / ds
    d1 = np.abs(x[1:-2] - (x[:-3] + w1 * dx))
    d2 = np.abs(x[2:-1] - (x[:-3] + w2 * dx))
    d_min = np.minimum(d1, d2)
    # as for single points, only pairs beyond threshold * lower can be beyond threshold * sig
    maybe = np.flatnonzero((d_min > threshold * scale.lower) & (d_min > ISOLATION_RATIO * np.abs(dx)))
    sig = dict(zip(maybe.tolist(), np.maximum(scale.at(maybe), scale.at(maybe + 1)).tolist(), strict=True))
    pair = [k for k in maybe.tolist() if d_min[k] > threshold * sig[k]]
    # overlapping candidates (a good point beside a bad pair also stands off its line): take
    # the strongest first, then those that do not touch it
    ranked = sorted(pair, key=lambda k: -float(min(d1[k], d2[k]) / sig[k]))
    for k in ranked:
        i = k + 1
        if not (spike[i - 1] or spike[i] or spike[i + 1] or spike[i + 2]):
            spike[i] = spike[i + 1] = True
            score[i], score[i + 1] = d1[k] / sig[k], d2[k] / sig[k]


# --------------------------------------------------------------------------- slow roll
@dataclass(frozen=True)
class SlowRollChoice:
    """Outcome of :func:`auto_slow_roll_window`.

    Attributes
    ----------
    window_rpm
        ``(low_rpm, high_rpm)`` of the chosen window, or ``None`` when no slow-roll
        window can be chosen.
    n_points
        Points in the window (0 when none).
    reason
        Why the window ends where it does, or why there is none (a sentence fragment).
    """

    window_rpm: tuple[float, float] | None
    n_points: int
    reason: str


def _peak_speed(
    speed: NDArray[np.float64], dynamic: NDArray[np.complex128], noise: float
) -> float | None:
    """Speed of the largest ``|dynamic|`` if it stands out of the noise, else ``None``."""
    amp = np.abs(dynamic)
    i = int(np.argmax(amp))
    return float(speed[i]) if amp[i] > PEAK_SIGNIFICANCE_SIGMAS * noise else None


def auto_slow_roll_window(
    speed_rpm: ArrayLike,
    response_um_pp: ArrayLike,
    *,
    noise_um_pp: float | None = None,
    span_fraction: float = SLOW_ROLL_SPAN_FRACTION,
    peak_fraction: float = SLOW_ROLL_PEAK_FRACTION,
    tolerance_fraction: float = SLOW_ROLL_TOLERANCE_FRACTION,
) -> SlowRollChoice:
    """Choose the slow-roll (runout) window of one curve from its lowest speeds.

    Parameters
    ----------
    speed_rpm
        Strictly increasing speeds, rpm.
    response_um_pp
        Uncompensated complex vectors, um pp.
    noise_um_pp
        Per-component noise sigma of one point; estimated robustly when ``None``.
    span_fraction
        The window stays within the lowest ``span_fraction`` of the curve's speed span.
    peak_fraction
        ... and below ``peak_fraction`` times the speed of the dynamic peak, when one
        stands out of the noise (``|x - mean(x[:3])|`` above 8 sigma).
    tolerance_fraction
        The window grows from the lowest speed while each next vector stays within
        ``max(5 sigma sqrt(1 + 1/k), tolerance_fraction * |m_k|)`` of the mean ``m_k``
        of the ``k`` points before it.

    Returns
    -------
    SlowRollChoice
        No window (``window_rpm=None``) when fewer than 3 points qualify, in particular
        when the curve starts above ``peak_fraction`` of its peak-response speed (the
        record holds no slow-roll data).

    Notes
    -----
    For a single mode ``x = A r^2 / (1 - r^2 + 2j zeta r)`` the dynamic part is 1.0 % of
    ``A`` at ``r = 0.1`` and 4.2 % at ``r = 0.2`` (Rao, *Mechanical Vibrations*, rotating
    unbalance), hence the 20 % limits.  Slow-roll compensation itself is common practice.
    """
    s = np.asarray(speed_rpm, dtype=float)
    x = np.asarray(response_um_pp, dtype=complex)
    n = x.size
    if n < MIN_SLOW_ROLL_POINTS:
        return SlowRollChoice(None, 0, f"the curve has only {n} point(s)")
    noise = _noise_sigma(s, x) if noise_um_pp is None else float(noise_um_pp)
    top = s[0] + span_fraction * (s[-1] - s[0])
    peak = _peak_speed(s, x - x[:MIN_SLOW_ROLL_POINTS].mean(), noise)
    if peak is not None and peak_fraction * peak < top:
        top = peak_fraction * peak
        if s[0] > top:
            return SlowRollChoice(
                None,
                0,
                f"the curve starts at {s[0]:.0f} rpm, above {peak_fraction:.0%} of its "
                f"peak-response speed {peak:.0f} rpm, so it holds no slow-roll data",
            )
    m = int(np.searchsorted(s, top, side="right"))
    if m < MIN_SLOW_ROLL_POINTS:
        return SlowRollChoice(None, m, f"only {m} point(s) lie below {top:.0f} rpm")
    k = np.arange(1, m)
    running_mean = np.cumsum(x[: m - 1]) / k
    allowed = np.maximum(
        NOISE_SIGMAS * noise * np.sqrt(1.0 + 1.0 / k), tolerance_fraction * np.abs(running_mean)
    )
    off = np.flatnonzero(np.abs(x[1:m] - running_mean) > allowed)
    if off.size == 0:
        return SlowRollChoice((float(s[0]), float(s[m - 1])), m, f"limit {top:.0f} rpm reached")
    k_end = int(off[0]) + 1
    if k_end < MIN_SLOW_ROLL_POINTS:
        return SlowRollChoice(
            None, k_end, f"the response changes from the lowest speed on ({s[k_end]:.0f} rpm)"
        )
    return SlowRollChoice(
        (float(s[0]), float(s[k_end - 1])),
        k_end,
        f"the response leaves the slow-roll vector at {s[k_end]:.0f} rpm",
    )


def _overlap_reasons(
    speed: NDArray[np.float64], raw: NDArray[np.complex128], window: tuple[float, float],
    vector: complex, noise: float,
) -> list[str]:
    """Signs that a slow-roll window overlaps the dynamic response."""
    reasons = []
    inside = np.flatnonzero((speed >= window[0]) & (speed <= window[1]))
    top_amp = abs(raw[inside[-1]] - vector)
    if top_amp > SLOW_ROLL_OVERLAP_FRACTION * abs(vector) and top_amp > NOISE_SIGMAS * noise:
        reasons.append(
            f"the compensated amplitude at its top is {top_amp:.3g} um pp, "
            f"{top_amp / abs(vector):.0%} of the slow-roll amplitude"
            if abs(vector) > 0
            else f"the compensated amplitude at its top is {top_amp:.3g} um pp"
        )
    peak = _peak_speed(speed, raw - vector, noise)
    if peak is not None and window[1] > SLOW_ROLL_WARN_PEAK_FRACTION * peak:
        reasons.append(
            f"its top is above {SLOW_ROLL_WARN_PEAK_FRACTION:.0%} of the peak-response "
            f"speed {peak:.0f} rpm"
        )
    return reasons


def _slow_roll(
    speed: NDArray[np.float64],
    raw: NDArray[np.complex128],
    option: SlowRollOption,
    where: str,
    noise: float | None = None,
) -> tuple[SlowRoll | None, list[str]]:
    """The slow-roll vector of one curve and warning sentences (``noise``: the curve's
    :func:`_noise_sigma` when already known)."""
    if option == "off":
        return None, []
    if noise is None:
        noise = _noise_sigma(speed, raw)
    if option == "auto":
        choice = auto_slow_roll_window(speed, raw, noise_um_pp=noise)
        if choice.window_rpm is None:
            return None, [f"{where}: slow roll not compensated because {choice.reason}; "
                          "give an explicit slow-roll window if runout matters."]
        window, automatic = choice.window_rpm, True
    else:
        window, automatic = (float(option[0]), float(option[1])), False
    inside = (speed >= window[0]) & (speed <= window[1])
    n = int(inside.sum())
    if n < 2:
        raise DataFormatError(
            f"{where}: slow-roll window {window[0]:g}-{window[1]:g} rpm holds {n} point(s), "
            "at least 2 are needed; widen the window or use slow_roll='auto'"
        )
    vector = complex(raw[inside].mean())
    reasons = _overlap_reasons(speed, raw, window, vector, noise)
    warn = (
        [f"{where}: slow-roll window {window[0]:.0f}-{window[1]:.0f} rpm may include dynamic "
         f"response: {' and '.join(reasons)}."]
        if reasons
        else []
    )
    return SlowRoll(window[0], window[1], vector, n, automatic), warn


# --------------------------------------------------------------------------- condition
def _check_options(slow_roll: object, spike_threshold: float, min_points: int) -> None:
    valid = "'auto', 'off' or a (low_rpm, high_rpm) tuple"
    if isinstance(slow_roll, str):
        if slow_roll not in ("auto", "off"):
            raise DataFormatError(f"unknown slow_roll choice {slow_roll!r}; use {valid}")
    elif isinstance(slow_roll, tuple) and len(slow_roll) == 2:
        try:
            low, high = (float(v) for v in slow_roll)
        except (TypeError, ValueError):
            low = high = math.nan
        if not (math.isfinite(low) and math.isfinite(high) and 0 <= low < high):
            raise DataFormatError(
                f"slow-roll window must satisfy 0 <= low < high (rpm), got {slow_roll!r}"
            )
    else:
        raise DataFormatError(f"slow_roll must be {valid}, got {slow_roll!r}")
    if not (math.isfinite(spike_threshold) and spike_threshold > 0):
        raise DataFormatError(f"spike_threshold must be positive, got {spike_threshold!r}")
    if isinstance(min_points, bool) or not isinstance(min_points, int) or min_points < 2:
        raise DataFormatError(f"min_points must be a whole number >= 2, got {min_points!r}")


def _rows_text(rows: NDArray[np.int64]) -> str:
    shown = ", ".join(str(r) for r in rows[:5])
    return shown + (f" and {rows.size - 5} more" if rows.size > 5 else "")


@dataclass(frozen=True)
class _Rows:
    """The sample columns conditioning works on, as aligned numpy arrays (one per row).

    ``probe`` holds integer codes into ``probe_names``, numbered in order of first
    appearance (:func:`pandas.factorize`), so that rows are grouped without comparing
    Python strings again.
    """

    speed: NDArray[np.float64]
    probe: NDArray[np.intp]
    probe_names: NDArray[np.object_]
    order: NDArray[np.int64]
    amplitude: NDArray[np.float64]
    phase: NDArray[np.float64]
    time: NDArray[np.float64]
    row: NDArray[np.int64]


def _all_finite(values: NDArray[np.float64]) -> bool:
    """Whether every value is finite, usually without a mask: a sum is finite only when
    every term is (a non-finite sum can still be an overflow, so it is checked again)."""
    with np.errstate(invalid="ignore", over="ignore"):  # inf - inf, overflow: checked again
        total = np.add.reduce(values)
    return bool(np.isfinite(total) or np.isfinite(values).all())


def _missing(df: pd.DataFrame) -> tuple[NDArray[np.bool_] | None, list[Correction]]:
    """Rows with a missing speed, amplitude or phase (``None`` when there is none) and
    their records."""
    columns = [df[c].to_numpy() for c in ("speed_rpm", "amplitude_um_pp", "phase_lag_deg")]
    # a NaN makes a sum NaN: a record without missing values needs no mask (the usual case)
    with np.errstate(invalid="ignore", over="ignore"):  # inf - inf is NaN too: checked below
        if not any(np.isnan(np.add.reduce(v)) for v in columns):
            return None, []
    bad = np.isnan(columns[0]) | np.isnan(columns[1]) | np.isnan(columns[2])
    corrections: list[Correction] = []
    if not bad.any():  # the sum was an infinity minus an infinity, not a missing value
        return None, corrections
    for (probe, order), group in df.loc[bad].groupby(["probe", "order"], sort=False):
        rows = group["row"].to_numpy()
        corrections.append(Correction(
            "missing_dropped", str(probe), int(order), None, None, tuple(rows.tolist()),
            f"probe {probe} order {order}: {rows.size} row(s) with a missing speed, "
            f"amplitude or phase dropped (rows {_rows_text(rows)}).",
        ))
    return bad, corrections


def _valid_rows(df: pd.DataFrame, bad: NDArray[np.bool_] | None) -> _Rows:
    """The rows of ``df`` not flagged ``bad``, as arrays (views of ``df`` when ``bad`` is
    ``None``)."""
    columns = ("speed_rpm", "probe", "order", "amplitude_um_pp", "phase_lag_deg", "time_s", "row")
    keep = None if bad is None else ~bad
    speed, probe, order, amp, phase, time, row = (
        df[c].to_numpy() if keep is None else df[c].to_numpy()[keep] for c in columns
    )
    codes, names = pd.factorize(probe)
    return _Rows(speed, codes, names, order, amp, phase, time, row)


def _sample_ids(speed: NDArray[np.float64], time: NDArray[np.float64]) -> NDArray[np.int64]:
    """One id per sample: rows sharing a time stamp (or, without time, a speed) in a row."""
    sid = np.cumsum(_change(time if _all_finite(time) else speed))
    sid -= 1  # in place: the ids of a large record are a large array
    return sid


def _segments(
    rows: _Rows, tol: float, min_points: int, default_direction: str
) -> tuple[NDArray[np.int64], tuple[Segment, ...], list[Correction]]:
    """Per-row segment labels (-1 = dropped) and the kept segments."""
    speed, time = rows.speed, rows.time
    sid = _sample_ids(speed, time)
    n_samples = int(sid[-1]) + 1
    count = np.bincount(sid, minlength=n_samples)
    s_speed = np.bincount(sid, weights=speed, minlength=n_samples) / count
    s_time = np.bincount(sid, weights=time, minlength=n_samples) / count
    s_label, signs = _segment_labels(s_speed, tol)
    record_range = float(np.ptp(s_speed))
    # rows per segment, counted over the samples (label -1, non-finite speed: slot 0)
    rows_per_label = np.bincount(s_label + 1, weights=count, minlength=len(signs) + 1)[1:]
    new_index = np.full(len(signs), -1, dtype=np.int64)
    segments: list[Segment] = []
    corrections: list[Correction] = []
    for k, sign in enumerate(signs):
        members = np.flatnonzero(s_label == k)
        sp = s_speed[members]
        direction = {1: "startup", -1: "coastdown"}.get(sign, default_direction)
        n_distinct = np.unique(sp).size
        span = float(np.ptp(sp))
        if n_distinct < min_points or span < MIN_SEGMENT_SPAN_FRACTION * record_range:
            dropped_rows = rows.row[(s_label == k)[sid]]
            corrections.append(Correction(
                "segment_dropped", None, None, None, None, tuple(dropped_rows.tolist()),
                f"{direction} segment {sp[0]:.0f}-{sp[-1]:.0f} rpm dropped: {n_distinct} "
                f"distinct speed(s), span {span:.0f} rpm (minimum {min_points} speeds and "
                f"{MIN_SEGMENT_SPAN_FRACTION:.0%} of the {record_range:.0f} rpm range).",
            ))
            continue
        new_index[k] = len(segments)
        t = s_time[members]
        ok = np.isfinite(t)
        rate = None
        if ok.sum() >= 2:
            dt, ds = np.diff(t[ok]), np.diff(sp[ok])
            pos = dt > 0
            if pos.any():
                rate = float(np.median(np.abs(ds[pos] / dt[pos])))
        segments.append(Segment(
            len(segments), direction, float(sp[0]), float(sp[-1]), int(rows_per_label[k]), rate,
        ))
    return new_index[s_label][sid], tuple(segments), corrections


def _curve_rows(
    key: NDArray[np.int64], speed: NDArray[np.float64]
) -> Iterator[tuple[int, NDArray[np.intp]]]:
    """The rows of each curve: ``(key, rows sorted by speed)``, keys ascending; rows of a
    negative key belong to no curve.

    The same grouping and order as ``numpy.lexsort((speed, key))``: by key, then speed,
    then position.  lexsort of a few hundred thousand rows is slow; here the key takes few
    values (one per curve), so a stable sort on the key (numpy sorts 16-bit integers by
    radix) followed by a stable sort of each curve's speeds gives the same permutation
    faster.  Stable sorts keep rows of equal key and speed in position order, as lexsort
    does.  The speed sort is skipped where the speeds already ascend, and reused where a
    curve's speeds equal an earlier curve's (probes sampled together share their speeds).
    """
    if key.size == 0:
        return
    small = int(key.min()) >= -1 and int(key.max()) < np.iinfo(np.int16).max
    if not small:
        order = np.lexsort((speed, key))
        k_sorted = key[order]
        bounds = np.flatnonzero(k_sorted[1:] != k_sorted[:-1]) + 1
        for a, b in zip(np.append(0, bounds), np.append(bounds, key.size), strict=True):
            if k_sorted[a] >= 0:
                yield int(k_sorted[a]), order[a:b]
        return
    key16 = key.astype(np.int16)
    order = np.argsort(key16, kind="stable")
    sorted_keys = key16[order]
    keys = np.arange(int(sorted_keys[-1]) + 1, dtype=np.int16)
    starts = np.searchsorted(sorted_keys, keys, side="left")
    ends = np.searchsorted(sorted_keys, keys, side="right")
    seen: dict[tuple[int, float, float], tuple[NDArray[np.float64], NDArray[np.intp]]] = {}
    for k, a, b in zip(keys.tolist(), starts.tolist(), ends.tolist(), strict=True):
        if a < b:
            part = order[a:b]
            yield k, part[_stable_speed_order(speed[part], seen)]


def _stable_speed_order(
    sp: NDArray[np.float64],
    seen: dict[tuple[int, float, float], tuple[NDArray[np.float64], NDArray[np.intp]]],
) -> NDArray[np.intp] | slice:
    """``numpy.argsort(sp, kind="stable")``, or a slice doing the same when ``sp`` already
    ascends; ``seen`` remembers the sorts done, and an equal array reuses its own (the
    stable order depends on the values alone)."""
    if np.all(sp[1:] >= sp[:-1]):  # false at a NaN too: then sorted, NaN last as lexsort
        return slice(None)
    tag = (sp.size, float(sp[0]), float(sp[-1]))
    if tag in seen and np.array_equal(seen[tag][0], sp):
        return seen[tag][1]
    perm = np.argsort(sp, kind="stable")
    seen[tag] = (sp, perm)
    return perm


def _points(
    speed: NDArray[np.float64], x: NDArray[np.complex128], time: NDArray[np.float64]
) -> tuple[NDArray[np.float64], NDArray[np.complex128], NDArray[np.float64], NDArray[np.int64]]:
    """Merge the rows of equal speed of one curve (sorted by speed): the speeds, mean
    vectors and mean times of its points and the rows in each."""
    new_point = np.ones(speed.size, dtype=bool)
    new_point[1:] = speed[1:] != speed[:-1]
    starts = np.flatnonzero(new_point)
    counts = np.diff(np.append(starts, speed.size))
    return speed[starts], _point_means(x, starts, counts), _point_means(time, starts, counts), counts


def _point_means(values: NDArray, starts: NDArray[np.intp], counts: NDArray[np.int64]) -> NDArray:
    """Mean of the rows of each point: ``add.reduceat(values, starts) / counts``.

    When every point is a single row the sums are the values themselves, so the
    reduction is skipped; the division is kept so that the result is the same bits.
    """
    if starts.size == values.size:
        return values / counts
    return np.add.reduceat(values, starts) / counts if starts.size else values[:0]


@dataclass(frozen=True)
class _CurveOptions:
    """The options of :func:`condition` that act on each curve."""

    slow_roll: SlowRollOption
    despike: bool
    spike_threshold: float
    min_points: int


@dataclass(frozen=True)
class _CurveJob:
    """One curve to condition: probe, order, segment and its rows (sorted by speed)."""

    probe: str
    order: int
    segment: Segment
    rows: NDArray[np.intp]


#: Curves are conditioned in parallel threads when there are several and together they hold
#: at least this many rows.  The work per curve (complex exponentials, moving medians,
#: medians) runs mostly in numpy with the GIL released, so on a multi-core machine threads
#: shorten a large record's conditioning; below this size thread start-up outweighs it.
PARALLEL_MIN_ROWS = 50_000


def _thread_budget() -> int:
    """Threads this process may use: the CPUs it may run on, capped by ``OMP_NUM_THREADS``
    when that is set (the convention of the math libraries; :mod:`runup.batch` sets it to 1
    in its workers, whose processes are the parallelism there)."""
    try:
        cpus = len(os.sched_getaffinity(0))
    except AttributeError:  # not on every platform
        cpus = os.cpu_count() or 1
    cap = os.environ.get("OMP_NUM_THREADS", "")
    return max(1, min(cpus, int(cap))) if cap.isdigit() and int(cap) > 0 else max(1, cpus)


def _map_curves(
    rows: _Rows, jobs: list[_CurveJob], options: _CurveOptions
) -> Iterator[tuple[list[Correction], list[str], Curve | None]]:
    """:func:`_condition_curve` of each job, in the order of ``jobs``.

    Each curve is computed independently of the others, so running them in threads gives
    exactly the results of running them one after the other; ``map`` returns them in job
    order and raises the first error in that order.
    """
    workers = min(len(jobs), _thread_budget())
    if workers < 2 or sum(job.rows.size for job in jobs) < PARALLEL_MIN_ROWS:
        return (_condition_curve(rows, job, options) for job in jobs)
    with ThreadPoolExecutor(max_workers=workers) as pool:
        return iter(list(pool.map(lambda job: _condition_curve(rows, job, options), jobs)))


def _condition_curve(
    rows: _Rows, job: _CurveJob, options: _CurveOptions
) -> tuple[list[Correction], list[str], Curve | None]:
    """Steps 3 to 7 of :func:`condition` for one curve: its correction records, its
    warnings and the curve (``None`` when dropped)."""
    probe, order_n, seg, idx = job.probe, job.order, job.segment, job.rows
    where = f"probe {probe} order {order_n} {seg.label}"
    corrections: list[Correction] = []
    sp, cx, ct, cnt = _points(
        rows.speed[idx], to_response(rows.amplitude[idx], rows.phase[idx]), rows.time[idx]
    )
    c_rows = rows.row[idx]
    if np.any(cnt > 1):
        merged = c_rows[np.repeat(cnt > 1, cnt)]
        corrections.append(Correction(
            "duplicates_merged", probe, order_n, seg.index, None, tuple(merged.tolist()),
            f"{where}: {int((cnt - 1).sum())} duplicate-speed row(s) merged into "
            f"{int((cnt > 1).sum())} point(s) as complex vector means "
            f"(rows {_rows_text(merged)}).",
        ))
    noise = None  # the curve's noise sigma, when despiking found it for the same points
    if options.despike and sp.size >= 3:
        spike, score, noise = _spikes(sp, cx, options.spike_threshold)
        offsets = np.append(0, np.cumsum(cnt))
        for i in np.flatnonzero(spike):
            point_rows = c_rows[offsets[i] : offsets[i + 1]]
            corrections.append(Correction(
                "spike_removed", probe, order_n, seg.index, float(sp[i]),
                tuple(point_rows.tolist()),
                f"{where}: spike at {sp[i]:.1f} rpm removed, {score[i]:.1f} noise "
                f"sigmas from its neighbours (rows {_rows_text(point_rows)}).",
            ))
        if spike.any():
            sp, cx, ct, cnt = sp[~spike], cx[~spike], ct[~spike], cnt[~spike]
            noise = None
    if sp.size < options.min_points:
        corrections.append(Correction(
            "too_few_points", probe, order_n, seg.index, None, tuple(c_rows.tolist()),
            f"{where}: curve dropped, {sp.size} point(s) left (minimum {options.min_points}).",
        ))
        return corrections, [], None
    sr, warnings = _slow_roll(sp, cx, options.slow_roll, where, noise)
    response = cx if sr is None else cx - sr.vector_um_pp
    # each point keeps how many rows it averages (duplicate speeds merged), so that noise
    # scales downstream stay per sample
    return corrections, warnings, Curve(
        probe, order_n, seg.index, seg.direction, sp, response, cx, ct, sr, cnt
    )


def _no_curve_records(
    df: pd.DataFrame, rows: _Rows, orders: NDArray[np.int64], keep: NDArray[np.bool_],
    corrections: list[Correction], curves: list[Curve],
) -> list[Correction]:
    """``too_few_points`` records for the probe/orders of ``df`` left with neither a curve
    nor such a record, in order of first appearance."""
    accounted = {(c.probe, c.order) for c in curves}
    accounted |= {(c.probe, c.order) for c in corrections if c.kind == "too_few_points"}
    if not _may_lack_record(rows, orders, keep, corrections, accounted):
        return []
    out = []
    for probe, order_n in df[["probe", "order"]].drop_duplicates().itertuples(index=False):
        pair = (str(probe), int(order_n))
        if pair not in accounted:
            out.append(Correction(
                "too_few_points", pair[0], pair[1], None, None, (),
                f"probe {pair[0]} order {pair[1]}: no curve kept, all its rows were missing "
                "or in dropped segments.",
            ))
    return out


def _may_lack_record(
    rows: _Rows, orders: NDArray[np.int64], keep: NDArray[np.bool_],
    corrections: list[Correction], accounted: set[tuple[str, int]],
) -> bool:
    """Whether some probe/order might have neither a curve nor a ``too_few_points`` record.

    Every probe/order with a row in a kept segment gets one of the two, so only those with
    missing rows (their ``missing_dropped`` records) or rows in dropped segments can lack
    both; this spares the scan of every row of the record in the usual case.
    """
    if (rows.probe < 0).any():  # a missing probe name (user-built Run): take the long way
        return True
    pairs = {(c.probe, c.order) for c in corrections if c.kind == "missing_dropped"}
    if not keep.all():
        key = rows.probe[~keep] * orders.size + np.searchsorted(orders, rows.order[~keep])
        for k in np.unique(key):
            pairs.add((str(rows.probe_names[k // orders.size]), int(orders[k % orders.size])))
    return not pairs <= accounted


def condition(
    run: Run,
    *,
    slow_roll: SlowRollOption = "auto",
    despike: bool = True,
    spike_threshold: float = 6.0,
    min_points: int = 5,
    segment_tolerance_rpm: float | None = None,
) -> ConditionedRun:
    """Condition a run-up or coastdown record into per-segment curves.

    Parameters
    ----------
    run
        The imported record.
    slow_roll
        ``"auto"`` (window per curve, :func:`auto_slow_roll_window`), ``"off"`` (no
        compensation) or an explicit ``(low_rpm, high_rpm)`` window, inclusive.
    despike
        Remove isolated spikes (:func:`find_spikes`).
    spike_threshold
        Spike threshold in robust noise sigmas.
    min_points
        Minimum distinct speeds of a segment and of a curve.
    segment_tolerance_rpm
        Reversal hysteresis of :func:`split_segments`; default
        :func:`default_segment_tolerance_rpm` of the record.

    Returns
    -------
    ConditionedRun
        Curves sorted by ascending speed (coastdowns reversed), compensated response =
        raw response minus the slow-roll vector (vector subtraction, common practice).

    Raises
    ------
    DataFormatError
        For invalid options, a record without any valid row, or an explicit slow-roll
        window holding fewer than 2 points of a curve.

    Notes
    -----
    The curves of a large record (:data:`PARALLEL_MIN_ROWS` rows or more) are conditioned
    in parallel threads; each curve is computed on its own, so the result is the same.
    """
    _check_options(slow_roll, spike_threshold, min_points)
    df = run.samples
    time_all = df["time_s"].to_numpy()
    if _all_finite(time_all) and np.any(time_all[1:] < time_all[:-1]):
        df = df.iloc[np.argsort(time_all, kind="stable")].reset_index(drop=True)
    bad, corrections = _missing(df)
    valid = _valid_rows(df, bad)
    if valid.speed.size == 0:
        raise DataFormatError("no row has a speed, amplitude and phase; nothing to condition")
    tol = _check_tolerance(valid.speed, segment_tolerance_rpm)
    default_direction = run.metadata.direction or "startup"
    label, segments, seg_corr = _segments(valid, tol, min_points, default_direction)
    corrections += seg_corr

    probe_code, probe_names = valid.probe, valid.probe_names
    if valid.order.min() == valid.order.max():  # one order (the usual 1X record)
        orders, order_idx = valid.order[:1], 0
    else:
        orders = np.sort(pd.unique(valid.order))
        order_idx = np.searchsorted(orders, valid.order)
    n_seg = max(len(segments), 1)
    # key = (probe_code * orders.size + order_idx) * n_seg + label, built in place
    key = probe_code * orders.size
    key += order_idx
    key *= n_seg
    key += label
    keep = label >= 0
    if not keep.all():
        key[~keep] = -1  # rows of dropped segments belong to no curve

    options = _CurveOptions(slow_roll, despike, spike_threshold, min_points)
    jobs = [
        _CurveJob(
            str(probe_names[k // n_seg // orders.size]),
            int(orders[(k // n_seg) % orders.size]),
            segments[k % n_seg],
            idx,
        )
        for k, idx in _curve_rows(key, valid.speed)
    ]
    curves: list[Curve] = []
    warnings: list[str] = []
    for curve_corrections, curve_warnings, curve in _map_curves(valid, jobs, options):
        corrections += curve_corrections
        warnings += curve_warnings
        if curve is not None:
            curves.append(curve)

    corrections += _no_curve_records(df, valid, orders, keep, corrections, curves)
    if not curves:
        warnings.append("No curve kept: every probe and segment had too few valid points.")
    settings = (
        ("slow_roll", str(slow_roll)),
        ("despike", str(despike)),
        ("spike_threshold", str(spike_threshold)),
        ("min_points", str(min_points)),
        ("segment_tolerance_rpm", str(segment_tolerance_rpm)),
        ("segment_tolerance_rpm_used", f"{tol:.6g}"),
    )
    return ConditionedRun(
        run.metadata, segments, tuple(curves), tuple(corrections), tuple(warnings), settings
    )
