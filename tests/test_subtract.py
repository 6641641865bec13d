"""Tests of the unbalance-verification subtraction (runup.subtract) and the run writer
(runup.io.write).

References
----------
* Jeffcott-rotor unbalance response ``X = A r^2 / (1 - r^2 + 2 j zeta r)`` (Rao,
  *Mechanical Vibrations*, 5th ed., 2011, sec. 3.7): responses to two unbalances add
  (linearity), so the with-weight run minus the residual run is the test weight's response.
* Linear interpolation error bound ``|f - p| <= h^2 / 8 max|f''|`` per real component (e.g.
  Burden & Faires, *Numerical Analysis*, interpolation error theorem).
All runs are synthetic.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose

from runup import identify
from runup.errors import DataFormatError
from runup.fit.models import unbalance_response
from runup.io import read_run
from runup.io.write import write_run
from runup.run import SourceFile
from runup.subtract import subtract
from runup.synthetic import SyntheticMode, SyntheticProbe, synthetic_run
from runup.units import to_response

MODES = [SyntheticMode(4000.0, 0.05)]
RESIDUAL_A = (10 * np.exp(0.3j), 7 * np.exp(-1.2j))  # probe X, Y: residual unbalance
WEIGHT_A = (6 * np.exp(2.0j), 5 * np.exp(0.4j))  # the test weight's response asymptote
RUNOUT = (4 * np.exp(1.0j), 3 * np.exp(2.5j))


def runs(*, residual_speeds=None, weight_speeds=None, noise=0.0):
    """A residual run and a with-weight run with identical runout on different speed grids."""
    sw = np.linspace(400.0, 8000.0, 500) if weight_speeds is None else weight_speeds
    sr = np.linspace(420.0, 7900.0, 430) if residual_speeds is None else residual_speeds
    names, planes = ("X", "Y"), (0.0, 90.0)
    res = [SyntheticProbe(n, (a,), r, "P", ang) for n, a, r, ang in zip(names, RESIDUAL_A, RUNOUT, planes, strict=True)]
    wt = [SyntheticProbe(n, (a + w,), r, "P", ang)
          for n, a, w, r, ang in zip(names, RESIDUAL_A, WEIGHT_A, RUNOUT, planes, strict=True)]
    residual = synthetic_run(sr, modes=MODES, probes=res, machine_id="SYN-T1", run_id="residual",
                             noise_fraction_of_peak=noise, seed=1)
    with_weight = synthetic_run(sw, modes=MODES, probes=wt, machine_id="SYN-T1", run_id="with-weight",
                                noise_fraction_of_peak=noise, seed=2)
    return with_weight, residual


def test_difference_is_the_weight_response_to_interpolation_error():
    """The difference equals the closed-form response to the weight alone (runout cancels),
    within the linear-interpolation bound h^2/8 (|Re''| + |Im''|) of the residual grid."""
    with_weight, residual = runs()
    diff = subtract(with_weight, residual)
    assert diff.metadata.run_id == "with-weight minus residual" and diff.metadata.machine_id == "SYN-T1"
    assert diff.probe_names == ("X", "Y")
    h = 7480.0 / 429  # residual grid spacing, rpm
    fine = np.linspace(400.0, 8000.0, 200_001)
    for probe, a in zip(("X", "Y"), WEIGHT_A, strict=True):
        s = diff.samples[diff.samples["probe"] == probe]
        got = to_response(s["amplitude_um_pp"], s["phase_lag_deg"])
        want = unbalance_response(s["speed_rpm"], natural_speed_rpm=4000.0, damping_ratio=0.05, modal_constant=a)
        # second derivative of the residual run's response (its unbalance only: runout is constant)
        x = unbalance_response(fine, natural_speed_rpm=4000.0, damping_ratio=0.05,
                               modal_constant=RESIDUAL_A[("X", "Y").index(probe)])
        d2 = np.gradient(np.gradient(x, fine), fine)
        bound = h * h / 8 * (np.abs(d2.real).max() + np.abs(d2.imag).max())
        assert np.abs(got - want).max() <= bound
        assert s["speed_rpm"].min() >= 420.0 and s["speed_rpm"].max() <= 7900.0  # overlap only


def test_identified_critical_of_the_difference_is_the_known_one():
    """Identifying the difference run finds the Jeffcott mode: natural speed within 0.1 %
    and damping within 2 % (noise-free; the residue is the interpolation error above, 0.3 %
    of the peak), and no runout left at slow roll."""
    diff = subtract(*runs())
    result = identify(diff)
    assert len(result.criticals) == 1
    c = result.criticals[0]
    assert_allclose(c.natural_speed_rpm, 4000.0, rtol=1e-3)
    assert_allclose(c.damping_ratio, 0.05, rtol=0.02)
    for curve in result.conditioned.curves:
        # at ~430 rpm (r = 0.11) the weight's own response is |A| r^2 / (1 - r^2) <= 0.07 um;
        # runout left behind would show as 3-4 um there
        assert curve.raw_amplitude_um_pp[0] < 0.1


def test_coastdown_order_and_sources_kept():
    """A coastdown pair gives a coastdown difference in falling-speed order, with the sources
    of both runs."""
    with_weight, residual = runs(residual_speeds=np.linspace(7900.0, 420.0, 430),
                                 weight_speeds=np.linspace(8000.0, 400.0, 500))
    with_weight = type(with_weight)(
        type(with_weight.metadata)(**{**with_weight.metadata.__dict__, "sources": (SourceFile("w.csv", "0" * 64),)}),
        with_weight.samples,
    )
    diff = subtract(with_weight, residual)
    assert diff.metadata.direction == "coastdown"
    speeds = diff.samples[diff.samples["probe"] == "X"]["speed_rpm"].to_numpy()
    assert np.all(np.diff(speeds) < 0)
    assert diff.metadata.sources == (SourceFile("w.csv", "0" * 64),)


def test_mismatched_probes_or_speeds_are_refused():
    """Different probes, a probe at another angle, or speed ranges that do not overlap:
    DataFormatError saying what differs."""
    with_weight, residual = runs()
    only_x = type(residual)(residual.metadata, residual.samples[residual.samples["probe"] == "X"])
    with pytest.raises(DataFormatError, match="only in the with-weight run: \\['Y 1X'\\]"):
        subtract(with_weight, only_x)
    far = runs(residual_speeds=np.linspace(9000.0, 12000.0, 100))[1]
    with pytest.raises(DataFormatError, match="overlap"):
        subtract(with_weight, far)
    moved = type(residual.metadata)(**{**residual.metadata.__dict__, "probes": tuple(
        type(p)(p.name, p.plane, (p.angle_deg or 0) + 45) for p in residual.metadata.probes)})
    with pytest.raises(DataFormatError, match="angle_deg"):
        subtract(with_weight, type(residual)(moved, residual.samples))


@pytest.mark.parametrize("suffix", [".csv", ".parquet"])
def test_write_run_round_trip(tmp_path, suffix):
    """write_run then read_run gives back the samples exactly (CSV floats are written as
    shortest round-trip decimals) and the metadata, sources aside."""
    with_weight, residual = runs(noise=0.01)
    diff = subtract(with_weight, residual)
    path = write_run(diff, tmp_path / f"diff{suffix}")
    assert (tmp_path / "diff.toml").exists()
    back = read_run(path)
    pd.testing.assert_frame_equal(back.samples, diff.samples, check_exact=True)
    for name in ("machine_id", "run_id", "direction", "rotation", "probes", "operating"):
        assert getattr(back.metadata, name) == getattr(diff.metadata, name)
    c1, c2 = identify(back).criticals, identify(diff).criticals
    assert len(c1) == len(c2) == 1 and math.isclose(c1[0].natural_speed_rpm, c2[0].natural_speed_rpm, rel_tol=1e-12)


def test_write_run_refuses_unknown_extension(tmp_path):
    """Only .csv and .parquet (.pq) run files are written."""
    with_weight, _ = runs()
    with pytest.raises(DataFormatError, match="unknown run file extension"):
        write_run(with_weight, tmp_path / "run.xlsx")
