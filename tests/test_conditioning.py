"""Tests of runup.conditioning on synthetic (invented) run-up and coastdown records.

Single-mode unbalance response with runout (Rao, *Mechanical Vibrations*, rotating
unbalance; Jeffcott rotor):  X(r) = A r^2 / (1 - r^2 + 2j zeta r) + runout, r = speed/crit.
With runup's phase convention the measured complex vector IS this number (angle = -lag).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose

from runup.conditioning import (
    auto_slow_roll_window,
    condition,
    default_segment_tolerance_rpm,
    find_spikes,
    split_segments,
)
from runup.errors import DataFormatError
from runup.run import Run, RunMetadata

CRIT_RPM = 3000.0
RUNOUT = 3.0 * np.exp(-0.6j)  # synthetic slow-roll (runout) vector, um pp


def jeffcott(speed_rpm, *, crit_rpm=CRIT_RPM, zeta=0.05, a_um_pp=10.0):
    """Closed-form single-mode unbalance response (Rao, rotating unbalance)."""
    r = np.asarray(speed_rpm, dtype=float) / crit_rpm
    return a_um_pp * r**2 / (1.0 - r**2 + 2j * zeta * r)


def make_run(speed_rpm, vectors, *, time_s=None, direction=None):
    """Long-layout Run, probes interleaved per sample, from complex vectors per probe."""
    speed = np.asarray(speed_rpm, dtype=float)
    n = speed.size
    t = np.full(n, np.nan) if time_s is None else np.asarray(time_s, dtype=float)
    frames = []
    for name, x in vectors.items():
        x = np.asarray(x, dtype=complex)
        frames.append(pd.DataFrame({
            "speed_rpm": speed, "probe": name, "order": 1,
            "amplitude_um_pp": np.abs(x), "phase_lag_deg": -np.degrees(np.angle(x)),
            "time_s": t, "sample": np.arange(n),
        }))
    df = pd.concat(frames).sort_values("sample", kind="stable").reset_index(drop=True)
    df["row"] = np.arange(len(df)) + 1
    return Run(RunMetadata(direction=direction), df.drop(columns="sample"))


def noise(rng, n, sigma):
    """Complex circular Gaussian noise with per-component standard deviation sigma."""
    return sigma * (rng.standard_normal(n) + 1j * rng.standard_normal(n))


def kinds(cr, kind):
    return [c for c in cr.corrections if c.kind == kind]


# ------------------------------------------------------------------ slow roll, closed form
def test_auto_compensation_matches_closed_form_minus_window_mean():
    """Auto compensation leaves the closed-form response minus the mean dynamic part of the
    window, and that part is small because the window stays below 20 % of the critical."""
    speed = np.linspace(100.0, 6000.0, 600)
    dyn = jeffcott(speed)
    cr = condition(make_run(speed, {"A": dyn + RUNOUT}))
    c = cr.curve("A")
    sr = c.slow_roll
    assert sr is not None and sr.automatic
    inside = (speed >= sr.low_rpm) & (speed <= sr.high_rpm)
    # derived: raw - mean(raw in window) = dyn - mean(dyn in window), runout cancels exactly;
    # rtol 1e-9 covers the amplitude/phase round trip through the Run table (float rounding)
    assert_allclose(c.raw_response_um_pp, dyn + RUNOUT, rtol=1e-9, atol=1e-12)
    assert_allclose(c.response_um_pp, dyn - dyn[inside].mean(), rtol=1e-9, atol=1e-9)
    assert sr.n_points == inside.sum()
    # auto rule: window top <= 20 % of the peak-response speed (peak at r = 1/sqrt(1-2 zeta^2),
    # Rao); at r = 0.2 the dynamic part is 4.2 % of A (REFERENCE-VALUES "Slow roll", re-derived:
    # 0.04 / sqrt(0.96^2 + 0.02^2) = 0.0417), so the subtracted vector is within 0.42 um of runout
    assert sr.high_rpm <= 0.2 * CRIT_RPM / np.sqrt(1 - 2 * 0.05**2) + 1e-9
    assert abs(sr.vector_um_pp - RUNOUT) <= 0.0417 * 10.0
    assert cr.warnings == ()


def test_explicit_window_vector_is_the_window_mean():
    """An explicit window subtracts the plain complex mean of the raw vectors inside it."""
    speed = np.linspace(100.0, 6000.0, 600)
    raw = jeffcott(speed) + RUNOUT
    cr = condition(make_run(speed, {"A": raw}), slow_roll=(100.0, 400.0))
    sr = cr.curve("A").slow_roll
    inside = (speed >= 100.0) & (speed <= 400.0)
    # definition of the window mean; rtol 1e-9 for the amplitude/phase round trip
    assert_allclose(sr.vector_um_pp, raw[inside].mean(), rtol=1e-9)
    assert not sr.automatic and sr.n_points == inside.sum()
    assert_allclose(cr.curve("A").response_um_pp, raw - raw[inside].mean(), rtol=1e-9, atol=1e-9)


def test_slow_roll_off_keeps_raw():
    """slow_roll='off' gives response equal to the raw vectors and no SlowRoll."""
    speed = np.linspace(100.0, 6000.0, 300)
    c = condition(make_run(speed, {"A": jeffcott(speed) + RUNOUT}), slow_roll="off").curve("A")
    assert c.slow_roll is None
    # identity: nothing subtracted (exact)
    assert_allclose(c.response_um_pp, c.raw_response_um_pp, rtol=0, atol=0)


def test_window_with_too_few_points_is_an_error():
    """An explicit window holding fewer than 2 points raises DataFormatError naming probe and window."""
    speed = np.linspace(100.0, 6000.0, 300)
    run = make_run(speed, {"A": jeffcott(speed) + RUNOUT})
    with pytest.raises(DataFormatError, match=r"probe A .*105-110 rpm holds 0 point"):
        condition(run, slow_roll=(105.0, 110.0))


def test_warning_when_window_reaches_resonance():
    """A window reaching the resonance draws one warning naming probe, segment and window."""
    speed = np.linspace(100.0, 6000.0, 600)
    cr = condition(make_run(speed, {"A": jeffcott(speed) + RUNOUT}), slow_roll=(100.0, 2900.0))
    assert len(cr.warnings) == 1
    w = cr.warnings[0]
    assert "probe A" in w and "startup #1" in w and "100-2900 rpm" in w


def test_auto_skips_when_record_starts_above_slow_roll_speeds():
    """A record starting at 40 % of the critical is not compensated (auto), with a warning."""
    speed = np.linspace(0.4 * CRIT_RPM, 6000.0, 400)
    cr = condition(make_run(speed, {"A": jeffcott(speed) + RUNOUT}))
    c = cr.curve("A")
    assert c.slow_roll is None
    # identity: nothing subtracted
    assert_allclose(c.response_um_pp, c.raw_response_um_pp, rtol=0, atol=0)
    assert len(cr.warnings) == 1 and "not compensated" in cr.warnings[0]
    assert "probe A" in cr.warnings[0] and "startup #1" in cr.warnings[0]


def test_auto_window_stops_where_response_leaves_slow_roll():
    """With small runout the auto window ends where the dynamic part exceeds 10 % of it."""
    speed = np.linspace(50.0, 6000.0, 1200)
    raw = jeffcott(speed) + 0.2 * RUNOUT  # runout 0.6 um: 10 % is 0.06 um, reached near r ~ 0.1
    choice = auto_slow_roll_window(speed, raw)
    assert choice.window_rpm is not None and choice.n_points >= 3
    top = choice.window_rpm[1]
    # derived: the test fires once |dyn(r) - mean dyn| > 0.1 |mean| ~ 0.06 um.  With the
    # low-speed limit dyn ~ A r^2 (Rao), that difference is below A r^2 = 0.06 um for
    # r < 0.077, and above 0.15 um at r = 0.155 (mean of r^2 over [0.017, 0.155] is 0.009)
    assert 0.077 * CRIT_RPM < top < 0.155 * CRIT_RPM


# ------------------------------------------------------------------ segments
def test_pure_startup_is_one_segment():
    """A monotonic startup gives one 'startup' segment with its sweep rate."""
    speed = np.linspace(200.0, 6000.0, 500)
    time = np.arange(500) * 0.5
    cr = condition(make_run(speed, {"A": jeffcott(speed)}, time_s=time), slow_roll="off")
    (seg,) = cr.segments
    assert seg.direction == "startup" and seg.label == "startup #1"
    # closed form: constant ramp rate = 5800 rpm / 499 steps / 0.5 s; rtol 1e-9 float rounding
    assert_allclose(seg.sweep_rate_rpm_per_s, 5800.0 / 499 / 0.5, rtol=1e-9)
    assert (seg.start_rpm, seg.end_rpm, seg.n_samples) == (200.0, 6000.0, 500)


def test_startup_then_coastdown_is_two_segments_with_consistent_labels():
    """Up-then-down gives 'startup #1' and 'coastdown #2'; both probes share the segments."""
    up = np.linspace(200.0, 6000.0, 300)
    speed = np.r_[up, up[::-1][1:]]
    cr = condition(
        make_run(speed, {"A": jeffcott(speed), "B": 0.5j * jeffcott(speed)}), slow_roll="off"
    )
    assert [s.label for s in cr.segments] == ["startup #1", "coastdown #2"]
    # the turning sample ends the startup: 300 + 299 samples, two probes each
    assert [s.n_samples for s in cr.segments] == [600, 598]
    for k in (0, 1):
        a, b = cr.curve("A", segment=k), cr.curve("B", segment=k)
        assert_allclose(a.speed_rpm, b.speed_rpm, rtol=0)  # same samples (exact)
    down = cr.curve("A", segment=1)
    assert down.direction == "coastdown" and np.all(np.diff(down.speed_rpm) > 0)


def test_coastdown_phase_is_continuous_in_speed_order():
    """A coastdown is reversed to ascending speed and its lag rises continuously through 90 deg."""
    speed = np.linspace(6000.0, 200.0, 400)
    c = condition(make_run(speed, {"A": jeffcott(speed)}), slow_roll="off").curve("A")
    r = c.speed_rpm / CRIT_RPM
    # Rao: phase lag = atan2(2 zeta r, 1 - r^2), continuous 0..180 deg; 1e-7 deg float rounding
    assert_allclose(c.phase_lag_deg, np.degrees(np.arctan2(0.1 * r, 1 - r**2)), atol=1e-7)


@pytest.mark.parametrize(
    ("legs", "expected"),
    [
        ([(200, 6000)], [1]),
        ([(6000, 200)], [-1]),
        ([(200, 6000), (6000, 200)], [1, -1]),
        ([(200, 6000), (6000, 1000), (1000, 5000)], [1, -1, 1]),
    ],
)
def test_split_segments_counts_reversals(legs, expected):
    """split_segments labels each monotonic leg in acquisition order."""
    speed = np.concatenate([np.linspace(a, b, 200)[(k > 0):] for k, (a, b) in enumerate(legs)])
    labels = split_segments(speed)
    assert labels.min() == 0 and labels.max() == len(expected) - 1
    assert np.all(np.diff(labels) >= 0)
    for k, sign in enumerate(expected):
        seg = speed[labels == k]
        assert np.sign(seg[-1] - seg[0]) == sign


def test_jittery_speed_and_dwell_stay_one_segment():
    """Speed jitter and a long jittery dwell do not create reversals."""
    rng = np.random.default_rng(7)
    ramp = np.r_[np.linspace(200, 3000, 2000), np.full(5000, 3000.0), np.linspace(3000, 6000, 2000)]
    speed = ramp + rng.normal(0.0, 5.0, ramp.size)  # 5 rpm jitter (common practice: a few rpm)
    labels = split_segments(speed)
    assert np.all(labels == 0)
    # default tolerance = max(2 % of span, 10 sigma): 2 % of ~5800 rpm dominates 10 * 5 rpm
    assert_allclose(default_segment_tolerance_rpm(speed), 0.02 * np.ptp(speed), rtol=1e-12)


def test_small_reversal_segment_dropped_and_indices_consecutive():
    """A reversal spanning < 5 % of the range is dropped and recorded; indices stay 0..n-1."""
    speed = np.r_[np.linspace(200, 3000, 300), np.linspace(3000, 2850, 20)[1:],
                  np.linspace(2850, 6000, 300)[1:]]
    cr = condition(make_run(speed, {"A": jeffcott(speed)}), slow_roll="off")
    assert [s.label for s in cr.segments] == ["startup #1", "startup #2"]
    assert [c.segment for c in cr.curves] == [0, 1]
    (drop,) = kinds(cr, "segment_dropped")
    assert len(drop.rows) == 19 and "coastdown" in drop.detail


def test_rows_stacked_by_probe_are_ordered_by_time():
    """With time stamps, rows stacked probe after probe are ordered by time before segmenting."""
    up = np.linspace(200.0, 6000.0, 200)
    speed = np.r_[up, up[::-1][1:]]
    t = np.arange(speed.size) * 0.1
    frames = [
        pd.DataFrame({"speed_rpm": speed, "probe": p, "order": 1, "amplitude_um_pp": 5.0,
                      "phase_lag_deg": 30.0, "time_s": t})
        for p in ("A", "B")
    ]
    df = pd.concat(frames, ignore_index=True)
    df["row"] = np.arange(len(df)) + 1
    cr = condition(Run(RunMetadata(), df), slow_roll="off", despike=False)
    assert [s.label for s in cr.segments] == ["startup #1", "coastdown #2"]
    assert len(cr.curves) == 4


# ------------------------------------------------------------------ duplicates, missing
def test_duplicates_merge_as_vector_mean():
    """Rows at equal speed merge to their complex mean: opposite phases cancel to ~0."""
    speed = np.linspace(200.0, 6000.0, 50)
    x = np.full(50, 4.0 + 0j)
    run = make_run(np.r_[speed, 3000.0], {"A": np.r_[x, 0]}, time_s=np.r_[np.arange(50.0), 50])
    df = run.samples.copy()
    i = int(np.argmin(np.abs(speed - 3000.0)))
    df.loc[i, "speed_rpm"] = 3000.0  # two rows at 3000 rpm: 4 um at 0 deg and 4 um at 180 deg
    df.loc[50, ["speed_rpm", "amplitude_um_pp", "phase_lag_deg", "time_s"]] = [3000.0, 4.0, 180.0, i]
    df = df.sort_values("time_s", kind="stable")
    cr = condition(Run(RunMetadata(), df), slow_roll="off", despike=False)
    c = cr.curve("A")
    j = int(np.flatnonzero(c.speed_rpm == 3000.0)[0])
    # vector mean of 4 and -4 is 0 (not the 4 um mean amplitude); atol 1e-12 um float rounding
    assert_allclose(c.raw_response_um_pp[j], 0.0, atol=1e-12)
    assert_allclose(c.time_s[j], float(i), rtol=0)  # mean of two equal times (exact)
    (dup,) = kinds(cr, "duplicates_merged")
    assert sorted(dup.rows) == sorted([i + 1, 51]) and "1 duplicate" in dup.detail
    # the merged point averages two rows (its noise variance is half a row's): counted
    assert c.sample_counts[j] == 2 and c.sample_counts.sum() == 51


def test_missing_rows_dropped_and_recorded():
    """Rows with NaN speed, amplitude or phase are dropped, one record per probe/order."""
    speed = np.linspace(200.0, 6000.0, 100)
    run = make_run(speed, {"A": jeffcott(speed), "B": jeffcott(speed)})
    df = run.samples.copy()
    df.loc[10, "amplitude_um_pp"] = np.nan  # probe A (even rows are A)
    df.loc[21, "phase_lag_deg"] = np.nan  # probe B
    df.loc[40, "speed_rpm"] = np.nan  # probe A
    cr = condition(Run(RunMetadata(), df), slow_roll="off")
    miss = {c.probe: c.rows for c in kinds(cr, "missing_dropped")}
    assert miss == {"A": (11, 41), "B": (22,)}
    assert cr.curve("A").speed_rpm.size == 98 and cr.curve("B").speed_rpm.size == 99


def test_all_nan_probe_has_no_curve_and_is_recorded():
    """A probe whose amplitudes are all NaN yields no curve, a missing and a too-few record."""
    speed = np.linspace(200.0, 6000.0, 100)
    run = make_run(speed, {"A": jeffcott(speed), "B": jeffcott(speed)})
    df = run.samples.copy()
    df.loc[df["probe"] == "B", "amplitude_um_pp"] = np.nan
    cr = condition(Run(RunMetadata(), df), slow_roll="off")
    assert {c.probe for c in cr.curves} == {"A"}
    assert len([c for c in kinds(cr, "missing_dropped") if c.probe == "B"][0].rows) == 100
    assert [c.probe for c in kinds(cr, "too_few_points")] == ["B"]


def test_all_rows_missing_is_an_error():
    """A record with no valid row raises a one-line DataFormatError."""
    speed = np.linspace(200.0, 6000.0, 10)
    df = make_run(speed, {"A": jeffcott(speed)}).samples.copy()
    df["phase_lag_deg"] = np.nan
    with pytest.raises(DataFormatError, match="no row has a speed"):
        condition(Run(RunMetadata(), df))


def test_few_points_segment_and_curve_dropped():
    """A 4-sample record is dropped as a segment; a probe with 3 valid points loses its curve."""
    cr = condition(make_run([100, 200, 300, 400], {"A": np.ones(4)}), slow_roll="off")
    assert cr.curves == () and len(kinds(cr, "segment_dropped")) == 1
    assert cr.warnings == ("No curve kept: every probe and segment had too few valid points.",)
    speed = np.linspace(200.0, 6000.0, 40)
    df = make_run(speed, {"A": jeffcott(speed), "B": jeffcott(speed)}).samples.copy()
    df.loc[(df["probe"] == "B") & (df.index > 6), "amplitude_um_pp"] = np.nan
    cr = condition(Run(RunMetadata(), df), slow_roll="off")
    (few,) = kinds(cr, "too_few_points")
    assert few.probe == "B" and few.segment == 0 and few.rows == (2, 4, 6)


def test_flat_line_is_kept_without_spikes_or_warnings():
    """A flat (runout-only) noisy curve keeps every point; compensation leaves the noise."""
    rng = np.random.default_rng(3)
    speed = np.linspace(200.0, 6000.0, 1000)
    raw = RUNOUT + noise(rng, 1000, 0.02)
    cr = condition(make_run(speed, {"A": raw}))
    c = cr.curve("A")
    assert c.speed_rpm.size == 1000 and kinds(cr, "spike_removed") == [] and cr.warnings == ()
    # auto window = lowest 20 % of the span (no dynamic peak stands out of the noise)
    assert_allclose(c.slow_roll.high_rpm, 200 + 0.2 * 5800, atol=5800 / 999)  # one step
    # compensated = noise minus window mean: |.| < 6 sigma * sqrt(2) (Rayleigh tail ~1e-7)
    assert np.max(np.abs(c.response_um_pp)) < 6 * 0.02 * np.sqrt(2)


# ------------------------------------------------------------------ spikes
def test_injected_spikes_are_removed_and_recorded():
    """Single-point glitches (random phase, 3-10x local amplitude) are removed and recorded."""
    rng = np.random.default_rng(11)
    speed = np.linspace(200.0, 6000.0, 500)
    clean = jeffcott(speed, zeta=0.1) + RUNOUT
    raw = clean + noise(rng, 500, 0.002 * np.abs(clean).max())  # 0.2 % of peak noise
    where = np.array([40, 120, 200, 245, 330, 460])
    raw[where] = np.abs(clean[where]) * rng.uniform(3, 10, where.size) * np.exp(
        2j * np.pi * rng.uniform(size=where.size))
    cr = condition(make_run(speed, {"A": raw}), slow_roll="off")
    spikes = kinds(cr, "spike_removed")
    assert sorted(c.rows[0] for c in spikes) == list(where + 1)
    assert_allclose(sorted(c.speed_rpm for c in spikes), speed[where], rtol=1e-12)
    assert all("noise sigmas" in c.detail for c in spikes)
    assert cr.curve("A").speed_rpm.size == 500 - where.size


def test_endpoint_spike_is_removed_by_the_one_sided_rule():
    """An endpoint glitch is judged against the line through the next two points (docs/conditioning.md)."""
    speed = np.linspace(200.0, 6000.0, 100)
    x = jeffcott(speed) + RUNOUT
    x[0] = 50.0
    spike, _ = find_spikes(speed, x)
    assert list(np.nonzero(spike)[0]) == [0]


@pytest.mark.parametrize("zeta", [0.01, 0.02, 0.05])
@pytest.mark.parametrize("points_per_band", [1.0, 2.0, 3.0])
def test_sparse_light_damping_peaks_are_kept(zeta, points_per_band):
    """Lightly damped modes with 1-3 points per half-power band keep every point."""
    rng = np.random.default_rng(5)
    step_r = 2 * zeta / points_per_band  # half-power bandwidth ~ 2 zeta in r (Rao)
    for offset in np.linspace(0.0, 1.0, 7):
        r = np.arange(0.1 + offset * step_r, 2.0, step_r)
        speed = r * CRIT_RPM
        x = jeffcott(speed, zeta=zeta) + RUNOUT
        x = x + noise(rng, r.size, 0.005 * np.abs(x).max())  # 0.5 % of peak noise
        spike, score = find_spikes(speed, x)
        # derived: on the modal circle the peak scores h/(2 zeta) <= 1 against the 2x isolation rule
        assert not spike.any(), (zeta, points_per_band, offset, score.max())


@pytest.mark.parametrize("noise_fraction", [0.01, 0.03, 0.05])
def test_dense_noisy_curves_lose_essentially_nothing(noise_fraction):
    """On dense curves with 1-5 % complex Gaussian noise the false-removal rate is tiny."""
    removed = 0
    total = 0
    for seed in range(10):
        rng = np.random.default_rng(seed)
        speed = np.linspace(200.0, 6000.0, 2000)
        x = jeffcott(speed) + RUNOUT
        x = x + noise(rng, speed.size, noise_fraction * np.abs(x).max())
        removed += int(find_spikes(speed, x)[0].sum())
        total += speed.size
    # Rayleigh tail at 6 sigma: exp(-18) = 1.5e-8 per point, times P(isolated) ~ 0.16
    # (derived); over 20 000 points the expected count is ~5e-5, so zero is required
    assert removed == 0, (removed, total)


# ------------------------------------------------------------------ options, provenance
def test_settings_are_recorded_and_bad_options_rejected():
    """Options used are recorded; an unknown slow_roll choice lists the valid ones."""
    speed = np.linspace(200.0, 6000.0, 100)
    run = make_run(speed, {"A": jeffcott(speed)})
    cr = condition(run, slow_roll="off", spike_threshold=7.0, min_points=6)
    settings = dict(cr.settings)
    assert settings["slow_roll"] == "off" and settings["spike_threshold"] == "7.0"
    assert settings["min_points"] == "6" and settings["despike"] == "True"
    # default tolerance = 2 % of the 5800 rpm span (no jitter)
    assert_allclose(float(settings["segment_tolerance_rpm_used"]), 116.0, rtol=1e-6)
    with pytest.raises(DataFormatError, match="'auto', 'off' or a"):
        condition(run, slow_roll="automatic")
    with pytest.raises(DataFormatError, match="min_points"):
        condition(run, min_points=1)


def test_glitches_at_the_ends_and_in_pairs_are_removed_but_an_edge_resonance_is_kept():
    """One-sided and paired glitches (3-10x the local amplitude, random phase) are removed; a
    lightly damped mode peaking near the top of the record is not (Jeffcott closed form, Rao 2011)."""
    from runup.conditioning import find_spikes
    from runup.fit.models import unbalance_response

    rng = np.random.default_rng(41)
    speed = np.linspace(300.0, 6000.0, 400)
    x = unbalance_response(speed, natural_speed_rpm=3000.0, damping_ratio=0.05, modal_constant=10.0) + (2 + 1j)
    x = x + 0.05 * (rng.standard_normal(400) + 1j * rng.standard_normal(400))
    bad = x.copy()
    for i in (0, 398, 399, 150, 151):  # an end, an end pair, an interior pair
        bad[i] = 8 * abs(x[i]) * np.exp(1j * rng.uniform(0, 2 * np.pi))
    spike, _ = find_spikes(speed, bad)
    assert set(np.nonzero(spike)[0]) == {0, 398, 399, 150, 151}
    # a mode whose peak is one sample from the top of the record, sampled every 0.5 %
    edge_speed = np.linspace(1000.0, 3010.0, 400)
    edge = unbalance_response(edge_speed, natural_speed_rpm=3000.0, damping_ratio=0.02, modal_constant=10.0)
    spike, _ = find_spikes(edge_speed, edge)
    assert not spike.any()


# ------------------------------------------------------------------ fast paths, same results
def test_curve_rows_are_the_groups_of_lexsort():
    """Rows grouped per curve and sorted by speed are exactly numpy.lexsort((speed, key)),
    ties in position order, rows of a negative key left out; for small keys (radix path,
    with sorted, unsorted and shared speed sequences) and for large ones (lexsort itself)."""
    from runup.conditioning import _curve_rows

    rng = np.random.default_rng(8)
    shared = np.round(rng.uniform(100, 200, 300))  # ties; the same for several keys
    for high in (6, 40_000):
        key = rng.integers(-1, high, 3000)
        key[:300] = high - 1
        speed = np.round(rng.uniform(100, 200, 3000))
        speed[key == 2] = np.sort(speed[key == 2])  # a curve already in order
        speed[:300] = shared
        speed[300:600] = shared
        key[300:600] = 0 if high == 6 else 17
        order = np.lexsort((speed, key))  # the reference
        groups = [(int(k), order[key[order] == k]) for k in np.unique(key) if k >= 0]
        got = list(_curve_rows(key, speed))
        assert [k for k, _ in got] == [k for k, _ in groups]
        for (_, rows), (_, ref) in zip(got, groups, strict=True):
            np.testing.assert_array_equal(rows, ref)


def test_pointwise_noise_scale_equals_scipy_median_filter():
    """The noise scale evaluated at single points equals the one from scipy's moving median
    (mode "nearest", 21 points), ties and curve ends included."""
    from scipy.ndimage import median_filter

    from runup.conditioning.despike import _RAYLEIGH_MEDIAN, _NoiseScale

    rng = np.random.default_rng(9)
    for n in (21, 22, 57, 400):
        d = np.round(np.abs(rng.standard_normal(n)), 1)  # rounded: many ties
        median_d, floor = np.median(d), 1e-9
        ref = np.maximum(np.maximum(median_filter(d, size=21, mode="nearest"), median_d) / _RAYLEIGH_MEDIAN, floor)
        scale = _NoiseScale(d, median_d, floor)
        idx = rng.permutation(n)
        np.testing.assert_array_equal(scale.at(idx), ref[idx])
        assert np.all(ref >= scale.lower)


@pytest.mark.parametrize("seed", range(6))
def test_despiking_scores_only_candidates_but_finds_the_same_spikes(seed):
    """Despiking as conditioning runs it (window medians only where a spike is possible)
    flags exactly the points find_spikes flags, with the same scores there, and returns the
    noise sigma of the documented formula: median|d| / sqrt(2 ln 2) / sqrt(1.5) (Rayleigh
    median; interpolation residual of evenly spaced points)."""
    from runup.conditioning.despike import _interpolation_residual, _spikes, find_spikes

    rng = np.random.default_rng(seed)
    n = int(rng.integers(30, 3000))
    speed = np.sort(rng.uniform(300.0, 6000.0, n))
    speed = np.unique(speed)
    x = jeffcott(speed) + RUNOUT + noise(rng, speed.size, 0.05)
    for i in rng.choice(speed.size, 6, replace=False):  # single spikes
        x[i] *= 5
    for i in rng.choice(speed.size - 1, 2, replace=False):  # pairs
        x[i : i + 2] = 6 * np.abs(x[i : i + 2]) * np.exp(1j * rng.uniform(0, 6.3))
    x[:2] *= 4 if seed % 2 else 1  # glitches at the start on half the cases
    for threshold in (3.0, 6.0):
        spike, score = find_spikes(speed, x, threshold=threshold)
        fast, fast_score, sigma = _spikes(speed, x, threshold)
        np.testing.assert_array_equal(fast, spike)
        np.testing.assert_array_equal(fast_score[spike], score[spike])
        d = np.abs(_interpolation_residual(speed, x))
        assert sigma == max(float(np.median(d)) / np.sqrt(2 * np.log(2)) / np.sqrt(1.5),
                            1e-9 * float(np.abs(x).max()))


def test_threads_do_not_change_the_result(monkeypatch):
    """Conditioning curves in parallel threads gives the same curves, records and warnings,
    bit for bit and in the same order, as conditioning them one after the other."""
    import runup.conditioning as conditioning

    rng = np.random.default_rng(12)
    speed = np.round(np.r_[np.linspace(200.0, 6000.0, 3000), np.linspace(6000.0, 300.0, 3000)])
    vectors = {p: jeffcott(speed) * (1 + k) + RUNOUT + noise(rng, speed.size, 0.05) for k, p in enumerate("ABCD")}
    for x in vectors.values():
        x[rng.choice(speed.size, 4, replace=False)] *= 6
    run = make_run(speed, vectors, time_s=np.arange(speed.size) * 0.1)
    results = []
    for min_rows in (10**12, 0):  # serial, then threaded
        monkeypatch.setattr(conditioning, "PARALLEL_MIN_ROWS", min_rows)
        results.append(condition(run))
    serial, threaded = results
    assert len(serial.curves) == 8
    assert serial.corrections == threaded.corrections and serial.warnings == threaded.warnings
    for a, b in zip(serial.curves, threaded.curves, strict=True):
        assert a.key == b.key and a.slow_roll == b.slow_roll
        for name in ("speed_rpm", "response_um_pp", "raw_response_um_pp", "time_s", "sample_counts"):
            np.testing.assert_array_equal(getattr(a, name), getattr(b, name))


def test_probe_only_in_a_dropped_segment_is_recorded():
    """A probe whose rows all lie in a dropped segment has no curve and a record saying so."""
    speed = np.r_[np.linspace(200.0, 6000.0, 100), [5500.0, 5000.0, 4500.0]]  # 3-sample coastdown
    run = make_run(speed, {"A": jeffcott(speed)}, time_s=np.arange(speed.size, dtype=float))
    df = run.samples.copy()
    df.loc[df.index[-3:], "probe"] = "B"
    cr = condition(Run(RunMetadata(), df), slow_roll="off")
    assert {c.probe for c in cr.curves} == {"A"}
    (rec,) = [c for c in kinds(cr, "too_few_points") if c.probe == "B"]
    assert "no curve kept" in rec.detail and kinds(cr, "segment_dropped")


def test_infinite_phase_is_not_a_missing_value():
    """Only NaN marks a missing value (pandas.isna is False for an infinity): rows with a
    phase of +inf and -inf are not reported as missing."""
    speed = np.linspace(200.0, 6000.0, 60)
    df = make_run(speed, {"A": jeffcott(speed)}).samples.copy()
    df.loc[[5, 9], "phase_lag_deg"] = [np.inf, -np.inf]
    assert not pd.isna(df["phase_lag_deg"]).any()
    with np.errstate(invalid="ignore"):  # exp(-1j * inf) is NaN, with numpy's warning
        cr = condition(Run(RunMetadata(), df), slow_roll="off", despike=False)
    assert kinds(cr, "missing_dropped") == []


def _same_conditioning(a, b):
    assert a.corrections == b.corrections and a.warnings == b.warnings and a.segments == b.segments
    assert [c.key for c in a.curves] == [c.key for c in b.curves]
    for x, y in zip(a.curves, b.curves, strict=True):
        for name in ("speed_rpm", "response_um_pp", "raw_response_um_pp", "time_s", "sample_counts"):
            np.testing.assert_array_equal(getattr(x, name), getattr(y, name))


@pytest.mark.skipif(int(pd.__version__.split(".")[0]) < 3, reason="needs pandas copy-on-write")
def test_importers_probe_numbering_gives_the_same_result_and_follows_edits():
    """Conditioning an imported Run groups rows by the importer's probe codes; the result
    is the one the names themselves give (pandas.factorize), also with rows out of time
    order and missing values, and an edit of the probe column after import is seen."""
    rng = np.random.default_rng(5)
    speed = np.r_[np.linspace(300.0, 6000.0, 400), np.linspace(6000.0, 400.0, 300)]
    vectors = {p: jeffcott(speed) * (1 + k) + RUNOUT + noise(rng, speed.size, 0.05) for k, p in enumerate("CAB")}
    plain = make_run(speed, vectors, time_s=np.arange(speed.size) * 0.1).samples.astype({"probe": object})
    plain.loc[[0, 4, 50], "amplitude_um_pp"] = np.nan  # the first rows of probes C and B missing
    shuffled = plain.iloc[rng.permutation(len(plain))].reset_index(drop=True)  # time out of order
    for df in (plain, shuffled):
        names = np.array(["A", "B", "C"], dtype=object)
        codes = np.searchsorted(names, df["probe"].to_numpy().astype(str))
        fast = Run._from_checked(RunMetadata(), df.copy(), names, probe_codes=codes)
        assert fast._probe_numbering() is not None
        _same_conditioning(condition(fast), condition(Run(RunMetadata(), df.copy())))
        # an edit after import: the numbering no longer holds and the edit counts
        fast.samples.loc[fast.samples["probe"] == "B", "probe"] = "D"
        assert fast._probe_numbering() is None
        assert {c.probe for c in condition(fast).curves} == {"A", "C", "D"}
