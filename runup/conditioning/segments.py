"""Monotonic speed segments of a record (startup / coastdown), with hysteresis.

Rules, parameters and sources: ``docs/conditioning.md``, section 2.
"""

from __future__ import annotations

import math

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ..errors import DataFormatError

__all__ = ["split_segments", "default_segment_tolerance_rpm"]

#: Reversal tolerance, part 1: fraction of the record's speed span.
TOLERANCE_SPAN_FRACTION = 0.02
#: Reversal tolerance, part 2: multiple of the robust speed-jitter scale.  The range of
#: N Gaussian samples is about 2*sqrt(2 ln N) sigma, 9.3 sigma for N = 50 000.
TOLERANCE_JITTER_MULTIPLE = 10.0
#: Segments spanning less than this fraction of the record's speed range are dropped.
#: Consistency of the MAD with the standard deviation of a Gaussian (Rousseeuw & Croux 1993).
_MAD_TO_SIGMA = 1.4826


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

