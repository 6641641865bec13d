"""Tests of the run sidecar reader (runup.io.sidecar).

Sidecars here are synthetic, with invented machine and run ids, written to ``tmp_path``.
"""

from __future__ import annotations

import hashlib
import tomllib

import pytest

from runup.errors import DataFormatError
from runup.io import RunSidecar, read_sidecar
from runup.run import OperatingSpeeds, Probe

FULL = """\
[run]
machine_id = "K-301"
run_id = "2026-03-14-cold-start"
direction = "startup"
rotation = "ccw"

[speeds]
min_operating_rpm = 8500
max_continuous_rpm = 11200
trip_rpm = 12300.5

[columns]
"Speed" = "speed_rpm"
"Brg 1 X amp [mil pp]" = "B1X.amplitude_mil_pp"

[[probes]]
name = "DE-X"
plane = "DE"
angle_deg = 45

[[probes]]
name = "DE-Y"
plane = "DE"
angle_deg = -45.0
"""


def write(tmp_path, text: str, name: str = "run.toml"):
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def test_full_sidecar_is_read(tmp_path):
    """Every documented table and key is read into a RunSidecar with the right types."""
    path = write(tmp_path, FULL)
    side = read_sidecar(path)
    assert isinstance(side, RunSidecar)
    assert (side.machine_id, side.run_id) == ("K-301", "2026-03-14-cold-start")
    assert (side.direction, side.rotation) == ("startup", "ccw")
    assert side.operating == OperatingSpeeds(8500.0, 11200.0, 12300.5)
    assert side.probes == (Probe("DE-X", "DE", 45.0), Probe("DE-Y", "DE", -45.0))
    # tomllib (stdlib) is the independent reader of the same mapping.
    assert side.column_map == tomllib.loads(FULL)["columns"]
    assert side.path == str(path)
    assert side.sha256 == hashlib.sha256(path.read_bytes()).hexdigest()


def test_empty_sidecar_gives_defaults(tmp_path):
    """An empty sidecar is valid and leaves everything unknown."""
    side = read_sidecar(write(tmp_path, ""))
    assert side.machine_id is None and side.direction is None
    assert side.operating == OperatingSpeeds() and side.probes == () and side.column_map == {}


BAD = {
    # name: (toml text, message fragment)
    "unknown table": (
        "[speed]\ntrip_rpm = 1\n",
        "unknown top-level key 'speed'; valid tables are columns, probes, run, speeds",
    ),
    "key at top level": (
        'machine_id = "K-1"\n',
        "unknown top-level key 'machine_id'; put it under [run]",
    ),
    "unknown run key": (
        '[run]\nmachine = "K-1"\n',
        "unknown key 'machine' in [run]; valid keys are machine_id, run_id, direction, rotation",
    ),
    "unknown speeds key": ("[speeds]\nmcs_rpm = 1\n", "unknown key 'mcs_rpm' in [speeds]"),
    "unknown probe key": (
        '[[probes]]\nname = "A"\nangel_deg = 1\n',
        "unknown key 'angel_deg' in [probes[1]]",
    ),
    "speed as string": (
        '[speeds]\ntrip_rpm = "12300"\n',
        "speeds.trip_rpm must be a finite number without quotes, got '12300'",
    ),
    "speed as bool": ("[speeds]\ntrip_rpm = true\n", "speeds.trip_rpm must be a finite number"),
    "speeds out of order": (
        "[speeds]\nmax_continuous_rpm = 9000\ntrip_rpm = 8000\n",
        "[speeds] max_continuous_rpm (9000) must not exceed trip_rpm (8000)",
    ),
    "negative speed": (
        "[speeds]\nmin_operating_rpm = -5\n",
        "min_operating_rpm must be a positive number",
    ),
    "machine id as number": (
        "[run]\nmachine_id = 301\n",
        "run.machine_id must be a non-empty string",
    ),
    "bad direction": (
        '[run]\ndirection = "up"\n',
        "run.direction must be one of 'startup', 'coastdown', got 'up'",
    ),
    "bad rotation": ('[run]\nrotation = "clockwise"\n', "run.rotation must be one of 'ccw', 'cw'"),
    "probe without name": ('[[probes]]\nplane = "DE"\n', "probes[1] lacks 'name'"),
    "duplicate probe": (
        '[[probes]]\nname = "A"\n[[probes]]\nname = "A"\n',
        "probe defined more than once in [[probes]]: A",
    ),
    "angle as string": (
        '[[probes]]\nname = "A"\nangle_deg = "45"\n',
        "probes[1].angle_deg must be a finite number",
    ),
    "run not a table": ('run = "x"\n', "'run' must be a table"),
    "probes not array": ('[probes]\nname = "A"\n', "'probes' must be an array of tables"),
    "column target not string": (
        '[columns]\n"Speed" = 1\n',
        "[columns] entry 'Speed' must map a source header",
    ),
    "syntax error": ('[run]\nmachine_id = "K-301"\nrun_id = \n', "invalid TOML at line 3, column"),
}


@pytest.mark.parametrize("case", list(BAD))
def test_bad_sidecar_is_one_clear_line(tmp_path, case):
    """Each malformed sidecar raises one DataFormatError naming the file and the key."""
    text, fragment = BAD[case]
    path = write(tmp_path, text)
    with pytest.raises(DataFormatError) as e:
        read_sidecar(path)
    msg = str(e.value)
    assert "\n" not in msg
    assert fragment in msg
    assert e.value.file == str(path)


def test_missing_sidecar_file(tmp_path):
    """An explicit sidecar path that does not exist is an error naming it."""
    with pytest.raises(DataFormatError, match="sidecar file not found") as e:
        read_sidecar(tmp_path / "absent.toml")
    assert e.value.file == str(tmp_path / "absent.toml")


def test_direction_case_is_normalised(tmp_path):
    """Direction and rotation are accepted in any case and stored lower-case."""
    side = read_sidecar(write(tmp_path, '[run]\ndirection = "Coastdown"\nrotation = "CW"\n'))
    assert (side.direction, side.rotation) == ("coastdown", "cw")
