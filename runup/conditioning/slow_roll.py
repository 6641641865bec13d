"""Slow-roll (runout) compensation: the vector to subtract, explicit or automatic window.

Rules, parameters and sources: ``docs/conditioning.md``, section 6.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ..errors import DataFormatError
from ..run import SlowRoll
from .despike import _noise_sigma

__all__ = ["auto_slow_roll_window", "SlowRollChoice", "SlowRollOption"]

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

