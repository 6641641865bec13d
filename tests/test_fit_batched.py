"""Batched least squares, batched circle fits and the resolution merge, against references.

References: ``scipy.optimize.least_squares`` (general-purpose reference library) for the
batched Levenberg–Marquardt solver; Ewins, *Modal Testing*, 2nd ed., 2000, sec. 4.3.2 and
Rao, *Mechanical Vibrations*, 2011, sec. 3.7 (unbalance response) for the circle fit; the
variance of a mean of ``c`` independent samples, ``sigma^2 / c`` (any statistics text), for
count-aware noise scales; the Taylor expansion of a local mean, ``f + (h^2/24) f''`` (derived),
for the averaging bias.
"""

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.optimize import least_squares

from runup.detect import noise_scale
from runup.errors import FitError
from runup.fit.binning import SPEED_RESOLUTION, bin_curve, merge_within_resolution
from runup.fit.circle import circle_fit, circle_fit_damping, circle_fits
from runup.fit.levenberg_marquardt import least_squares_batch
from runup.fit.models import unbalance_response

T = np.linspace(0.0, 3.0, 60)


def _decay_problem(seed: int, n: int):
    rng = np.random.default_rng(seed)
    true = np.column_stack([rng.uniform(1, 3, n), rng.uniform(0.5, 2, n), rng.uniform(-1, 1, n)])
    y = true[:, [0]] * np.exp(-true[:, [1]] * T) + true[:, [2]] + 0.02 * rng.standard_normal((n, T.size))

    def res(x, rows):
        return x[:, [0]] * np.exp(-x[:, [1]] * T) + x[:, [2]] - y[rows]

    def jac(x, rows):
        e = np.exp(-x[:, [1]] * T)
        return np.stack([e, -x[:, [0]] * T * e, np.ones_like(e)], axis=2)

    return y, res, jac


def _scipy(res, jac, x0, i, n, **kw):
    rows = np.zeros(n, dtype=bool)
    rows[i] = True
    return least_squares(lambda q: res(q[None], rows)[0], x0, jac=lambda q: jac(q[None], rows)[0],
                         xtol=1e-14, ftol=1e-14, gtol=1e-14, **kw)


def test_batched_solver_matches_scipy_on_independent_problems():
    """Each problem of a batch reaches the minimum scipy finds for it alone."""
    n = 25
    _, res, jac = _decay_problem(1, n)
    # very different starts: some problems need many more iterations than others
    x0 = np.tile([1.0, 1.0, 0.0], (n, 1))
    x0[::5] = [4.0, 3.0, -1.0]
    sol = least_squares_batch(res, jac, x0)
    assert sol.success.all()
    for i in range(n):
        ref = _scipy(res, jac, x0[i], i, n)
        # our solver stops at scipy's default tolerances (1e-8), scipy here at 1e-14: the
        # parameters agree to the looser one, the costs (flat at a minimum) much closer
        assert_allclose(sol.x[i], ref.x, rtol=1e-6, atol=1e-8)
        assert_allclose(sol.cost[i], ref.cost, rtol=1e-9)


def test_batched_solver_respects_bounds_like_scipy():
    """A minimum outside the box ends on the bound, as scipy's bounded solver does."""
    n = 6
    _, res, jac = _decay_problem(2, n)
    x0 = np.tile([1.0, 1.0, 0.0], (n, 1))
    lower, upper = [-np.inf, -np.inf, -np.inf], [np.inf, np.inf, -1.5]  # offsets are > -1 in truth
    sol = least_squares_batch(res, jac, x0 + [0, 0, -2.0], lower=lower, upper=upper)
    for i in range(n):
        ref = _scipy(res, jac, x0[i] + [0, 0, -2.0], i, n, bounds=(lower, upper))
        assert sol.x[i, 2] == pytest.approx(-1.5)
        # the free parameters converge at tolerance 1e-8 along a different (projected) path
        assert_allclose(sol.x[i], ref.x, rtol=1e-5, atol=1e-7)


@pytest.mark.parametrize("zeta", [0.03, 0.1])
def test_circle_fits_of_windows_of_different_lengths_equal_single_fits(zeta):
    """The batched fit of padded windows gives what each window gives alone, and the
    noise-free unbalance response of a mode gives its natural speed and damping (Ewins)."""
    wn = 4200.0
    rng = np.random.default_rng(3)
    windows = []
    for n in (9, 31, 120):
        speed = np.linspace(wn * (1 - 2.5 * zeta), wn * (1 + 2.5 * zeta), n)
        x = unbalance_response(speed, natural_speed_rpm=wn, damping_ratio=zeta, modal_constant=20.0 + 5j)
        windows.append((speed, x + 0.05 * (rng.standard_normal(n) + 1j * rng.standard_normal(n))))
    batch = circle_fits(windows, natural_speed_guesses_rpm=[wn * 1.01] * 3, damping_ratio_guesses=[zeta * 1.3] * 3)
    for (speed, x), fit in zip(windows, batch, strict=True):
        alone = circle_fit(speed, x, natural_speed_guess_rpm=wn * 1.01, damping_ratio_guess=zeta * 1.3)
        assert_allclose([fit.natural_speed_rpm, fit.damping_ratio], [alone.natural_speed_rpm, alone.damping_ratio],
                        rtol=1e-8)
        # noise 0.05 um on a 20 um mode: a few standard errors of the 9-point window
        assert fit.natural_speed_rpm == pytest.approx(wn, rel=2e-3)
        assert fit.damping_ratio == pytest.approx(zeta, rel=0.05)
    speed = np.linspace(wn * (1 - 2.5 * zeta), wn * (1 + 2.5 * zeta), 40)
    exact = unbalance_response(speed, natural_speed_rpm=wn, damping_ratio=zeta, modal_constant=20.0)
    assert_allclose(circle_fit_damping(speed, np.vstack([exact, exact]), natural_speed_guess_rpm=wn,
                                       damping_ratio_guess=2 * zeta), zeta, rtol=1e-7)


def test_circle_fits_report_each_failure_without_stopping_the_others():
    speed = np.linspace(3000.0, 3300.0, 12)
    line = (1.0 + 0.1j) * speed**2  # X / r on a straight line: no turn about a centre
    good = unbalance_response(speed, natural_speed_rpm=3150.0, damping_ratio=0.02)
    out = circle_fits([(speed[:3], good[:3]), (speed, line), (speed, good)],
                      natural_speed_guesses_rpm=[3150.0] * 3, damping_ratio_guesses=[0.02] * 3)
    assert isinstance(out[0], FitError) and "at least 4 points" in str(out[0])
    assert isinstance(out[1], FitError)
    assert out[2].natural_speed_rpm == pytest.approx(3150.0, rel=1e-6)


def test_noise_scale_with_counts_estimates_the_per_sample_noise():
    """Points that average c samples carry sigma^2/c noise variance; the count-aware scale
    recovers the per-sample sigma from such points (variance of a mean)."""
    rng = np.random.default_rng(4)
    sigma = 0.7
    counts = rng.integers(1, 60, 20000).astype(float)
    noise = sigma / np.sqrt(counts) * (rng.standard_normal(counts.size) + 1j * rng.standard_normal(counts.size)) / math.sqrt(2)
    smooth = 5.0 * np.exp(1j * np.linspace(0, 1, counts.size))  # a slowly varying response
    assert noise_scale(smooth + noise, counts) == pytest.approx(sigma, rel=0.03)
    # without counts, single samples: the same rule as before (sqrt(6 ln 2) normalisation)
    plain = sigma * (rng.standard_normal(20000) + 1j * rng.standard_normal(20000)) / math.sqrt(2)
    assert noise_scale(plain) == pytest.approx(sigma, rel=0.03)
    assert noise_scale(plain, np.ones(20000)) == pytest.approx(noise_scale(plain), rel=1e-12)


def test_merge_within_resolution_keeps_the_response_within_the_averaging_bound():
    """Dense samples of a mode averaged at 0.1 % resolution stay within the Taylor
    bias bound (h^2/24)|X''| <= h^2 / (12 zeta^2) |X| of the exact response at the mean speed."""
    zeta, wn = 0.01, 3000.0
    speed = np.linspace(2000.0, 4000.0, 200001)
    x = unbalance_response(speed, natural_speed_rpm=wn, damping_ratio=zeta)
    merged = merge_within_resolution(speed, (x,), np.ones(speed.size))
    assert merged is not None
    s, (xm,), c = merged
    assert c.sum() == speed.size
    assert s.size < speed.size / 50
    exact = unbalance_response(s, natural_speed_rpm=wn, damping_ratio=zeta)
    bound = SPEED_RESOLUTION**2 / (12 * zeta**2) * np.abs(exact) * (s / wn) ** 2 + 1e-12
    assert np.all(np.abs(xm - exact) <= 1.2 * bound)
    # worst case, two points at the edges of each bin: bias Var(s) X''/2 <= (h^2/8)|X''|,
    # i.e. within h^2 / (4 zeta^2) |X| (the bound in runup/fit/binning.py)
    bins = np.arange(np.ceil(np.log(2000.0) / SPEED_RESOLUTION), np.floor(np.log(4000.0) / SPEED_RESOLUTION))
    edges = np.exp((bins + 0.5) * SPEED_RESOLUTION)  # bin centres
    pairs = np.sort(np.r_[edges * np.exp(-0.4999 * SPEED_RESOLUTION), edges * np.exp(0.4999 * SPEED_RESOLUTION)])
    xp = unbalance_response(pairs, natural_speed_rpm=wn, damping_ratio=zeta)
    s2, (xm2,), _ = merge_within_resolution(pairs, (xp,), np.ones(pairs.size))
    exact2 = unbalance_response(s2, natural_speed_rpm=wn, damping_ratio=zeta)
    bound2 = SPEED_RESOLUTION**2 / (4 * zeta**2) * np.abs(exact2) * (s2 / wn) ** 2
    err = np.abs(xm2 - exact2)
    assert np.all(err <= 1.2 * bound2)
    assert np.any(err > 0.5 * bound2)  # the bound is nearly reached: the test is not vacuous
    # a curve sampled more coarsely than the resolution is left alone
    coarse = np.geomspace(2000.0, 4000.0, 200)
    assert merge_within_resolution(coarse, (coarse.astype(complex),), np.ones(200)) is None


def test_merge_keeps_common_speeds_of_probes_sampled_together():
    """X and Y probes sampled at the same speeds keep identical merged speeds (fixed grid)."""
    speed = np.sort(np.random.default_rng(5).uniform(1000, 9000, 30000))
    a = merge_within_resolution(speed, (np.ones(speed.size, complex),), np.ones(speed.size))
    b = merge_within_resolution(speed, (2j * np.ones(speed.size),), np.ones(speed.size))
    assert np.array_equal(a[0], b[0])


def test_bin_curve_weights_by_counts():
    """A bin of a point averaging 3 samples and one of a single sample: weights 3:1."""
    speed = np.array([1.0, 2.0, 3.0, 4.0])
    x = np.array([0.0, 4.0, 8.0, 12.0], dtype=complex)
    s, xb, c = bin_curve(speed, x, counts=np.array([3.0, 1.0, 1.0, 1.0]), max_points=2)
    assert_allclose(c, [4.0, 2.0])
    assert_allclose(xb, [1.0, 10.0])
    assert_allclose(s, [1.25, 3.5])
