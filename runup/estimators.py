"""Amplification-factor estimators side by side, each with an uncertainty.

For one critical, on its dominant probe (largest fitted peak response), with the fitted
neighbouring modes and residual terms subtracted so that each single-mode estimator sees
this mode alone (what each probe shows raw is in the per-probe detail), runup computes

``half_power``
    API 684 half-power AF on the samples (:mod:`runup.fit.half_power`);
``phase_slope``
    damping from the slope of the phase lag at the natural speed, ``d phi / d r = 1/zeta``
    at ``r = 1`` for a single mode (derived from ``phi = atan2(2 zeta r, 1 - r^2)``; Rao,
    *Mechanical Vibrations*, 2011, sec. 3.7).  A straight line through the lag over the
    half-power band would understate the slope by up to ``pi/4`` (the lag turns 90 degrees
    over ``2 zeta``), so the slope is taken from a least-squares fit of the single-mode phase
    law ``theta_0 + phi(r)`` (offset, natural speed, damping) to the lag of the samples
    within ``+-2.5 zeta``; the phase alone, mapped to AF through ``AF(zeta)``;
``circle_fit``
    the AF implied by the Kennedy–Pancu circle fit's damping (:mod:`runup.fit.circle`);
``global_fit``
    the AF of the least-squares modal fit shared by all probes (:mod:`runup.fit.modal`),
    with the 95 % interval from the fit covariance.

The uncertainty of the first three is a parametric bootstrap (Efron & Tibshirani, *An
Introduction to the Bootstrap*, 1993, ch. 6): the estimator is re-run on ``n_boot`` copies
of the fitted mode at the measured speeds plus complex Gaussian noise of the fit's
per-sample residual RMS (divided by the square root of the samples a bin mean averages); the standard deviation ``s`` of the replicates' log AF gives the interval
``AF exp(+-1.96 s)`` (20 replicates: ``s`` to about 16 %, enough to flag disagreement).  Estimators *disagree* when
their log-AF intervals, treated as normal, differ by more than 1.96 combined standard
errors from the headline and by more than 10 % (``DISAGREE_MIN_FRACTION``).  The headline is the global fit when it was made (it uses every
probe, accounts for neighbouring modes and residual runout, and has the smallest
variance; about the Cramér–Rao bound in the accuracy benchmark); otherwise the first of
circle fit and half-power that exists.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from .fit.circle import circle_fit_damping, phase_lag_derivatives
from .fit.half_power import half_power
from .fit.levenberg_marquardt import least_squares_batch
from .fit.modal import ModalFit
from .fit.models import amplification_factor_from_damping, peak_speed_ratio

__all__ = ["EstimatorRow", "EstimatorTable", "phase_slope_damping", "compare_estimators"]

_Z95 = 1.959963984540054
#: Estimators disagree only when, beyond their uncertainty, they also differ by more than
#: this fraction: smaller differences do not change an engineering decision (the AF
#: accuracy the project aims at is 10 %).
DISAGREE_MIN_FRACTION = 0.10


@dataclass(frozen=True)
class EstimatorRow:
    """One estimator's AF (and damping where it gives one) with a 95 % interval."""

    estimator: str
    amplification_factor: float
    af_ci95_low: float
    af_ci95_high: float
    damping_ratio: float
    probe: str
    note: str = ""


@dataclass(frozen=True)
class EstimatorTable:
    """Estimators side by side for one critical, the headline and why it was chosen."""

    rows: tuple[EstimatorRow, ...]
    headline: str
    reason: str
    disagree: tuple[str, ...]

    def row(self, estimator: str) -> EstimatorRow | None:
        return next((r for r in self.rows if r.estimator == estimator), None)


def phase_slope_damping(
    speed_rpm: NDArray[np.float64],
    response_um_pp: NDArray[np.complex128],
    *,
    natural_speed_rpm: float,
    damping_ratio_guess: float,
) -> float:
    """Damping ratio from the phase-lag slope at the natural speed, ``zeta = 1/(d phi/d r)``.

    Fits ``theta_0 + atan2(2 zeta r, 1 - r^2)``, ``r = speed / Omega_n``, to the unwrapped lag
    (radians) of the samples with ``|speed/natural_speed - 1| <= 2.5 zeta_guess`` (at least
    five, the nearest five otherwise) by least squares in ``(theta_0, Omega_n, zeta)``; the
    slope of the fitted law at ``r = 1`` is ``1/zeta``.  Returns ``nan`` when the fit fails.
    """
    x = np.asarray(response_um_pp, dtype=complex)
    return float(_phase_slope_batch(speed_rpm, x[None, :], natural_speed_rpm, damping_ratio_guess)[0])


def _phase_slope_batch(speed_rpm: NDArray, x: NDArray, natural_speed_rpm: float, damping_ratio_guess: float) -> NDArray:
    """:func:`phase_slope_damping` of each row of ``x`` (shape ``(B, m)``) at once."""
    speed = np.asarray(speed_rpm, dtype=float)
    z0 = float(np.clip(damping_ratio_guess, 2e-3, 0.6))
    sel = np.abs(speed / natural_speed_rpm - 1.0) <= max(2.5 * z0, 0.01)
    if sel.sum() < 5:
        sel = np.zeros(speed.size, dtype=bool)
        sel[np.argsort(np.abs(speed - natural_speed_rpm))[:5]] = True
    s, lag = speed[sel], np.unwrap(-np.angle(x[:, sel]), axis=1)

    def law(q: NDArray[np.float64], rows: NDArray[np.bool_]) -> NDArray[np.float64]:
        r = s / q[:, [1]]
        return q[:, [0]] + np.arctan2(2.0 * q[:, [2]] * r, 1.0 - r * r) - lag[rows]

    def law_jacobian(q: NDArray[np.float64], rows: NDArray[np.bool_]) -> NDArray[np.float64]:
        d_wn, d_zeta = phase_lag_derivatives(s, q[:, [1]], q[:, [2]])
        return np.stack([np.ones_like(d_wn), d_wn, d_zeta], axis=2)

    shape = np.arctan2(2.0 * z0 * s / natural_speed_rpm, 1.0 - (s / natural_speed_rpm) ** 2)
    theta0 = np.mean(lag - shape, axis=1)
    start = np.column_stack([theta0, np.full(theta0.size, natural_speed_rpm), np.full(theta0.size, z0)])
    sol = least_squares_batch(law, law_jacobian, start, lower=[-np.inf, 0.5 * natural_speed_rpm, 1e-4],
                              upper=[np.inf, 2.0 * natural_speed_rpm, 0.7])
    return np.where(sol.success, sol.x[:, 2], np.nan)


def _row_from_samples(name: str, values: NDArray, point: float, zeta: float, probe: str, note: str) -> EstimatorRow:
    """Interval ``point * exp(+-1.96 s)``, ``s`` the bootstrap standard deviation of log AF."""
    values = np.asarray(values, dtype=float)
    finite = np.log(values[np.isfinite(values) & (values > 0)])
    if finite.size >= max(5, values.size // 2) and math.isfinite(point) and point > 0:
        spread = math.exp(_Z95 * float(np.std(finite, ddof=1)))
        lo, hi = point / spread, point * spread
    else:
        lo = hi = math.nan
    return EstimatorRow(name, point, float(lo), float(hi), zeta, probe, note)


def _estimates(speed: NDArray, x: NDArray, wn: float, zeta: float) -> NDArray[np.float64]:
    """Per row of ``x`` (shape ``(B, m)``): half-power AF, phase-slope AF and zeta, circle AF and zeta.

    Returns an array of shape ``(B, 5)``, NaN where an estimator fails.
    """
    amp = np.abs(x)
    near = np.nonzero(np.abs(speed / (wn * peak_speed_ratio(zeta)) - 1.0) <= max(2.0 * zeta, 0.02))[0]
    out = np.full((x.shape[0], 5), np.nan)
    for b in range(x.shape[0]):
        k = int(near[np.argmax(amp[b, near])]) if near.size else int(np.argmax(amp[b]))
        hp = half_power(speed, amp[b], peak_index=k)
        if hp.amplification_factor is not None:
            out[b, 0] = hp.amplification_factor
    out[:, 2] = _phase_slope_batch(speed, x, wn, zeta)
    sel = np.abs(speed / wn - 1.0) <= max(2.5 * zeta, 0.02)
    if sel.sum() < 6:
        sel = np.zeros(speed.size, dtype=bool)
        sel[np.argsort(np.abs(speed - wn))[:6]] = True
    out[:, 4] = circle_fit_damping(speed[sel], x[:, sel], natural_speed_guess_rpm=wn, damping_ratio_guess=zeta)
    for col in (2, 4):
        out[:, col - 1] = [amplification_factor_from_damping(z) if math.isfinite(z) else math.nan for z in out[:, col]]
    return out


def compare_estimators(
    fit: ModalFit,
    mode_index: int,
    data: dict[str, tuple[NDArray[np.float64], NDArray[np.complex128], NDArray[np.float64]]],
    *,
    af_ci95: tuple[float, float] | None,
    n_boot: int = 20,
    seed: int = 0,
) -> EstimatorTable:
    """Estimators side by side for mode ``mode_index`` of ``fit`` (see module notes).

    Parameters
    ----------
    fit
        The modal fit.
    mode_index
        Which of its modes.
    data
        ``probe -> (speed_rpm, response_um_pp, samples_per_point)`` of the fit window
        (points may be bin means, :mod:`runup.fit.binning`).
    af_ci95
        The global fit's AF interval.
    n_boot
        Bootstrap replicates for the other estimators.
    seed
        Seed of the bootstrap's generator (results are reproducible).
    """
    mode = fit.modes[mode_index]
    wn, zeta = mode.natural_speed_rpm, mode.damping_ratio
    peaks = [abs(a) for a in mode.modal_constants_um_pp]
    probe = fit.probes[int(np.argmax(peaks))]
    speed, x, counts = data[probe]
    # points within the mode's own neighbourhood, with the fitted neighbouring modes and
    # residual terms subtracted: each single-mode estimator sees this mode alone
    sel = np.abs(speed / wn - 1.0) <= max(6.0 * zeta, 0.1)
    speed, x, counts = speed[sel], x[sel], counts[sel]
    r = speed / wn
    own = mode.modal_constants_um_pp[fit.probes.index(probe)] * r**2 / (1.0 - r**2 + 2j * zeta * r)
    x = x - (fit.predict(probe, speed) - own)
    af_fit = amplification_factor_from_damping(zeta)
    rows = [
        EstimatorRow(
            "global_fit", af_fit, af_ci95[0] if af_ci95 else math.nan, af_ci95[1] if af_ci95 else math.nan,
            zeta, "all", f"{len(fit.modes)} mode(s) fitted to {len(fit.probes)} probe(s)",
        )
    ]
    if speed.size >= 5:
        rng = np.random.default_rng(seed)
        # per-sample noise of the fit; a bin mean of n samples has 1/sqrt(n) of it
        sigma = fit.noise_rms_um_pp / np.sqrt(counts)
        noise = rng.standard_normal((n_boot, speed.size)) + 1j * rng.standard_normal((n_boot, speed.size))
        # row 0: the measured points; rows 1...: the replicates
        est = _estimates(speed, np.vstack([x, own + sigma * noise / math.sqrt(2)]), wn, zeta)
        point, b = est[0], est[1:]
        rows.append(_row_from_samples("half_power", b[:, 0], point[0], math.nan, probe, "API 684 on the samples"))
        rows.append(_row_from_samples("phase_slope", b[:, 1], point[1], point[2], probe, "d(lag)/dr = 1/zeta at r = 1"))
        rows.append(_row_from_samples("circle_fit", b[:, 3], point[3], point[4], probe, "Kennedy-Pancu on X/r"))
    headline = "global_fit"
    reason = (
        "global fit: uses every probe, accounts for neighbouring modes and residual runout, and has the "
        "smallest variance"
    )
    disagree = []
    ref = rows[0]
    for r in rows[1:]:
        if not (math.isfinite(r.amplification_factor) and r.amplification_factor > 0):
            continue
        se_r = _log_se(r)
        se_ref = _log_se(ref)
        if not math.isfinite(se_r):
            continue
        se = math.hypot(se_r, se_ref if math.isfinite(se_ref) else 0.0)
        gap = abs(math.log(r.amplification_factor / ref.amplification_factor))
        if gap > _Z95 * se and gap > math.log(1.0 + DISAGREE_MIN_FRACTION):
            disagree.append(r.estimator)
    return EstimatorTable(tuple(rows), headline, reason, tuple(disagree))


def _log_se(row: EstimatorRow) -> float:
    if not (row.af_ci95_low > 0 and row.af_ci95_high > 0):
        return math.nan
    return math.log(row.af_ci95_high / row.af_ci95_low) / (2 * _Z95)
