"""X–Y probe geometry against synthetic orbits built from their definition.

An orbit x(t) = a cos(wt + alpha), y(t) = b cos(wt + beta) is written directly in time
and sampled; what each probe reads is its projection (common practice: a proximity probe
measures the displacement along its axis).  Forward/backward decomposition: Muszynska,
*Rotordynamics*, 2005, ch. 2 (an ellipse is the sum of a forward and a backward circle).
"""

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose

from runup.errors import DataFormatError
from runup.geometry import major_axis_response, orbit, probe_pairs, resolve, virtual_probe
from runup.run import Probe, RunMetadata


def _phasor_of(signal, wt):
    """1X phasor X with signal = Re[X exp(j w t)], by a one-revolution DFT (exact for a sinusoid)."""
    return 2.0 * np.mean(signal * np.exp(-1j * wt))


def _probe_reading(x_t, y_t, angle_deg):
    a = math.radians(angle_deg)
    return -math.sin(a) * x_t + math.cos(a) * y_t


@pytest.mark.parametrize(("angles"), [(-45.0, 45.0), (0.0, 90.0), (-30.0, 75.0)])
def test_resolve_and_virtual_probe_recover_the_time_domain_orbit(angles):
    """Two probes' phasors resolve to the orbit's x, y phasors; a virtual probe reads its projection."""
    wt = np.linspace(0, 2 * np.pi, 512, endpoint=False)
    x_t = 3.0 * np.cos(wt + 0.4)
    y_t = 1.5 * np.cos(wt - 1.1)
    p1 = _phasor_of(_probe_reading(x_t, y_t, angles[0]), wt)
    p2 = _phasor_of(_probe_reading(x_t, y_t, angles[1]), wt)
    x, y = resolve(p1, p2, first_angle_deg=angles[0], second_angle_deg=angles[1])
    assert_allclose([x, y], [_phasor_of(x_t, wt), _phasor_of(y_t, wt)], atol=1e-12)  # exact DFT
    v = virtual_probe(x, y, angle_deg=20.0)
    assert_allclose(v, _phasor_of(_probe_reading(x_t, y_t, 20.0), wt), atol=1e-12)


def test_major_minor_axes_direction_and_whirl_of_an_ellipse():
    """A tilted ellipse traced counter-clockwise: axes, tilt and forward whirl for a ccw rotor."""
    wt = np.linspace(0, 2 * np.pi, 2048, endpoint=False)
    a_major, b_minor, tilt = 4.0, 1.0, math.radians(30.0)  # tilt of the major axis from +x
    u, v = a_major * np.cos(wt + 0.3), b_minor * np.sin(wt + 0.3)  # ccw ellipse in its own axes
    x_t = u * math.cos(tilt) - v * math.sin(tilt)
    y_t = u * math.sin(tilt) + v * math.cos(tilt)
    # runup's vectors are peak-to-peak: twice the zero-to-peak phasor of a sinusoid
    p1 = 2 * _phasor_of(_probe_reading(x_t, y_t, -45.0), wt)
    p2 = 2 * _phasor_of(_probe_reading(x_t, y_t, 45.0), wt)
    orb = orbit([1000.0], [p1], [p2], first_angle_deg=-45.0, second_angle_deg=45.0, rotation="ccw")
    # peak-to-peak axes are twice the semi-axes
    assert_allclose(orb.semi_major_um_pp, [2 * a_major], rtol=1e-9)
    assert_allclose(orb.semi_minor_um_pp, [2 * b_minor], rtol=1e-9)
    # tilt from +x of 30 deg is 30 - 90 = -60 deg from vertical-up (ccw positive)
    assert_allclose(orb.major_axis_angle_deg, [-60.0], atol=1e-9)
    assert orb.forward is not None and bool(orb.forward[0])
    back = orbit([1000.0], [p1], [p2], first_angle_deg=-45.0, second_angle_deg=45.0, rotation="cw")
    assert back.forward is not None and not bool(back.forward[0])  # same orbit, rotor turning cw: backward


def test_major_axis_response_has_the_orbit_extreme_phase():
    """The major-axis vector's lag is the shaft angle at which the orbit reaches its extreme."""
    wt = np.linspace(0, 2 * np.pi, 4096, endpoint=False)
    x_t = 2.0 * np.cos(wt - 0.9)
    y_t = 0.5 * np.cos(wt - 2.0)
    p1 = 2 * _phasor_of(_probe_reading(x_t, y_t, -45.0), wt)  # peak-to-peak vectors
    p2 = 2 * _phasor_of(_probe_reading(x_t, y_t, 45.0), wt)
    orb = orbit([1000.0], [p1], [p2], first_angle_deg=-45.0, second_angle_deg=45.0)
    m = major_axis_response(orb)[0]
    radius = np.hypot(x_t, y_t)
    lag = -np.angle(m)
    i = int(round((lag % (2 * np.pi)) / (2 * np.pi) * wt.size)) % wt.size
    assert_allclose(radius[i], radius.max(), rtol=1e-4)  # grid of 4096 points: 1e-4 in radius
    assert_allclose(abs(m), 2 * radius.max(), rtol=1e-6)


def test_probe_pairs_from_metadata_and_parallel_probes_rejected():
    """Probes of one plane with known angles pair up; parallel probes cannot resolve an orbit."""
    meta = RunMetadata(probes=(Probe("A", "DE", -45), Probe("B", "DE", 45), Probe("C", "NDE", 10), Probe("D", None, 0)))
    pairs = probe_pairs(meta)
    assert [(p.plane, p.first.name, p.second.name) for p in pairs] == [("DE", "A", "B")]
    with pytest.raises(DataFormatError, match="parallel"):
        resolve([1.0], [1.0], first_angle_deg=10.0, second_angle_deg=190.0)


def test_circular_forward_orbit_has_one_whirl_component_of_its_diameter():
    """A circular 2 um pp orbit turning counter-clockwise: ccw component 2 um pp, cw component 0
    (forward circle only; Muszynska 2005)."""
    wt = np.linspace(0, 2 * np.pi, 1024, endpoint=False)
    x_t, y_t = np.cos(wt), np.sin(wt)  # radius 1 um: 2 um pk-pk, counter-clockwise
    p1 = 2 * _phasor_of(_probe_reading(x_t, y_t, 0.0), wt)
    p2 = 2 * _phasor_of(_probe_reading(x_t, y_t, -90.0), wt)
    orb = orbit([1000.0], [p1], [p2], first_angle_deg=0.0, second_angle_deg=-90.0, rotation="ccw")
    assert_allclose(abs(orb.ccw_um_pp[0]), 2.0, rtol=1e-9)
    assert_allclose(abs(orb.cw_um_pp[0]), 0.0, atol=1e-9)
    assert_allclose([orb.semi_major_um_pp[0], orb.semi_minor_um_pp[0]], [2.0, 2.0], rtol=1e-9)
