"""Levenberg–Marquardt for many small, independent least-squares problems at once.

The circle fit and the phase-slope estimator solve a three-parameter nonlinear least-squares
problem; the estimator comparison (:mod:`runup.estimators`) solves each of them again on
every bootstrap replicate.  Calling ``scipy.optimize.least_squares`` once per problem costs
about a millisecond of Python overhead per call, far more than the arithmetic.  Here the
problems of a batch share one vectorised iteration: residuals ``(B, m)``, Jacobians
``(B, m, p)``, normal equations ``(B, p, p)`` solved together, each problem keeping its own
damping and its own convergence test, so that no problem's path depends on the others
(tests compare with ``scipy.optimize.least_squares``; like any local method it can, from
the same start, end in a different local minimum than scipy's trust-region path on a
multimodal problem).

The iteration is the damped Gauss–Newton method of Levenberg (1944) and Marquardt (1963)
with the gain-ratio update of the damping parameter of Madsen, Nielsen & Tingleff,
*Methods for Non-Linear Least Squares Problems*, 2nd ed., 2004, Algorithm 3.16, and Moré's
scale-invariant damping ``mu * diag(J^T J)`` (running maximum of the diagonal; Moré, "The
Levenberg–Marquardt algorithm: implementation and theory", in G. A. Watson (ed.),
*Numerical Analysis*, Springer, 1978, pp. 105–116).  Simple bounds are kept by projection: a parameter on a bound whose gradient
points out of the box is held for the step, the others solve the reduced system, and each
trial point is projected onto the box (the gain ratio is computed for the projected step;
projected Levenberg–Marquardt, Kanzow, Yamashita & Fukushima, J. Comput. Appl. Math. 172,
2004).  Convergence tests follow
``scipy.optimize.least_squares`` (``ftol`` on the relative cost reduction, ``xtol`` on the
step relative to the parameters) and MINPACK (``gtol`` on the cosine between the residual
and each column of the Jacobian).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

__all__ = ["BatchSolution", "least_squares_batch"]

Residual = Callable[[NDArray[np.float64], NDArray[np.bool_]], NDArray[np.float64]]


@dataclass(frozen=True)
class BatchSolution:
    """Solutions of a batch of least-squares problems.

    Attributes
    ----------
    x
        Parameters, shape ``(B, p)``.
    cost
        Half the sum of squared residuals at ``x``, shape ``(B,)``.
    success
        True where a convergence test was met with finite values, shape ``(B,)``.
    n_iter
        Iterations the batch ran.
    """

    x: NDArray[np.float64]
    cost: NDArray[np.float64]
    success: NDArray[np.bool_]
    n_iter: int


def least_squares_batch(
    residual: Residual,
    jacobian: Residual,
    x0: ArrayLike,
    *,
    lower: ArrayLike | None = None,
    upper: ArrayLike | None = None,
    ftol: float = 1e-8,
    xtol: float = 1e-8,
    gtol: float = 1e-8,
    max_iter: int = 200,
) -> BatchSolution:
    """Minimise ``0.5 * sum(residual(x)[b] ** 2)`` for every problem ``b`` of a batch.

    Parameters
    ----------
    residual
        ``residual(x, active) -> r`` of shape ``(b, m)``, vectorised over problems: it is
        called with the rows ``x`` (shape ``(b, p)``) of the problems still iterating only,
        and ``active``, a boolean mask of shape ``(B,)`` saying which problems (in order)
        those rows belong to, so that it can pick their data.
    jacobian
        ``jacobian(x, active) -> J`` of shape ``(b, m, p)``, the derivatives of
        ``residual``.
    x0
        Starting points ``(B, p)``.
    lower, upper
        Bounds ``(p,)`` or ``(B, p)``; default unbounded.
    ftol, xtol, gtol
        Convergence tolerances (see module notes); the defaults are scipy's.
    max_iter
        Iterations before the problems not yet converged are returned with
        ``success=False``.

    Returns
    -------
    BatchSolution
    """
    x = np.array(x0, dtype=float, ndmin=2, copy=True)
    n_batch, n_par = x.shape
    lo = np.broadcast_to(-np.inf if lower is None else np.asarray(lower, dtype=float), x.shape)
    hi = np.broadcast_to(np.inf if upper is None else np.asarray(upper, dtype=float), x.shape)
    x = np.clip(x, lo, hi)
    everyone = np.ones(n_batch, dtype=bool)
    r = residual(x, everyone)
    jac = jacobian(x, everyone)
    cost = 0.5 * np.einsum("bm,bm->b", r, r)
    scale = np.einsum("bmp,bmp->bp", jac, jac)  # diag(J^T J)
    mu = np.full(n_batch, 1e-3)  # dimensionless: the damping term is mu * diag(J^T J)
    nu = np.full(n_batch, 2.0)
    done = ~np.isfinite(cost)
    success = np.zeros(n_batch, dtype=bool)
    n_iter = 0
    eye = np.eye(n_par)
    for _ in range(max_iter):
        active = ~done
        if not active.any():
            break
        n_iter += 1
        ja, ra, xa = jac[active], r[active], x[active]
        a = np.einsum("bmp,bmq->bpq", ja, ja)
        g = np.einsum("bmp,bm->bp", ja, ra)
        column = np.diagonal(a, axis1=1, axis2=2).copy()  # |J_i|^2 at this point
        d = np.maximum(scale[active], column)
        scale[active] = d
        d_safe = np.where(d > 0, d, 1.0)
        # a parameter on a bound that the gradient pushes outward is held there for this
        # step (its row and column of the system decoupled), so that the others still move
        held = ((xa <= lo[active]) & (g > 0)) | ((xa >= hi[active]) & (g < 0))
        if held.any():
            free = (~held).astype(float)
            a = a * free[:, :, None] * free[:, None, :] + held[:, :, None] * eye
            g = g * free
        # MINPACK's orthogonality test: |J_i^T r| <= gtol |J_i| |r| for every column i
        norms = np.sqrt(np.where(column > 0, column, 1.0))
        small_g = np.max(np.abs(g) / norms, axis=1) <= gtol * np.sqrt(2.0 * cost[active] + 1e-300)
        try:
            step = -np.linalg.solve(a + mu[active, None, None] * d_safe[:, None, :] * eye, g[..., None])[..., 0]
        except np.linalg.LinAlgError:
            step = np.zeros_like(g)
            for i, (ai, gi, mi, di) in enumerate(zip(a, g, mu[active], d_safe, strict=True)):
                step[i] = -np.linalg.lstsq(ai + mi * np.diag(di), gi, rcond=None)[0]
        trial = np.clip(xa + step, lo[active], hi[active])
        step = trial - xa
        r_trial = residual(trial, active)
        cost_trial = 0.5 * np.einsum("bm,bm->b", r_trial, r_trial)
        predicted = -(np.einsum("bp,bp->b", g, step) + 0.5 * np.einsum("bp,bpq,bq->b", step, a, step))
        actual = cost[active] - cost_trial
        with np.errstate(divide="ignore", invalid="ignore"):
            rho = np.where(predicted > 0, actual / predicted, -1.0)
        accept = np.isfinite(cost_trial) & (actual > 0) & (rho > 0)
        idx = np.flatnonzero(active)
        small_x = np.linalg.norm(step, axis=1) <= xtol * (xtol + np.linalg.norm(xa, axis=1))
        # scipy's ftol test: a small relative decrease on a step the model predicted well
        small_f = accept & (actual <= ftol * cost[active]) & (rho > 0.25)
        # damping update (Madsen, Nielsen & Tingleff 2004, eq. 3.16 / Algorithm 3.16)
        factor = np.maximum(1.0 / 3.0, 1.0 - (2.0 * np.clip(rho, 0.0, 1.0) - 1.0) ** 3)
        mu_a, nu_a = mu[active], nu[active]
        mu[active] = np.where(accept, mu_a * factor, mu_a * nu_a)
        nu[active] = np.where(accept, 2.0, 2.0 * nu_a)
        acc = idx[accept]
        if acc.size:
            x[acc] = trial[accept]
            r[acc] = r_trial[accept]
            cost[acc] = cost_trial[accept]
            jac[acc] = jacobian(trial[accept], _mask(n_batch, acc))
        converged = small_g | small_x | small_f | (cost[idx] == 0.0)
        stuck = ~np.isfinite(mu[idx]) | (mu[idx] > 1e300)
        success[idx[converged]] = True
        done[idx[converged | stuck]] = True
    success &= np.isfinite(cost) & np.all(np.isfinite(x), axis=1)
    return BatchSolution(x, cost, success, n_iter)


def _mask(n: int, idx: NDArray[np.intp]) -> NDArray[np.bool_]:
    out = np.zeros(n, dtype=bool)
    out[idx] = True
    return out
