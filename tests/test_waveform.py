"""Tests of the waveform reader (runup.io.waveform) and of waveform files end to end.

Files are synthetic, written to ``tmp_path``: a constant-speed shaft (invented), one
reference channel and two probes, one in micrometres and one in millivolts.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose, assert_array_equal

from runup.errors import DataFormatError, UnitError
from runup.io.waveform import iter_blocks, read_waveform_spec
from runup.vectors import waveform_vectors

FS_HZ = 10240.0
SPEC = """\
[run]
machine_id = "synthetic-K1"
direction = "startup"

[waveform]
sample_rate_hz = 10240
reference_channel = "ref_v"

[[waveform.channels]]
name = "DE-X"
column = "x_um"
unit = "um"
angle_from_reference_deg = 45
plane = "DE"
angle_deg = 45

[[waveform.channels]]
name = "DE-Y"
column = "y_mv"
unit = "mV"
sensitivity_mv_per_um = 7.87
angle_from_reference_deg = 315
plane = "DE"
angle_deg = -45
"""


def frame(seconds: float = 2.0, speed_hz: float = 40.0) -> pd.DataFrame:
    """Constant speed; X = 30 um pp at 20 deg lag, Y = 30 um pp at 110 deg, in mV for Y."""
    t = np.arange(int(seconds * FS_HZ)) / FS_HZ
    theta = 2 * np.pi * speed_hz * t
    psi = (np.mod(speed_hz * t + 0.5, 1.0) - 0.5) * 360.0
    notch = np.minimum(np.clip((psi + 6) / 12, 0, 1), np.clip((30 - psi) / 12, 0, 1))
    rng = np.random.default_rng(5)
    return pd.DataFrame(
        {
            "ref_v": -8.0 - 2.0 * notch + rng.normal(0, 1e-3, t.size),
            "x_um": 15.0 * np.cos(theta - np.radians(20.0)),
            "y_mv": -7870.0 + 7.87 * 15.0 * np.cos(theta - np.radians(110.0)),
        }
    )


def write(tmp_path, df: pd.DataFrame, kind: str = "parquet", spec: str = SPEC):
    data = tmp_path / f"rec.{kind}"
    if kind == "parquet":
        df.to_parquet(data, index=False)
    else:
        df.to_csv(data, index=False)
    (tmp_path / "rec.toml").write_text(spec, encoding="utf-8")
    return data


def test_spec_is_read():
    """Every [waveform] key and the [run] table are read with their types."""
    import tempfile
    from pathlib import Path

    with tempfile.TemporaryDirectory() as d:
        p = Path(d) / "w.toml"
        p.write_text(SPEC, encoding="utf-8")
        spec = read_waveform_spec(p)
    assert spec.reference_channel == "ref_v" and spec.sample_rate_hz == 10240.0
    assert spec.machine_id == "synthetic-K1" and spec.direction == "startup"
    x, y = spec.channels
    assert (x.name, x.column, x.unit, x.angle_from_reference_deg) == ("DE-X", "x_um", "um", 45.0)
    # 1 mV / (7.87 mV/um) = 0.127065 um (hand calculation)
    assert_allclose(y.um_per_unit, 1 / 7.87, rtol=1e-15)


@pytest.mark.parametrize("kind", ["parquet", "csv"])
def test_blocks_are_converted_and_independent_of_block_size(tmp_path, kind):
    """Blocks concatenate to the file's columns, mV converted by 1/7.87, times row/fs."""
    df = frame(0.5)
    data = write(tmp_path, df, kind)
    spec = read_waveform_spec(tmp_path / "rec.toml")
    small = list(iter_blocks(data, spec, block_rows=777))
    assert len(small) > 1
    t = np.concatenate([b.time_s for b in small])
    sig = np.concatenate([b.signals_um for b in small], axis=1)
    assert_array_equal(t, np.arange(len(df)) / FS_HZ)
    assert_allclose(sig[0], df["x_um"], rtol=1e-15)
    assert_allclose(sig[1], df["y_mv"] / 7.87, rtol=1e-12)  # CSV text round trip: 1e-12
    assert [b.first_row for b in small][:2] == [1, 1 + len(small[0].time_s)]


def test_waveform_file_gives_the_vectors_and_chunks_do_not_matter(tmp_path):
    """End to end: 1X of X and Y as synthesised; 2,048-row blocks equal one big block.

    Truth by construction: X 30 um pp at 20 deg, Y 30 um pp at 110 deg (mV / 7.87),
    speed 2400 rpm.  Tolerances: noise-free probes, the only error is the reference-edge
    interpolation (1 mV noise on a 2 V, 12 deg edge: ~0.006 deg).
    """
    data = write(tmp_path, frame())
    big = waveform_vectors(data, block_rows=1 << 20)
    small = waveform_vectors(data, block_rows=2048)
    pd.testing.assert_frame_equal(big.run.samples, small.run.samples, check_exact=True)
    s = big.run.samples
    one = s[s["order"] == 1]
    # edge jitter 0.006 deg -> speed std sqrt(2) * 0.006 / 360 = 2.4e-5; 1.5e-4 is 6 sigma
    assert_allclose(one["speed_rpm"], 2400.0, rtol=1.5e-4)
    assert_allclose(one["amplitude_um_pp"], 30.0, rtol=1e-4)
    lag = one.groupby("probe")["phase_lag_deg"].median()
    assert_allclose(lag[["DE-X", "DE-Y"]], [20.0, 110.0], atol=0.05)
    assert big.run.metadata.machine_id == "synthetic-K1"
    assert [p.name for p in big.run.metadata.probes] == ["DE-X", "DE-Y"]
    assert len(big.run.metadata.sources) == 2
    rotor = waveform_vectors(data, phase_reference="probe", orders=(1,))
    lag_r = rotor.run.samples.groupby("probe")["phase_lag_deg"].median()
    # 20 - 45 and 110 - 315 (mod 360): the documented offset convention
    assert_allclose(lag_r[["DE-X", "DE-Y"]], [335.0, 155.0], atol=0.05)


@pytest.mark.parametrize(
    ("edit", "error", "match"),
    [
        (lambda s: s.replace('reference_channel = "ref_v"', 'reference_channel = "kp"'), DataFormatError, "'kp' not in the file"),
        (lambda s: s.replace("sensitivity_mv_per_um = 7.87\n", ""), UnitError, "sensitivity_mv_per_um"),
        (lambda s: s.replace('unit = "um"', 'unit = "furlong"'), UnitError, "unknown unit"),
        (lambda s: s.replace("sample_rate_hz = 10240", "sample_rate = 10240"), DataFormatError, "unknown key 'sample_rate'"),
        (lambda s: s.replace("sample_rate_hz = 10240\n", ""), DataFormatError, "no time_s column"),
        (lambda s: s.replace("angle_from_reference_deg = 315", "angle_from_reference_deg = -45"), DataFormatError, r"\[0, 360\)"),
        (lambda s: s + "\n[[probes]]\nname = 'A'\n", DataFormatError, "not used for waveforms"),
    ],
)
def test_bad_descriptions_raise(tmp_path, edit, error, match):
    """Each description error raises one clear line naming the key or column."""
    data = write(tmp_path, frame(0.2), spec=edit(SPEC))
    with pytest.raises(error, match=match):
        waveform_vectors(data)


def test_bad_cells_raise_with_row(tmp_path):
    """A non-finite cell is reported with its column and 1-based data row."""
    df = frame(0.2)
    df.loc[1000, "x_um"] = np.nan
    data = write(tmp_path, df)
    with pytest.raises(DataFormatError, match="column 'x_um', row 1001"):
        waveform_vectors(data, block_rows=300)


def test_time_column_checks(tmp_path):
    """time_s must increase strictly and agree with sample_rate_hz when both are given."""
    df = frame(0.2)
    df.insert(0, "time_s", np.arange(len(df)) / FS_HZ)
    df.loc[500, "time_s"] = df.loc[499, "time_s"]
    data = write(tmp_path, df)
    with pytest.raises(DataFormatError, match="row 501"):
        waveform_vectors(data, block_rows=256)
    df["time_s"] = np.arange(len(df)) / 20000.0
    data = write(tmp_path, df)
    with pytest.raises(DataFormatError, match="disagree with sample_rate_hz"):
        waveform_vectors(data)


def test_file_errors(tmp_path):
    """Missing file, unknown extension and missing description are clear errors."""
    with pytest.raises(DataFormatError, match="not found"):
        waveform_vectors(tmp_path / "none.parquet", spec=tmp_path / "none.toml")
    (tmp_path / "a.xyz").write_text("x")
    (tmp_path / "a.toml").write_text(SPEC)
    with pytest.raises(DataFormatError, match="unknown file extension"):
        waveform_vectors(tmp_path / "a.xyz")
    frame(0.1).to_parquet(tmp_path / "b.parquet")
    with pytest.raises(DataFormatError, match="no waveform description"):
        waveform_vectors(tmp_path / "b.parquet")
