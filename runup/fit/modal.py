"""Least-squares fit of unbalance-forced modes to the complex 1X response of several probes.

Model (see :mod:`runup.fit.models`): for probe ``p`` at speed ``Omega``

.. math::  X_p(\\Omega) = \\sum_k A_{pk} \\frac{r_k^2}{1 - r_k^2 + 2 j \\zeta_k r_k}
           + B_p + C_p s^2, \\qquad r_k = \\Omega/\\Omega_k,\\; s = \\Omega/\\Omega_{ref}

The natural speeds ``Omega_k`` and damping ratios ``zeta_k`` belong to the rotor and are
shared by all probes; each probe has its own complex participations ``A_pk`` and residual
terms ``B_p``, ``C_p``.  The model is linear in ``A, B, C``; those are eliminated by
variable projection (Golub & Pereyra, "The differentiation of pseudo-inverses and
nonlinear least squares problems whose variables separate", SIAM J. Numer. Anal. 10,
1973), leaving a small nonlinear problem in ``(log Omega_k, log zeta_k)`` solved with
``scipy.optimize.least_squares`` (trust-region reflective).

Uncertainty: with complex residuals of equal variance the Gauss–Newton covariance of the
nonlinear parameters is ``s^2 (J^T J)^{-1}``, ``J`` the Jacobian of the projected (stacked
real and imaginary) residual and ``s^2 = SSR / (2N - P)`` with ``P`` all real parameters
(Bates & Watts, *Nonlinear Regression Analysis and Its Applications*, 1988, sec. 2.3;
the projected Jacobian gives the Schur-complement block of the full covariance).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray
from scipy.optimize import least_squares

from ..errors import FitError

__all__ = ["ModeEstimate", "ModalFit", "fit_modes"]


@dataclass(frozen=True)
class ModeEstimate:
    """One mode from :func:`fit_modes`.

    Attributes
    ----------
    natural_speed_rpm, natural_speed_stderr_rpm
        Undamped natural speed and its standard error, rpm.
    damping_ratio, damping_ratio_stderr
        Viscous modal damping ratio and its standard error.
    modal_constants_um_pp
        Complex participation ``A_pk`` per probe, aligned with ``ModalFit.probes``.
    """

    natural_speed_rpm: float
    natural_speed_stderr_rpm: float
    damping_ratio: float
    damping_ratio_stderr: float
    modal_constants_um_pp: tuple[complex, ...]


@dataclass(frozen=True)
class ModalFit:
    """Result of :func:`fit_modes`.

    Attributes
    ----------
    modes
        Fitted modes, ascending natural speed.
    probes
        Probe names, aligned with each mode's ``modal_constants_um_pp``.
    residual_terms_um_pp
        Per probe ``(B_p, C_p)``.
    reference_rpm
        ``Omega_ref`` of the ``C s^2`` term.
    noise_rms_um_pp
        Estimated RMS of the complex residual, ``sqrt(SSR / (N - P/2))``.
    n_points
        Complex samples fitted (all probes; binned points count as the samples they average).
    low_rpm, high_rpm
        Speed window.
    converged
        Whether the optimiser reported convergence.
    ssr_um2
        Sum of squared complex residuals (weighted), um^2.
    n_parameters
        Real parameters fitted (nonlinear and linear).
    """

    modes: tuple[ModeEstimate, ...]
    probes: tuple[str, ...]
    residual_terms_um_pp: tuple[tuple[complex, complex], ...]
    reference_rpm: float
    noise_rms_um_pp: float
    n_points: int
    low_rpm: float
    high_rpm: float
    converged: bool
    ssr_um2: float = math.nan
    n_parameters: int = 0

    def predict(self, probe: str, speed_rpm: NDArray[np.float64]) -> NDArray[np.complex128]:
        """Fitted complex response of one probe at the given speeds (um pp)."""
        p = self.probes.index(probe)
        s = np.asarray(speed_rpm, dtype=float)
        out = np.zeros(s.shape, dtype=complex)
        for mode in self.modes:
            r = s / mode.natural_speed_rpm
            out += mode.modal_constants_um_pp[p] * r**2 / (1.0 - r**2 + 2j * mode.damping_ratio * r)
        b, c = self.residual_terms_um_pp[p]
        return out + b + c * (s / self.reference_rpm) ** 2


def _basis(speed: NDArray, wn: NDArray, zeta: NDArray, ref: float, residual: bool) -> NDArray:
    r = speed[:, None] / wn[None, :]
    cols = r**2 / (1.0 - r**2 + 2j * zeta[None, :] * r)
    if residual:
        s2 = (speed / ref) ** 2
        cols = np.column_stack([cols, np.ones_like(speed), s2])
    return cols


def fit_modes(
    curves: Sequence[tuple[str, NDArray[np.float64], NDArray[np.complex128]]],
    *,
    initial: Sequence[tuple[float, float]],
    residual_terms: bool = True,
    weights: Sequence[NDArray[np.float64]] | None = None,
) -> ModalFit:
    """Fit shared modes to the complex responses of one or more probes.

    Parameters
    ----------
    curves
        ``(probe, speed_rpm, response_um_pp)`` per probe, already cut to the speed window
        to fit; speeds increasing.
    initial
        Starting ``(natural_speed_rpm, damping_ratio)`` per mode.
    residual_terms
        Include ``B_p + C_p s^2`` (see module notes).
    weights
        Per curve, the number of samples each point averages (binned data); residuals
        are weighted by its square root so that the fit and its covariance equal those of
        the unbinned samples to first order.  Default: all ones.

    Returns
    -------
    ModalFit

    Raises
    ------
    FitError
        When there are fewer points than parameters, or the least-squares problem fails.
    """
    if not initial:
        raise FitError("fit_modes needs at least one starting mode")
    n_modes = len(initial)
    n_lin = n_modes + (2 if residual_terms else 0)
    if weights is None:
        weights = [np.ones(len(c[1])) for c in curves]
    roots = [np.sqrt(np.asarray(w, dtype=float)) for w in weights]
    n_points = int(round(sum(float(np.sum(w)) for w in weights)))
    n_real_params = 2 * n_modes + 2 * n_lin * len(curves)
    if 2 * min(n_points, sum(len(c[1]) for c in curves)) <= n_real_params + 2:
        raise FitError(
            f"{n_points} points are too few to fit {n_modes} mode(s) on {len(curves)} probe(s)"
        )
    all_speed = np.concatenate([c[1] for c in curves])
    ref = float(np.median([w for w, _ in initial]))
    wn0 = np.array([w for w, _ in initial], dtype=float)
    z0 = np.clip(np.array([z for _, z in initial], dtype=float), 2e-3, 0.6)
    theta0 = np.concatenate([np.log(wn0 / ref), np.log(z0)])
    smin, smax = float(all_speed.min()), float(all_speed.max())
    # keep modes within a generous neighbourhood of the data and damping physical
    lower = np.concatenate([np.full(n_modes, math.log(0.5 * smin / ref)), np.full(n_modes, math.log(1e-4))])
    upper = np.concatenate([np.full(n_modes, math.log(2.0 * smax / ref)), np.full(n_modes, math.log(0.7))])
    theta0 = np.clip(theta0, lower + 1e-9, upper - 1e-9)
    speeds = [np.asarray(c[1], dtype=float) for c in curves]
    data = [np.asarray(c[2], dtype=complex) for c in curves]

    def solve(theta: NDArray) -> tuple[NDArray, list[NDArray]]:
        wn = ref * np.exp(theta[:n_modes])
        zeta = np.exp(theta[n_modes:])
        res, coefs = [], []
        for s, x, w in zip(speeds, data, roots, strict=True):
            phi = _basis(s, wn, zeta, ref, residual_terms)
            coef, *_ = np.linalg.lstsq(phi * w[:, None], x * w, rcond=None)
            e = (x - phi @ coef) * w
            res.append(e)
            coefs.append(coef)
        e = np.concatenate(res)
        return np.concatenate([e.real, e.imag]), coefs

    try:
        sol = least_squares(lambda t: solve(t)[0], theta0, bounds=(lower, upper), method="trf",
                            x_scale=np.full(theta0.size, 0.05), max_nfev=400)
    except (ValueError, np.linalg.LinAlgError) as exc:  # pragma: no cover - numerical failure
        raise FitError(f"modal fit failed: {exc}") from exc
    resid, coefs = solve(sol.x)
    ssr = float(resid @ resid)
    dof = 2 * n_points - n_real_params
    s2 = ssr / dof
    jac = sol.jac
    try:
        cov = s2 * np.linalg.inv(jac.T @ jac)
        stderr = np.sqrt(np.clip(np.diag(cov), 0.0, None))
    except np.linalg.LinAlgError:
        stderr = np.full(sol.x.size, math.nan)
    wn = ref * np.exp(sol.x[:n_modes])
    zeta = np.exp(sol.x[n_modes:])
    order = np.argsort(wn)
    modes = tuple(
        ModeEstimate(
            natural_speed_rpm=float(wn[k]),
            natural_speed_stderr_rpm=float(wn[k] * stderr[k]),  # d(wn) = wn d(log wn)
            damping_ratio=float(zeta[k]),
            damping_ratio_stderr=float(zeta[k] * stderr[n_modes + k]),
            modal_constants_um_pp=tuple(complex(c[k]) for c in coefs),
        )
        for k in order
    )
    residual = tuple(
        (complex(c[n_modes]), complex(c[n_modes + 1])) if residual_terms else (0j, 0j) for c in coefs
    )
    return ModalFit(
        modes=modes,
        probes=tuple(c[0] for c in curves),
        residual_terms_um_pp=residual,
        reference_rpm=ref,
        noise_rms_um_pp=math.sqrt(ssr / (dof / 2.0)),
        n_points=n_points,
        low_rpm=smin,
        high_rpm=smax,
        converged=bool(sol.success),
        ssr_um2=ssr,
        n_parameters=n_real_params,
    )
