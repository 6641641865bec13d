"""Effective support stiffness from measured critical speeds and the predicted map.

The undamped critical speed map of a rotordynamic model gives each mode's critical speed
as a function of the support stiffness ratio ``kappa`` (support stiffness over its
nominal value, typically swept 0.1 to 10 on a log scale).  Given the measured natural
speeds of matched modes, :func:`estimate_support_stiffness` finds the ``kappa`` that
explains them best:

.. math::  \\chi^2(x) = \\sum_k \\left(\\frac{N_k - f_k(x)}{\\sigma_k}\\right)^2,
           \\qquad x = \\ln \\kappa

with ``f_k`` the map curve of mode ``k`` interpolated in ``ln kappa`` by a monotone cubic
(PCHIP; Fritsch & Carlson, "Monotone piecewise cubic interpolation", SIAM J. Numer. Anal.
17, 1980; ``scipy.interpolate.PchipInterpolator``), ``N_k`` the measured undamped natural
speed (``Critical.natural_speed_rpm``: the map is undamped) and
``sigma_k = max(95 % half-width / 1.96, floor * N_k)``.  The floor (1 % by default, common
practice) stands for what the fit interval leaves out: sweep-rate shift of the peak,
damping and cross-coupling the undamped map ignores.

The minimum is searched on a dense grid over the map's range and refined with Brent's
method (``scipy.optimize.minimize_scalar``); the 95 % interval is the profile-likelihood
interval ``chi^2(x) <= chi^2_min + 3.841 * max(1, chi^2_min / (n - 1))`` (3.841 is the 95 %
point of chi-square with one degree of freedom, Wilks 1938; the factor inflates the
interval when the modes disagree more than their sigmas allow, the Birge ratio).  Modes
disagree when the chi-square test of ``chi^2_min`` on ``n - 1`` degrees of freedom gives
p < 0.05.

The result is a suggestion for the modeller, not a substitute for bearing analysis.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy.interpolate import PchipInterpolator
from scipy.optimize import brentq, minimize_scalar
from scipy.stats import chi2

from .compare import Agreement
from .critical import Interval
from .errors import DataFormatError
from .io.predicted import CriticalSpeedMap

__all__ = [
    "CAVEAT",
    "ObservedSpeed",
    "ModeResidual",
    "StiffnessEstimate",
    "observed_from_agreement",
    "estimate_support_stiffness",
]

#: Stated with every estimate.
CAVEAT = (
    "This support stiffness ratio is a suggestion for the rotordynamic modeller: the single factor "
    "on the nominal support stiffness that makes the predicted undamped critical speed map pass "
    "closest to the measured natural speeds. It lumps bearing, pedestal and foundation stiffness "
    "and ignores damping and cross-coupling; it is not a substitute for bearing analysis."
)

_Z95 = 1.959963984540054  # two-sided 95 % normal quantile
_DELTA_CHI2_95 = float(chi2.ppf(0.95, 1))  # 3.841
_GRID_POINTS = 4001
_DISAGREE_P = 0.05


@dataclass(frozen=True)
class ObservedSpeed:
    """A measured undamped natural speed (rpm) of a mapped mode, with its 95 % interval."""

    mode: str
    speed_rpm: float
    ci95_rpm: Interval | None = None


@dataclass(frozen=True)
class ModeResidual:
    """How one mode fits at the estimate.

    Attributes
    ----------
    mode
        Map column label.
    measured_speed_rpm, sigma_rpm
        Measured natural speed and the standard deviation used.
    map_speed_rpm
        Map curve at the estimated stiffness ratio.
    residual_percent
        ``100 (measured - map) / map``.
    normalised_residual
        ``(measured - map) / sigma``.
    """

    mode: str
    measured_speed_rpm: float
    sigma_rpm: float
    map_speed_rpm: float
    residual_percent: float
    normalised_residual: float


@dataclass(frozen=True)
class StiffnessEstimate:
    """Result of :func:`estimate_support_stiffness`.

    Attributes
    ----------
    stiffness_ratio
        Best-fit support stiffness over nominal.
    ci95
        Profile-likelihood 95 % interval of the ratio (clipped to the map's range, see flags).
    chi_square, degrees_of_freedom, p_value
        Misfit at the estimate, ``n - 1`` and the chi-square tail probability (``nan`` for
        one mode).
    residuals
        Per mode.
    map_range
        Lowest and highest stiffness ratio of the map.
    flags
        ``at_map_edge`` (best fit at the end of the map: the ratio may lie outside it),
        ``interval_at_map_edge``, ``modes_disagree``.
    warnings
        Sentences for the user.
    caveat
        :data:`CAVEAT`.
    """

    stiffness_ratio: float
    ci95: Interval
    chi_square: float
    degrees_of_freedom: int
    p_value: float
    residuals: tuple[ModeResidual, ...]
    map_range: tuple[float, float]
    flags: tuple[str, ...]
    warnings: tuple[str, ...]
    caveat: str = CAVEAT


def observed_from_agreement(agreement: Agreement, speed_map: CriticalSpeedMap) -> tuple[ObservedSpeed, ...]:
    """Measured natural speeds of the matched modes that the map has a curve for."""
    return tuple(
        ObservedSpeed(m.predicted.mode, m.measured.natural_speed_rpm, m.measured.natural_speed_ci95_rpm)
        for m in agreement.matches
        if m.predicted.mode in speed_map.modes and math.isfinite(m.measured.natural_speed_rpm)
    )


def _sigma(obs: ObservedSpeed, floor: float) -> float:
    width = obs.ci95_rpm.width / (2.0 * _Z95) if obs.ci95_rpm is not None else 0.0
    width = width if math.isfinite(width) else 0.0
    return max(width, floor * obs.speed_rpm)


def estimate_support_stiffness(
    speed_map: CriticalSpeedMap,
    observed: Sequence[ObservedSpeed],
    *,
    sigma_floor_percent: float = 1.0,
) -> StiffnessEstimate:
    """Support stiffness ratio that best explains measured natural speeds (module notes).

    Parameters
    ----------
    speed_map
        Predicted undamped critical speed map.
    observed
        Measured natural speeds of mapped modes (see :func:`observed_from_agreement`).
    sigma_floor_percent
        Least standard deviation of a measured speed, percent of it.

    Returns
    -------
    StiffnessEstimate

    Raises
    ------
    DataFormatError
        No observation, a mode the map lacks or given twice, a speed that is not positive,
        or a floor that is not positive.
    """
    if not observed:
        raise DataFormatError("no measured speed to fit; match at least one mapped mode first")
    if not (math.isfinite(sigma_floor_percent) and sigma_floor_percent > 0):
        raise DataFormatError(f"sigma_floor_percent must be positive, got {sigma_floor_percent!r}")
    labels = [o.mode for o in observed]
    for o in observed:
        if o.mode not in speed_map.modes:
            raise DataFormatError(
                f"mode {o.mode!r} has no curve in the critical speed map (columns: "
                f"{', '.join(speed_map.modes)}); use the map's labels", file=speed_map.source or None,
            )
        if labels.count(o.mode) > 1:
            raise DataFormatError(f"mode {o.mode!r} observed twice; give one speed per mode")
        if not (math.isfinite(o.speed_rpm) and o.speed_rpm > 0):
            raise DataFormatError(f"mode {o.mode!r}: speed must be positive, got {o.speed_rpm!r}")
    x_map = np.log(speed_map.stiffness_ratio)
    curves = [PchipInterpolator(x_map, speed_map.curve(o.mode), extrapolate=False) for o in observed]
    speeds = np.array([o.speed_rpm for o in observed])
    sigmas = np.array([_sigma(o, sigma_floor_percent / 100.0) for o in observed])

    def chi_square(x: float | np.ndarray) -> np.ndarray:
        x = np.atleast_1d(x)
        model = np.vstack([f(x) for f in curves])
        return np.sum(((speeds[:, None] - model) / sigmas[:, None]) ** 2, axis=0)

    def chi_square_at(x: float) -> float:
        return float(chi_square(x)[0])

    grid = np.linspace(x_map[0], x_map[-1], _GRID_POINTS)
    values = chi_square(grid)
    i = int(np.argmin(values))
    lo, hi = grid[max(i - 1, 0)], grid[min(i + 1, grid.size - 1)]
    best = minimize_scalar(chi_square_at, bounds=(lo, hi), method="bounded",
                           options={"xatol": 1e-10})
    x_best, chi_min = (float(best.x), float(best.fun)) if best.fun <= values[i] else (float(grid[i]), float(values[i]))
    n = len(observed)
    dof = n - 1
    p_value = float(chi2.sf(chi_min, dof)) if dof > 0 else math.nan
    threshold = chi_min + _DELTA_CHI2_95 * (max(1.0, chi_min / dof) if dof > 0 else 1.0)
    flags: list[str] = []
    warnings: list[str] = []
    kmin, kmax = float(speed_map.stiffness_ratio[0]), float(speed_map.stiffness_ratio[-1])
    step = grid[1] - grid[0]
    if x_best - grid[0] < step or grid[-1] - x_best < step:
        flags.append("at_map_edge")
        warnings.append(
            f"the best fit lies at the edge of the map (stiffness ratio {math.exp(x_best):.3g}, map "
            f"{kmin:g} to {kmax:g}): the stiffness that explains the measurements may be outside the "
            "swept range; extend the map"
        )
    bounds = []
    for side in (-1, 1):
        j = i
        while 0 < j < grid.size - 1 and values[j] <= threshold:
            j += side
        if values[j] <= threshold:
            bounds.append(grid[j])
            if "interval_at_map_edge" not in flags:
                flags.append("interval_at_map_edge")
                warnings.append("the 95 % interval reaches the edge of the map; it is open on that side")
        else:  # chi-square crosses the threshold between grid[j - side] and grid[j]
            a, b = sorted((grid[j - side], grid[j]))
            bounds.append(brentq(lambda x: chi_square_at(x) - threshold, a, b, xtol=1e-12))
    if dof > 0 and p_value < _DISAGREE_P:
        flags.append("modes_disagree")
        warnings.append(
            f"the modes disagree (chi-square {chi_min:.3g} on {dof} degree(s) of freedom, p = "
            f"{p_value:.2g}): no single support stiffness factor explains them all; the interval "
            "is widened by the Birge ratio. Check the mode matching and the model"
        )
    residuals = []
    for o, f, s in zip(observed, curves, sigmas, strict=True):
        model = float(f(x_best))
        residuals.append(ModeResidual(
            o.mode, o.speed_rpm, float(s), model, 100.0 * (o.speed_rpm - model) / model, float((o.speed_rpm - model) / s),
        ))
    return StiffnessEstimate(
        stiffness_ratio=math.exp(x_best),
        ci95=Interval(math.exp(bounds[0]), math.exp(bounds[1])),
        chi_square=chi_min,
        degrees_of_freedom=dof,
        p_value=p_value,
        residuals=tuple(residuals),
        map_range=(kmin, kmax),
        flags=tuple(flags),
        warnings=tuple(warnings),
    )
