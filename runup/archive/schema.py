"""Table schemas of the archive, its metadata document and the versioned upgrade path.

Every table is a Parquet dataset partitioned Hive-style by ``machine_id`` (the partition
column is not stored in the files).  Every row carries ``run_id`` and ``write_id``: a run's
rows in every table share the ``write_id`` of the ``runs`` row that committed them, so a
reader joins on it and never sees rows of an uncommitted or replaced write.

``SCHEMA_VERSION`` changes whenever a column changes meaning or is removed; an archive of an
older version is read through :func:`upgrade_frames`, one registered step per version.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import pandas as pd
import pyarrow as pa

from ..errors import DataFormatError

__all__ = ["SCHEMA_VERSION", "TABLES", "TABLE_NAMES", "FORMAT", "table_schema", "schemas_to_json",
           "upgrade_frames", "check_version"]

#: Version of the archive layout written by this runup.
SCHEMA_VERSION = 1
#: ``archive.json``'s ``format`` value.
FORMAT = "runup-archive"


def _f(name: str, type_: pa.DataType, description: str, *, nullable: bool = True) -> pa.Field:
    return pa.field(name, type_, nullable=nullable, metadata={"description": description})


_KEYS = [
    _f("run_id", pa.string(), "run identifier", nullable=False),
    _f("write_id", pa.string(), "identifier of the write that committed the run (join key)", nullable=False),
]
_VECTOR = [
    _f("amplitude_um_pp", pa.float64(), "amplitude, um peak-to-peak (null when unknown)"),
    _f("phase_lag_deg", pa.float64(), "phase lag, degrees in [0, 360) (null when unknown)"),
]
_LIST = pa.list_(pa.string())

#: Schema of each table, in the order a run is written (``runs`` last: it commits the run).
TABLES: dict[str, pa.Schema] = {
    "segments": pa.schema(_KEYS + [
        _f("segment", pa.int32(), "0-based segment index in acquisition order"),
        _f("direction", pa.string(), "startup or coastdown"),
        _f("start_rpm", pa.float64(), "speed at the segment's first sample, rpm"),
        _f("end_rpm", pa.float64(), "speed at the segment's last sample, rpm"),
        _f("sweep_rate_rpm_per_s", pa.float64(), "median sweep rate, rpm/s (null without time)"),
    ]),
    "criticals": pa.schema(_KEYS + [
        _f("index", pa.int32(), "position of the critical in the run"),
        _f("segment", pa.int32(), "speed segment"),
        _f("direction", pa.string(), "startup or coastdown"),
        _f("order", pa.int32(), "harmonic order (speeds of order n are frequencies in cpm)"),
        _f("speed_rpm", pa.float64(), "peak-response speed, rpm"),
        _f("natural_speed_rpm", pa.float64(), "fitted undamped natural speed, rpm"),
        _f("natural_speed_ci95_low_rpm", pa.float64(), "95 % interval, low, rpm"),
        _f("natural_speed_ci95_high_rpm", pa.float64(), "95 % interval, high, rpm"),
        _f("damping_ratio", pa.float64(), "modal damping ratio"),
        _f("damping_ratio_ci95_low", pa.float64(), "95 % interval, low"),
        _f("damping_ratio_ci95_high", pa.float64(), "95 % interval, high"),
        _f("amplification_factor", pa.float64(), "API half-power amplification factor"),
        _f("amplification_factor_ci95_low", pa.float64(), "95 % interval, low"),
        _f("amplification_factor_ci95_high", pa.float64(), "95 % interval, high"),
        _f("peak_amplitude_um_pp", pa.float64(), "largest probe peak, um pp"),
        _f("method", pa.string(), "modal_fit, circle_fit or half_power"),
        _f("probes", _LIST, "probes showing the critical"),
        _f("flags", _LIST, "flags of the critical"),
        _f("split_lower_rpm", pa.float64(), "split pair: lower natural speed, rpm (null if not split)"),
        _f("split_upper_rpm", pa.float64(), "split pair: upper natural speed, rpm (null if not split)"),
    ]),
    "curves": pa.schema(_KEYS + [
        _f("curve", pa.int32(), "position of the curve in the run"),
        _f("name", pa.string(), "probe name, or plane name for a major-axis curve"),
        _f("kind", pa.string(), "probe or major_axis"),
        _f("order", pa.int32(), "harmonic order"),
        _f("segment", pa.int32(), "speed segment"),
        _f("speed_rpm", pa.float64(), "grid speed, rpm (multiple of the run's grid step)"),
        *_VECTOR,
    ]),
    "slow_roll": pa.schema(_KEYS + [
        _f("index", pa.int32(), "position in the run"),
        _f("probe", pa.string(), "probe"),
        _f("order", pa.int32(), "harmonic order"),
        _f("segment", pa.int32(), "speed segment"),
        *_VECTOR,
        _f("low_rpm", pa.float64(), "averaging window, low, rpm"),
        _f("high_rpm", pa.float64(), "averaging window, high, rpm"),
    ]),
    "running_speed": pa.schema(_KEYS + [
        _f("index", pa.int32(), "position in the run"),
        _f("probe", pa.string(), "probe"),
        _f("segment", pa.int32(), "speed segment"),
        _f("speed_rpm", pa.float64(), "running speed, rpm"),
        _f("basis", pa.string(), "max_continuous (metadata) or top_speed (of the curve)"),
        *_VECTOR,
    ]),
    "verdicts": pa.schema(_KEYS + [
        _f("index", pa.int32(), "position in the run"),
        _f("kind", pa.string(), "margin or vibration"),
        _f("segment", pa.int32(), "speed segment"),
        _f("subject", pa.string(), "critical speed (margin) or probe (vibration)"),
        _f("value", pa.float64(), "margin % or amplitude um pp"),
        _f("limit", pa.float64(), "required margin % or limit um pp"),
        _f("status", pa.string(), "pass, fail or not_evaluated"),
        _f("rule", pa.string(), "rule label with its source"),
    ]),
    "runs": pa.schema(_KEYS + [
        _f("schema_version", pa.int32(), "archive schema version of the writer"),
        _f("committed_utc", pa.string(), "ISO 8601 UTC time the run was committed"),
        _f("start_time", pa.string(), "ISO 8601 start time (tag start_time), null when not given"),
        _f("time_key", pa.string(), "start time, else run id: what a history is ordered by"),
        _f("direction", pa.string(), "startup or coastdown"),
        _f("rotation", pa.string(), "ccw or cw viewed from the driver end"),
        _f("tags_json", pa.string(), "condition tags, a JSON object of strings"),
        _f("grid_step_rpm", pa.float64(), "spacing of the curves' speed grid, rpm"),
        _f("rule_set", pa.string(), "rule set of the verdicts, null when not checked"),
        _f("sources_json", pa.string(), "input files, a JSON list of {path, sha256}"),
        _f("tool_version", pa.string(), "runup version that made the fingerprint"),
        _f("n_criticals", pa.int32(), "criticals of the run"),
    ]),
}
TABLE_NAMES = tuple(TABLES)


def table_schema(name: str) -> pa.Schema:
    """The schema of one table (``KeyError`` lists the tables)."""
    try:
        return TABLES[name]
    except KeyError:
        raise KeyError(f"no table {name!r}; tables are {', '.join(TABLE_NAMES)}") from None


def schemas_to_json() -> dict[str, list[dict[str, str]]]:
    """Every table's columns as ``{"name", "type", "description"}`` for ``archive.json``."""
    return {
        name: [
            {"name": f.name, "type": str(f.type), "description": (f.metadata or {}).get(b"description", b"").decode()}
            for f in schema
        ]
        for name, schema in TABLES.items()
    }


Frames = dict[str, pd.DataFrame]
#: ``_UPGRADES[v]`` turns frames of version ``v`` into frames of version ``v + 1``.
_UPGRADES: dict[int, Callable[[Frames], Frames]] = {}


def check_version(doc: dict[str, Any], *, file: str) -> int:
    """The schema version of an ``archive.json`` document, checked readable by this runup."""
    if doc.get("format") != FORMAT:
        raise DataFormatError(f"not a runup archive (format is {doc.get('format')!r}, expected {FORMAT!r})", file=file)
    version = doc.get("schema_version")
    if not isinstance(version, int) or version < 1:
        raise DataFormatError(f"schema_version must be a whole number >= 1, found {version!r}", file=file)
    if version > SCHEMA_VERSION:
        raise DataFormatError(
            f"archive written with schema version {version}, this runup reads up to {SCHEMA_VERSION}; upgrade runup",
            file=file,
        )
    return version


def upgrade_frames(frames: Frames, *, from_version: int) -> Frames:
    """Tables read from an archive of ``from_version``, upgraded step by step to :data:`SCHEMA_VERSION`.

    Version 1 is the current version: nothing to do.  A future version ``v + 1`` registers
    ``_UPGRADES[v]`` (e.g. adding a column with its default), so that every older archive
    keeps loading.
    """
    for version in range(from_version, SCHEMA_VERSION):
        frames = _UPGRADES[version](frames)
    return frames
