"""Fingerprints: grid curves, major axis, criticals, slow roll, running speed, tags, verdicts.

All runs here are synthetic (runup.synthetic, invented modes of known truth).
"""

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose

from runup.criteria import judge, load_rules
from runup.errors import DataFormatError
from runup.fingerprint import fingerprint, interp_complex, speed_grid_rpm
from runup.identify import identify
from runup.run import OperatingSpeeds
from runup.synthetic import SyntheticMode, SyntheticProbe, synthetic_run


def synthetic_identification(
    *, machine_id="K-301", run_id="r001", natural_rpm=4000.0, damping=0.06, runout=(3 + 1j, 1 - 2j),
    mcs_rpm=8000.0, noise=0.005, seed=0, low_rpm=500.0, high_rpm=9000.0, n=300,
):
    """A small synthetic startup (invented): one mode, X-Y probes at -45/+45 deg on plane DE."""
    speed = np.linspace(low_rpm, high_rpm, n)
    time_s = np.linspace(0.0, 300.0, n)
    probes = [SyntheticProbe("DE-X", (10 + 0j,), runout[0], "DE", -45.0),
              SyntheticProbe("DE-Y", (0 + 10j,), runout[1], "DE", 45.0)]
    op = OperatingSpeeds(None if mcs_rpm is None else 0.75 * mcs_rpm, mcs_rpm, None if mcs_rpm is None else 1.05 * mcs_rpm)
    run = synthetic_run(speed, modes=[SyntheticMode(natural_rpm, damping)], probes=probes, noise_fraction_of_peak=noise,
                        time_s=time_s, seed=seed, machine_id=machine_id, run_id=run_id, operating=op)
    return identify(run)


@pytest.fixture(scope="module")
def ident():
    return synthetic_identification()


def test_grid_is_multiples_of_step_and_nan_outside_measured_range():
    """The grid spans floor(low/step)..ceil(high/step) steps; outside xp the vector is nan (no extrapolation)."""
    grid = speed_grid_rpm(512.0, 1049.0, step_rpm=50.0)
    assert_allclose(grid, np.arange(500.0, 1051.0, 50.0))  # hand-computed: 500, 550, ..., 1050
    z = interp_complex(grid, [512.0, 1049.0], [1 + 1j, 2 + 3j])
    assert math.isnan(z[0].real) and math.isnan(z[-1].real)
    # closed form: linear in real and imaginary part, at 800 rpm t = (800-512)/(1049-512)
    t = (800.0 - 512.0) / (1049.0 - 512.0)
    assert_allclose(z[grid == 800.0][0], (1 + 1j) + t * (1 + 2j), rtol=1e-14)


def test_grid_curves_match_conditioned_curves_at_measured_speeds(ident):
    """Each probe's grid curve equals the conditioned curve where the grid meets a measured speed."""
    fp = fingerprint(ident)
    cond = ident.conditioned.curve("DE-X")
    g = fp.curve("DE-X")
    assert np.all(np.mod(g.speed_rpm, 50.0) == 0)
    # the synthetic speeds start at 500 and end at 9000 rpm, both multiples of 50: exact at the ends
    assert_allclose(g.response_um_pp[0], cond.response_um_pp[0], rtol=1e-12)
    assert_allclose(g.response_um_pp[-1], cond.response_um_pp[-1], rtol=1e-12)
    inside = np.isfinite(g.response_um_pp)
    assert inside.all()
    # independent reader: numpy interp on amplitude of a smooth curve, within 1 % off-resonance
    # (linear interpolation of real/imag vs amplitude differs only at second order in the step)
    far = g.speed_rpm > 5500  # where the response is well above the noise (about 0.4 um here)
    amp_np = np.interp(g.speed_rpm[far], cond.speed_rpm, np.abs(cond.response_um_pp))
    assert_allclose(np.abs(g.response_um_pp[far]), amp_np, rtol=0.01)


def test_major_axis_of_circular_orbit_equals_probe_amplitude():
    """Probes 90 deg apart reading equal amplitudes 90 deg apart in phase describe a circle: major axis = probe pp.

    Closed form: a circular orbit's major and minor axes both equal the diameter each probe reads.
    """
    ident = synthetic_identification(runout=(0j, 0j), noise=0.0)
    fp = fingerprint(ident)
    major = fp.curve("DE", kind="major_axis").response_um_pp
    probe = fp.curve("DE-X").response_um_pp
    ok = np.isfinite(major)
    assert ok.sum() > 100
    assert_allclose(np.abs(major[ok]), np.abs(probe[ok]), rtol=1e-9)  # float round-off of the orbit solve


def test_criticals_sweep_rate_slow_roll_and_running_speed(ident):
    """Criticals keep speeds and 95 % intervals; sweep rate, slow roll and 1X at MCS are carried over."""
    fp = fingerprint(ident)
    c0, p0 = ident.criticals[0], fp.criticals[0]
    assert p0.speed_rpm == c0.speed_rpm and p0.natural_speed_rpm == c0.natural_speed_rpm
    assert p0.natural_speed_ci95_low_rpm == c0.natural_speed_ci95_rpm.low
    assert p0.amplification_factor == c0.amplification_factor and p0.flags == c0.flags
    # closed form: 8,500 rpm swept linearly in 300 s = 28.33 rpm/s (median of equal steps)
    assert_allclose(fp.segments[0].sweep_rate_rpm_per_s, 8500.0 / 300.0, rtol=1e-9)
    assert {s.probe for s in fp.slow_roll} == {"DE-X", "DE-Y"}
    assert_allclose(fp.slow_roll[0].vector_um_pp, ident.conditioned.curve("DE-X").slow_roll.vector_um_pp)
    rs = {r.probe: r for r in fp.running_speed}
    assert rs["DE-X"].speed_rpm == 8000.0 and rs["DE-X"].basis == "max_continuous"
    curve = ident.conditioned.curve("DE-X")
    want = np.interp(8000.0, curve.speed_rpm, curve.response_um_pp.real) + 1j * np.interp(
        8000.0, curve.speed_rpm, curve.response_um_pp.imag)  # numpy as the independent interpolator
    assert_allclose(rs["DE-X"].response_um_pp, want, rtol=1e-12)
    assert fp.sources == ident.conditioned.metadata.sources and fp.tool_version


def test_running_speed_falls_back_to_top_speed_without_mcs():
    """Without a maximum continuous speed, 1X at running speed is taken at each curve's top speed."""
    fp = fingerprint(synthetic_identification(mcs_rpm=None))
    assert {r.basis for r in fp.running_speed} == {"top_speed"}
    assert all(r.speed_rpm == 9000.0 for r in fp.running_speed)


def test_tags_start_time_and_time_key(ident):
    """Tags are sorted pairs; start_time (ISO 8601) becomes the time key, else the run id is."""
    fp = fingerprint(ident, tags={"start": "cold", "start_time": "2024-05-17T08:30", "oil_temp_c": "48"})
    assert fp.tags == (("oil_temp_c", "48"), ("start", "cold"), ("start_time", "2024-05-17T08:30"))
    assert fp.start_time == "2024-05-17T08:30:00" and fp.time_key == fp.start_time
    assert fingerprint(ident).time_key == "r001"


@pytest.mark.parametrize("tags", [{"start_time": "yesterday"}, {"bad key": "x"}, {"k": "two\nlines"}])
def test_bad_tags_raise_one_line_error(ident, tags):
    """A tag key that is not an identifier, a multi-line value or a non-ISO start time is a DataFormatError."""
    with pytest.raises(DataFormatError) as info:
        fingerprint(ident, tags=tags)
    assert "\n" not in str(info.value)


def test_verdicts_are_kept_when_a_check_is_given(ident):
    """With a check result, every margin and vibration verdict is kept with its rule set name."""
    check = judge(ident, rules=load_rules("api617"))
    fp = fingerprint(ident, check=check)
    assert fp.rule_set == "api617"
    assert len(fp.verdicts) == len(check.margins) + len(check.vibration)
    assert {v.kind for v in fp.verdicts} == {"margin", "vibration"}
    assert fingerprint(ident).verdicts == () and fingerprint(ident).rule_set is None
