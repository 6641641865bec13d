"""Tests of synchronous vectors from raw waveforms (runup.vectors).

All signals are synthetic, built exactly: shaft angle from a linear speed ramp by its
closed-form integral ``theta(t) = 2 pi (f0 t + a t^2 / 2)``, one reference pulse when
``theta = 2 pi k``, probe signal ``sum A_n cos(n theta - phi_n) + noise``.  The truth of
revolution ``k`` is ``A_n``, ``phi_n`` and the mean speed ``60 / (t_{k+1} - t_k)`` with
``t_k = 2k / (f0 + sqrt(f0^2 + 2 a k))`` (root of ``f0 t + a t^2/2 = k``, written so that
it holds for accelerating and decelerating ramps).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose

import runup
from runup.errors import DataFormatError
from runup.io.waveform import blocks_from_arrays
from runup.pulses import detect_edges, reference_levels, validate_edges
from runup.run import SAMPLE_COLUMNS, Run, RunMetadata
from runup.vectors import synchronous_vectors

FS_HZ = 25600.0
HARMONICS = ((1, 50.0, 30.0), (2, 10.0, 100.0), (3, 5.0, 200.0))  # (order, um pp, lag deg)


def pulse_times(f0_hz: float, a_hz_per_s: float, n: int) -> np.ndarray:
    """Closed-form times of shaft revolutions 0..n-1 for speed f0 + a t (rev/s)."""
    k = np.arange(n)
    return 2.0 * k / (f0_hz + np.sqrt(f0_hz**2 + 2.0 * a_hz_per_s * k))


def reference_signal(rev: np.ndarray, *, rng, glitch_rev=None, missing_rev=None) -> np.ndarray:
    """Synthetic notch signal: -2 V pulse on -8 V, 8 deg edges, 50 % point at theta = 2 pi k.

    60 dB reference SNR (noise 2 mV rms on a 2 V pulse): a notch under a proximity probe
    gives volts against millivolts of noise (common practice).
    """
    ramp = 8.0
    psi = (np.mod(rev + 0.5, 1.0) - 0.5) * 360.0
    pulse = np.minimum(np.clip((psi + ramp / 2) / ramp, 0, 1), np.clip((20 + ramp / 2 - psi) / ramp, 0, 1))
    if missing_rev is not None:
        pulse[np.abs(rev - missing_rev) < 0.3] = 0.0
    if glitch_rev is not None:  # a short spurious pulse 150 deg into a revolution
        pulse = np.maximum(pulse, np.clip(1 - np.abs((rev - glitch_rev) * 360 - 150) / 3, 0, 1))
    return -8.0 - 2.0 * pulse + rng.normal(0.0, 2e-3, rev.size)


def synth(f0_hz, a_hz_per_s, duration_s, *, seed=0, snr_db=40.0, harmonics=HARMONICS, **ref):
    """(time_s, reference, probe signal um) of a ramp; noise SNR relative to the 1X power."""
    rng = np.random.default_rng(seed)
    t = np.arange(int(duration_s * FS_HZ)) / FS_HZ
    rev = f0_hz * t + 0.5 * a_hz_per_s * t * t
    theta = 2 * np.pi * rev
    x = sum(a / 2 * np.cos(n * theta - np.radians(p)) for n, a, p in harmonics)
    a1 = harmonics[0][1] / 2
    x = x + rng.normal(0.0, a1 / np.sqrt(2) / 10 ** (snr_db / 20), t.size)
    return t, reference_signal(rev, rng=rng, **ref), x


def vectors(t, ref, x, *, block_rows=50000, **options):
    pulses = validate_edges(detect_edges([(t, ref)], levels=reference_levels(ref)))
    return synchronous_vectors(
        blocks_from_arrays(t, ref, np.atleast_2d(x), block_rows=block_rows),
        probes=[f"P{i}" for i in range(np.atleast_2d(x).shape[0])],
        pulses=pulses,
        metadata=RunMetadata(run_id="synthetic"),
        **options,
    )


def wrapped(d):
    return (np.asarray(d) + 180.0) % 360.0 - 180.0


@pytest.mark.parametrize(
    ("f0_hz", "a_hz_per_s", "duration_s"),
    [(10.0, 20.0, 10.0), (150.0, -12.0, 10.0)],
    ids=["accelerating", "decelerating"],
)
def test_ramp_with_harmonics_noise_double_trigger_and_missing_pulse(f0_hz, a_hz_per_s, duration_s):
    """1X within 0.5 % and 1 deg, speed within 0.1 %, on every revolution of a ramp at 40 dB.

    The ramp is harsh (600 -> 12600 rpm in 10 s; the speed changes by up to 13 % within
    the first revolutions) and the record has 2X and 3X harmonics, one double trigger and
    one missing pulse, which are corrected and flagged.
    """
    t, ref, x = synth(f0_hz, a_hz_per_s, duration_s, glitch_rev=50.3, missing_rev=80)
    sv = vectors(t, ref, x)
    kinds = {f.kind for f in sv.pulses.flags}
    assert {"double_trigger_removed", "missing_pulse_inserted"} <= kinds
    # The record starts on the rising edge of pulse 0, which is not an edge: the first
    # detected edge is revolution 1 of the closed form.
    truth_t = pulse_times(f0_hz, a_hz_per_s, sv.pulses.edge_times_s.size + 1)[1:]
    truth_speed = 60.0 / np.diff(truth_t)
    s = sv.run.samples
    one, two = s[s["order"] == 1], s[s["order"] == 2]
    assert len(one) == truth_speed.size  # every revolution measured, none lost
    # Speed: closed-form mean speed per revolution; 0.1 % is the brief's bound (the
    # measured error is ~0.01 %, from edge interpolation on an 8 deg edge).
    assert_allclose(one["speed_rpm"], truth_speed, rtol=1e-3)
    # 1X: DFT noise std is sigma sqrt(2/M) = 0.088 % of A at 40 dB and M = 128
    # (Gaussian noise through a 128-point DFT); 0.5 % is the brief's bound, > 5 sigma.
    assert_allclose(one["amplitude_um_pp"], 50.0, rtol=5e-3)
    assert np.abs(wrapped(one["phase_lag_deg"] - 30.0)).max() < 1.0
    # 2X is 1/5 of 1X, so its relative noise is 5x larger: 0.44 % std; 2.5 % is > 5 sigma.
    assert_allclose(two["amplitude_um_pp"], 10.0, rtol=2.5e-2)
    # 2X phase noise std 0.25 deg (0.0044 rad); 1.5 deg is 6 sigma.
    assert np.abs(wrapped(two["phase_lag_deg"] - 100.0)).max() < 1.5


def test_noise_free_ramp_is_exact_to_interpolation_error():
    """Without probe noise the vectors match the closed form to 1e-3 and 0.05 n deg.

    The residual is the linear interpolation between samples (about (pi f / fs)^2 / 6 in
    amplitude at 3X and top speed) and the edge jitter from the 60 dB reference noise:
    2 mV on a 2 V, 8 deg edge is 0.008 deg rms, n times that at order n; 0.05 n deg is
    six of those.
    """
    t, ref, x = synth(10.0, 20.0, 10.0, snr_db=300.0, glitch_rev=50.3, missing_rev=80)
    s = vectors(t, ref, x, orders=(1, 2, 3)).run.samples
    for n, a, p in HARMONICS:
        part = s[s["order"] == n]
        assert_allclose(part["amplitude_um_pp"], a, rtol=1e-3)  # see docstring
        assert np.abs(wrapped(part["phase_lag_deg"] - p)).max() < 0.05 * n


def test_chunked_processing_is_identical_to_one_block():
    """Block size (1,237 rows, 50,000 rows, the whole record) does not change any result."""
    t, ref, x = synth(20.0, 10.0, 4.0, glitch_rev=30.2, missing_rev=40)
    whole = vectors(t, ref, x, block_rows=t.size)
    for rows in (1237, 50000):
        part = vectors(t, ref, x, block_rows=rows)
        pd.testing.assert_frame_equal(part.run.samples, whole.run.samples, check_exact=True)
        pd.testing.assert_frame_equal(part.direct, whole.direct, check_exact=True)


def test_direct_peak_to_peak_matches_the_waveform():
    """Direct pp equals max - min of the harmonic sum over each revolution (noise free).

    Reference: the closed-form signal evaluated on a 20x finer grid (numerical maximum;
    sampling at 25.6 kHz misses the true extreme by at most ~0.1 % at these speeds).
    """
    t, ref, x = synth(30.0, 5.0, 3.0, snr_db=300.0)
    sv = vectors(t, ref, x)
    theta = np.linspace(0, 2 * np.pi, 20000)
    wave = sum(a / 2 * np.cos(n * theta - np.radians(p)) for n, a, p in HARMONICS)
    # 0.2 %: the sampling loss above plus the exact-edge difference of partial samples
    assert_allclose(sv.direct["direct_um_pp"], wave.max() - wave.min(), rtol=2e-3)


def test_probe_phase_reference_subtracts_order_times_angle():
    """phase_reference='probe' gives lag - n * delta (delta = reference-to-probe angle)."""
    t, ref, x = synth(20.0, 5.0, 3.0)
    a = vectors(t, ref, x).run.samples
    b = vectors(t, ref, x, phase_reference="probe", angle_from_reference_deg={"P0": 45.0}).run.samples
    # definition in docs/waveforms.md (virtual reference sensor at the probe)
    assert_allclose(wrapped(a["phase_lag_deg"] - b["phase_lag_deg"] - 45.0 * a["order"]), 0.0, atol=1e-9)
    with pytest.raises(DataFormatError, match="angle_from_reference_deg"):
        vectors(t, ref, x, phase_reference="probe")


def test_probe_angle_appears_in_the_measured_lag():
    """A probe delta degrees after the reference sensor sees the same rotor delta later.

    Synthetic check of the convention: the probe signal is the rotor pattern delayed by
    shaft angle delta, x(theta - delta); its measured 1X lag is phi + delta, and with
    phase_reference='probe' it is phi again (hand calculation).
    """
    rng = np.random.default_rng(4)
    t = np.arange(int(3.0 * FS_HZ)) / FS_HZ
    rev = 20.0 * t + 2.5 * t * t
    theta, delta = 2 * np.pi * rev, 60.0
    x = 20.0 * np.cos(theta - np.radians(delta) - np.radians(30.0))
    ref = reference_signal(rev, rng=rng)
    measured = vectors(t, ref, x, orders=(1,)).run.samples
    assert np.abs(wrapped(measured["phase_lag_deg"] - 90.0)).max() < 0.05  # 30 + 60
    rotor = vectors(t, ref, x, orders=(1,), phase_reference="probe", angle_from_reference_deg={"P0": delta})
    assert np.abs(wrapped(rotor.run.samples["phase_lag_deg"] - 30.0)).max() < 0.05


def test_block_of_revolutions_is_the_mean_of_single_revolutions():
    """revolutions_per_vector=N: complex mean of N per-revolution vectors (linearity of
    the DFT over concatenated revolutions) and mean speed 60 N / span."""
    t, ref, x = synth(20.0, 5.0, 3.0)
    one = vectors(t, ref, x).run.samples
    four = vectors(t, ref, x, revolutions_per_vector=4)
    s = four.run.samples
    z = one["amplitude_um_pp"].to_numpy() * np.exp(-1j * np.radians(one["phase_lag_deg"].to_numpy()))
    z1 = z[one["order"].to_numpy() == 1]
    g = z1[: z1.size // 4 * 4].reshape(-1, 4).mean(axis=1)
    got = s[s["order"] == 1]
    assert_allclose(got["amplitude_um_pp"], np.abs(g), rtol=1e-12)  # same arithmetic
    edges = four.pulses.edge_times_s
    n = len(got)
    assert_allclose(got["speed_rpm"], 240.0 / (edges[4 : 4 * n + 1 : 4] - edges[0 : 4 * n : 4]), rtol=1e-12)


def test_jeffcott_runup_through_waveforms_gives_the_same_critical():
    """Waveforms of a closed-form Jeffcott run-up, identified, give the same critical
    speed (within 0.3 %) as the closed-form vectors at the same speeds.

    Response ``A r^2 / (1 - r^2 + 2 j zeta r)`` (Jeffcott rotor, unbalance response) at
    the instantaneous speed, 600 -> 6000 rpm in 30 s, critical 3000 rpm, zeta 0.05.
    """
    f0, a, dur, nat, zeta = 10.0, 3.0, 30.0, 3000.0, 0.05
    rng = np.random.default_rng(11)
    t = np.arange(int(dur * FS_HZ)) / FS_HZ
    rev = f0 * t + 0.5 * a * t * t
    speed_inst = 60.0 * (f0 + a * t)

    def response(speed_rpm, phase_deg):
        r = speed_rpm / nat
        return 40.0 * np.exp(-1j * np.radians(phase_deg)) * r**2 / (1 - r**2 + 2j * zeta * r)

    probes = (("X", 20.0), ("Y", 110.0))
    x = np.stack([np.real(0.5 * response(speed_inst, p) * np.exp(2j * np.pi * rev)) for _, p in probes])
    x = x + rng.normal(0.0, 0.05, x.shape)
    ref = reference_signal(rev, rng=rng)
    pulses = validate_edges(detect_edges([(t, ref)], levels=reference_levels(ref)))
    sv = synchronous_vectors(
        blocks_from_arrays(t, ref, x, block_rows=65536),
        probes=[n for n, _ in probes],
        pulses=pulses,
        metadata=RunMetadata(run_id="synthetic-jeffcott", direction="startup"),
        orders=(1,),
    )
    s = sv.run.samples
    direct = s.copy()
    for name, phase in probes:
        m = direct["probe"] == name
        z = response(direct.loc[m, "speed_rpm"].to_numpy(), phase)
        direct.loc[m, "amplitude_um_pp"] = np.abs(z)
        direct.loc[m, "phase_lag_deg"] = -np.degrees(np.angle(z))
    closed = Run(RunMetadata(run_id="synthetic-jeffcott", direction="startup"), direct[list(SAMPLE_COLUMNS)])
    from_wave = runup.identify(sv.run).criticals
    from_closed = runup.identify(closed).criticals
    assert len(from_wave) == len(from_closed) == 1
    # 0.3 %: the brief's bound; the per-revolution averaging of a changing response and
    # the noise are the only differences between the two paths.
    assert_allclose(from_wave[0].speed_rpm, from_closed[0].speed_rpm, rtol=3e-3)


@pytest.mark.parametrize(
    ("options", "match"),
    [
        ({"orders": (1, 64)}, "points per revolution"),
        ({"orders": (0,)}, "orders must be"),
        ({"points_per_rev": 4}, "points_per_rev"),
        ({"revolutions_per_vector": 0}, "revolutions_per_vector"),
        ({"phase_reference": "rotor"}, "phase_reference"),
    ],
)
def test_bad_options_raise(options, match):
    """Each bad option raises DataFormatError naming the option."""
    t, ref, x = synth(20.0, 0.0, 1.0)
    with pytest.raises(DataFormatError, match=match):
        vectors(t, ref, x, **options)


def test_too_few_samples_per_revolution_raises():
    """Order 8 at 12,000 rpm sampled at 2 kHz (10 samples/rev < 32) is refused."""
    fs = 2000.0
    t = np.arange(2000) / fs
    rev = 200.0 * t
    ref = reference_signal(rev, rng=np.random.default_rng(0))
    ref = np.where(np.mod(rev, 1.0) < 0.2, -10.0, -8.0)  # a wide pulse, seen at this rate
    with pytest.raises(DataFormatError, match="higher sample rate"):
        vectors(t, ref, np.cos(2 * np.pi * rev), orders=(1, 8))
