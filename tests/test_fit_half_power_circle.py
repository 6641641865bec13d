"""Half-power AF on samples and the Kennedy–Pancu circle fit, against closed forms.

References: API RP 684 half-power method (AF = N_c / (N_2 - N_1)); Ewins, *Modal Testing*,
2nd ed., 2000, sec. 4.3.2 (circle fit, viscous mobility circle, damping from point pairs);
Rao, *Mechanical Vibrations*, 2011, sec. 3.7 (unbalance response).
"""

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose

from runup.errors import FitError
from runup.fit.circle import circle_fit, damping_from_point_pair, fit_circle
from runup.fit.half_power import half_power
from runup.fit.models import amplification_factor_from_damping, unbalance_response


@pytest.mark.parametrize("zeta", [0.02, 0.05, 0.1, 0.2])
def test_half_power_on_dense_noise_free_samples_equals_exact_af(zeta):
    """Dense noise-free samples give the closed-form API AF (linear interpolation error only)."""
    speed = np.linspace(500.0, 9000.0, 20001)
    amp = np.abs(unbalance_response(speed, natural_speed_rpm=3000.0, damping_ratio=zeta))
    hp = half_power(speed, amp)
    # interpolation over 0.43 rpm steps and a sampled peak: error well below 1e-3 relative
    assert_allclose(hp.amplification_factor, amplification_factor_from_damping(zeta), rtol=1e-3)
    assert hp.flags == ()


def test_half_power_on_symmetric_triangle_is_exact():
    """Hand-computed case: a triangle peak 10 at 1000 rpm falling to 0 at 900 and 1100 rpm."""
    speed = np.array([800.0, 900.0, 1000.0, 1100.0, 1200.0])
    amp = np.array([0.0, 0.0, 10.0, 0.0, 0.0])
    hp = half_power(speed, amp)
    # crossings at 0.7071 of the peak: 1000 -+ 100 (1 - 0.7071) = 970.71 / 1029.29
    assert_allclose([hp.lower_speed_rpm, hp.upper_speed_rpm], [1000 - 100 * (1 - 1 / math.sqrt(2)), 1000 + 100 * (1 - 1 / math.sqrt(2))])
    assert_allclose(hp.amplification_factor, 1000 / (200 * (1 - 1 / math.sqrt(2))))


def test_half_power_one_sided_and_edge_and_flat_are_flagged():
    """Missing upper point -> one-sided estimate and flag; edge peak -> no AF; plateau -> flat_peak."""
    speed = np.linspace(1000.0, 3050.0, 400)
    amp = np.abs(unbalance_response(speed, natural_speed_rpm=3000.0, damping_ratio=0.05))
    hp = half_power(speed, amp, peak_index=int(np.argmax(amp[:-3])))
    assert "half_power_one_sided" in hp.flags and hp.upper_speed_rpm is None
    # common practice: from the one side found, AF = N_c / (2 (N_c - N_1))
    assert_allclose(hp.amplification_factor, hp.peak_speed_rpm / (2 * (hp.peak_speed_rpm - hp.lower_speed_rpm)))
    edge = half_power(speed, np.linspace(1.0, 2.0, speed.size))
    assert edge.amplification_factor is None and "peak_at_range_edge" in edge.flags
    flat = np.concatenate([np.linspace(0.2, 1, 50), np.ones(100), np.linspace(1, 0.2, 50)])
    res = half_power(np.arange(200.0) + 1000, flat, peak_index=100)
    assert "flat_peak" in res.flags


def test_fit_circle_recovers_known_circle_from_a_short_arc():
    """Taubin + geometric fit recovers centre and radius of noisy points on a 90-degree arc."""
    rng = np.random.default_rng(3)
    t = np.linspace(0.2, 0.2 + math.pi / 2, 40)
    pts = (2.0 - 1.5j) + 3.0 * np.exp(1j * t) + 0.01 * (rng.standard_normal(40) + 1j * rng.standard_normal(40))
    c, r = fit_circle(pts)
    # noise 0.01 on radius 3 over a quarter circle: centre and radius good to ~1e-2
    assert_allclose([c.real, c.imag, r], [2.0, -1.5, 3.0], atol=2e-2)
    with pytest.raises(FitError):
        fit_circle([1 + 1j, 1 + 1j])


@pytest.mark.parametrize("zeta", [0.01, 0.05, 0.15, 0.3])
def test_circle_fit_is_exact_on_noise_free_unbalance_response(zeta):
    """X / r of the unbalance response is an exact circle (Ewins' viscous mobility circle, derived),
    so the fit returns the generating natural speed, damping and modal constant."""
    a = 12.0 * np.exp(1j * 0.9)
    speed = 4000.0 * np.linspace(1 - 2 * zeta, 1 + 2 * zeta, 25)
    x = unbalance_response(speed, natural_speed_rpm=4000.0, damping_ratio=zeta, modal_constant=a)
    cf = circle_fit(speed, x, natural_speed_guess_rpm=4000.0 * 1.02, damping_ratio_guess=zeta * 1.5)
    assert_allclose(cf.natural_speed_rpm, 4000.0, rtol=1e-7)  # exact data: optimiser tolerance
    assert_allclose(cf.damping_ratio, zeta, rtol=1e-6)
    assert_allclose(cf.modal_constant_um_pp, a, rtol=1e-6)
    assert cf.residual_rms < 1e-9
    assert_allclose(cf.amplification_factor, amplification_factor_from_damping(zeta), rtol=1e-5)


def test_ewins_point_pair_formula_is_consistent_with_the_circle():
    """Ewins (2000) viscous pair formula returns the generating zeta for any two points on the circle."""
    zeta, wn = 0.04, 1.0
    # angle from the resonance point seen from the centre: theta = 2 |phi - 90 deg|
    def theta(w):
        return 2 * abs(math.atan2(2 * zeta * w / wn, 1 - (w / wn) ** 2) - math.pi / 2)

    for wa, wb in [(1.02, 0.97), (1.05, 0.99), (1.01, 0.93)]:
        z = damping_from_point_pair(omega_a=wa, theta_a_rad=theta(wa), omega_b=wb, theta_b_rad=theta(wb), omega_r=wn)
        assert_allclose(z, zeta, rtol=1e-10)


def test_circle_fit_rejects_points_that_do_not_turn():
    """Far from resonance the points barely turn: FitError rather than a made-up mode."""
    speed = np.linspace(500.0, 600.0, 10)
    x = unbalance_response(speed, natural_speed_rpm=5000.0, damping_ratio=0.05)
    with pytest.raises(FitError, match="turn"):
        circle_fit(speed, x, natural_speed_guess_rpm=550.0, damping_ratio_guess=0.05)
