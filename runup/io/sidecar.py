"""The run sidecar: a small TOML file of metadata beside a data file.

A data file ``run1.csv`` may have a sidecar ``run1.toml`` in the same folder giving
the machine and run identifiers, direction, rotation, operating speeds, probe
definitions and a column map.  Every table and key is optional, but unknown tables and
keys are errors so that a typo cannot pass silently.  The format is documented in
``docs/file-formats.md``.
"""

from __future__ import annotations

import hashlib
import math
import os
import re
import tomllib
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Literal

from ..errors import DataFormatError
from ..run import OperatingSpeeds, Probe

__all__ = ["RunSidecar", "read_sidecar"]

_TABLES = {
    "run": ("machine_id", "run_id", "direction", "rotation"),
    "speeds": ("min_operating_rpm", "max_continuous_rpm", "trip_rpm"),
    "columns": (),
    "probes": ("name", "plane", "angle_deg"),
}
_DIRECTIONS = ("startup", "coastdown")
_ROTATIONS = ("ccw", "cw")
_TOML_WHERE = re.compile(r"\s*\(at line (\d+), column (\d+)\)\s*$")


@dataclass(frozen=True)
class RunSidecar:
    """Metadata read from a sidecar TOML file.

    Attributes
    ----------
    machine_id, run_id
        Identifiers, or ``None`` when the sidecar does not give them.
    direction
        ``"startup"``, ``"coastdown"`` or ``None``.
    rotation
        ``"ccw"`` or ``"cw"`` viewed from the driver end, or ``None``.
    operating
        Minimum operating, maximum continuous and trip speeds, rpm.
    probes
        Probe definitions (name, plane, mounting angle in degrees from vertical-up,
        positive counter-clockwise viewed from the driver end).
    column_map
        Source header -> canonical column name (see ``docs/file-formats.md``).
    path
        The sidecar file as given.
    sha256
        Hex SHA-256 of the sidecar's bytes, for provenance.
    """

    machine_id: str | None = None
    run_id: str | None = None
    direction: Literal["startup", "coastdown"] | None = None
    rotation: Literal["ccw", "cw"] | None = None
    operating: OperatingSpeeds = field(default_factory=OperatingSpeeds)
    probes: tuple[Probe, ...] = ()
    column_map: dict[str, str] = field(default_factory=dict)
    path: str = ""
    sha256: str = ""


def read_sidecar(path: str | os.PathLike) -> RunSidecar:
    """Read and validate a run sidecar TOML file.

    Parameters
    ----------
    path
        The ``.toml`` file.

    Returns
    -------
    RunSidecar

    Raises
    ------
    DataFormatError
        File missing or unreadable, TOML syntax error (message gives the line and
        column), unknown table or key (message lists the valid ones), a value of the
        wrong type, or inconsistent operating speeds.
    """
    file = str(path)
    try:
        data = Path(path).read_bytes()
    except FileNotFoundError:
        raise DataFormatError("sidecar file not found; check the path", file=file) from None
    except OSError as exc:
        raise DataFormatError(
            f"cannot read sidecar file ({exc.strerror or type(exc).__name__})", file=file
        ) from None
    try:
        doc = tomllib.loads(data.decode("utf-8"))
    except UnicodeDecodeError:
        raise DataFormatError("sidecar is not UTF-8 text; save it as UTF-8", file=file) from None
    except tomllib.TOMLDecodeError as exc:
        text = str(exc)
        m = _TOML_WHERE.search(text)
        where = f" at line {m.group(1)}, column {m.group(2)}" if m else ""
        reason = _TOML_WHERE.sub("", text)
        raise DataFormatError(
            f"invalid TOML{where}: {reason}; see docs/file-formats.md for the sidecar format",
            file=file,
        ) from None
    return _build(doc, file=file, sha256=hashlib.sha256(data).hexdigest())


def _build(doc: Mapping[str, Any], *, file: str, sha256: str) -> RunSidecar:
    for key, value in doc.items():
        if key not in _TABLES:
            hint = next((f"; put it under [{t}]" for t, keys in _TABLES.items() if key in keys), "")
            raise DataFormatError(
                f"unknown top-level key '{key}'{hint}; valid tables are "
                f"{', '.join(sorted(_TABLES))}",
                file=file,
            )
        if key == "probes":
            if not isinstance(value, list):
                raise DataFormatError(
                    "'probes' must be an array of tables, written [[probes]]", file=file
                )
        elif not isinstance(value, dict):
            raise DataFormatError(f"'{key}' must be a table, written [{key}]", file=file)

    run = doc.get("run", {})
    _check_keys(run, "run", file=file)
    speeds = doc.get("speeds", {})
    _check_keys(speeds, "speeds", file=file)
    machine_id = _optional_str(run, "run", "machine_id", file=file)
    run_id = _optional_str(run, "run", "run_id", file=file)
    direction = _optional_choice(run, "direction", _DIRECTIONS, file=file)
    rotation = _optional_choice(run, "rotation", _ROTATIONS, file=file)
    try:
        operating = OperatingSpeeds(
            **{k: _optional_number(speeds, "speeds", k, file=file) for k in _TABLES["speeds"]}
        )
    except DataFormatError as exc:
        raise DataFormatError(f"[speeds] {exc.message}", file=file) from None
    return RunSidecar(
        machine_id=machine_id,
        run_id=run_id,
        direction=direction,  # type: ignore[arg-type]
        rotation=rotation,  # type: ignore[arg-type]
        operating=operating,
        probes=_probes(doc.get("probes", []), file=file),
        column_map=_columns(doc.get("columns", {}), file=file),
        path=file,
        sha256=sha256,
    )


def _check_keys(table: Mapping[str, Any], where: str, *, file: str) -> None:
    valid = _TABLES[where.split("[", 1)[0]]
    for key in table:
        if key not in valid:
            raise DataFormatError(
                f"unknown key '{key}' in [{where}]; valid keys are {', '.join(valid)}",
                file=file,
            )


def _optional_str(table: Mapping[str, Any], where: str, key: str, *, file: str) -> str | None:
    value = table.get(key)
    if value is None:
        return None
    if not isinstance(value, str) or not value.strip():
        raise DataFormatError(
            f"{where}.{key} must be a non-empty string in quotes, got {value!r}", file=file
        )
    return value.strip()


def _optional_choice(
    table: Mapping[str, Any], key: str, choices: tuple[str, ...], *, file: str
) -> str | None:
    value = _optional_str(table, "run", key, file=file)
    if value is None:
        return None
    if value.lower() not in choices:
        raise DataFormatError(
            f"run.{key} must be one of {', '.join(repr(c) for c in choices)}, got {value!r}",
            file=file,
        )
    return value.lower()


def _optional_number(table: Mapping[str, Any], where: str, key: str, *, file: str) -> float | None:
    value = table.get(key)
    if value is None:
        return None
    if isinstance(value, bool) or not isinstance(value, int | float) or not math.isfinite(value):
        raise DataFormatError(
            f"{where}.{key} must be a finite number without quotes, got {value!r}", file=file
        )
    return float(value)


def _probes(items: list[Any], *, file: str) -> tuple[Probe, ...]:
    probes = []
    for i, item in enumerate(items, start=1):
        where = f"probes[{i}]"
        if not isinstance(item, dict):
            raise DataFormatError(f"{where} must be a table, written [[probes]]", file=file)
        _check_keys(item, where, file=file)
        name = _optional_str(item, where, "name", file=file)
        if name is None:
            raise DataFormatError(
                f"{where} lacks 'name'; give the probe name used in the data file", file=file
            )
        probes.append(
            Probe(
                name,
                plane=_optional_str(item, where, "plane", file=file),
                angle_deg=_optional_number(item, where, "angle_deg", file=file),
            )
        )
    names = [p.name for p in probes]
    dupes = sorted({n for n in names if names.count(n) > 1})
    if dupes:
        raise DataFormatError(
            f"probe defined more than once in [[probes]]: {', '.join(dupes)}", file=file
        )
    return tuple(probes)


def _columns(table: Mapping[str, Any], *, file: str) -> dict[str, str]:
    out = {}
    for source, target in table.items():
        if not isinstance(target, str) or not target.strip() or not source.strip():
            raise DataFormatError(
                f"[columns] entry {source!r} must map a source header to a canonical column "
                f'name in quotes, e.g. "Speed" = "speed_rpm"; got {target!r}',
                file=file,
            )
        out[source.strip()] = target.strip()
    return out
