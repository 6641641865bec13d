"""Response models of unbalance-forced modes: pure formulas, no fitting.

The 1X response of one mode to a rotating unbalance (the Jeffcott rotor, or one mode of
a flexible rotor in modal coordinates) is, with ``r = Omega / Omega_n``,

.. math::  X(\\Omega) = A \\, \\frac{r^2}{1 - r^2 + 2 j \\zeta r}

(Rao, *Mechanical Vibrations*, 5th ed., 2011, sec. 3.7 "Response of a system under
rotating unbalance"; Childs, *Turbomachinery Rotordynamics*, 1993, ch. 3).  ``A`` is the
complex high-speed asymptote (the response well above the mode, for a Jeffcott rotor the
eccentricity with the unbalance's angle).  With runup's phase convention the measured
complex 1X vector equals ``X`` (see :mod:`runup.units`); the phase lag is
``atan2(2 zeta r, 1 - r**2)`` and grows through 90 degrees at ``r = 1``.

Several modes and out-of-band effects add up:

.. math::  X(\\Omega) = \\sum_k A_k \\frac{r_k^2}{1 - r_k^2 + 2 j \\zeta_k r_k}
           + B + C \\, s^2, \\qquad s = \\Omega / \\Omega_{ref}

``B`` takes residual runout and modes well below the band (each tends to ``-A`` there),
``C s^2`` modes well above it (each tends to ``A r^2``): the residual terms of modal
analysis (Ewins, *Modal Testing*, 2nd ed., 2000, sec. 4.3) written for forcing that grows
with the square of speed.
"""

from __future__ import annotations

import math

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy.optimize import brentq

__all__ = [
    "unbalance_response",
    "peak_speed_ratio",
    "half_power_speed_ratios",
    "amplification_factor_from_damping",
    "damping_from_amplification_factor",
    "critically_damped_limit_ratio",
]


def unbalance_response(
    speed_rpm: ArrayLike,
    *,
    natural_speed_rpm: float,
    damping_ratio: float,
    modal_constant: complex = 1.0,
) -> NDArray[np.complex128]:
    """Complex 1X response of one unbalance-forced mode.

    Parameters
    ----------
    speed_rpm
        Shaft speeds, rpm.
    natural_speed_rpm
        Undamped natural speed ``Omega_n``, rpm.
    damping_ratio
        Modal damping ratio ``zeta`` (viscous), dimensionless.
    modal_constant
        Complex high-speed asymptote ``A``, in the response's unit (um pp).

    Returns
    -------
    numpy.ndarray of complex
        ``A r^2 / (1 - r^2 + 2 j zeta r)`` with ``r = speed / natural speed``.
    """
    r = np.asarray(speed_rpm, dtype=float) / natural_speed_rpm
    return modal_constant * r**2 / (1.0 - r**2 + 2j * damping_ratio * r)


def peak_speed_ratio(damping_ratio: float) -> float:
    """Speed ratio of the amplitude peak, ``1 / sqrt(1 - 2 zeta^2)``.

    Maximising ``|X|`` of the unbalance response (Rao, 2011, eq. 3.82). Returns ``nan`` for
    ``zeta >= 1/sqrt(2)``, where the amplitude rises monotonically to its asymptote.
    """
    z2 = damping_ratio**2
    return 1.0 / math.sqrt(1.0 - 2.0 * z2) if 2.0 * z2 < 1.0 else math.nan


def half_power_speed_ratios(damping_ratio: float) -> tuple[float, float]:
    """Speed ratios where the unbalance response is ``1/sqrt(2)`` of its peak.

    Setting ``|X|^2`` to half its peak value ``1/(4 zeta^2 (1 - zeta^2))`` and solving for
    ``u = 1/r^2`` gives ``u = 1 - 2 zeta^2 +- 2 zeta sqrt(1 - zeta^2)`` (derived from the
    model above), so

    ``r_1,2 = 1 / sqrt(1 - 2 zeta^2 +- 2 zeta sqrt(1 - zeta^2))``.

    Returns
    -------
    (r_lower, r_upper)
        ``r_upper`` is ``nan`` when ``1 - 2 zeta^2 - 2 zeta sqrt(1 - zeta^2) <= 0``, i.e. for
        ``zeta >= sin(22.5 deg) = 0.3827``: the response never falls back to half power above
        the peak.  Both are ``nan`` for ``zeta >= 1/sqrt(2)`` (no peak).
    """
    z = damping_ratio
    if not 0.0 < z < 1.0 / math.sqrt(2.0):
        return (math.nan, math.nan)
    root = 2.0 * z * math.sqrt(1.0 - z * z)
    base = 1.0 - 2.0 * z * z
    lower = 1.0 / math.sqrt(base + root)
    upper = 1.0 / math.sqrt(base - root) if base - root > 0.0 else math.nan
    return (lower, upper)


def amplification_factor_from_damping(damping_ratio: float) -> float:
    """API 684 half-power amplification factor of one unbalance-forced mode.

    ``AF = r_peak / (r_upper - r_lower)`` from :func:`peak_speed_ratio` and
    :func:`half_power_speed_ratios`: the amplification factor the API 684 half-power method
    (peak speed over half-power bandwidth) gives on the noise-free response.  It expands as
    ``1/(2 zeta) - 2 zeta + O(zeta^3)``, not ``1/(2 zeta)``.

    Returns ``nan`` where the upper half-power point does not exist (``zeta >= 0.3827``).
    """
    lower, upper = half_power_speed_ratios(damping_ratio)
    if not math.isfinite(upper):
        return math.nan
    return peak_speed_ratio(damping_ratio) / (upper - lower)


#: ``zeta`` at which the upper half-power point vanishes, ``sin(pi/8)`` (derived above).
critically_damped_limit_ratio = math.sin(math.pi / 8.0)


def damping_from_amplification_factor(amplification_factor: float) -> float:
    """Inverse of :func:`amplification_factor_from_damping` (root bracketing, Brent 1973).

    Parameters
    ----------
    amplification_factor
        API half-power AF, positive (it tends to 0 as ``zeta`` tends to 0.3827, where the
        upper half-power point runs off to infinite speed).

    Returns
    -------
    float
        ``zeta`` with ``amplification_factor_from_damping(zeta) == amplification_factor``.
    """
    lo, hi = 1e-6, critically_damped_limit_ratio - 1e-9
    af_hi = amplification_factor_from_damping(hi)
    if not amplification_factor > af_hi:
        raise ValueError(
            f"amplification factor {amplification_factor!r} is below {af_hi:.3f}, the smallest "
            "an unbalance-forced mode with both half-power points can have"
        )
    return brentq(lambda z: amplification_factor_from_damping(z) - amplification_factor, lo, hi, xtol=1e-14)
