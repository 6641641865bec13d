"""Tests of the run-table importer (runup.io.tables).

All data here is synthetic, invented for the tests and written to ``tmp_path``.
"""

from __future__ import annotations

import hashlib
import math
import os
import threading

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose

from runup.errors import DataFormatError, UnitError
from runup.io import MIN_POINTS_PER_PROBE, parse_column_map, read_run
from runup.run import SAMPLE_COLUMNS

# Float64 round-off of one multiplication is ~1e-16 relative; 1e-12 leaves room for the
# decimal text -> binary parse of the CSV cells and still catches any wrong factor.
RTOL = 1e-12


def write(tmp_path, name: str, text: str):
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def long_csv(n: int = 6, *, probes=("A", "B")) -> str:
    lines = ["speed_rpm,probe,amplitude_um_pp,phase_lag_deg"]
    for i in range(n):
        for p in probes:
            lines.append(f"{1000 + 100 * i},{p},{10 + i},{20 + i}")
    return "\n".join(lines) + "\n"


def wide_csv(n: int = 6) -> str:
    lines = [
        "speed_rpm,DE.X.amplitude_um_pp,DE.X.phase_lag_deg,NDE.amplitude_um_pp,NDE.phase_lag_deg"
    ]
    for i in range(n):
        lines.append(f"{1000 + 100 * i},{i + 1},{10 * i},{2 * (i + 1)},{20 * i}")
    return "\n".join(lines) + "\n"


# -- layouts and conversions --------------------------------------------------------------


def test_long_layout_converts_units_with_closed_form_factors(tmp_path):
    """A long file in mil 0-p, Hz and radians of lead is converted to um pp, rpm, deg lag."""
    rows = ["speed_hz,probe,amplitude_mil_0p,phase_lead_rad"]
    speed_hz = np.array([10.0, 20.0, 30.0, 40.0, 50.0])
    amp_mil_0p = np.array([0.1, 0.25, 0.5, 1.0, 0.75])
    lead_rad = np.array([0.0, 0.5, 1.0, 2.0, -1.0])
    triples = zip(speed_hz.tolist(), amp_mil_0p.tolist(), lead_rad.tolist(), strict=True)
    rows += [f"{s!r},P1,{a!r},{p!r}" for s, a, p in triples]
    run = read_run(write(tmp_path, "r.csv", "\n".join(rows)))
    s = run.samples
    # 1 Hz = 60 rev/min by definition of the units.
    assert_allclose(s["speed_rpm"], speed_hz * 60.0, rtol=RTOL)
    # 1 mil = 25.4 um exactly (international yard and pound agreement, 1959); pk-pk = 2 x 0-pk
    # for a sinusoid, which a filtered 1X component is.
    assert_allclose(s["amplitude_um_pp"], amp_mil_0p * 25.4 * 2.0, rtol=RTOL)
    # pi rad = 180 deg; a lead is a negative lag (runup.units module notes, common practice).
    # atol covers the zero-lead cell, where a relative tolerance means nothing.
    assert_allclose(s["phase_lag_deg"], -lead_rad * 180.0 / math.pi, rtol=RTOL, atol=1e-12)
    assert list(s.columns) == list(SAMPLE_COLUMNS)
    assert s["order"].tolist() == [1] * 5  # order defaults to 1 without an order column
    assert s["row"].tolist() == [1, 2, 3, 4, 5]
    assert s["time_s"].isna().all()
    assert s["probe"].dtype == object and all(type(p) is str for p in s["probe"])


def test_long_layout_matches_independent_pandas_parse(tmp_path):
    """Values read from a random long CSV equal those pandas.read_csv reads from it."""
    rng = np.random.default_rng(7)
    n = 200
    frame = pd.DataFrame(
        {
            "speed_rpm": rng.uniform(100, 12000, n),
            "probe": rng.choice(["B1X", "B1Y"], n),
            "amplitude_um_pp": rng.uniform(0, 200, n),
            "phase_lag_deg": rng.uniform(-720, 720, n),
            "comment": "synthetic",
        }
    )
    path = tmp_path / "long.csv"
    frame.to_csv(path, index=False)
    ref = pd.read_csv(path)  # second, independent CSV parser
    s = read_run(path).samples
    # Both parsers round-trip the shortest repr exactly; RTOL only guards the parser choice.
    for col in ("speed_rpm", "amplitude_um_pp", "phase_lag_deg"):
        assert_allclose(s[col], ref[col], rtol=RTOL)
    assert s["probe"].tolist() == ref["probe"].tolist()


def test_wide_layout_one_sample_per_probe_per_row(tmp_path):
    """Wide files give, row by row, one sample per probe in header order; dots allowed in names."""
    run = read_run(write(tmp_path, "w.csv", wide_csv()))
    s = run.samples
    assert s["probe"].tolist()[:4] == ["DE.X", "NDE", "DE.X", "NDE"]
    assert s["row"].tolist()[:4] == [1, 1, 2, 2]
    # Expected values are the synthetic cells as written (canonical units: no conversion).
    assert_allclose(s["speed_rpm"].to_numpy()[:4], [1000, 1000, 1100, 1100], rtol=RTOL)
    assert_allclose(s["amplitude_um_pp"].to_numpy()[:4], [1, 2, 2, 4], rtol=RTOL)
    assert run.probe_names == ("DE.X", "NDE")
    assert (s["order"] == 1).all()


def test_time_column_gives_stable_acquisition_order(tmp_path):
    """Rows are stable-sorted by time_s; equal times keep file order and source rows follow."""
    text = "time_s,speed_rpm,probe,amplitude_um_pp,phase_lag_deg\n" + "\n".join(
        f"{t},{1000 + 10 * i},{p},{i},{i}"
        for i, (t, p) in enumerate(
            [
                (2, "A"),
                (1, "A"),
                (1, "B"),
                (0, "A"),
                (2, "B"),
                (0, "B"),
                (3, "A"),
                (3, "B"),
                (4, "A"),
                (4, "B"),
            ]
        )
    )
    s = read_run(write(tmp_path, "t.csv", text)).samples
    assert s["time_s"].tolist() == [0, 0, 1, 1, 2, 2, 3, 3, 4, 4]
    assert s["row"].tolist() == [4, 6, 2, 3, 1, 5, 7, 8, 9, 10]
    assert s["probe"].tolist()[:2] == ["A", "B"]


def test_order_column_and_csv_equal_parquet(tmp_path):
    """An order column is read as integers, and the same table as Parquet imports identically."""
    frame = pd.DataFrame(
        {
            "speed_rpm": np.repeat(np.arange(1000.0, 1600.0, 100.0), 2),
            "probe": "P",
            "order": [1, 2] * 6,
            "amplitude_um_pp": np.arange(12.0),
            "phase_lag_deg": np.arange(12.0) * 3,
        }
    )
    frame.to_csv(tmp_path / "o.csv", index=False)
    frame.to_parquet(tmp_path / "o.parquet")
    a = read_run(tmp_path / "o.csv").samples
    b = read_run(tmp_path / "o.parquet").samples
    assert a["order"].tolist() == [1, 2] * 6
    pd.testing.assert_frame_equal(a, b)
    assert read_run(tmp_path / "o.csv").orders == (1, 2)


def test_missing_values_become_nan_and_spaces_are_trimmed(tmp_path):
    """Empty, NA, N/A, NaN and null cells are missing (NaN); spaces around cells and headers go."""
    text = (
        " speed_rpm , probe , amplitude_um_pp , phase_lag_deg \n"
        " 1000 , A , 1.5 , 10 \n"
        "1100,A,,20\n"
        "1200,A,NA,n/a\n"
        "1300,A,NaN,null\n" + "".join(f"{1400 + 100 * i},A,{i},{i}\n" for i in range(5))
    )
    s = read_run(write(tmp_path, "m.csv", text)).samples
    assert s["probe"].tolist() == ["A"] * 9
    amp = s["amplitude_um_pp"].to_numpy()
    assert amp[0] == 1.5 and np.isnan(amp[1:4]).all()
    assert np.isnan(s["phase_lag_deg"].to_numpy()[2:4]).all()


@pytest.mark.parametrize(("name", "sep"), [("t.txt", "\t"), ("s.csv", ";")])
def test_tab_and_semicolon_delimiters_detected(tmp_path, name, sep):
    """The delimiter is taken from the header line: tab and semicolon files read like CSV."""
    text = long_csv().replace(",", sep)
    s = read_run(write(tmp_path, name, text)).samples
    assert len(s) == 12 and s["probe"].tolist()[:2] == ["A", "B"]


def test_utf8_bom_is_ignored(tmp_path):
    """A UTF-8 byte-order mark before the header does not spoil the first column name."""
    path = tmp_path / "bom.csv"
    path.write_bytes(b"\xef\xbb\xbf" + long_csv().encode())
    assert len(read_run(path).samples) == 12


# -- column map ---------------------------------------------------------------------------


def test_column_map_renames_before_detection(tmp_path):
    """Mapped headers are renamed before layout detection and units follow the new name."""
    text = "Speed (rpm),Brg 1 X amp [mil pp],Brg 1 X phase\n" + "".join(
        f"{1000 + i},{0.5 + i},{i}\n" for i in range(5)
    )
    cmap = parse_column_map(
        [
            "Speed (rpm)=speed_rpm",
            "Brg 1 X amp [mil pp]=B1X.amplitude_mil_pp",
            "Brg 1 X phase=B1X.phase_lag_deg",
        ]
    )
    s = read_run(write(tmp_path, "c.csv", text), column_map=cmap).samples
    # 1 mil = 25.4 um exactly (1959 international inch).
    assert_allclose(s["amplitude_um_pp"], (0.5 + np.arange(5)) * 25.4, rtol=RTOL)
    assert set(s["probe"]) == {"B1X"}


def test_parse_column_map_splits_on_last_equals():
    """parse_column_map splits each item on its last '=' and trims spaces."""
    assert parse_column_map(["a=b=c", " Speed = speed_rpm "]) == {"a=b": "c", "Speed": "speed_rpm"}


@pytest.mark.parametrize("item", ["no-equals", "=speed_rpm", "Speed="])
def test_parse_column_map_rejects_malformed(item):
    """A column-map item that is not SOURCE=TARGET is one clear error."""
    with pytest.raises(DataFormatError, match="SOURCE=TARGET"):
        parse_column_map([item])


def test_column_map_key_not_in_file(tmp_path):
    """A column-map source absent from the header is an error naming it."""
    with pytest.raises(DataFormatError, match="'Rotor speed' not in the file") as e:
        read_run(write(tmp_path, "k.csv", long_csv()), column_map={"Rotor speed": "speed_rpm"})
    assert e.value.column == "Rotor speed"


# -- metadata -----------------------------------------------------------------------------


def test_metadata_defaults_and_provenance(tmp_path):
    """Without a sidecar: machine 'unknown', run id = file stem, source hashed with SHA-256."""
    path = write(tmp_path, "cold-start.csv", long_csv())
    run = read_run(path, sidecar=None)
    assert run.metadata.machine_id == "unknown" and run.metadata.run_id == "cold-start"
    # hashlib is the independent reference for the digest.
    assert run.metadata.sources[0].sha256 == hashlib.sha256(path.read_bytes()).hexdigest()
    assert [p.name for p in run.metadata.probes] == ["A", "B"]
    run2 = read_run(path, machine_id="K-999", run_id="r2")
    assert (run2.metadata.machine_id, run2.metadata.run_id) == ("K-999", "r2")


def test_sidecar_auto_explicit_and_overrides(tmp_path):
    """The same-stem TOML is read automatically; explicit arguments and the CLI map win."""
    path = write(tmp_path, "run1.csv", long_csv().replace("speed_rpm", "Speed", 1))
    side = write(
        tmp_path,
        "run1.toml",
        '[run]\nmachine_id = "K-301"\nrun_id = "synthetic-1"\ndirection = "startup"\n'
        'rotation = "ccw"\n[speeds]\nmax_continuous_rpm = 11200\n'
        '[columns]\n"Speed" = "speed_hz"\n[[probes]]\nname = "A"\nplane = "DE"\nangle_deg = 45\n',
    )
    run = read_run(path)
    m = run.metadata
    assert (m.machine_id, m.run_id, m.direction, m.rotation) == (
        "K-301",
        "synthetic-1",
        "startup",
        "ccw",
    )
    assert m.operating.max_continuous_rpm == 11200
    assert m.probe("A").angle_deg == 45 and m.probe("B").plane is None
    assert [src.path for src in m.sources] == [str(path), str(side)]
    assert m.sources[1].sha256 == hashlib.sha256(side.read_bytes()).hexdigest()
    # speed_hz from the sidecar map: 1 Hz = 60 rpm by definition.
    assert_allclose(run.samples["speed_rpm"].iloc[0], 1000 * 60.0, rtol=RTOL)
    over = read_run(path, column_map={"Speed": "speed_rpm"}, machine_id="K-302")
    assert over.metadata.machine_id == "K-302"
    assert_allclose(over.samples["speed_rpm"].iloc[0], 1000.0, rtol=RTOL)  # cell as written
    # Without the sidecar's map, a bare "Speed" header reads as a speed of unknown unit.
    with pytest.raises(UnitError, match="unknown speed unit in column name 'Speed'"):
        read_run(path, sidecar=None)
    assert read_run(path, sidecar=side).metadata.machine_id == "K-301"


# -- bad input ----------------------------------------------------------------------------


def one_line(exc: Exception) -> str:
    text = str(exc)
    assert "\n" not in text
    assert "arrow" not in text.lower() and "Traceback" not in text
    return text


BAD_CASES = {
    # name: (file text, error class, message fragment, column, row)
    "missing amplitude": (
        "speed_rpm,probe,phase_lag_deg\n1000,A,1\n",
        DataFormatError,
        "missing required column amplitude_",
        None,
        None,
    ),
    "duplicate names": (
        "speed_rpm,probe,amplitude_um_pp,amplitude_um_pp,phase_lag_deg\n1000,A,1,2,3\n",
        DataFormatError,
        "duplicate column name 'amplitude_um_pp' (columns 3, 4",
        "amplitude_um_pp",
        None,
    ),
    "non-numeric": (
        long_csv().replace("\n1100,A,11,21", "\n1100,A,1l,21"),
        DataFormatError,
        "non-numeric value '1l'",
        "amplitude_um_pp",
        3,
    ),
    "negative amplitude": (
        long_csv().replace("\n1100,B,11,", "\n1100,B,-0.5,"),
        DataFormatError,
        "amplitude must be a finite number >= 0, found -0.5",
        "amplitude_um_pp",
        4,
    ),
    "zero speed": (
        long_csv().replace("\n1000,A,", "\n0,A,"),
        DataFormatError,
        "speed must be a positive finite number, found 0",
        "speed_rpm",
        1,
    ),
    "negative speed": (
        long_csv().replace("\n1200,B,", "\n-1200,B,"),
        DataFormatError,
        "found -1200",
        "speed_rpm",
        6,
    ),
    "infinite phase": (
        long_csv().replace(",10,20\n", ",10,inf\n"),
        DataFormatError,
        "phase must be finite",
        "phase_lag_deg",
        1,
    ),
    "empty file": ("", DataFormatError, "empty file", None, None),
    "header only": (
        "speed_rpm,probe,amplitude_um_pp,phase_lag_deg\n",
        DataFormatError,
        "header but no data rows",
        None,
        None,
    ),
    "header only, no newline": (
        "speed_rpm,probe,amplitude_um_pp,phase_lag_deg",
        DataFormatError,
        "header but no data rows",
        None,
        None,
    ),
    "too few points": (
        long_csv(n=MIN_POINTS_PER_PROBE).replace("\n1200,B,12,22", "\n1200,B,,22"),
        DataFormatError,
        f"probe 'B' (order 1) has {MIN_POINTS_PER_PROBE - 1} samples",
        None,
        None,
    ),
    "unknown amplitude unit": (
        "speed_rpm,probe,amplitude_furlong_pp,phase_lag_deg\n1000,A,1,1\n",
        UnitError,
        "unknown amplitude unit",
        "amplitude_furlong_pp",
        None,
    ),
    "unknown speed unit": (
        "speed_rps,probe,amplitude_um_pp,phase_lag_deg\n1000,A,1,1\n",
        UnitError,
        "unknown speed unit",
        "speed_rps",
        None,
    ),
    "unknown time unit": (
        "time_ms,speed_rpm,probe,amplitude_um_pp,phase_lag_deg\n1,1000,A,1,1\n",
        UnitError,
        "only time column is time_s",
        "time_ms",
        None,
    ),
    "fractional order": (
        "speed_rpm,probe,order,amplitude_um_pp,phase_lag_deg\n1000,A,1,1,1\n1100,A,1.5,1,1\n",
        DataFormatError,
        "whole number >= 1 (1 for 1X, 2 for 2X), found 1.5",
        "order",
        2,
    ),
    "zero order": (
        "speed_rpm,probe,order,amplitude_um_pp,phase_lag_deg\n1000,A,0,1,1\n",
        DataFormatError,
        "found 0",
        "order",
        1,
    ),
    "ambiguous speed": (
        "speed_rpm,speed_hz,probe,amplitude_um_pp,phase_lag_deg\n1000,16,A,1,1\n",
        DataFormatError,
        "ambiguous: 2 speed columns",
        "speed_hz",
        None,
    ),
    "wide amplitude without phase": (
        "speed_rpm,B1.amplitude_um_pp,B1.phase_lag_deg,B2.amplitude_um_pp\n1000,1,1,1\n",
        DataFormatError,
        "missing required column 'B2.phase_<sense>_<unit>' for probe 'B2'",
        None,
        None,
    ),
    "wide phase without amplitude": (
        "speed_rpm,B1.phase_lag_deg\n1000,1\n",
        DataFormatError,
        "'B1.amplitude_<unit>_<def>' for probe 'B1'",
        None,
        None,
    ),
    "bare amplitude without probe column": (
        "speed_rpm,amplitude_um_pp,phase_lag_deg\n1000,1,1\n",
        DataFormatError,
        "needs a 'probe' column",
        "amplitude_um_pp",
        None,
    ),
    "mixed layouts": (
        "speed_rpm,probe,amplitude_um_pp,phase_lag_deg,B1.amplitude_um_pp\n1000,A,1,1,1\n",
        DataFormatError,
        "not both",
        "B1.amplitude_um_pp",
        None,
    ),
    "empty probe name": (
        long_csv().replace("\n1100,A,", "\n1100,,"),
        DataFormatError,
        "empty probe name",
        "probe",
        3,
    ),
    "partial time": (
        "time_s,speed_rpm,probe,amplitude_um_pp,phase_lag_deg\n0,1000,A,1,1\n,1100,A,1,1\n",
        DataFormatError,
        "time_s is empty here",
        "time_s",
        2,
    ),
    "ragged row": (
        long_csv().replace("\n1100,A,11,21\n", "\n1100,A,11\n"),
        DataFormatError,
        "line 4 of the file has 3 fields but the header has 4",
        None,
        None,
    ),
}


@pytest.mark.parametrize("case", list(BAD_CASES))
def test_bad_input_gives_one_clear_line(tmp_path, case):
    """Each kind of bad CSV raises one runup error naming file, column and data row."""
    text, cls, fragment, column, row = BAD_CASES[case]
    path = write(tmp_path, "bad.csv", text)
    with pytest.raises(cls) as e:
        read_run(path)
    msg = one_line(e.value)
    assert fragment in msg
    assert e.value.file == str(path)
    assert e.value.column == column
    assert e.value.row == row


def test_file_not_found_and_unknown_extension(tmp_path):
    """A missing file and an unsupported extension are one-line errors naming the file."""
    with pytest.raises(DataFormatError, match="not found") as e:
        read_run(tmp_path / "nope.csv")
    assert e.value.file == str(tmp_path / "nope.csv")
    with pytest.raises(DataFormatError, match=r"accepted: \.csv, \.txt, \.parquet, \.pq"):
        read_run(write(tmp_path, "r.xlsx", "x"))


def test_corrupt_parquet(tmp_path):
    """A file named .parquet that is not valid Parquet is a one-line DataFormatError."""
    good = tmp_path / "g.parquet"
    pd.DataFrame(
        {"speed_rpm": [1.0] * 10, "probe": "A", "amplitude_um_pp": 1.0, "phase_lag_deg": 1.0}
    ).to_parquet(good)
    for name, data in [
        ("junk.parquet", b"not parquet at all"),
        ("cut.pq", good.read_bytes()[: good.stat().st_size // 2]),
    ]:
        path = tmp_path / name
        path.write_bytes(data)
        with pytest.raises(DataFormatError, match="cannot read the file as Parquet") as e:
            read_run(path)
        one_line(e.value)


def test_parquet_string_cells_located(tmp_path):
    """Text cells in a Parquet numeric column are located by column and row like CSV ones."""
    frame = pd.DataFrame(
        {
            "speed_rpm": ["1000", "1100", "fast", "1300", "1400"],
            "probe": "A",
            "amplitude_um_pp": 1.0,
            "phase_lag_deg": 1.0,
        }
    )
    frame.to_parquet(tmp_path / "s.parquet")
    with pytest.raises(DataFormatError, match="non-numeric value 'fast'") as e:
        read_run(tmp_path / "s.parquet")
    assert (e.value.column, e.value.row) == ("speed_rpm", 3)


def test_large_wide_import_matches_pandas(tmp_path):
    """8 probes x 50,000 points (400k samples, wide layout) import row by row, probes in
    header order, with the values pandas.read_csv reads (speed is timed in benchmarks/)."""
    rng = np.random.default_rng(3)
    n = 50_000
    cols = {"time_s": np.arange(n) * 0.01, "speed_rpm": np.linspace(300.0, 12000.0, n)}
    for k in range(8):
        cols[f"P{k}.amplitude_um_pp"] = rng.uniform(0, 100, n)
        cols[f"P{k}.phase_lag_deg"] = rng.uniform(0, 360, n)
    path = tmp_path / "big.csv"
    pd.DataFrame(cols).to_csv(path, index=False)
    ref = pd.read_csv(path)  # an independent CSV parser
    s = read_run(path).samples
    assert len(s) == 8 * n
    assert s["probe"].tolist()[:9] == [f"P{k}" for k in range(8)] + ["P0"]
    amp = s["amplitude_um_pp"].to_numpy().reshape(n, 8)
    # both parsers round-trip the shortest repr exactly; RTOL only guards the parser choice
    assert_allclose(amp, ref[[f"P{k}.amplitude_um_pp" for k in range(8)]].to_numpy(), rtol=RTOL)
    assert_allclose(s["speed_rpm"].to_numpy()[::8], ref["speed_rpm"], rtol=RTOL)


def test_wide_order_column_rejected(tmp_path):
    """An order column in a wide file is an error: the wide layout is order 1 only."""
    text = "speed_rpm,order,B1.amplitude_um_pp,B1.phase_lag_deg\n1000,1,1,1\n"
    with pytest.raises(DataFormatError, match="wide layout is order 1 only") as e:
        read_run(write(tmp_path, "w.csv", text))
    assert e.value.column == "order"


def test_parquet_without_rows(tmp_path):
    """A Parquet file with columns but no rows is the header-only error."""
    empty = pd.DataFrame(
        {
            "speed_rpm": pd.Series([], dtype=float),
            "probe": pd.Series([], dtype=str),
            "amplitude_um_pp": pd.Series([], dtype=float),
            "phase_lag_deg": pd.Series([], dtype=float),
        }
    )
    empty.to_parquet(tmp_path / "e.parquet")
    with pytest.raises(DataFormatError, match="no data rows"):
        read_run(tmp_path / "e.parquet")


def test_too_few_points_names_wide_probe_column(tmp_path):
    """In a wide file a probe with too few finite points is named with its amplitude column."""
    text = (
        wide_csv(n=6)
        .replace("\n1000,1,0,2,0", "\n1000,1,0,,0")
        .replace("\n1100,2,10,4,20", "\n1100,2,10,4,")
    )
    with pytest.raises(
        DataFormatError,
        match=f"probe 'NDE' \\(order 1\\) has 4 samples.*at least {MIN_POINTS_PER_PROBE}",
    ) as e:
        read_run(write(tmp_path, "w.csv", text))
    assert e.value.column == "NDE.amplitude_um_pp"


# -- the fast paths give what the plain reading gives -------------------------------------


def test_probe_names_trimmed_and_merged_across_parse_blocks(tmp_path):
    """Probe names padded with spaces, in a file large enough to be parsed in several blocks
    whose first names differ, import as the trimmed names Python's csv module reads."""
    import csv

    rng = np.random.default_rng(5)
    n = 80_000  # ~2.5 MB: pyarrow parses 1 MB blocks, each with its own dictionary
    pools = [[" B1X", "B1X"], ["B2Y ", "  N D E  ", "B1X "], ["N D E", "B2Y"]]
    names = np.concatenate([rng.choice(pool, n // 3 + 1) for pool in pools])[:n]
    frame = pd.DataFrame(
        {
            "speed_rpm": np.linspace(300.0, 9000.0, n),
            "probe": names,
            "amplitude_um_pp": rng.uniform(0, 50, n),
            "phase_lag_deg": rng.uniform(0, 360, n),
        }
    )
    path = tmp_path / "blocks.csv"
    frame.to_csv(path, index=False)
    with open(path, newline="", encoding="utf-8") as f:  # an independent CSV reader
        expected = [row[1].strip() for row in list(csv.reader(f))[1:]]
    run = read_run(path)
    probe = run.samples["probe"]
    assert probe.tolist() == expected
    assert probe.dtype == object and {type(p) for p in probe} == {str}
    assert run.probe_names == tuple(dict.fromkeys(expected))
    assert [p.name for p in run.metadata.probes] == sorted(set(expected))


def test_parquet_row_groups_with_different_probes(tmp_path):
    """A Parquet file whose row groups hold different probe names (so different dictionaries)
    imports the names pandas.read_parquet reads, trimmed."""
    import pyarrow.parquet as pq

    frames = [
        pd.DataFrame({"speed_rpm": 1000.0 + np.arange(30), "probe": p, "amplitude_um_pp": 1.0,
                      "phase_lag_deg": 2.0})
        for group in (["A", "B"], ["C", " A"], ["B", "D", "A "])
        for p in group
    ]
    frame = pd.concat(frames, ignore_index=True)
    path = tmp_path / "groups.parquet"
    pq.write_table(pa_table(frame), path, row_group_size=60)
    assert pq.ParquetFile(path).metadata.num_row_groups > 1
    expected = [p.strip() for p in pd.read_parquet(path)["probe"]]
    assert read_run(path).samples["probe"].tolist() == expected


def test_parquet_integer_probe_names_become_text(tmp_path):
    """Integer probe identifiers in Parquet become their decimal text (str of the integer)."""
    frame = pd.DataFrame({"speed_rpm": np.arange(1000.0, 1600.0, 50.0), "probe": [7, 12] * 6,
                          "amplitude_um_pp": 1.0, "phase_lag_deg": 2.0})
    frame.to_parquet(tmp_path / "i.parquet")
    s = read_run(tmp_path / "i.parquet").samples
    assert s["probe"].tolist() == [str(p) for p in frame["probe"]]


def test_samples_are_plain_writable_columns(tmp_path):
    """The imported columns can be changed in place like any DataFrame's, without touching
    another import of the same file (pandas semantics)."""
    path = write(tmp_path, "w.csv", long_csv(6))
    a, b = read_run(path).samples, read_run(path).samples
    a.loc[0, ["speed_rpm", "amplitude_um_pp", "time_s"]] = [1.0, 2.0, 3.0]
    a.loc[0, ["order", "row"]] = [2, 99]
    a.loc[0, "probe"] = "Z"
    assert a.iloc[0].tolist() == [1.0, "Z", 2, 2.0, 20.0, 3.0, 99]
    assert b.iloc[0].tolist()[:3] == [1000.0, "A", 1] and b["row"].iloc[0] == 1


def test_too_few_points_with_high_orders(tmp_path):
    """The first probe/order short of points is named also when orders are large (counted by
    sorting rather than by a table of all keys); the count is the one pandas groupby gives."""
    rows = [(1000 + 10 * i, "A", 1) for i in range(6)] + [(1000 + 10 * i, "A", 1000) for i in range(3)]
    rows += [(1000 + 10 * i, "B", 2) for i in range(2)]
    frame = pd.DataFrame(rows, columns=["speed_rpm", "probe", "order"]).assign(
        amplitude_um_pp=1.0, phase_lag_deg=1.0
    )
    counts = frame.groupby(["probe", "order"]).size()
    path = tmp_path / "o.csv"
    frame.to_csv(path, index=False)
    with pytest.raises(DataFormatError, match=f"probe 'A' \\(order 1000\\) has {counts['A', 1000]} samples"):
        read_run(path)
    frame[frame["order"] != 1000].to_csv(path, index=False)
    with pytest.raises(DataFormatError, match=f"probe 'B' \\(order 2\\) has {counts['B', 2]} samples"):
        read_run(path)


def pa_table(frame: pd.DataFrame):
    import pyarrow as pa

    return pa.Table.from_pandas(frame, preserve_index=False)


@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="named pipes are POSIX")
def test_named_pipe_is_read_like_the_file(tmp_path):
    """A CSV arriving through a named pipe (its size is not known in advance) imports as the
    same file does, values checked against pandas.read_csv (an independent parser)."""
    text = "speed_rpm,probe,amplitude_um_pp,phase_lag_deg\n" + "".join(
        f"{1000 + 10 * i},{p},{1 + i / 100:.3f},{(7 * i) % 360}\n" for i in range(400) for p in ("A", "B")
    )
    plain = tmp_path / "plain.csv"
    plain.write_text(text)
    pipe = tmp_path / "pipe.csv"
    os.mkfifo(pipe)
    writer = threading.Thread(target=pipe.write_text, args=(text,))
    writer.start()
    try:
        run = read_run(pipe, sidecar=None)
    finally:
        writer.join()
    ref = pd.read_csv(plain)
    np.testing.assert_array_equal(run.samples["speed_rpm"].to_numpy(), ref["speed_rpm"].to_numpy())
    np.testing.assert_array_equal(run.samples["amplitude_um_pp"].to_numpy(), ref["amplitude_um_pp"].to_numpy())
    assert list(run.samples["probe"][:4]) == ["A", "B", "A", "B"]
