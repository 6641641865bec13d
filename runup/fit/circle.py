"""Kennedy–Pancu circle fit of one unbalance-forced mode.

For unbalance forcing the response ``X = A r^2 / D`` with ``D = 1 - r^2 + 2 j zeta r`` is
not a circle, but ``Y = X / r`` (the response divided by speed) is: it has the form of the
viscous *mobility* of a single mode, which traces an exact circle (Kennedy & Pancu,
"Use of vectors in vibration measurement and analysis", J. Aeronautical Sciences 14, 1947;
Ewins, *Modal Testing: Theory, Practice and Application*, 2nd ed., 2000, sec. 4.3.2).

Writing ``Y = A r / D`` one finds the centre ``c = -j A / (4 zeta)`` and

.. math::  Y - c = \\frac{j A \\bar D}{4 \\zeta D}, \\qquad
           \\arg(Y - c) = \\arg A + 90^\\circ - 2 \\varphi(r), \\quad
           \\varphi = \\operatorname{atan2}(2\\zeta r, 1 - r^2)

(derived; it is Ewins' relation ``tan(theta/2) = (1 - (w/w_r)^2) / (2 zeta w/w_r)`` for the
angle ``theta`` seen from the centre between a point and the resonance point).  The fit:

1. algebraic circle fit of the points ``Y_i`` (Taubin, "Estimation of planar curves,
   surfaces and nonplanar space curves...", IEEE PAMI 13, 1991), refined geometrically
   (least squares on the distances to the circle; Levenberg–Marquardt);
2. natural speed and damping by least squares on the angles of the points about the fitted
   centre, using the relation above with all points rather than finite differences of the
   sweep rate (the maximum of ``d theta / d w^2`` is the natural frequency in Ewins' text;
   the least-squares form uses the same relation and is less sensitive to noise);
3. modal constant from the diameter: ``|A| = 4 zeta R``, ``arg A = alpha - 90 deg``;
4. Ewins' damping estimates from pairs of points below (b) and above (a) resonance,
   ``zeta = (w_a^2 - w_b^2) / (2 w_r (w_a tan(theta_a/2) + w_b tan(theta_b/2)))``, kept as
   a consistency check (their spread).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy.optimize import least_squares

from ..errors import FitError
from .models import amplification_factor_from_damping

__all__ = ["CircleFit", "fit_circle", "circle_fit", "damping_from_point_pair"]

#: Points on each side of resonance used for Ewins' pairwise damping estimates.
_MAX_PAIR_POINTS = 30


@dataclass(frozen=True)
class CircleFit:
    """Result of the Kennedy–Pancu circle fit around one resonance.

    Attributes
    ----------
    natural_speed_rpm
        Undamped natural speed ``Omega_n`` of the mode, rpm.
    damping_ratio
        Viscous modal damping ratio.
    pair_damping_spread
        Relative spread (interquartile range over median) of Ewins' pairwise damping
        estimates; large values mean the points do not follow one circle (``nan`` with
        fewer than two pairs).
    modal_constant_um_pp
        Complex high-speed asymptote ``A`` of the mode (um pp).
    amplification_factor
        API half-power AF of the fitted single mode,
        :func:`~runup.fit.models.amplification_factor_from_damping`.
    center_um_pp, radius_um_pp
        Circle in the plane of ``X / (speed / reference_rpm)``.
    reference_rpm
        Speed used to scale ``X / r``.
    residual_rms
        RMS distance of the points from the circle relative to its radius.
    n_points, low_rpm, high_rpm
        Points used and their speed window.
    """

    natural_speed_rpm: float
    damping_ratio: float
    pair_damping_spread: float
    modal_constant_um_pp: complex
    amplification_factor: float
    center_um_pp: complex
    radius_um_pp: float
    reference_rpm: float
    residual_rms: float
    n_points: int
    low_rpm: float
    high_rpm: float


def fit_circle(points: ArrayLike) -> tuple[complex, float]:
    """Least-squares circle through complex points.

    Taubin's algebraic fit (1991, via the SVD form of Chernov, *Circular and Linear
    Regression*, 2010, sec. 5.9) started geometric refinement (``scipy.optimize.least_squares``
    on ``|p_i - c| - R``).

    Returns
    -------
    (center, radius)
    """
    p = np.asarray(points, dtype=complex)
    if p.size < 3:
        raise FitError("a circle needs at least 3 points")
    mean = p.mean()
    x, y = (p - mean).real, (p - mean).imag
    z = x * x + y * y
    zmean = z.mean()
    if not zmean > 0:
        raise FitError("circle fit: all points coincide")
    z0 = (z - zmean) / (2.0 * math.sqrt(zmean))
    _, _, vt = np.linalg.svd(np.column_stack([z0, x, y]), full_matrices=False)
    a = vt[-1].copy()
    a0 = a[0] / (2.0 * math.sqrt(zmean))
    a3 = -zmean * a0
    if abs(a0) < 1e-300:
        raise FitError("circle fit: points lie on a straight line")
    cx, cy = -a[1] / (2.0 * a0), -a[2] / (2.0 * a0)
    radius = math.sqrt(max(a[1] ** 2 + a[2] ** 2 - 4.0 * a0 * a3, 0.0)) / (2.0 * abs(a0))
    start = np.array([cx, cy, radius])

    def residual(q: NDArray[np.float64]) -> NDArray[np.float64]:
        return np.hypot(x - q[0], y - q[1]) - q[2]

    def jacobian(q: NDArray[np.float64]) -> NDArray[np.float64]:
        dx, dy = x - q[0], y - q[1]
        d = np.maximum(np.hypot(dx, dy), np.finfo(float).tiny)
        return np.column_stack([-dx / d, -dy / d, -np.ones_like(d)])

    sol = least_squares(residual, start, jac=jacobian, method="lm")
    cx, cy, radius = sol.x
    return complex(cx, cy) + mean, float(abs(radius))


def _phase_lag_rad(r: NDArray[np.float64], zeta: float) -> NDArray[np.float64]:
    return np.arctan2(2.0 * zeta * r, 1.0 - r * r)


def phase_lag_derivatives(
    speed_rpm: NDArray[np.float64], natural_speed_rpm: float, zeta: float
) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """``d phi / d Omega_n`` (1/rpm) and ``d phi / d zeta`` of ``phi = atan2(2 zeta r, 1 - r^2)``.

    With ``u = 1 - r^2``, ``v = 2 zeta r``, ``r = Omega / Omega_n`` (derived):
    ``d phi / d zeta = 2 r u / (u^2 + v^2)`` and
    ``d phi / d Omega_n = -2 zeta r (1 + r^2) / (Omega_n (u^2 + v^2))``.
    """
    r = speed_rpm / natural_speed_rpm
    u, v = 1.0 - r * r, 2.0 * zeta * r
    den = u * u + v * v
    return -2.0 * zeta * r * (1.0 + r * r) / (natural_speed_rpm * den), 2.0 * r * u / den


def _wrap(angle: NDArray[np.float64]) -> NDArray[np.float64]:
    return np.angle(np.exp(1j * angle))


def damping_from_point_pair(
    *, omega_a: float, theta_a_rad: float, omega_b: float, theta_b_rad: float, omega_r: float
) -> float:
    """Ewins' viscous damping estimate from one point above (a) and one below (b) resonance.

    ``zeta = (w_a^2 - w_b^2) / (2 w_r (w_a tan(theta_a/2) + w_b tan(theta_b/2)))`` with
    ``theta`` the angle, seen from the circle centre, between the point and the resonance
    point (Ewins, 2000, eq. 4.9 for viscous damping of the mobility circle — from memory).
    Any consistent unit of angular speed may be used.
    """
    return (omega_a**2 - omega_b**2) / (
        2.0 * omega_r * (omega_a * math.tan(theta_a_rad / 2.0) + omega_b * math.tan(theta_b_rad / 2.0))
    )


def circle_fit(
    speed_rpm: ArrayLike,
    response_um_pp: ArrayLike,
    *,
    natural_speed_guess_rpm: float,
    damping_ratio_guess: float,
) -> CircleFit:
    """Kennedy–Pancu circle fit of one unbalance-forced mode (see module notes).

    Parameters
    ----------
    speed_rpm
        Increasing speeds of the points to fit (the caller chooses the window, typically
        the half-power band and somewhat beyond), rpm.
    response_um_pp
        Complex 1X vectors at those speeds (runup's convention, :mod:`runup.units`).
    natural_speed_guess_rpm, damping_ratio_guess
        Starting values, e.g. the peak speed and the damping implied by half-power AF.

    Returns
    -------
    CircleFit

    Raises
    ------
    FitError
        With fewer than 4 points, or when the points do not turn about the centre.
    """
    speed = np.asarray(speed_rpm, dtype=float)
    x = np.asarray(response_um_pp, dtype=complex)
    if speed.size < 4:
        raise FitError(f"circle fit needs at least 4 points, got {speed.size}")
    ref = float(natural_speed_guess_rpm)
    y = x / (speed / ref)
    center, radius = fit_circle(y)
    psi = np.angle(y - center)

    def residual(q: NDArray[np.float64]) -> NDArray[np.float64]:
        wn, zeta, alpha = q
        return _wrap(psi - alpha + 2.0 * _phase_lag_rad(speed / wn, zeta))

    def jacobian(q: NDArray[np.float64]) -> NDArray[np.float64]:
        d_wn, d_zeta = phase_lag_derivatives(speed, q[0], q[1])
        return np.column_stack([2.0 * d_wn, 2.0 * d_zeta, -np.ones_like(d_wn)])

    z0 = float(np.clip(damping_ratio_guess, 1e-3, 0.6))
    alpha0 = float(np.angle(np.mean(np.exp(1j * (psi + 2.0 * _phase_lag_rad(speed / ref, z0))))))
    lo = [speed.min() * 0.5, 1e-4, -4 * math.pi]
    hi = [speed.max() * 2.0, 0.7, 4 * math.pi]
    sol = least_squares(residual, [ref, z0, alpha0], jac=jacobian, bounds=(lo, hi), x_scale=[ref * 0.01, z0, 0.1])
    wn, zeta, alpha = (float(v) for v in sol.x)
    turned = float(np.ptp(np.unwrap(psi)))
    if not sol.success or turned < math.radians(60.0):
        raise FitError(
            f"circle fit: the points turn only {math.degrees(turned):.0f} deg about the centre; "
            "need a resonance inside the window"
        )
    # modal constant from the diameter: R = |A| (ref/wn) / (4 zeta), arg A = alpha - 90 deg
    modal_constant = radius * 4.0 * zeta * (wn / ref) * np.exp(1j * (alpha - math.pi / 2.0))
    resid = np.abs(y - center) - radius

    # Ewins' pairwise damping (consistency): theta measured from the resonance point,
    # whose angle about the centre is alpha - 2 * 90 deg.  Vectorised over all pairs of at
    # most _MAX_PAIR_POINTS points each side (nearest the resonance).
    theta = np.abs(_wrap(psi - (alpha - math.pi)))
    ok = theta < math.radians(170.0)
    below = np.nonzero((speed < wn) & ok)[0][-_MAX_PAIR_POINTS:]
    above = np.nonzero((speed > wn) & ok)[0][:_MAX_PAIR_POINTS]
    if below.size and above.size:
        wa, wb = speed[above][:, None], speed[below][None, :]
        ta, tb = np.tan(theta[above] / 2.0)[:, None], np.tan(theta[below] / 2.0)[None, :]
        pairs = ((wa**2 - wb**2) / (2.0 * wn * (wa * ta + wb * tb))).ravel()
    else:
        pairs = np.empty(0)
    if pairs.size >= 2:
        q1, med, q3 = np.percentile(pairs, [25, 50, 75])
        spread = float((q3 - q1) / med) if med > 0 else math.nan
    else:
        spread = math.nan
    return CircleFit(
        natural_speed_rpm=wn,
        damping_ratio=zeta,
        pair_damping_spread=spread,
        modal_constant_um_pp=complex(modal_constant),
        amplification_factor=amplification_factor_from_damping(zeta),
        center_um_pp=complex(center),
        radius_um_pp=radius,
        reference_rpm=ref,
        residual_rms=float(np.sqrt(np.mean(resid**2)) / radius) if radius > 0 else math.nan,
        n_points=int(speed.size),
        low_rpm=float(speed.min()),
        high_rpm=float(speed.max()),
    )
