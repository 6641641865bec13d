"""Identification of critical speeds end to end, against closed forms and scipy.

References
----------
* Single mode: Jeffcott-rotor unbalance response (Rao, *Mechanical Vibrations*, 2011,
  sec. 3.7), API half-power AF of it derived in ``runup.fit.models``.
* Several modes: a two-mass rotor on springs computed independently with
  ``scipy.signal`` (state space, frequency response) and ``scipy.linalg.eig`` (natural
  frequency ``|lambda|`` and damping ratio ``-Re(lambda)/|lambda|`` of each eigenvalue).
"""

import math

import numpy as np
import pandas as pd
import pytest
import scipy.linalg
import scipy.signal
from numpy.testing import assert_allclose

from runup import Run, RunMetadata, condition, identify, to_frame
from runup.fit.models import amplification_factor_from_damping, unbalance_response
from runup.synthetic import SyntheticMode, SyntheticProbe, synthetic_run
from runup.units import amplitude_of, phase_lag_deg_of


def _run_from_response(speed, responses, *, time_s=None):
    """A long-layout Run from complex responses per probe (probes interleaved per sample)."""
    frames = []
    for name, x in responses.items():
        frames.append(pd.DataFrame({
            "speed_rpm": speed, "probe": name, "order": 1, "amplitude_um_pp": amplitude_of(x),
            "phase_lag_deg": phase_lag_deg_of(x, unwrap=False),
            "time_s": np.full(speed.size, np.nan) if time_s is None else time_s, "k": np.arange(speed.size),
        }))
    df = pd.concat(frames).sort_values("k", kind="stable").drop(columns="k").reset_index(drop=True)
    df["row"] = np.arange(1, len(df) + 1)
    return Run(RunMetadata(), df)


CASES = [  # (zeta, noise fraction of peak, seed): the range zeta 0.02-0.2, noise 1-5 %
    (0.02, 0.01, 1), (0.02, 0.05, 2), (0.05, 0.03, 3), (0.08, 0.05, 4),
    (0.12, 0.02, 5), (0.15, 0.05, 6), (0.2, 0.01, 7), (0.2, 0.05, 8),
]


def _single_critical_within_targets(result, wn, zeta):
    """The one critical of ``result``, checked against issue 2's targets: natural speed within
    0.5 %, damping within 15 %, AF within 10 % of the noise-free half-power AF (Jeffcott
    closed form, Rao 2011; AF of it from ``runup.fit.models``)."""
    assert len(result.criticals) == 1, result.rejected
    c = result.criticals[0]
    assert abs(c.natural_speed_rpm / wn - 1) < 0.005
    assert abs(c.damping_ratio / zeta - 1) < 0.15
    assert abs(c.amplification_factor / amplification_factor_from_damping(zeta) - 1) < 0.10
    return c


@pytest.mark.parametrize(("zeta", "noise", "seed"), CASES)
def test_single_mode_with_runout_meets_accuracy_targets(zeta, noise, seed):
    """Seeded single-mode run-ups with runout: natural speed within 0.5 %, damping within
    15 %, AF within 10 % of the noise-free half-power AF (Jeffcott closed form)."""
    rng = np.random.default_rng(seed)
    wn = float(rng.uniform(2500, 8000))
    probes = [
        SyntheticProbe("A", (12 * np.exp(1j * rng.uniform(0, 6.3)),), 4 * np.exp(1j * rng.uniform(0, 6.3))),
        SyntheticProbe("B", (8 * np.exp(1j * rng.uniform(0, 6.3)),), 3 * np.exp(1j * rng.uniform(0, 6.3))),
    ]
    speed = np.linspace(0.08 * wn, 2.0 * wn, 400)
    run = synthetic_run(speed, modes=[SyntheticMode(wn, zeta)], probes=probes, noise_fraction_of_peak=noise, seed=seed)
    c = _single_critical_within_targets(identify(run), wn, zeta)
    assert c.evidence in ("peak+phase", "peak")
    assert set(c.probes) == {"A", "B"}
    # both senses of "critical speed" reported, tied by the single-mode relation (Rao 2011)
    assert_allclose(c.speed_rpm, c.natural_speed_rpm / math.sqrt(1 - 2 * c.damping_ratio**2), rtol=1e-12)
    if zeta < 0.17:  # AF 2.5 <-> zeta 0.174 (derived): API 684 critically damped rule
        assert "critically_damped" not in c.flags
    else:
        assert "critically_damped" in c.flags


@pytest.mark.parametrize(("zeta", "seed"), [(0.015, 21), (0.06, 22), (0.15, 23)])
def test_long_dense_record_meets_accuracy_targets(zeta, seed):
    """A 60,000-point run-up (points averaged at 0.1 % speed resolution, sample counts kept)
    meets the single-mode targets against the Jeffcott closed form (Rao 2011), and finds no
    mode in the noise: dense records are no easier to fool than coarse ones."""
    rng = np.random.default_rng(seed)
    wn = float(rng.uniform(3000, 7000))
    probes = [SyntheticProbe("A", (10 * np.exp(1j * rng.uniform(0, 6.3)),), 3 * np.exp(1j * rng.uniform(0, 6.3)))]
    speed = np.sort(rng.uniform(0.1 * wn, 1.9 * wn, 60_000))
    run = synthetic_run(speed, modes=[SyntheticMode(wn, zeta)], probes=probes, noise_fraction_of_peak=0.05, seed=seed)
    c = _single_critical_within_targets(identify(run), wn, zeta)
    # the intervals still describe the per-sample noise (60,000 samples, not the merged points)
    assert c.natural_speed_ci95_rpm is not None
    assert c.natural_speed_ci95_rpm.low <= wn <= c.natural_speed_ci95_rpm.high


def test_flat_runout_and_noise_report_no_critical():
    """A record with no resonance in range gives an empty list and says so."""
    speed = np.linspace(500.0, 6000.0, 500)
    rng = np.random.default_rng(9)
    x = (3 + 2j) + 0.05 * (rng.standard_normal(500) + 1j * rng.standard_normal(500))
    # a mode far above the range adds only a slowly rising baseline (Rao 2011 model, r << 1)
    x = x + unbalance_response(speed, natural_speed_rpm=25000.0, damping_ratio=0.05, modal_constant=20)
    result = identify(_run_from_response(speed, {"A": x}))
    assert result.criticals == ()
    assert to_frame(result.criticals).empty


def _two_mass_rotor():
    """Two masses on springs, Rayleigh damping; returns M, K, C and an unbalance location."""
    m = np.diag([80.0, 120.0])  # kg
    k = np.array([[3.0e7, -1.2e7], [-1.2e7, 4.5e7]])  # N/m
    c = 1.2e-4 * k + 10.0 * m  # Rayleigh damping (zeta about 0.04 and 0.05): classical modes, exactly modal responses
    return m, k, c


def test_two_modes_of_a_two_mass_rotor_match_scipy_eigenvalues():
    """Criticals of an MDOF rotor computed with scipy.signal agree with its eigenvalues
    (|lambda| natural speed within 0.3 %, damping ratio within 10 %)."""
    m, k, c = _two_mass_rotor()
    n = 2
    a = np.block([[np.zeros((n, n)), np.eye(n)], [-np.linalg.solve(m, k), -np.linalg.solve(m, c)]])
    b = np.vstack([np.zeros((n, n)), np.linalg.inv(m)])
    lam = scipy.linalg.eigvals(a)
    lam = lam[lam.imag > 0]
    wn_rpm = np.sort(np.abs(lam)) * 60 / (2 * np.pi)
    zeta = (-lam.real / np.abs(lam))[np.argsort(np.abs(lam))]
    speed = np.linspace(0.1 * wn_rpm[0], 1.5 * wn_rpm[1], 700)
    omega = speed * 2 * np.pi / 60
    responses = {}
    force_dir = np.array([1.0, 0.6])  # unbalance on both masses (kg m), in phase
    for i, name in enumerate(["M1", "M2"]):
        out = np.zeros((1, 2 * n))
        out[0, i] = 1.0  # displacement of mass i
        num, den = scipy.signal.ss2tf(a, b @ force_dir[:, None], out, np.zeros((1, 1)))
        _, hi = scipy.signal.freqs(num[0], den, worN=omega)
        x_m = 1e-4 * omega**2 * hi  # unbalance force m e w^2, metres
        responses[name] = x_m * 2e6  # um pp (2 x 0-p)
    result = identify(_run_from_response(speed, responses))
    found = sorted(c.natural_speed_rpm for c in result.criticals)
    assert len(found) == 2, result.rejected
    assert_allclose(found, wn_rpm, rtol=3e-3)
    zetas = [c.damping_ratio for c in sorted(result.criticals, key=lambda c: c.natural_speed_rpm)]
    assert_allclose(zetas, zeta, rtol=0.10)


def test_startup_then_coastdown_gives_criticals_per_segment():
    """An up-and-down record is split into two labelled segments, each with its critical."""
    up = np.linspace(400.0, 6000.0, 300)
    speed = np.concatenate([up, up[::-1][1:]])
    x = unbalance_response(speed, natural_speed_rpm=3200.0, damping_ratio=0.05, modal_constant=10) + (2 - 1j)
    result = identify(_run_from_response(speed, {"A": x}, time_s=np.arange(speed.size) * 0.1))
    segs = result.conditioned.segments
    assert [s.direction for s in segs] == ["startup", "coastdown"]
    assert [c.direction for c in result.criticals] == ["startup", "coastdown"]
    for c in result.criticals:
        assert abs(c.natural_speed_rpm / 3200 - 1) < 0.002  # noise-free: fit error only


def test_identify_is_deterministic_and_frame_has_one_row_per_critical():
    """The same input gives the same numbers; to_frame gives one row per critical."""
    speed = np.linspace(300.0, 9000.0, 400)
    x = unbalance_response(speed, natural_speed_rpm=3000.0, damping_ratio=0.04, modal_constant=9)
    x = x + unbalance_response(speed, natural_speed_rpm=7000.0, damping_ratio=0.07, modal_constant=6j)
    run = _run_from_response(speed, {"A": x})
    r1, r2 = identify(run), identify(condition(run))
    assert [c.natural_speed_rpm for c in r1.criticals] == [c.natural_speed_rpm for c in r2.criticals]
    frame = to_frame(r1.criticals)
    assert len(frame) == 2 and list(frame["natural_speed_rpm"]) == sorted(frame["natural_speed_rpm"])
