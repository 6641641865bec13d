"""Tests of the prediction reader (runup.io.predicted).

All predictions here are synthetic: invented modes of invented machines, written to
``tmp_path`` or taken from the synthetic ``sample_runs/compressor_predicted.*``.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_allclose

from runup.errors import DataFormatError, UnitError
from runup.io.predicted import (
    AmplitudeDefinition,
    CriticalSpeedMap,
    read_critical_speed_map,
    read_predicted,
)

SAMPLES = Path(__file__).resolve().parents[1] / "sample_runs"

TOML = """\
# synthetic
machine_id = "SYN-T1"
amplitude_definition = "{definition}"

[[modes]]
mode = "1st, horizontal"
speed_rpm = 4150
af = 7.0
split_pair = "1st"
{amplitude_key} = {{ DE = 40.0, NDE = 50.0 }}
shape = {{ DE = [0.6, 0.1], NDE = 1.0 }}

[[modes]]
mode = "1st, vertical"
speed_rpm = 4450
split_pair = "1st"

[[modes]]
mode = "2nd"
speed_rpm = 9300
af = 2.1
"""


def write(tmp_path: Path, text: str, name: str) -> Path:
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def toml_text(definition: str = "pp single_probe", amplitude_key: str = "peak_amplitude_um_pp") -> str:
    return TOML.format(definition=definition, amplitude_key=amplitude_key)


def test_sample_formats_hold_the_same_prediction():
    """The synthetic sample prediction reads the same from TOML, JSON and CSV (the formats
    of docs/compare.md), and TOML/JSON attach the map CSV they name."""
    toml = read_predicted(SAMPLES / "compressor_predicted.toml")
    js = read_predicted(SAMPLES / "compressor_predicted.json")
    csv = read_predicted(SAMPLES / "compressor_predicted.csv")
    assert toml.modes == js.modes == csv.modes
    assert toml.amplitude_definition == AmplitudeDefinition("pp", "single_probe")
    assert toml.machine_id == "SYN-K7"
    assert csv.critical_speed_map is None
    assert toml.critical_speed_map is not None and js.critical_speed_map is not None
    assert toml.critical_speed_map.modes == ("1st forward", "2nd forward")
    assert_allclose(toml.critical_speed_map.speed_rpm, js.critical_speed_map.speed_rpm, rtol=0)  # same file
    assert len(toml.sources) == 2  # prediction and map, each with its SHA-256


def test_split_pair_complex_shape_and_partner(tmp_path):
    """Split-pair members find each other; a complex shape component [re, im] is read as
    re + j im and a real one with zero imaginary part."""
    p = read_predicted(write(tmp_path, toml_text(), "p.toml"))
    first = p.mode("1st, horizontal")
    assert p.partner(first) == p.mode("1st, vertical")
    assert p.partner(p.mode("2nd")) is None
    assert dict(first.shape) == {"DE": 0.6 + 0.1j, "NDE": 1.0 + 0j}
    assert first.amplitude_at("NDE") == 50.0 and first.amplitude_at("XX") is None


@pytest.mark.parametrize(
    ("definition", "key", "factor"),
    [
        ("pp single_probe", "peak_amplitude_um_pp", 1.0),
        ("0p single_probe", "peak_amplitude_um_0p", 2.0),  # pp = 2 x 0-p for a sinusoid
        ("0p, single_probe", "peak_amplitude_mil_0p", 50.8),  # 1 mil = 25.4 um exactly (1959 inch)
    ],
)
def test_amplitudes_converted_to_um_pp(tmp_path, definition, key, factor):
    """Predicted amplitudes end in um pp whatever unit and scale the file declares."""
    p = read_predicted(write(tmp_path, toml_text(definition, key), "p.toml"))
    assert_allclose([a for _, a in p.mode("1st, horizontal").peak_amplitude_um_pp],
                    np.array([40.0, 50.0]) * factor, rtol=1e-15)  # one multiplication: exact to rounding


def test_csv_prediction_with_complex_shape_and_separate_map(tmp_path):
    """CSV per-plane columns shape.<plane> and shape_im.<plane> form a complex component;
    a map given as a keyword is attached."""
    text = (
        "# synthetic\nmode,speed_rpm,amplitude_definition,peak_amplitude_um_0p.DE,shape.DE,shape_im.DE,shape.NDE\n"
        "first,4000,0p single_probe,20,0.5,-0.2,1\nsecond,9000,0p single_probe,,1,,-0.4\n"
    )
    map_path = write(tmp_path, "stiffness_ratio,first,second\n0.1,1000,5000\n1,3900,8800\n10,5000,9900\n", "m.csv")
    p = read_predicted(write(tmp_path, text, "p.csv"), critical_speed_map=map_path)
    assert dict(p.mode("first").shape) == {"DE": 0.5 - 0.2j, "NDE": 1.0}
    assert p.mode("first").peak_amplitude_um_pp == (("DE", 40.0),)  # 2 x 20 (0-p to pp)
    assert p.mode("second").peak_amplitude_um_pp == ()
    assert p.critical_speed_map is not None
    assert_allclose(p.critical_speed_map.curve("second"), [5000, 8800, 9900], rtol=0)


def test_inline_map_in_toml_and_json(tmp_path):
    """An inline map (TOML table or JSON object) equals the same map read from CSV."""
    toml = toml_text() + (
        '\n[critical_speed_map]\nstiffness_ratio = [0.1, 1.0, 10.0]\n'
        '[critical_speed_map.speed_rpm]\n"2nd" = [5000.0, 9200.0, 9900.0]\n'
    )
    a = read_predicted(write(tmp_path, toml, "p.toml")).critical_speed_map
    doc = {"modes": [{"mode": "2nd", "speed_rpm": 9300}],
           "critical_speed_map": {"stiffness_ratio": [0.1, 1.0, 10.0], "speed_rpm": {"2nd": [5000, 9200, 9900]}}}
    b = read_predicted(write(tmp_path, json.dumps(doc), "p.json")).critical_speed_map
    c = read_critical_speed_map(write(tmp_path, "stiffness_ratio,2nd\n0.1,5000\n1,9200\n10,9900\n", "m.csv"))
    for m in (a, b):
        assert m is not None and m.modes == c.modes
        assert_allclose(m.stiffness_ratio, c.stiffness_ratio, rtol=0)  # same decimal literals
        assert_allclose(m.speed_rpm, c.speed_rpm, rtol=0)


BAD = [
    # (name, text, message fragment, column, row)
    ("p.csv", "mode,af\nfirst,3\n", "speed_rpm", "speed_rpm", 1),
    ("p.csv", "mode,speed_rpm\nfirst,4000\nsecond,0\n", "must be positive", "speed_rpm", 2),
    ("p.csv", "mode,speed_rpm\nfirst,-4000\n", "must be positive", "speed_rpm", 1),
    ("p.csv", "mode,speed_rpm\nfirst,4000\nfirst,9000\n", "appears twice", "mode", 2),
    ("p.csv", "mode,speed_rpm\nfirst,fast\n", "expected a number", "speed_rpm", 1),
    ("p.csv", "mode,speed_rpm,colour\nfirst,4000,red\n", "unknown column", "colour", None),
    ("p.toml", toml_text("pp double_probe"), "unknown amplitude_definition", "amplitude_definition", None),
    ("p.toml", toml_text("pp major_axis"), "major-axis", "amplitude_definition", None),
    ("p.toml", toml_text("0p single_probe"), "make them agree", "peak_amplitude_um_pp", 1),
    ("p.toml", toml_text().replace('amplitude_definition = "pp single_probe"\n', ""),
     "no amplitude_definition", "amplitude_definition", None),
    ("p.toml", toml_text().replace('mode = "2nd"\nspeed_rpm = 9300\n', 'mode = "2nd"\nspeed_rpm = 9300\nsplit_pair = "1st"\n'),
     "3 member(s)", "split_pair", 3),
    ("p.toml", toml_text().replace("af = 2.1", "colour = 2.1"), "unknown field", "colour", 3),
    ("p.json", '{"modes": []}', "no predicted modes", "modes", None),
    ("p.json", '{"modes": [{"mode": "a", "speed_rpm": 1}], "critical_speed_map": '
               '{"stiffness_ratio": [1, 0.5], "speed_rpm": {"a": [1, 2]}}}', "increase strictly", "stiffness_ratio", 2),
    ("p.json", '{"modes": [{"mode": "a", "speed_rpm": 1}], "critical_speed_map": '
               '{"stiffness_ratio": [0.5, 1], "speed_rpm": {"b": [1, 2]}}}', "does not list", "b", None),
    ("p.yaml", "modes: []", "unknown prediction file extension", None, None),
]


@pytest.mark.parametrize(("name", "text", "fragment", "column", "row"), BAD)
def test_bad_predictions_are_refused_with_where_and_what(tmp_path, name, text, fragment, column, row):
    """Each malformed prediction raises DataFormatError naming the file, the field (column)
    and the row, in one line."""
    path = write(tmp_path, text, name)
    with pytest.raises(DataFormatError) as info:
        read_predicted(path)
    err = info.value
    assert fragment in str(err)
    assert err.file == str(path) and err.column == column and err.row == row
    assert "\n" not in str(err)


def test_unknown_amplitude_unit_is_a_unit_error(tmp_path):
    """An amplitude field with an unknown unit raises UnitError naming the field."""
    with pytest.raises(UnitError, match="peak_amplitude_furlong_pp"):
        read_predicted(write(tmp_path, toml_text(amplitude_key="peak_amplitude_furlong_pp"), "p.toml"))


def test_map_csv_errors(tmp_path):
    """A map whose stiffness axis repeats a value, or whose speeds are not positive, is refused
    with the offending column and data row."""
    with pytest.raises(DataFormatError) as info:
        read_critical_speed_map(write(tmp_path, "stiffness_ratio,a\n0.1,100\n1,200\n1,300\n", "m.csv"))
    assert (info.value.column, info.value.row) == ("stiffness_ratio", 3)
    with pytest.raises(DataFormatError) as info:
        read_critical_speed_map(write(tmp_path, "stiffness_ratio,a\n0.1,100\n1,-200\n", "m.csv"))
    assert (info.value.column, info.value.row) == ("a", 2)
    with pytest.raises(DataFormatError, match="first column"):
        read_critical_speed_map(write(tmp_path, "kappa,a\n0.1,100\n1,200\n", "m.csv"))


def test_map_is_read_only():
    """Map arrays cannot be changed behind the result (frozen, read-only arrays)."""
    m = CriticalSpeedMap(np.array([0.1, 1.0]), ("a",), np.array([[100.0], [200.0]]))
    with pytest.raises(ValueError, match="read-only"):
        m.speed_rpm[0, 0] = 1.0
