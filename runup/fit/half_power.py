"""API 684 half-power amplification factor on a measured amplitude curve.

The half-power (peak amplitude) method of API RP 684 (2nd ed., 2005, sec. 2.8 — from
memory: confirm the clause against the edition at hand) takes the speed of peak response
``N_c`` and the speeds ``N_1 < N_c < N_2`` where the amplitude is 0.707 of the peak:

.. math::  AF = \\frac{N_c}{N_2 - N_1}

Crossing speeds are interpolated linearly between the two samples that bracket 0.707 of
the peak.  Rules for incomplete data (runup's, documented in ``docs/methods.md``):

* one half-power point missing (the record ends, or a neighbouring mode keeps the
  amplitude up): ``AF = N_c / (2 |N_c - N_found|)`` from the side found, flagged
  ``half_power_one_sided``; a single mode's curve is not symmetric, so this is an
  estimate only;
* neither found: no AF, flagged ``no_half_power_points``;
* peak at the first or last sample: no AF, flagged ``peak_at_range_edge`` (the critical
  may lie outside the record);
* flat peak: flagged ``flat_peak`` when the contiguous band above 0.95 of the peak is more
  than half as wide as the half-power band.  For a single lightly damped mode that ratio is
  ``sqrt(1/0.95**2 - 1) = 0.33`` (the width of a resonance at level ``a`` of its peak scales
  as ``sqrt(1/a**2 - 1)``), so a wider top means two modes or a limited signal.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

__all__ = ["HALF_POWER_LEVEL", "HalfPower", "half_power"]

#: Amplitude ratio of the half-power points, 1/sqrt(2) (API 684 writes 0.707).
HALF_POWER_LEVEL = 1.0 / math.sqrt(2.0)
_FLAT_LEVEL = 0.95
_FLAT_RATIO = 0.5


@dataclass(frozen=True)
class HalfPower:
    """Result of the half-power method on one amplitude curve.

    Attributes
    ----------
    peak_speed_rpm, peak_amplitude_um_pp
        Speed ``N_c`` and amplitude of the highest sample.
    lower_speed_rpm, upper_speed_rpm
        Interpolated half-power speeds ``N_1``, ``N_2``; ``None`` when not found.
    amplification_factor
        ``N_c / (N_2 - N_1)``, or the one-sided estimate; ``None`` when not determinable.
    flags
        Any of ``half_power_one_sided``, ``no_half_power_points``, ``peak_at_range_edge``,
        ``flat_peak``.
    """

    peak_speed_rpm: float
    peak_amplitude_um_pp: float
    lower_speed_rpm: float | None
    upper_speed_rpm: float | None
    amplification_factor: float | None
    flags: tuple[str, ...] = ()

    @property
    def bandwidth_rpm(self) -> float | None:
        """``N_2 - N_1`` when both points exist."""
        if self.lower_speed_rpm is None or self.upper_speed_rpm is None:
            return None
        return self.upper_speed_rpm - self.lower_speed_rpm


def _crossing(speed: np.ndarray, amp: np.ndarray, k: int, stop: int, level: float) -> float | None:
    """Speed where ``amp`` first falls to ``level`` walking from index k toward ``stop``."""
    step = -1 if stop < k else 1
    idx = np.arange(k + step, stop + step, step)
    if idx.size == 0:
        return None
    below = np.nonzero(amp[idx] <= level)[0]
    if below.size == 0:
        return None
    j = int(idx[below[0]])
    i = j - step  # the neighbour still above the level
    a0, a1 = amp[i], amp[j]
    t = (a0 - level) / (a0 - a1) if a0 != a1 else 0.0
    return float(speed[i] + t * (speed[j] - speed[i]))


def half_power(
    speed_rpm: ArrayLike,
    amplitude_um_pp: ArrayLike,
    *,
    peak_index: int | None = None,
    search_from: int | None = None,
    search_to: int | None = None,
) -> HalfPower:
    """API 684 half-power amplification factor of one resonance.

    Parameters
    ----------
    speed_rpm
        Strictly increasing speeds, rpm.
    amplitude_um_pp
        Amplitudes at those speeds (any consistent unit; um pp in runup).
    peak_index
        Index of the resonance peak; default the highest sample in the search range.
    search_from, search_to
        Index range (inclusive) the half-power crossings are searched in, e.g. bounded by
        neighbouring modes; default the whole curve.

    Returns
    -------
    HalfPower
        See the module notes for the rules on missing points and flat peaks.
    """
    speed = np.asarray(speed_rpm, dtype=float)
    amp = np.asarray(amplitude_um_pp, dtype=float)
    if speed.size == 0 or speed.size != amp.size:
        raise ValueError("half_power needs equal, non-empty speed and amplitude arrays")
    lo = 0 if search_from is None else max(0, int(search_from))
    hi = speed.size - 1 if search_to is None else min(speed.size - 1, int(search_to))
    k = lo + int(np.argmax(amp[lo : hi + 1])) if peak_index is None else int(peak_index)
    if not lo <= k <= hi:
        raise ValueError(f"peak index {k} lies outside the search range {lo}-{hi}")
    peak = float(amp[k])
    nc = float(speed[k])
    flags: list[str] = []
    if k in (0, speed.size - 1):
        flags.append("peak_at_range_edge")
        return HalfPower(nc, peak, None, None, None, tuple(flags))

    level = HALF_POWER_LEVEL * peak
    n1 = _crossing(speed, amp, k, lo, level)
    n2 = _crossing(speed, amp, k, hi, level)
    if n1 is not None and n2 is not None:
        af = nc / (n2 - n1)
        f1 = _crossing(speed, amp, k, lo, _FLAT_LEVEL * peak)
        f2 = _crossing(speed, amp, k, hi, _FLAT_LEVEL * peak)
        if f1 is not None and f2 is not None and (f2 - f1) > _FLAT_RATIO * (n2 - n1):
            flags.append("flat_peak")
    elif n1 is not None or n2 is not None:
        found = n1 if n1 is not None else n2
        af = nc / (2.0 * abs(nc - found))
        flags.append("half_power_one_sided")
    else:
        af = None
        flags.append("no_half_power_points")
    return HalfPower(nc, peak, n1, n2, af, tuple(flags))
