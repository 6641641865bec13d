"""Tests of reference-pulse processing (runup.pulses).

Reference signals are synthetic trapezoids in shaft angle (an invented notch) whose
rising edge crosses 50 % of its height exactly when the shaft angle is a whole number of
turns; the closed-form edge times come from a linear speed ramp.
"""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose, assert_array_equal

from runup.errors import DataFormatError
from runup.pulses import (
    PulseRules,
    detect_edges,
    detect_edges_block,
    level_sample,
    reference_levels,
    validate_edges,
)

FS_HZ = 25600.0


def notch(rev: np.ndarray, *, height: float = 2.0, ramp_deg: float = 8.0) -> np.ndarray:
    """Trapezoid of ``height`` on 0, rising edge centred on each whole turn, 20 deg long."""
    psi = (np.mod(rev + 0.5, 1.0) - 0.5) * 360.0
    rise = np.clip((psi + ramp_deg / 2) / ramp_deg, 0, 1)
    fall = np.clip((20 + ramp_deg / 2 - psi) / ramp_deg, 0, 1)
    return height * np.minimum(rise, fall)


def ramp(f0_hz: float, a_hz_per_s: float, duration_s: float):
    t = np.arange(int(duration_s * FS_HZ)) / FS_HZ
    return t, f0_hz * t + 0.5 * a_hz_per_s * t * t


def closed_form_edges(f0_hz: float, a_hz_per_s: float, n: int) -> np.ndarray:
    """Times of whole turns k = 1..n of speed f0 + a t (root of f0 t + a t^2 / 2 = k)."""
    k = np.arange(1, n + 1)
    return 2.0 * k / (f0_hz + np.sqrt(f0_hz**2 + 2.0 * a_hz_per_s * k))


@pytest.mark.parametrize("sign", [1.0, -1.0], ids=["positive", "negative"])
def test_levels_are_the_median_and_the_extreme_percentile(sign):
    """Baseline = median and pulse level = the far percentile, for either polarity.

    Hand calculation: the pulse occupies 28/360 = 7.8 % of a turn (< 50 %, so the median
    is the baseline; > 0.1 %, so the 99.9th percentile is the top).
    """
    t, rev = ramp(30.0, 0.0, 1.0)
    lv = reference_levels(-5.0 + sign * notch(rev))
    assert lv.polarity == ("positive" if sign > 0 else "negative")
    assert_allclose([lv.baseline, lv.pulse], [-5.0, -5.0 + 2.0 * sign], atol=1e-12)
    # thresholds at 50 % and 25 % of the height (PulseRules defaults)
    assert_allclose([lv.trigger, lv.rearm], [-5.0 + sign, -5.0 + 0.5 * sign], atol=1e-12)


def test_flat_reference_raises():
    """A signal without pulses (noise only) is refused with a message naming the channel."""
    rng = np.random.default_rng(1)
    with pytest.raises(DataFormatError, match="no pulses"):
        reference_levels(rng.normal(0.0, 1.0, 10000))


def test_edges_match_closed_form_on_a_ramp():
    """Sub-sample edge times equal the closed-form turn times to 1e-4 of a revolution.

    Linear interpolation on an 8 deg linear edge sampled at >= 10 points per edge is
    exact but for the curvature of angle in time within one sample (speed change per
    sample < 1e-4), hence 1e-4 turn (0.036 deg).
    """
    t, rev = ramp(10.0, 20.0, 5.0)
    ref = notch(rev)
    edges = detect_edges([(t, ref)], levels=reference_levels(ref))
    truth = closed_form_edges(10.0, 20.0, edges.size)
    period = np.diff(np.concatenate(([0.0], truth)))
    assert np.max(np.abs(edges - truth) / period) < 1e-4


def test_blocks_give_the_same_edges_as_one_block():
    """Splitting the record (also right at a crossing) does not change any edge time."""
    t, rev = ramp(20.0, 5.0, 2.0)
    ref = notch(rev) + np.random.default_rng(3).normal(0, 0.01, t.size)
    lv = reference_levels(ref)
    whole = detect_edges([(t, ref)], levels=lv)
    cut = int(np.searchsorted(t, whole[3]))  # block boundary between the samples of edge 3
    for bounds in ([cut], list(range(997, t.size, 997))):
        parts = np.split(np.arange(t.size), bounds)
        assert_array_equal(detect_edges([(t[p], ref[p]) for p in parts], levels=lv), whole)


def test_hysteresis_and_holdoff_stop_chatter():
    """Noise that recrosses the trigger level gives one edge per pulse.

    A slow edge with ripple of +/-0.2 (0.4 pp, less than the 0.5 hysteresis band) crosses the
    trigger level three times but triggers once; two clean edges 0.2 ms apart (inside
    the 0.5 ms hold-off) give one edge.
    """
    t = np.arange(2000) / FS_HZ
    edge = np.clip((t - 0.02) / 0.02, 0, 1) * 2.0 + 0.2 * np.sin(2 * np.pi * 2000 * t)
    sig = np.concatenate(([0.0] * 50, edge))
    tt = np.arange(sig.size) / FS_HZ
    lv = reference_levels(np.concatenate((np.zeros(20000), np.full(200, 2.0))))
    edges, _ = detect_edges_block(tt, sig, levels=lv)
    assert edges.size == 1
    double = np.zeros(400)
    double[100:103] = 2.0
    double[108:111] = 2.0  # 8 samples = 0.31 ms later
    edges, _ = detect_edges_block(np.arange(400) / FS_HZ, double, levels=lv)
    assert edges.size == 1


def test_double_trigger_is_removed_and_missing_pulse_inserted():
    """A spurious edge is removed, a missing edge is re-inserted close to the truth.

    Inserted edge: cubic in revolution number through the neighbouring edges; on a
    constant-acceleration ramp its error is far below 1e-4 turn (closed form).
    """
    t, rev = ramp(10.0, 20.0, 5.0)
    truth = closed_form_edges(10.0, 20.0, 150)
    edges = truth.copy()
    edges = np.delete(edges, 60)  # missing pulse (revolution 61)
    spurious = truth[30] + 0.6 * (truth[31] - truth[30])  # 216 deg into revolution 30
    edges = np.sort(np.append(edges, spurious))
    train = validate_edges(edges)
    assert_array_equal(train.removed_times_s, [spurious])
    assert train.edge_inserted.sum() == 1
    assert_allclose(train.edge_times_s, truth, atol=1e-4 * (truth[61] - truth[60]))
    kinds = {(f.index, f.kind) for f in train.flags}
    assert (59, "missing_pulse_inserted") in kinds and (60, "missing_pulse_inserted") in kinds
    assert (30, "double_trigger_removed") in kinds
    assert train.revolution_valid.all()


def test_irregular_gap_is_flagged_and_not_a_revolution():
    """A gap of 5.5 turns (not a whole number <= 3) marks that interval invalid."""
    truth = closed_form_edges(30.0, 0.0, 100)
    edges = np.concatenate((truth[:40], truth[40:] + 4.5 / 30.0))
    train = validate_edges(edges)
    assert not train.revolution_valid[39] and train.revolution_valid.sum() == 98
    assert np.isnan(train.speed_rpm[39])
    assert any(f.kind == "irregular_interval" and f.index == 39 for f in train.flags)


def test_speed_uncertainty_matches_monte_carlo():
    """Estimated edge jitter and speed uncertainty agree with the noise put in.

    Edges at constant acceleration plus seeded Gaussian noise of 20 us.  15 %: each local
    jitter estimate is a MAD over 51 edges (37 % efficiency: ~16 % relative standard
    error), and the median over 2000 edges of those is far steadier; the speed
    uncertainty must match the standard deviation of the actual speed errors
    (first-order propagation, JCGM 100:2008 eq. 10).
    """
    rng = np.random.default_rng(7)
    truth = closed_form_edges(50.0, 2.0, 2000)
    noisy = truth + rng.normal(0.0, 20e-6, truth.size)
    train = validate_edges(noisy)
    assert_allclose(np.median(train.edge_jitter_s), 20e-6, rtol=0.15)
    errors = train.speed_rpm - 60.0 / np.diff(truth)
    assert_allclose(np.median(train.speed_uncertainty_rpm / train.speed_rpm), np.std(errors / train.speed_rpm), rtol=0.15)
    assert not any(f.kind == "jitter" for f in train.flags)


def test_a_displaced_edge_is_flagged_jitter():
    """One edge 3 deg of shaft angle late is flagged (limit max(5 sigma, 0.5 deg))."""
    truth = closed_form_edges(50.0, 2.0, 300)
    edges = truth.copy()
    edges[150] += 3.0 / 360.0 / 50.0
    train = validate_edges(edges)
    assert any(f.kind == "jitter" and f.index == 150 for f in train.flags)


def test_too_few_pulses_raise():
    """Three edges (two revolutions) are not enough."""
    with pytest.raises(DataFormatError, match="at least 4"):
        validate_edges([0.1, 0.2, 0.3])


def test_level_sample_does_not_depend_on_blocks():
    """The decimated level sample is the same for any split of the record."""
    x = np.random.default_rng(2).normal(size=100_000)
    whole = level_sample([x], max_points=5000)
    parts = level_sample(np.array_split(x, 77), max_points=5000)
    assert_array_equal(whole, parts)
    assert whole.size <= 5000


def test_bad_rules_raise():
    """Inconsistent thresholds are refused with the rule named."""
    with pytest.raises(DataFormatError, match="rearm_fraction"):
        PulseRules(trigger_fraction=0.2, rearm_fraction=0.3)
