"""Reading an archive: committed runs, one run, one machine's history.

Readers take no lock.  They see exactly the committed runs: a run's ``runs`` row is the
commit, rows of other tables are kept only when their ``write_id`` is that of a committed
``runs`` row, and when a run was replaced and both writes are still on disk (a writer
stopped between committing the new write and removing the old one) the later commit wins.
Temporary files start with ``.`` and are skipped by ``pyarrow.dataset``.
"""

from __future__ import annotations

import os
from pathlib import Path

import pandas as pd
import pyarrow as pa
import pyarrow.dataset as ds
import pyarrow.parquet as pq

from ..errors import DataFormatError
from ..fingerprint import Fingerprint
from .rows import fingerprints_from_frames
from .schema import TABLE_NAMES, TABLES, upgrade_frames
from .store import ID_PATTERN, ArchiveInfo, open_archive, read_baseline, table_dir, validate_id

__all__ = ["machines", "list_runs", "read_table", "load_run", "history"]

_RETRIES = 3


def _info(archive: str | os.PathLike[str] | ArchiveInfo) -> ArchiveInfo:
    return archive if isinstance(archive, ArchiveInfo) else open_archive(archive)


def machines(archive: str | os.PathLike[str] | ArchiveInfo) -> tuple[str, ...]:
    """Machine ids with at least one committed run, sorted."""
    info = _info(archive)
    folder = info.root / "runs"
    if not folder.is_dir():
        return ()
    found = []
    for p in folder.iterdir():
        key, _, value = p.name.partition("=")
        if key == "machine_id" and ID_PATTERN.match(value) and any(p.glob("*.parquet")):
            found.append(value)
    return tuple(sorted(found))


def _read_files(paths: list[Path] | Path, schema: pa.Schema) -> pd.DataFrame:
    """Parquet files (or a directory of them) as one frame; retried if a replaced file vanishes."""
    for attempt in range(_RETRIES):
        try:
            if isinstance(paths, Path):
                if not paths.is_dir():
                    return schema.empty_table().to_pandas()
                table = ds.dataset(str(paths), format="parquet", schema=schema).to_table()
            else:
                tables = [pq.read_table(p, schema=schema) for p in paths]
                table = pa.concat_tables(tables) if tables else schema.empty_table()
            return table.to_pandas()
        except FileNotFoundError:
            if attempt == _RETRIES - 1:
                raise
    raise AssertionError("unreachable")


def _committed_runs(frame: pd.DataFrame) -> pd.DataFrame:
    frame = frame.sort_values(["committed_utc", "write_id"], kind="stable")
    return frame.drop_duplicates(["run_id"], keep="last")


def _machine_frames(info: ArchiveInfo, machine: str, *, tables: tuple[str, ...]) -> dict[str, pd.DataFrame]:
    runs = _committed_runs(_read_files(table_dir(info.root, "runs", machine), TABLES["runs"]))
    frames = {"runs": runs}
    keep = set(runs["write_id"])
    for t in tables:
        if t != "runs":
            f = _read_files(table_dir(info.root, t, machine), TABLES[t])
            frames[t] = f[f["write_id"].isin(keep)]
    return upgrade_frames(frames, from_version=info.schema_version)


def read_table(
    archive: str | os.PathLike[str] | ArchiveInfo, table: str, *, machine_id: str | None = None
) -> pd.DataFrame:
    """The committed rows of one table, with a ``machine_id`` column (all machines by default)."""
    if table not in TABLES:
        raise DataFormatError(f"no table {table!r}; tables are {', '.join(TABLE_NAMES)}")
    info = _info(archive)
    ids = (validate_id(machine_id, what="machine id"),) if machine_id is not None else machines(info)
    parts = []
    for m in ids:
        f = _machine_frames(info, m, tables=(table,))[table].copy()
        f.insert(0, "machine_id", m)
        parts.append(f)
    if not parts:
        empty = TABLES[table].empty_table().to_pandas()
        empty.insert(0, "machine_id", pd.Series(dtype=object))
        return empty
    return pd.concat(parts, ignore_index=True)


def list_runs(archive: str | os.PathLike[str] | ArchiveInfo, *, machine_id: str | None = None) -> pd.DataFrame:
    """One row per committed run, ordered by machine then time key, with a ``baseline`` column."""
    info = _info(archive)
    runs = read_table(info, "runs", machine_id=machine_id)
    base = {m: read_baseline(info, m) for m in runs["machine_id"].unique()}
    runs["baseline"] = [base.get(m) == r for m, r in zip(runs["machine_id"], runs["run_id"], strict=True)]
    return runs.sort_values(["machine_id", "time_key", "committed_utc"], kind="stable").reset_index(drop=True)


def load_run(archive: str | os.PathLike[str] | ArchiveInfo, machine_id: str, run_id: str) -> Fingerprint:
    """One committed run's fingerprint (reads only that run's files)."""
    info = _info(archive)
    machine = validate_id(machine_id, what="machine id")
    run = validate_id(run_id, what="run id")
    folder = table_dir(info.root, "runs", machine)
    paths = sorted(p for p in folder.glob(f"{run}~*.parquet") if p.name.split("~", 1)[0] == run) if folder.is_dir() else []
    runs = _committed_runs(_read_files(paths, TABLES["runs"]))
    if runs.empty:
        raise DataFormatError(f"no run {run} for machine {machine} in the archive", file=str(info.root))
    name = f"{run}~{runs['write_id'].iloc[0]}.parquet"
    frames = {"runs": runs}
    for t in TABLE_NAMES[:-1]:
        path = table_dir(info.root, t, machine) / name
        frames[t] = _read_files([path] if path.exists() else [], TABLES[t])
    frames = upgrade_frames(frames, from_version=info.schema_version)
    return fingerprints_from_frames(frames, machine_id=machine)[0]


def history(archive: str | os.PathLike[str] | ArchiveInfo, machine_id: str) -> tuple[Fingerprint, ...]:
    """Every committed run of one machine, ordered by time key (start time, else run id)."""
    info = _info(archive)
    machine = validate_id(machine_id, what="machine id")
    frames = _machine_frames(info, machine, tables=TABLE_NAMES)
    frames["runs"] = frames["runs"].sort_values(["time_key", "committed_utc"], kind="stable")
    return tuple(fingerprints_from_frames(frames, machine_id=machine))
