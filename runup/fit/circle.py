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
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ..errors import FitError
from .levenberg_marquardt import least_squares_batch
from .models import amplification_factor_from_damping

__all__ = ["CircleFit", "fit_circle", "fit_circles", "circle_fit", "circle_fits", "circle_fit_damping", "damping_from_point_pair"]

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
    Regression*, 2010, sec. 5.9) started geometric refinement (least squares on
    ``|p_i - c| - R``, Levenberg–Marquardt, :mod:`runup.fit.levenberg_marquardt`).

    Returns
    -------
    (center, radius)

    Raises
    ------
    FitError
        Fewer than 3 points, coincident points, or points on a straight line.
    """
    p = np.asarray(points, dtype=complex)
    if p.size < 3:
        raise FitError("a circle needs at least 3 points")
    center, radius, why = fit_circles(p[None, :])
    if why[0]:
        raise FitError(f"circle fit: {why[0]}")
    return complex(center[0]), float(radius[0])


def fit_circles(
    points: ArrayLike, valid: ArrayLike | None = None
) -> tuple[NDArray[np.complex128], NDArray[np.float64], list[str]]:
    """:func:`fit_circle` of each row of ``points`` (shape ``(B, m)``) at once.

    ``valid`` (boolean, same shape; default all) marks the points of each row that take
    part; the others (padding of shorter rows) contribute nothing: their rows of the
    algebraic design matrix and their residuals are zero.  Each row needs 3 valid points.

    Returns
    -------
    (centers, radii, failures)
        Arrays of shape ``(B,)`` (NaN where a row failed) and, per row, an empty string or
        why the fit failed.
    """
    p = np.asarray(points, dtype=complex)
    w = np.ones(p.shape) if valid is None else np.asarray(valid, dtype=float)
    p = np.where(w > 0, p, 0.0)  # padding takes no part, whatever it holds
    count = w.sum(axis=1, keepdims=True)
    mean = (p * w).sum(axis=1, keepdims=True) / np.maximum(count, 1.0)
    x, y = (p - mean).real * w, (p - mean).imag * w
    z = x * x + y * y
    zmean = z.sum(axis=1, keepdims=True) / np.maximum(count, 1.0)
    why = [
        "a circle needs at least 3 points" if n < 3 else ("" if zm > 0 else "all points coincide")
        for n, zm in zip(count[:, 0], zmean[:, 0], strict=True)
    ]
    root = np.sqrt(np.where(zmean > 0, zmean, 1.0))
    z0 = (z - zmean) / (2.0 * root) * w
    _, _, vt = np.linalg.svd(np.stack([z0, x, y], axis=2), full_matrices=False)
    a = vt[:, -1, :]
    a0 = a[:, 0] / (2.0 * root[:, 0])
    a3 = -zmean[:, 0] * a0
    line = np.abs(a0) < 1e-300
    why = [w_ or ("points lie on a straight line" if bad else "") for w_, bad in zip(why, line, strict=True)]
    a0 = np.where(line, 1.0, a0)
    cx, cy = -a[:, 1] / (2.0 * a0), -a[:, 2] / (2.0 * a0)
    radius = np.sqrt(np.maximum(a[:, 1] ** 2 + a[:, 2] ** 2 - 4.0 * a0 * a3, 0.0)) / (2.0 * np.abs(a0))

    def residual(q: NDArray[np.float64], rows: NDArray[np.bool_]) -> NDArray[np.float64]:
        return (np.hypot(x[rows] - q[:, [0]], y[rows] - q[:, [1]]) - q[:, [2]]) * w[rows]

    def jacobian(q: NDArray[np.float64], rows: NDArray[np.bool_]) -> NDArray[np.float64]:
        dx, dy = x[rows] - q[:, [0]], y[rows] - q[:, [1]]
        d = np.maximum(np.hypot(dx, dy), np.finfo(float).tiny)
        return np.stack([-dx / d, -dy / d, -np.ones_like(d)], axis=2) * w[rows][..., None]

    sol = least_squares_batch(residual, jacobian, np.column_stack([cx, cy, radius]))
    failed = np.array([bool(w_) for w_ in why]) | ~np.all(np.isfinite(sol.x), axis=1)
    center = np.where(failed, np.nan, sol.x[:, 0] + 1j * sol.x[:, 1] + mean[:, 0])
    radius = np.where(failed, np.nan, np.abs(sol.x[:, 2]))
    why = [w_ or ("no finite solution" if f else "") for w_, f in zip(why, failed, strict=True)]
    return center, radius, why


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
    """Angles wrapped to [-pi, pi)."""
    return np.remainder(angle + math.pi, 2.0 * math.pi) - math.pi


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


def _padded(windows: Sequence[tuple[ArrayLike, ArrayLike]]) -> tuple[NDArray, NDArray, NDArray]:
    """Windows of different lengths as ``(B, m)`` arrays padded with each row's last point,
    and the mask of real points (edge padding leaves unwrapped angles and ranges unchanged)."""
    sizes = [np.size(s) for s, _ in windows]
    m = max(sizes)
    speed = np.empty((len(windows), m))
    x = np.empty((len(windows), m), dtype=complex)
    valid = np.zeros((len(windows), m), dtype=bool)
    for b, ((s, v), n) in enumerate(zip(windows, sizes, strict=True)):
        speed[b, :n], x[b, :n], valid[b, :n] = s, v, True
        speed[b, n:], x[b, n:] = speed[b, n - 1], x[b, n - 1]
    return speed, x, valid


def _circle_modal(
    speed: NDArray[np.float64], y: NDArray[np.complex128], valid: NDArray[np.bool_],
    ref: NDArray[np.float64], zeta_guess: NDArray[np.float64],
) -> tuple[NDArray, NDArray, NDArray, list[str]]:
    """Steps 1-2 of the module notes for each row of ``y = X / (speed / ref)``, shape ``(B, m)``.

    Returns ``(center, radius, (Omega_n, zeta, alpha) of shape (B, 3), failures)``.
    """
    center, radius, failure = fit_circles(y, valid)
    w = valid.astype(float)
    psi = np.angle(y - np.where(np.isfinite(center), center, 0.0)[:, None])

    def residual(q: NDArray[np.float64], rows: NDArray[np.bool_]) -> NDArray[np.float64]:
        return _wrap(psi[rows] - q[:, [2]] + 2.0 * _phase_lag_rad(speed[rows] / q[:, [0]], q[:, [1]])) * w[rows]

    def jacobian(q: NDArray[np.float64], rows: NDArray[np.bool_]) -> NDArray[np.float64]:
        d_wn, d_zeta = phase_lag_derivatives(speed[rows], q[:, [0]], q[:, [1]])
        return np.stack([2.0 * d_wn, 2.0 * d_zeta, -np.ones_like(d_wn)], axis=2) * w[rows][..., None]

    z0 = np.clip(zeta_guess, 1e-3, 0.6)
    turn = np.exp(1j * (psi + 2.0 * _phase_lag_rad(speed / ref[:, None], z0[:, None])))
    alpha0 = np.angle((turn * w).sum(axis=1))
    lo = np.column_stack([speed.min(axis=1) * 0.5, np.full(ref.size, 1e-4), np.full(ref.size, -4 * math.pi)])
    hi = np.column_stack([speed.max(axis=1) * 2.0, np.full(ref.size, 0.7), np.full(ref.size, 4 * math.pi)])
    sol = least_squares_batch(residual, jacobian, np.column_stack([ref, z0, alpha0]), lower=lo, upper=hi)
    turned = np.ptp(np.unwrap(psi, axis=1), axis=1)
    for b in range(ref.size):
        if not failure[b] and (not sol.success[b] or turned[b] < math.radians(60.0)):
            failure[b] = (
                f"the points turn only {math.degrees(turned[b]):.0f} deg about the centre; "
                "need a resonance inside the window"
            )
    return center, radius, sol.x, failure


def circle_fit_damping(
    speed_rpm: ArrayLike,
    responses_um_pp: ArrayLike,
    *,
    natural_speed_guess_rpm: float,
    damping_ratio_guess: float,
) -> NDArray[np.float64]:
    """Damping ratio of :func:`circle_fit` for each row of ``responses_um_pp`` at once.

    ``responses_um_pp`` has shape ``(B, m)``, one set of vectors at the speeds
    ``speed_rpm`` (shape ``(m,)``, ``m >= 4``) per row, e.g. bootstrap replicates.  Rows
    where the fit fails give NaN.
    """
    x = np.atleast_2d(np.asarray(responses_um_pp, dtype=complex))
    speed = np.broadcast_to(np.asarray(speed_rpm, dtype=float), x.shape)
    if speed.shape[1] < 4:
        return np.full(x.shape[0], np.nan)
    ref = np.full(x.shape[0], float(natural_speed_guess_rpm))
    _, _, q, failure = _circle_modal(speed, x / (speed / ref[:, None]), np.ones(x.shape, dtype=bool), ref,
                                     np.full(x.shape[0], float(damping_ratio_guess)))
    return np.where([not f for f in failure], q[:, 1], np.nan)


def circle_fits(
    windows: Sequence[tuple[ArrayLike, ArrayLike]],
    *,
    natural_speed_guesses_rpm: Sequence[float],
    damping_ratio_guesses: Sequence[float],
) -> list[CircleFit | FitError]:
    """:func:`circle_fit` of several windows (e.g. one per probe) at once.

    Parameters
    ----------
    windows
        ``(speed_rpm, response_um_pp)`` per fit, of any lengths.
    natural_speed_guesses_rpm, damping_ratio_guesses
        Starting values per fit.

    Returns
    -------
    list
        Per window its :class:`CircleFit`, or the :class:`~runup.errors.FitError` saying
        why it failed.
    """
    out: list[CircleFit | FitError | None] = [None] * len(windows)
    todo = []
    for i, (s, _) in enumerate(windows):
        if np.size(s) < 4:
            out[i] = FitError(f"circle fit needs at least 4 points, got {np.size(s)}")
        else:
            todo.append(i)
    if todo:
        speed, x, valid = _padded([windows[i] for i in todo])
        ref = np.array([float(natural_speed_guesses_rpm[i]) for i in todo])
        y = x / (speed / ref[:, None])
        center, radius, q, failure = _circle_modal(
            speed, y, valid, ref, np.array([float(damping_ratio_guesses[i]) for i in todo])
        )
        for b, i in enumerate(todo):
            if failure[b]:
                out[i] = FitError(f"circle fit: {failure[b]}")
            else:
                n = int(valid[b].sum())
                out[i] = _finish(speed[b, :n], y[b, :n], complex(center[b]), float(radius[b]), q[b], float(ref[b]))
    return out  # type: ignore[return-value]


def _finish(
    speed: NDArray[np.float64], y: NDArray[np.complex128], center: complex, radius: float,
    q: NDArray[np.float64], ref: float,
) -> CircleFit:
    """Steps 3-4 of the module notes on one fitted window."""
    wn, zeta, alpha = (float(v) for v in q)
    psi = np.angle(y - center)
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
    result = circle_fits(
        [(np.asarray(speed_rpm, dtype=float), np.asarray(response_um_pp, dtype=complex))],
        natural_speed_guesses_rpm=[natural_speed_guess_rpm],
        damping_ratio_guesses=[damping_ratio_guess],
    )[0]
    if isinstance(result, FitError):
        raise result
    return result
