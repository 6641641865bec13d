"""Identification on hard data: split criticals, model order, 2X, review, estimators, coverage.

Truth comes from the closed-form unbalance response of each mode (Rao, *Mechanical
Vibrations*, 2011, sec. 3.7) summed over modes (modal superposition, Ewins 2000, ch. 2);
the API AF of a mode from the closed form of ``runup.fit.models`` (checked against scipy in
test_fit_models.py).
"""

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose

from runup import identify
from runup.fit.models import amplification_factor_from_damping
from runup.review import read_review
from runup.run import Probe
from runup.synthetic import SyntheticMode, SyntheticProbe, synthetic_run


def _split_run(seed=0, noise=0.01):
    """Two modes 6.5 % apart: one horizontal-dominant, one vertical-dominant, probes at -45/+45 deg."""
    modes = [SyntheticMode(5000.0, 0.04), SyntheticMode(5325.0, 0.045)]
    probes = [
        SyntheticProbe("X", (10 * np.exp(0.2j), 2.5 * np.exp(1.5j)), 3 * np.exp(0.5j), "B1", -45),
        SyntheticProbe("Y", (2.0 * np.exp(-1.0j), 9 * np.exp(-0.3j)), 2 * np.exp(2.0j), "B1", 45),
    ]
    speed = np.linspace(500.0, 9000.0, 700)
    return synthetic_run(speed, modes=modes, probes=probes, noise_fraction_of_peak=noise, seed=seed), modes


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_split_critical_reported_as_one_mode_with_two_speeds(seed):
    """A split pair is reported once, flagged split, both speeds within 0.5 %, each branch's
    dominant probe the one that sees it most."""
    run, modes = _split_run(seed)
    result = identify(run)
    split = [c for c in result.criticals if c.split is not None]
    assert len(split) == 1, [c.natural_speed_rpm for c in result.criticals]
    assert len(result.criticals) == 1
    pair = split[0].split
    assert "split_critical" in split[0].flags
    assert abs(pair.lower.natural_speed_rpm / modes[0].natural_speed_rpm - 1) < 0.005
    assert abs(pair.upper.natural_speed_rpm / modes[1].natural_speed_rpm - 1) < 0.005
    assert (pair.lower.dominant_probe, pair.upper.dominant_probe) == ("X", "Y")
    assert math.isfinite(pair.lower.direction_deg) and math.isfinite(pair.upper.direction_deg)


def test_major_axis_detail_is_reported_for_an_xy_pair():
    """Each critical carries the half-power result on the major axis of the X–Y pair."""
    run, _ = _split_run(4)
    c = identify(run).criticals[0]
    major = [d for d in c.detail if d.evidence == "major_axis"]
    assert len(major) == 1 and major[0].probe == "B1 major axis" and major[0].half_power is not None


def test_major_axis_of_a_dense_pair_survives_rows_missing_on_one_probe():
    """A dense X–Y record (40,000 samples; points averaged at 0.1 % speed resolution) with
    half of one probe's rows missing (bin means of X and Y then never share a speed) keeps its
    major-axis detail: points pair up by their speed bin; its
    peak lies at the single-mode peak speed Omega_n / sqrt(1 - 2 zeta^2) (Rao 2011) within
    1 % (the major axis mixes both probes' noise)."""
    mode = SyntheticMode(4000.0, 0.05)
    probes = [
        SyntheticProbe("X", (10 * np.exp(0.2j),), 2 * np.exp(0.5j), "B1", -45),
        SyntheticProbe("Y", (10 * np.exp(0.2j - 1.5708j),), 2 * np.exp(2.0j), "B1", 45),
    ]
    speed = np.linspace(500.0, 8000.0, 40_000)
    run = synthetic_run(speed, modes=[mode], probes=probes, noise_fraction_of_peak=0.02, seed=7)
    df = run.samples.copy()
    rows_x = np.flatnonzero(df["probe"].to_numpy() == "X")
    df.loc[np.random.default_rng(7).choice(rows_x, rows_x.size // 2, replace=False), "amplitude_um_pp"] = np.nan
    (c,) = identify(type(run)(run.metadata, df)).criticals
    (major,) = [d for d in c.detail if d.evidence == "major_axis"]
    peak = mode.natural_speed_rpm / math.sqrt(1 - 2 * mode.damping_ratio**2)
    assert abs(major.peak_speed_rpm / peak - 1) < 0.01
    assert major.half_power is not None and major.half_power.amplification_factor is not None


def test_close_modes_on_one_probe_resolved_by_model_order_selection():
    """Two modes 7 % apart seen by one probe as one merged hump are resolved into two (BIC)."""
    speed = np.linspace(1000.0, 8000.0, 800)
    modes = [SyntheticMode(4000.0, 0.05), SyntheticMode(4280.0, 0.05)]
    probes = [SyntheticProbe("A", (8.0, 6.0), 1.0)]  # in phase: one merged peak (detected once)
    run = synthetic_run(speed, modes=modes, probes=probes, noise_fraction_of_peak=0.005, seed=3)
    result = identify(run)
    found = sorted(c.natural_speed_rpm for c in result.criticals)
    assert len(found) == 2, found
    assert_allclose(found, [4000.0, 4280.0], rtol=0.005)
    added = [c for c in result.criticals if any("model-order selection" in n for n in c.notes)]
    assert added, "one mode must say it was added by model-order selection"


def test_second_order_resonance_reported_at_twice_the_shaft_speed():
    """A 2X resonance at shaft speed N is a mode at 2N, tagged seen in 2X."""
    run, _ = _split_run(5)
    df = run.samples.copy()
    rng = np.random.default_rng(8)
    two = df[df["probe"] == "X"].copy()
    r = 2 * two["speed_rpm"].to_numpy() / 8000.0  # 2X excitation of a mode at 8,000 cpm
    x = 3.0 * r**2 / (1 - r**2 + 2j * 0.05 * r) + 0.02 * (rng.standard_normal(r.size) + 1j * rng.standard_normal(r.size))
    two["order"] = 2
    two["amplitude_um_pp"] = np.abs(x)
    two["phase_lag_deg"] = np.degrees(-np.angle(x)) % 360
    samples = __import__("pandas").concat([df, two], ignore_index=True)
    samples["row"] = np.arange(1, len(samples) + 1)
    run2 = type(run)(run.metadata, samples)
    two_x = [c for c in identify(run2).criticals if c.order == 2]
    assert len(two_x) == 1
    c = two_x[0]
    assert abs(c.natural_speed_rpm / 8000.0 - 1) < 0.005
    assert abs(c.shaft_speed_rpm - c.speed_rpm / 2) < 1e-9 and "seen_in_2X" in c.flags


def test_review_rejects_accepts_and_adds_with_reasons(tmp_path):
    """A review file rejects a critical (reason kept), and adds a mode where none was detected."""
    speed = np.linspace(500.0, 9000.0, 600)
    modes = [SyntheticMode(3000.0, 0.04), SyntheticMode(6500.0, 0.06)]
    probes = [SyntheticProbe("A", (6.0, 5.0j), 1.0 + 1.0j)]
    run = synthetic_run(speed, modes=modes, probes=probes, noise_fraction_of_peak=0.01, seed=2)
    review = tmp_path / "review.toml"
    review.write_text(
        "# synthetic review\n"
        '[[reject]]\nspeed_rpm = 3010\nreason = "belongs to the neighbouring machine (synthetic)"\n'
        '[[add]]\nspeed_rpm = 6500\nreason = "seen on the casing (synthetic)"\n'
    )
    result = identify(run, review=read_review(review))
    speeds = [c.natural_speed_rpm for c in result.criticals]
    assert all(abs(s - 3000) > 100 for s in speeds)
    assert any("rejected by review: belongs to the neighbouring machine" in r for r in result.rejected)
    assert any(abs(s / 6500 - 1) < 0.01 for s in speeds)


def test_review_file_errors_are_clear(tmp_path):
    """A review entry without a reason, or with an unknown key, is refused naming the entry."""
    from runup.errors import DataFormatError

    f = tmp_path / "r.toml"
    f.write_text("[[reject]]\nspeed_rpm = 100\n")
    with pytest.raises(DataFormatError, match="reason is required"):
        read_review(f)
    f.write_text('[[reject]]\nspeed_rpm = 100\nreason = "x"\nspeed = 3\n')
    with pytest.raises(DataFormatError, match="unknown key"):
        read_review(f)


def test_estimator_table_lists_four_estimators_with_headline():
    """Half-power, phase-slope, circle-fit and global-fit AF side by side; headline global fit."""
    speed = np.linspace(300.0, 6000.0, 500)
    run = synthetic_run(speed, modes=[SyntheticMode(3000.0, 0.06)], probes=[SyntheticProbe("A", (9.0,), 2.0)],
                        noise_fraction_of_peak=0.01, seed=1)
    c = identify(run).criticals[0]
    table = c.estimators
    assert [r.estimator for r in table.rows] == ["global_fit", "half_power", "phase_slope", "circle_fit"]
    assert table.headline == "global_fit"
    af = amplification_factor_from_damping(0.06)
    for r in table.rows:  # an isolated mode with 1 % noise: every estimator within 10 % of the truth
        assert abs(r.amplification_factor / af - 1) < 0.10, r
    assert "estimators_disagree" not in c.flags


def test_natural_speed_interval_coverage_by_monte_carlo():
    """Nominal 95 % intervals of natural speed and damping from the whole pipeline cover the
    truth in 90-99 % of seeded runs (binomial s.e. 2.2 % at 100 runs)."""
    hits_wn = hits_z = 0
    trials = 100
    for seed in range(trials):
        rng = np.random.default_rng(1000 + seed)
        wn, zeta = float(rng.uniform(3000, 6000)), float(rng.uniform(0.03, 0.12))
        speed = np.linspace(0.1 * wn, 1.8 * wn, 250)
        probes = [SyntheticProbe("A", (10 * np.exp(1j * rng.uniform(0, 6.3)),), 2 * np.exp(1j * rng.uniform(0, 6.3)))]
        run = synthetic_run(speed, modes=[SyntheticMode(wn, zeta)], probes=probes, noise_fraction_of_peak=0.03,
                            seed=seed)
        cs = identify(run).criticals
        assert len(cs) == 1
        hits_wn += wn in cs[0].natural_speed_ci95_rpm
        hits_z += zeta in cs[0].damping_ratio_ci95
    assert 0.90 <= hits_wn / trials <= 0.99
    assert 0.90 <= hits_z / trials <= 0.99


def test_probe_metadata_unused_when_angles_unknown():
    """Without mounting angles no major axis is computed, identification still works."""
    speed = np.linspace(500.0, 6000.0, 300)
    run = synthetic_run(speed, modes=[SyntheticMode(3000.0, 0.05)],
                        probes=[SyntheticProbe("A", (8.0,), 1.0), SyntheticProbe("B", (5.0j,), 1.0)],
                        noise_fraction_of_peak=0.01, seed=2)
    assert all(p.angle_deg is None for p in run.metadata.probes) and Probe("A").angle_deg is None
    c = identify(run).criticals[0]
    assert not [d for d in c.detail if d.evidence == "major_axis"]
