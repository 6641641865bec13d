"""Isolated spikes in a curve of complex 1X vectors: a Hampel-type rule.

Rules, parameters and sources: ``docs/conditioning.md``, section 4.
"""

from __future__ import annotations

import functools
import math

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy.ndimage import median_filter

__all__ = ["find_spikes"]

#: Half-width (points) of the moving window of the local noise scale in despiking.
HAMPEL_HALF_WINDOW = 10
#: A spike deviates from its neighbours' interpolation by more than this many times the
#: change across the neighbours.  The peak of a single mode sampled at spacing h (in
#: frequency ratio) scores at most h / (2 zeta), so 2 keeps every mode sampled with at
#: least one point per two half-power bandwidths.
ISOLATION_RATIO = 2.0
#: Median of a Rayleigh variable in units of its per-component standard deviation.
_RAYLEIGH_MEDIAN = math.sqrt(2.0 * math.log(2.0))


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



def _all_finite(values: NDArray[np.float64]) -> bool:
    """Whether every value is finite, usually without a mask: a sum is finite only when
    every term is (a non-finite sum can still be an overflow, so it is checked again)."""
    with np.errstate(invalid="ignore", over="ignore"):  # inf - inf, overflow: checked again
        total = np.add.reduce(values)
    return bool(np.isfinite(total) or np.isfinite(values).all())
