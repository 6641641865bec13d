"""Single-mode unbalance response relations against closed forms and scipy.

References
----------
Rao, *Mechanical Vibrations*, 5th ed., 2011, sec. 3.7 (rotating unbalance):
``|X|/e = r^2 / sqrt((1 - r^2)^2 + (2 zeta r)^2)``, ``phi = atan2(2 zeta r, 1 - r^2)``,
peak at ``r = 1/sqrt(1 - 2 zeta^2)`` with value ``1/(2 zeta sqrt(1 - zeta^2))``.
"""

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.optimize import brentq, minimize_scalar

from runup.fit.models import (
    amplification_factor_from_damping,
    critically_damped_limit_ratio,
    damping_from_amplification_factor,
    half_power_speed_ratios,
    peak_speed_ratio,
    unbalance_response,
)


@pytest.mark.parametrize("zeta", [0.01, 0.05, 0.1, 0.2, 0.3])
def test_unbalance_response_matches_textbook_magnitude_and_phase(zeta):
    """The complex model has Rao's magnitude ratio and phase lag (angle = -lag)."""
    r = np.linspace(0.05, 3.0, 500)
    x = unbalance_response(r * 3000.0, natural_speed_rpm=3000.0, damping_ratio=zeta)
    mag = r**2 / np.sqrt((1 - r**2) ** 2 + (2 * zeta * r) ** 2)  # Rao 2011, sec. 3.7
    lag = np.arctan2(2 * zeta * r, 1 - r**2)
    assert_allclose(np.abs(x), mag, rtol=1e-12)  # same formula: round-off only
    assert_allclose(-np.angle(x), lag, rtol=1e-12, atol=1e-15)


def test_phase_lag_is_90_deg_at_natural_speed_and_slope_is_one_over_zeta():
    """phi(1) = 90 deg exactly and d phi / d r at r = 1 equals 1/zeta (differentiating atan2)."""
    zeta = 0.05
    x = unbalance_response([3000.0], natural_speed_rpm=3000.0, damping_ratio=zeta)
    assert_allclose(-np.degrees(np.angle(x[0])), 90.0, atol=1e-12)
    h = 1e-6
    lag = -np.angle(unbalance_response(np.array([1 - h, 1 + h]) * 3000.0, natural_speed_rpm=3000.0, damping_ratio=zeta))
    assert_allclose((lag[1] - lag[0]) / (2 * h), 1 / zeta, rtol=1e-6)  # central difference error O(h^2)


@pytest.mark.parametrize("zeta", [0.01, 0.05, 0.1, 0.2, 0.5])
def test_peak_speed_ratio_agrees_with_numerical_maximum(zeta):
    """Peak of |X| at 1/sqrt(1-2 zeta^2) (Rao 2011) agrees with scipy's bounded minimiser."""
    res = minimize_scalar(
        lambda r: -abs(unbalance_response([r], natural_speed_rpm=1.0, damping_ratio=zeta)[0]),
        bounds=(0.5, 3.0), method="bounded", options={"xatol": 1e-10},
    )
    assert_allclose(peak_speed_ratio(zeta), res.x, rtol=1e-7)  # optimiser tolerance 1e-10 on a flat top
    peak = abs(unbalance_response([peak_speed_ratio(zeta)], natural_speed_rpm=1.0, damping_ratio=zeta)[0])
    assert_allclose(peak, 1 / (2 * zeta * math.sqrt(1 - zeta**2)), rtol=1e-12)  # Rao 2011, closed form


@pytest.mark.parametrize("zeta", [0.01, 0.05, 0.1, 0.2, 0.35])
def test_half_power_ratios_are_roots_of_the_amplitude_curve(zeta):
    """Closed-form half-power ratios agree with scipy's brentq on |X| = peak/sqrt(2)."""
    peak = 1 / (2 * zeta * math.sqrt(1 - zeta**2))
    r_peak = peak_speed_ratio(zeta)

    def f(r):
        return abs(unbalance_response([r], natural_speed_rpm=1.0, damping_ratio=zeta)[0]) - peak / math.sqrt(2)

    lo = brentq(f, 1e-3, r_peak)
    hi = brentq(f, r_peak, 50.0)
    assert_allclose(half_power_speed_ratios(zeta), (lo, hi), rtol=1e-9)  # brentq default xtol 2e-12


def test_upper_half_power_point_vanishes_at_sin_22_5_deg():
    """No upper half-power point for zeta >= sin(22.5 deg) = 0.3827 (derived in REFERENCE-VALUES.md)."""
    assert_allclose(critically_damped_limit_ratio, 0.38268343236, rtol=1e-10)
    assert math.isfinite(half_power_speed_ratios(0.38)[1])
    assert math.isnan(half_power_speed_ratios(0.39)[1])
    assert math.isnan(amplification_factor_from_damping(0.39))


@pytest.mark.parametrize(
    ("zeta", "af_exact"),
    # exact values derived and checked in REFERENCE-VALUES.md (table "AF exact")
    [(0.01, 49.980), (0.05, 9.8996), (0.10, 4.7969), (0.20, 2.0726)],
)
def test_api_af_of_single_mode_matches_reference_table(zeta, af_exact):
    """API half-power AF of the omega^2-forced mode: 1/(2 zeta) - 2 zeta + O(zeta^3), not 1/(2 zeta)."""
    af = amplification_factor_from_damping(zeta)
    assert_allclose(af, af_exact, rtol=5e-5)  # the table is given to 5 significant figures
    assert_allclose(af, 1 / (2 * zeta) - 2 * zeta, rtol=3 * zeta**2 + 1e-3)  # series, O(zeta^3) remainder


def test_af_approaches_q_for_light_damping():
    """AF -> Q = 1/(2 zeta) as zeta -> 0 (standard vibration texts, e.g. Rao 2011 sec. 3.4 quality factor)."""
    for zeta in (1e-3, 3e-3, 1e-2):
        assert_allclose(amplification_factor_from_damping(zeta) * 2 * zeta, 1.0, rtol=5 * zeta**2)


@pytest.mark.parametrize(("af", "zeta"), [(2.5, 0.174), (3.0, 0.151), (5.0, 0.096), (10.0, 0.0495)])
def test_damping_from_af_inverts_the_relation(af, zeta):
    """Inverse AF relation: AF 2.5 <-> zeta 0.174 etc. (REFERENCE-VALUES.md, derived), round trip exact."""
    z = damping_from_amplification_factor(af)
    assert_allclose(z, zeta, rtol=6e-3)  # reference values are rounded to 3 significant figures
    assert_allclose(amplification_factor_from_damping(z), af, rtol=1e-10)


def test_damping_from_af_rejects_non_positive():
    """A non-positive AF has no damping: ValueError with the reason."""
    with pytest.raises(ValueError, match="below"):
        damping_from_amplification_factor(0.0)
