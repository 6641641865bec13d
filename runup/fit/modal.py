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
from typing import Literal

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
    residual_model
        The ``residual_terms`` the fit used.
    n_residuals
        Complex residuals (points, bins counting once), the basis of the degrees of
        freedom and of the BIC.
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
    residual_model: str = "constant+quadratic"
    n_residuals: int = 0

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


Residual = Literal["none", "constant", "constant+quadratic"]


def _basis(speed: NDArray, wn: NDArray, zeta: NDArray, ref: float, residual: Residual) -> NDArray:
    """Model columns at ``speed`` (any leading shape): modes, then ``1`` and ``s^2`` as asked."""
    r = speed[..., None] / wn
    cols = r**2 / (1.0 - r**2 + 2j * zeta * r)
    extra = []
    if residual != "none":
        extra.append(np.ones_like(cols[..., :1]))
    if residual == "constant+quadratic":
        extra.append(((speed / ref) ** 2)[..., None].astype(complex))
    return np.concatenate([cols, *extra], axis=-1) if extra else cols


def _basis_derivatives(speed: NDArray, wn: NDArray, zeta: NDArray) -> tuple[NDArray, NDArray]:
    """Derivatives of the mode columns ``f = r^2 / D`` with respect to ``log wn`` and ``log zeta``.

    With ``D = 1 - r^2 + 2 j zeta r``: ``df/dr = 2 r (1 + j zeta r) / D^2``, ``dr/d(log wn) = -r``
    and ``df/d(log zeta) = -2 j zeta r^3 / D^2`` (derived).
    """
    r = speed[..., None] / wn
    d2 = (1.0 - r**2 + 2j * zeta * r) ** 2
    return -2.0 * r**2 * (1.0 + 1j * zeta * r) / d2, -2j * zeta * r**3 / d2


class _Projection:
    """Variable projection of the linear terms, all probes at once (padded, zero weight).

    For probe ``p`` the weighted basis ``A = W Phi(theta)`` and data ``b = W x`` give the
    residual ``e = P_perp b`` (``P_perp = I - A A^+``, reduced QR ``A = Q R``).  Its
    Jacobian, column ``j`` (Golub & Pereyra 1973, full form; complex linear parameters,
    real ``theta``):

    .. math::  \\partial e / \\partial \\theta_j = -P_\\perp (\\partial_j A) c - (A^+)^H (\\partial_j A)^H e

    with ``c = A^+ b`` and ``(A^+)^H = Q R^{-H}``; only the column of the mode that
    ``theta_j`` belongs to depends on it.
    """

    def __init__(self, speeds, data, roots, n_modes: int, ref: float, residual: Residual) -> None:
        n_max = max(s.size for s in speeds)
        n_p = len(speeds)
        self.mask = np.arange(n_max)[None, :] < np.array([s.size for s in speeds])[:, None]
        self.speed = np.ones((n_p, n_max))
        self.w = np.zeros((n_p, n_max))
        self.b = np.zeros((n_p, n_max), dtype=complex)
        for p, (s, x, w) in enumerate(zip(speeds, data, roots, strict=True)):
            self.speed[p, : s.size] = s
            self.w[p, : s.size] = w
            self.b[p, : s.size] = x * w
        self.n_modes, self.ref, self.residual = n_modes, ref, residual
        self._theta: NDArray | None = None
        self._compressed_theta: NDArray | None = None

    def _params(self, theta: NDArray) -> tuple[NDArray, NDArray]:
        return self.ref * np.exp(theta[: self.n_modes]), np.exp(theta[self.n_modes :])

    def solve(self, theta: NDArray) -> None:
        """Projection at ``theta`` (cached): residual ``e``, coefficients ``c``, ``Q``, ``R``."""
        if self._theta is not None and np.array_equal(theta, self._theta):
            return
        wn, zeta = self._params(theta)
        a = _basis(self.speed, wn, zeta, self.ref, self.residual) * self.w[..., None]
        q, r = np.linalg.qr(a)
        qh = np.conj(q.transpose(0, 2, 1))
        qb = qh @ self.b[..., None]
        self.coef = np.linalg.solve(r, qb)[..., 0]
        self.e = self.b - (q @ qb)[..., 0]
        self.q, self.qh, self.r = q, qh, r
        self._theta = np.array(theta, copy=True)

    def residual_vector(self, theta: NDArray) -> NDArray:
        """Stacked real and imaginary parts of every probe's weighted residual."""
        self.solve(theta)
        e = self.e[self.mask]
        return np.concatenate([e.real, e.imag])

    def complex_jacobian(self, theta: NDArray) -> NDArray:
        """``d e / d theta`` per probe, shape ``(probes, points, parameters)`` (class notes)."""
        self.solve(theta)
        wn, zeta = self._params(theta)
        k = self.n_modes
        d_wn, d_z = _basis_derivatives(self.speed, wn, zeta)
        d = np.concatenate([d_wn, d_z], axis=-1) * self.w[..., None]  # (P, N, 2K)
        col = np.concatenate([np.arange(k), np.arange(k)])
        dc = d * self.coef[:, None, col]
        proj = dc - self.q @ (self.qh @ dc)
        # (A^+)^H e_k = Q R^{-H} e_k for the column k of each parameter
        g = (self.q @ np.conj(np.linalg.inv(self.r).transpose(0, 2, 1)))[:, :, col]
        scal = (self.e[:, None, :].conj() @ d)[:, 0, :].conj()
        return -(proj + g * scal[:, None, :])

    def compressed(self, theta: NDArray) -> tuple[NDArray, NDArray]:
        """An ``n + 1`` row residual and Jacobian with the same ``f^T f``, ``J^T J``, ``J^T f``.

        ``J^T J = V diag(s^2) V^T`` gives ``J~ = [diag(s) V^T; 0]`` and
        ``f~ = [diag(1/s) V^T J^T f; sqrt(f^T f - |.|^2)]``.  A Gauss-Newton trust-region
        step depends on the residual and Jacobian only through these three (the step solves
        ``min |J p + f|`` within the region), so the optimiser takes the same steps on a
        problem of ``n + 1`` rows instead of twice the number of points.
        """
        if self._compressed_theta is not None and np.array_equal(theta, self._compressed_theta):
            return self._compressed
        jac = self.complex_jacobian(theta).reshape(-1, theta.size)
        e = self.e.reshape(-1)
        # plain loops (einsum) rather than BLAS: a threaded GEMM of this long, thin shape
        # costs more in thread hand-over than it saves
        stacked = np.concatenate([jac.real, jac.imag])
        f_full = np.concatenate([e.real, e.imag])
        gram = np.einsum("ni,nj->ij", stacked, stacked)
        grad = np.einsum("ni,n->i", stacked, f_full)
        ff = float(np.vdot(e, e).real)
        s2, v = np.linalg.eigh(gram)
        s = np.sqrt(np.clip(s2, 0.0, None))
        keep = s > s.max() * 1e-12
        top = np.where(keep, (v.T @ grad) / np.where(keep, s, 1.0), 0.0)
        rest = math.sqrt(max(ff - float(top @ top), 0.0))
        f = np.append(top, rest)
        j = np.vstack([s[:, None] * v.T, np.zeros((1, theta.size))])
        self._compressed_theta = np.array(theta, copy=True)
        self._compressed = (f, j)
        return f, j


def fit_modes(
    curves: Sequence[tuple[str, NDArray[np.float64], NDArray[np.complex128]]],
    *,
    initial: Sequence[tuple[float, float]],
    residual_terms: Residual = "constant+quadratic",
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
        Which residual terms each probe gets: ``"constant+quadratic"`` (``B_p + C_p s^2``,
        see module notes), ``"constant"`` (``B_p``) or ``"none"``.
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
    if residual_terms not in ("none", "constant", "constant+quadratic"):
        raise ValueError(f"residual_terms must be 'none', 'constant' or 'constant+quadratic', got {residual_terms!r}")
    n_lin = n_modes + {"none": 0, "constant": 1, "constant+quadratic": 2}[residual_terms]
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

    proj = _Projection(speeds, data, roots, n_modes, ref, residual_terms)
    try:
        sol = least_squares(lambda t: proj.compressed(t)[0], theta0, jac=lambda t: proj.compressed(t)[1], bounds=(lower, upper), method="trf",
                            x_scale=np.full(theta0.size, 0.05), max_nfev=400)
    except (ValueError, np.linalg.LinAlgError) as exc:  # pragma: no cover - numerical failure
        raise FitError(f"modal fit failed: {exc}") from exc
    resid = proj.residual_vector(sol.x)
    coefs = list(proj.coef)
    ssr = float(resid @ resid)
    # residuals are one per point (a bin mean weighted by sqrt(count) has the per-sample
    # variance), so the degrees of freedom count points, not the samples they average
    n_residuals = sum(len(c[1]) for c in curves)
    dof = 2 * n_residuals - n_real_params
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
        (
            complex(c[n_modes]) if residual_terms != "none" else 0j,
            complex(c[n_modes + 1]) if residual_terms == "constant+quadratic" else 0j,
        )
        for c in coefs
    )
    return ModalFit(
        modes=modes,
        probes=tuple(c[0] for c in curves),
        residual_terms_um_pp=residual,
        reference_rpm=ref,
        noise_rms_um_pp=math.sqrt(ssr / (dof / 2.0)),
        n_points=n_points,
        n_residuals=n_residuals,
        low_rpm=smin,
        high_rpm=smax,
        converged=bool(sol.success),
        ssr_um2=ssr,
        n_parameters=n_real_params,
        residual_model=residual_terms,
    )
