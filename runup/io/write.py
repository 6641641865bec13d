"""Write a :class:`~runup.run.Run` as a canonical long-layout run file plus sidecar.

The data file (CSV or Parquet, by extension) holds the columns ``speed_rpm``, ``probe``,
``order``, ``amplitude_um_pp``, ``phase_lag_deg`` and, when the run has times,
``time_s``, one row per sample in the run's acquisition order -- the long layout of
``docs/file-formats.md``, which :func:`runup.io.read_run` reads back.  The sidecar
``<stem>.toml`` beside it holds the metadata (machine and run ids, direction, rotation,
operating speeds, probes); the run's source files and their SHA-256 are listed in its
header comment.  Both files are written atomically (temporary file, then rename).
"""

from __future__ import annotations

import json
import os
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

from .._version import __version__
from ..errors import DataFormatError
from ..run import Run
from .atomic import atomic_write

__all__ = ["write_run"]

_FORMATS = {".csv": "csv", ".parquet": "parquet", ".pq": "parquet"}


def _toml_str(value: str) -> str:
    return json.dumps(value)  # a JSON string is a valid TOML basic string


def _sidecar_text(run: Run) -> str:
    m = run.metadata
    lines = [f"# Run metadata written by runup {__version__} (runup.io.write_run)."]
    lines += [f"# source: {s.path} sha256 {s.sha256}" for s in m.sources]
    lines += ["[run]", f"machine_id = {_toml_str(m.machine_id)}", f"run_id = {_toml_str(m.run_id)}"]
    if m.direction is not None:
        lines.append(f"direction = {_toml_str(m.direction)}")
    if m.rotation is not None:
        lines.append(f"rotation = {_toml_str(m.rotation)}")
    speeds = [(k, getattr(m.operating, k)) for k in ("min_operating_rpm", "max_continuous_rpm", "trip_rpm")]
    if any(v is not None for _, v in speeds):
        lines += ["", "[speeds]"] + [f"{k} = {float(v)!r}" for k, v in speeds if v is not None]
    for p in m.probes:
        lines += ["", "[[probes]]", f"name = {_toml_str(p.name)}"]
        if p.plane is not None:
            lines.append(f"plane = {_toml_str(p.plane)}")
        if p.angle_deg is not None:
            lines.append(f"angle_deg = {float(p.angle_deg)!r}")
    return "\n".join(lines) + "\n"


def write_run(run: Run, path: str | os.PathLike[str], *, sidecar: bool = True) -> Path:
    """Write ``run`` to ``path`` (``.csv``, ``.parquet`` or ``.pq``) and its sidecar.

    Parameters
    ----------
    run
        The run to write.
    path
        Data file; replaced if it exists.
    sidecar
        Also write ``<stem>.toml`` beside it (replacing one that exists).

    Returns
    -------
    pathlib.Path
        The data file written.

    Raises
    ------
    DataFormatError
        Unknown extension or a folder that cannot be written to.
    """
    out = Path(path)
    kind = _FORMATS.get(out.suffix.lower())
    if kind is None:
        raise DataFormatError(
            f"unknown run file extension '{out.suffix}'; write .csv or .parquet", file=str(out)
        )
    df = run.samples.drop(columns="row")
    if not np.isfinite(df["time_s"].to_numpy()).any():
        df = df.drop(columns="time_s")
    try:
        if kind == "csv":
            atomic_write(out, lambda tmp: df.to_csv(tmp, index=False))  # floats as repr: exact round trip
        else:
            table = pa.Table.from_pandas(df, preserve_index=False)
            atomic_write(out, lambda tmp: pq.write_table(table, tmp))
        if sidecar:
            text = _sidecar_text(run)
            atomic_write(out.with_suffix(".toml"), lambda tmp: Path(tmp).write_text(text, encoding="utf-8"))
    except OSError as exc:
        raise DataFormatError(
            f"cannot write run file ({exc.strerror or type(exc).__name__}); check the folder",
            file=str(out),
        ) from None
    return out
