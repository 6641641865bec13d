"""Writing to an archive: ids, atomic files, locks, committing runs, baselines.

Layout (see ``docs/archive.md``)::

    ARCHIVE/archive.json                                  format, schema_version, table schemas
    ARCHIVE/<table>/machine_id=<M>/<run_id>~<write_id>.parquet   one file per run per table
    ARCHIVE/baselines/<M>.json                            the machine's baseline and its history
    ARCHIVE/.locks/<M>.lock, ARCHIVE/.locks/archive.lock  fcntl.flock lock files

Every file is written to a temporary file whose name starts with ``.`` in the same
directory (ignored by ``pyarrow.dataset``), fsynced, then renamed over its final name with
``os.replace`` and the directory fsynced.  A run is committed when its ``runs`` file is
renamed in, last, under the machine's lock; rows of other tables whose ``write_id`` has no
committed ``runs`` row are invisible to :mod:`runup.archive.query`.
"""

from __future__ import annotations

import contextlib
import fcntl
import json
import os
import re
import uuid
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path
from typing import IO, Any

import pyarrow as pa
import pyarrow.parquet as pq

from .._version import __version__
from ..errors import DataFormatError, RunupError
from ..fingerprint import Fingerprint
from .rows import fingerprint_tables
from .schema import FORMAT, SCHEMA_VERSION, TABLE_NAMES, check_version, schemas_to_json

__all__ = [
    "ID_PATTERN",
    "ArchiveInfo",
    "Commit",
    "validate_id",
    "create_archive",
    "open_archive",
    "add_fingerprint",
    "set_baseline",
    "read_baseline",
    "committed_files",
    "table_dir",
]

#: Machine and run ids: a letter or digit, then up to 63 letters, digits, '.', '_' or '-'.
ID_PATTERN = re.compile(r"^[A-Za-z0-9][A-Za-z0-9._-]{0,63}$")
_META = "archive.json"


class ArchiveError(RunupError):
    """A write the archive refuses (a run id already present, a missing run)."""


@dataclass(frozen=True)
class ArchiveInfo:
    """An opened archive: its root, schema version and metadata document."""

    root: Path
    schema_version: int
    created_utc: str
    tool_version: str


@dataclass(frozen=True)
class Commit:
    """What :func:`add_fingerprint` committed: ids, files written, files of a replaced write removed."""

    machine_id: str
    run_id: str
    write_id: str
    files: tuple[Path, ...]
    replaced: tuple[Path, ...]


def validate_id(value: object, *, what: str) -> str:
    """``value`` if it is a valid machine or run id, else :class:`DataFormatError`.

    Ids become directory and file names: ``^[A-Za-z0-9][A-Za-z0-9._-]{0,63}$`` and no
    ``..`` (so no path separator, no traversal, no hidden name, 64 characters at most).
    """
    if not isinstance(value, str) or not value:
        raise DataFormatError(f"{what} is empty; give one of letters, digits, '.', '_' or '-'")
    if len(value) > 64:
        raise DataFormatError(f"{what} {value[:20]!r}... is {len(value)} characters long; 64 at most")
    if not ID_PATTERN.match(value) or ".." in value:
        raise DataFormatError(
            f"{what} {value!r} is not valid: start with a letter or digit, then letters, digits, "
            "'.', '_' or '-' (no '..', no path separators)"
        )
    return value


def _now() -> str:
    return datetime.now(UTC).isoformat(timespec="microseconds")


def _fsync_dir(path: Path) -> None:
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def atomic_write(path: Path, write: Callable[[IO[bytes]], None]) -> None:
    """Write ``path`` through a hidden temporary file in its directory, fsync, rename, fsync dir."""
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f".{path.name}.{uuid.uuid4().hex[:8]}.tmp")
    try:
        with open(tmp, "xb") as fh:
            write(fh)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(OSError):
            tmp.unlink()
        raise
    _fsync_dir(path.parent)


def _json_bytes(doc: Any) -> Callable[[IO[bytes]], None]:
    return lambda fh: fh.write((json.dumps(doc, indent=2) + "\n").encode("utf-8"))


@contextlib.contextmanager
def _lock(root: Path, name: str) -> Iterator[None]:
    locks = root / ".locks"
    locks.mkdir(parents=True, exist_ok=True)
    with open(locks / f"{name}.lock", "a+b") as fh:
        fcntl.flock(fh.fileno(), fcntl.LOCK_EX)
        try:
            yield
        finally:
            fcntl.flock(fh.fileno(), fcntl.LOCK_UN)


def table_dir(root: Path, table: str, machine_id: str) -> Path:
    """Directory of one machine's files of one table."""
    return root / table / f"machine_id={validate_id(machine_id, what='machine id')}"


def _read_meta(root: Path) -> dict[str, Any]:
    file = root / _META
    try:
        doc = json.loads(file.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise DataFormatError("not an archive: archive.json missing; create one with `runup archive add`",
                              file=str(root)) from None
    except (OSError, ValueError) as exc:
        raise DataFormatError(f"cannot read archive metadata ({exc})", file=str(file)) from None
    if not isinstance(doc, dict):
        raise DataFormatError("archive metadata must be a JSON object", file=str(file))
    return doc


def _info(root: Path, doc: dict[str, Any]) -> ArchiveInfo:
    version = check_version(doc, file=str(root / _META))
    return ArchiveInfo(root, version, str(doc.get("created_utc", "")), str(doc.get("tool", {}).get("version", "")))


def open_archive(path: str | os.PathLike[str]) -> ArchiveInfo:
    """Open an existing archive (its ``archive.json`` read and its version checked)."""
    root = Path(path)
    return _info(root, _read_meta(root))


def create_archive(path: str | os.PathLike[str]) -> ArchiveInfo:
    """Open the archive at ``path``, creating it (directory and ``archive.json``) if needed."""
    root = Path(path)
    if root.exists() and not root.is_dir():
        raise DataFormatError("archive path exists and is not a directory", file=str(root))
    root.mkdir(parents=True, exist_ok=True)
    with _lock(root, "archive"):
        if not (root / _META).exists():
            if any(p.name not in (".locks",) for p in root.iterdir()):
                raise DataFormatError("directory is not empty and holds no archive.json; choose another path",
                                      file=str(root))
            doc = {
                "format": FORMAT,
                "schema_version": SCHEMA_VERSION,
                "created_utc": _now(),
                "tool": {"name": "runup", "version": __version__},
                "partitioning": {"flavor": "hive", "key": "machine_id"},
                "tables": schemas_to_json(),
            }
            atomic_write(root / _META, _json_bytes(doc))
        return open_archive(root)


def committed_files(root: Path, table: str, machine_id: str, run_id: str) -> list[Path]:
    """Files of ``table`` for one run (any write), by name ``<run_id>~<write_id>.parquet``."""
    folder = table_dir(root, table, machine_id)
    if not folder.is_dir():
        return []
    return sorted(p for p in folder.glob(f"{run_id}~*.parquet") if p.name.split("~", 1)[0] == run_id)


def _write_parquet(table: Any) -> Callable[[IO[bytes]], None]:
    return lambda fh: pq.write_table(table, fh)


def add_fingerprint(
    archive: str | os.PathLike[str] | ArchiveInfo,
    fp: Fingerprint,
    *,
    replace: bool = False,
    baseline: bool = False,
) -> Commit:
    """Store one fingerprint; create the archive if needed.

    Parameters
    ----------
    archive
        Archive directory (or an opened archive).
    fp
        The fingerprint; its machine and run ids must be valid (:func:`validate_id`).
    replace
        Replace a run of the same id of the same machine (its files are removed after the
        new run is committed); without it such a run is an error.
    baseline
        Mark the run as the machine's baseline.

    Raises
    ------
    DataFormatError
        Invalid ids, or an archive of another version.
    ArchiveError
        The run id is present and ``replace`` is False.
    """
    root = archive.root if isinstance(archive, ArchiveInfo) else Path(archive)
    machine = validate_id(fp.machine_id, what="machine id")
    run = validate_id(fp.run_id, what="run id")
    info = create_archive(root)
    if info.schema_version != SCHEMA_VERSION:
        raise DataFormatError(f"archive has schema version {info.schema_version}; this runup writes "
                              f"{SCHEMA_VERSION} and does not append to older archives", file=str(root))
    if committed_files(root, "runs", machine, run) and not replace:
        raise ArchiveError(_present(machine, run))
    write_id = uuid.uuid4().hex
    tables = fingerprint_tables(fp, write_id=write_id, committed_utc="")
    name = f"{run}~{write_id}.parquet"
    written: list[Path] = []
    committed = False
    removed: list[Path] = []
    try:
        for table in TABLE_NAMES[:-1]:  # every table but runs
            if table in tables:
                path = table_dir(root, table, machine) / name
                atomic_write(path, _write_parquet(tables[table]))
                written.append(path)
        with _lock(root, machine):
            old = committed_files(root, "runs", machine, run)
            if old and not replace:
                raise ArchiveError(_present(machine, run))
            runs = tables["runs"]
            i = runs.schema.get_field_index("committed_utc")
            runs = runs.set_column(i, runs.schema.field(i), pa.array([_now()], pa.string()))
            runs_path = table_dir(root, "runs", machine) / name
            atomic_write(runs_path, _write_parquet(runs))  # the commit
            committed = True
            written.append(runs_path)
            if old:
                removed = _remove_writes(root, machine, run, keep=write_id)
            if baseline:
                _write_baseline(root, machine, run)
    except BaseException:
        if not committed:  # nothing of this write is visible: tidy its files away
            for path in written:
                with contextlib.suppress(OSError):
                    path.unlink()
        raise
    return Commit(machine, run, write_id, tuple(written), tuple(removed))


def _present(machine: str, run: str) -> str:
    return f"run {run} is already in the archive for machine {machine}; give --replace to replace it"


def _remove_writes(root: Path, machine: str, run: str, *, keep: str) -> list[Path]:
    """Remove the files of earlier writes of a run: the runs row first, so it is never half-visible."""
    removed = []
    for table in ("runs", *TABLE_NAMES[:-1]):
        for path in committed_files(root, table, machine, run):
            if path.stem.split("~", 1)[1] != keep:
                path.unlink()
                removed.append(path)
    return removed


def _baseline_path(root: Path, machine: str) -> Path:
    return root / "baselines" / f"{validate_id(machine, what='machine id')}.json"


def _write_baseline(root: Path, machine: str, run: str) -> None:
    path = _baseline_path(root, machine)
    history: list[dict[str, str]] = []
    if path.exists():
        history = list(json.loads(path.read_text(encoding="utf-8")).get("history", []))
    now = _now()
    history.append({"run_id": run, "set_utc": now})
    atomic_write(path, _json_bytes({"machine_id": machine, "run_id": run, "set_utc": now, "history": history}))


def set_baseline(archive: str | os.PathLike[str] | ArchiveInfo, machine_id: str, run_id: str) -> None:
    """Mark a committed run as the machine's baseline (earlier choices stay in the history)."""
    info = archive if isinstance(archive, ArchiveInfo) else open_archive(archive)
    machine = validate_id(machine_id, what="machine id")
    run = validate_id(run_id, what="run id")
    with _lock(info.root, machine):
        if not committed_files(info.root, "runs", machine, run):
            raise ArchiveError(f"no run {run} for machine {machine} in the archive; add it first")
        _write_baseline(info.root, machine, run)


def read_baseline(archive: str | os.PathLike[str] | ArchiveInfo, machine_id: str) -> str | None:
    """The run id of the machine's baseline, or ``None`` when none was set."""
    root = archive.root if isinstance(archive, ArchiveInfo) else Path(archive)
    path = _baseline_path(root, machine_id)
    try:
        doc = json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        return None
    except (OSError, ValueError) as exc:
        raise DataFormatError(f"cannot read baseline ({exc})", file=str(path)) from None
    run = doc.get("run_id") if isinstance(doc, dict) else None
    return validate_id(run, what="baseline run id") if run is not None else None
