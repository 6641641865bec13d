"""Tests of the support-stiffness inference (runup.stiffness).

References
----------
* Jeffcott rotor on flexible supports (e.g. Childs, *Turbomachinery Rotordynamics*, 1993,
  ch. 3): shaft and support springs in series, ``k_eq = k_shaft k_s / (k_shaft + k_s)``,
  ``omega_n = sqrt(k_eq / m)``; inverted in closed form ``k_s = k_eq k_shaft / (k_shaft - k_eq)``.
* Two-mass rotor on two supports: natural frequencies from ``scipy.linalg.eigh(K, M)``, and
  the best stiffness from ``scipy.optimize.least_squares`` on that model directly (no map,
  no interpolation) as the second computation.
All rotors are invented.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.linalg
from numpy.testing import assert_allclose
from scipy.optimize import least_squares

from runup.critical import Interval
from runup.errors import DataFormatError
from runup.io.predicted import CriticalSpeedMap
from runup.stiffness import CAVEAT, ObservedSpeed, estimate_support_stiffness

KAPPA = np.geomspace(0.1, 10.0, 41)
RPM_PER_RAD_S = 60.0 / (2.0 * math.pi)


def jeffcott_rpm(kappa, *, m=100.0, k_shaft=5.0e7, k_nominal=2.0e7):
    k_s = np.asarray(kappa) * k_nominal
    return np.sqrt(k_shaft * k_s / (k_shaft + k_s) / m) * RPM_PER_RAD_S


def two_mass_rpm(kappa):
    """Natural speeds (rpm) of an invented two-mass rotor: masses 120 and 80 kg joined by a
    shaft spring 4e7 N/m, each on a support spring kappa * (3e7, 2e7) N/m."""
    out = []
    for k in np.atleast_1d(kappa):
        K = np.array([[4e7 + k * 3e7, -4e7], [-4e7, 4e7 + k * 2e7]])
        w2 = scipy.linalg.eigh(K, np.diag([120.0, 80.0]), eigvals_only=True)
        out.append(np.sqrt(w2) * RPM_PER_RAD_S)
    return np.array(out)


def test_jeffcott_closed_form_recovered():
    """Noise-free natural speed of a Jeffcott rotor at kappa = 2.3 gives back 2.3 (the closed
    form inversion k_s = k_eq k_shaft/(k_shaft - k_eq) gives the same), with no flags."""
    speed_map = CriticalSpeedMap(KAPPA, ("1st",), jeffcott_rpm(KAPPA)[:, None])
    n = float(jeffcott_rpm(2.3))
    w = n / RPM_PER_RAD_S
    k_eq = 100.0 * w * w
    kappa_closed = k_eq * 5.0e7 / (5.0e7 - k_eq) / 2.0e7
    est = estimate_support_stiffness(speed_map, [ObservedSpeed("1st", n)])
    # PCHIP on 41 log-spaced points (20 per decade) of this curve: speed error below 4e-6
    # relative (measured on a 20 001-point grid), divided by the local sensitivity
    # d ln N / d ln kappa = k_shaft / (2 (k_shaft + k_s)) = 0.26 at kappa 2.3: about 1.5e-5 in kappa
    assert_allclose(est.stiffness_ratio, kappa_closed, rtol=1e-4)
    assert_allclose(kappa_closed, 2.3, rtol=1e-12)  # the closed form itself inverts exactly
    assert est.flags == () and est.degrees_of_freedom == 0 and math.isnan(est.p_value)
    assert est.ci95.low < 2.3 < est.ci95.high
    assert est.caveat == CAVEAT and "not a substitute for bearing analysis" in est.caveat


def test_two_mode_map_with_noise_matches_direct_least_squares():
    """Two modes measured at kappa = 2.3 with 0.5 % seeded noise: the estimate agrees with a
    least-squares fit of the two-mass model itself, and its 95 % interval holds 2.3."""
    speed_map = CriticalSpeedMap(KAPPA, ("1st", "2nd"), two_mass_rpm(KAPPA))
    truth = two_mass_rpm(2.3)[0]
    rng = np.random.default_rng(5)
    measured = truth * (1 + 0.005 * rng.standard_normal(2))
    half = 1.96 * 0.005 * measured  # 95 % half-width of 0.5 % noise
    observed = [ObservedSpeed(m, float(v), Interval(float(v - h), float(v + h)))
                for m, v, h in zip(("1st", "2nd"), measured, half, strict=True)]
    est = estimate_support_stiffness(speed_map, observed, sigma_floor_percent=0.1)
    sigma = half / 1.96
    direct = least_squares(lambda x: (measured - two_mass_rpm(math.exp(x[0]))[0]) / sigma, x0=[0.0])
    # the map interpolation error (< 1e-5 relative in speed, measured) is far below the 0.5 % noise; 1e-3
    # in kappa leaves room for the two optimisers' tolerances
    assert_allclose(est.stiffness_ratio, math.exp(direct.x[0]), rtol=1e-3)
    assert 2.3 in est.ci95
    assert est.degrees_of_freedom == 1 and "modes_disagree" not in est.flags
    assert_allclose([r.normalised_residual for r in est.residuals],
                    (measured - two_mass_rpm(est.stiffness_ratio)[0]) / sigma, rtol=1e-3, atol=1e-3)


def test_disagreeing_modes_are_flagged_and_interval_widened():
    """Mode 1 at kappa 0.5 and mode 2 at kappa 5 with 0.1 % intervals cannot share one kappa:
    flagged (chi-square p < 0.05) and the interval is wider than without the Birge factor."""
    speed_map = CriticalSpeedMap(KAPPA, ("1st", "2nd"), two_mass_rpm(KAPPA))
    n1, n2 = two_mass_rpm(0.5)[0, 0], two_mass_rpm(5.0)[0, 1]
    obs = [ObservedSpeed("1st", n1, Interval(n1 * 0.999, n1 * 1.001)),
           ObservedSpeed("2nd", n2, Interval(n2 * 0.999, n2 * 1.001))]
    est = estimate_support_stiffness(speed_map, obs, sigma_floor_percent=0.05)
    assert "modes_disagree" in est.flags and est.p_value < 0.05
    assert any("disagree" in w for w in est.warnings)


def test_estimate_at_the_map_edge_is_flagged():
    """A rotor at kappa = 30, outside the map's 0.1-10, gives an estimate at the edge, flagged."""
    speed_map = CriticalSpeedMap(KAPPA, ("1st",), jeffcott_rpm(KAPPA)[:, None])
    est = estimate_support_stiffness(speed_map, [ObservedSpeed("1st", float(jeffcott_rpm(30.0)))])
    assert "at_map_edge" in est.flags and "interval_at_map_edge" in est.flags
    assert_allclose(est.stiffness_ratio, 10.0, rtol=1e-3)  # the edge, within the refinement step


def test_bad_observations_are_refused():
    """Unknown mode, a mode twice, no observation or a non-positive speed: DataFormatError."""
    speed_map = CriticalSpeedMap(KAPPA, ("1st",), jeffcott_rpm(KAPPA)[:, None])
    with pytest.raises(DataFormatError, match="no curve"):
        estimate_support_stiffness(speed_map, [ObservedSpeed("2nd", 4000.0)])
    with pytest.raises(DataFormatError, match="twice"):
        estimate_support_stiffness(speed_map, [ObservedSpeed("1st", 4000.0)] * 2)
    with pytest.raises(DataFormatError, match="no measured speed"):
        estimate_support_stiffness(speed_map, [])
    with pytest.raises(DataFormatError, match="positive"):
        estimate_support_stiffness(speed_map, [ObservedSpeed("1st", -1.0)])
