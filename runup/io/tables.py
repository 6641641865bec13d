"""Import run tables (CSV or Parquet) into a :class:`runup.run.Run`.

Two layouts are recognised from the header alone (rules in ``docs/file-formats.md``):

* **long** -- a ``probe`` column; one row per probe per sample;
* **wide** -- no ``probe`` column; ``<probe>.amplitude_...`` and ``<probe>.phase_...``
  columns, one pair per probe, split on the last ``.``.

Unit-bearing names are read by :func:`runup.units.parse_column_name` and converted by
the converters of :mod:`runup.units`, once, here.  Every check is vectorised and every
error names the file, the column and the 1-based data row where it can.
"""

from __future__ import annotations

import csv
import hashlib
import os
import re
import stat
import threading
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Literal

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pacsv
import pyarrow.parquet as pq
from numpy.typing import NDArray

from ..errors import DataFormatError, RunupError, UnitError
from ..run import Run, RunMetadata, SourceFile
from ..units import (
    ColumnUnit,
    amplitude_to_um_pp,
    parse_column_name,
    phase_to_lag_deg,
    speed_to_rpm,
)
from .sidecar import RunSidecar, read_sidecar

__all__ = ["MIN_POINTS_PER_PROBE", "ACCEPTED_EXTENSIONS", "read_run", "parse_column_map"]

#: Fewest samples with finite speed, amplitude and phase a probe (per order) must have.
MIN_POINTS_PER_PROBE = 5

#: File extensions read, and the reader used for each (case-insensitive).
ACCEPTED_EXTENSIONS: dict[str, Literal["csv", "parquet"]] = {
    ".csv": "csv",
    ".txt": "csv",
    ".parquet": "parquet",
    ".pq": "parquet",
}

#: Cell texts (after trimming spaces, case-insensitive) read as a missing value.
MISSING_TOKENS = ("", "na", "n/a", "nan", "null")

Role = Literal["speed", "amplitude", "phase", "probe", "order", "time"]
_MAX_LISTED = 20


@dataclass(frozen=True)
class _Column:
    """One recognised column: where it is, what it holds."""

    index: int
    source: str  # header text in the file (trimmed)
    role: Role
    unit: ColumnUnit | None = None
    probe: str | None = None  # wide-layout probe prefix


@dataclass(frozen=True)
class _Layout:
    kind: Literal["long", "wide"]
    speed: _Column
    time: _Column | None
    probe: _Column | None = None  # long
    order: _Column | None = None  # long
    amplitude: _Column | None = None  # long
    phase: _Column | None = None  # long
    pairs: tuple[tuple[str, _Column, _Column], ...] = ()  # wide: (probe, amplitude, phase)

    @property
    def columns(self) -> tuple[_Column, ...]:
        cols = [self.speed, self.time, self.probe, self.order, self.amplitude, self.phase]
        cols += [c for _, a, p in self.pairs for c in (a, p)]
        return tuple(c for c in cols if c is not None)


def parse_column_map(items: Sequence[str]) -> dict[str, str]:
    """Parse command-line column-map items ``"SOURCE=TARGET"``.

    Parameters
    ----------
    items
        Strings such as ``"Speed (rpm)=speed_rpm"``; each is split on its *last* ``=``
        so that a source header may itself contain ``=``.  Spaces around either side
        are removed.

    Returns
    -------
    dict
        Source header -> canonical column name.

    Raises
    ------
    DataFormatError
        An item without ``=``, with an empty side, or a source given twice.
    """
    out: dict[str, str] = {}
    for item in items:
        source, sep, target = str(item).rpartition("=")
        source, target = source.strip(), target.strip()
        if not sep or not source or not target:
            raise DataFormatError(
                f"column map item {item!r} is not SOURCE=TARGET; write e.g. "
                "--column 'Speed (rpm)=speed_rpm'"
            )
        if source in out and out[source] != target:
            raise DataFormatError(
                f"column map gives source '{source}' twice ('{out[source]}' and '{target}'); "
                "keep one"
            )
        out[source] = target
    return out


def read_run(
    path: str | os.PathLike,
    *,
    column_map: Mapping[str, str] | None = None,
    sidecar: str | os.PathLike | None | Literal["auto"] = "auto",
    machine_id: str | None = None,
    run_id: str | None = None,
) -> Run:
    """Read a run-up or coastdown table into a :class:`~runup.run.Run`.

    Parameters
    ----------
    path
        CSV (``.csv``, ``.txt``; comma, tab or semicolon separated, detected from the
        header line) or Parquet (``.parquet``, ``.pq``) file.
    column_map
        Source header -> canonical name, applied before layout detection.  Entries
        override the sidecar's ``[columns]`` for the same source or target.
    sidecar
        ``"auto"`` reads ``<folder>/<data stem>.toml`` when it exists; a path reads that
        file; ``None`` reads none.
    machine_id, run_id
        Override the sidecar; defaults ``"unknown"`` and the data file's stem.

    Returns
    -------
    Run
        Samples in canonical units (speed rpm, amplitude um pp, phase lag deg, see
        :mod:`runup.units`), in acquisition order: stable-sorted by ``time_s`` when the
        file has it, else file order (wide layout: row by row, probes in header order).

    Raises
    ------
    DataFormatError
        Unreadable file, unknown layout, missing/duplicate/ambiguous columns,
        non-numeric cells, out-of-range values, too few points per probe.
    UnitError
        A quantity column whose unit is not known.
    """
    file = str(path)
    reader = ACCEPTED_EXTENSIONS.get(Path(path).suffix.lower())
    if reader is None:
        raise DataFormatError(
            f"unknown file extension '{Path(path).suffix}'; accepted: "
            f"{', '.join(ACCEPTED_EXTENSIONS)} (CSV or Parquet)",
            file=file,
        )
    side = _find_sidecar(path, sidecar)
    data = _read_bytes(path, what="data file")
    table = _CsvTable(data, file=file) if reader == "csv" else _ParquetTable(data, file=file)
    cmap = _merge_maps(side.column_map if side else {}, column_map or {})
    layout = _detect(table.header, cmap, file=file)
    numeric = [c.index for c in layout.columns if c.role != "probe"]  # order too: whole numbers
    text = [layout.probe.index] if layout.probe is not None else []
    arrays = table.read([c.index for c in layout.columns], numeric=numeric, text=text)
    digest = _BackgroundSha256(data)  # overlaps the conversions below
    if len(arrays[layout.speed.index]) == 0:  # e.g. only empty lines after the header
        raise DataFormatError("the file has a header but no data rows", file=file)
    samples, probe_codes, probe_names = _samples(layout, arrays, file=file)
    sources = [SourceFile(path=file, sha256=digest.hexdigest())]
    if side is not None:
        sources.append(SourceFile(path=side.path, sha256=side.sha256))
    meta = RunMetadata(
        machine_id=machine_id or (side.machine_id if side else None) or "unknown",
        run_id=run_id or (side.run_id if side else None) or Path(path).stem,
        direction=side.direction if side else None,
        rotation=side.rotation if side else None,
        probes=side.probes if side else (),
        operating=side.operating if side else RunMetadata().operating,
        sources=tuple(sources),
    )
    # every rule of Run's own validation holds already (checked above, column by column,
    # with file and row in the messages), so the table is not checked and copied again
    return Run._from_checked(meta, samples, probe_names, probe_codes=probe_codes)


class _BackgroundSha256:
    """SHA-256 of ``data`` computed in a thread while the caller goes on (parsing).

    hashlib releases the GIL while it hashes a large buffer, so the ~8 ms of a 15 MB file
    overlap the parse instead of adding to it.
    """

    def __init__(self, data: pa.Buffer) -> None:
        self._hash = hashlib.sha256()
        self._thread = threading.Thread(target=self._hash.update, args=(data,), daemon=True)
        self._thread.start()

    def hexdigest(self) -> str:
        self._thread.join()
        return self._hash.hexdigest()


# -- files -----------------------------------------------------------------------------


def _read_bytes(path: str | os.PathLike, *, what: str) -> pa.Buffer:
    """The whole file, in a buffer of Arrow's memory pool.

    The pool keeps its pages from one file to the next, so that reading many large files
    in one process (a batch, a benchmark) does not fault in fresh memory for each; the
    buffer is read by pyarrow, hashed by hashlib and searched by ``re`` without a copy.
    """
    try:
        with open(path, "rb") as f:
            info = os.fstat(f.fileno())
            if not stat.S_ISREG(info.st_mode):  # a pipe or device: its size is not known
                return pa.py_buffer(f.read())
            buf = pa.allocate_buffer(info.st_size)
            n = f.readinto(memoryview(buf))
            rest = f.read()  # a file still growing while it is read: take what follows too
        if rest:
            return pa.py_buffer(bytes(memoryview(buf)[:n]) + rest)
        return buf if n == info.st_size else buf.slice(0, n)
    except FileNotFoundError:
        raise DataFormatError(f"{what} not found; check the path", file=str(path)) from None
    except IsADirectoryError:
        raise DataFormatError(f"{what} is a folder, expected a file", file=str(path)) from None
    except OSError as exc:
        raise DataFormatError(
            f"cannot read {what} ({exc.strerror or type(exc).__name__})", file=str(path)
        ) from None


def _find_sidecar(path: str | os.PathLike, sidecar: str | os.PathLike | None) -> RunSidecar | None:
    if sidecar is None:
        return None
    if isinstance(sidecar, str) and sidecar == "auto":
        candidate = Path(path).with_suffix(".toml")
        return read_sidecar(candidate) if candidate.is_file() else None
    return read_sidecar(sidecar)


class _CsvTable:
    """Header from the raw first line (so duplicates are seen), columns via pyarrow."""

    def __init__(self, data: pa.Buffer, *, file: str) -> None:
        self.data, self.file = data, file
        # the first line and a look past it, without copying the rest of the file
        newline = _NEWLINE.search(data)
        end = newline.start() if newline else -1
        first = bytes(memoryview(data)[: end if end >= 0 else len(data)]).rstrip(b"\r")
        try:
            line = first.decode("utf-8-sig")
        except UnicodeDecodeError:
            raise DataFormatError(
                "the header line is not UTF-8 text; save the file as UTF-8", file=file
            ) from None
        if not line.strip():
            if not _has_text(data, 0):
                raise DataFormatError(
                    "empty file: expected a header line naming the columns, then data rows",
                    file=file,
                )
            raise DataFormatError(
                "the first line is blank; it must be the header naming the columns", file=file
            )
        if end < 0 or not _has_text(data, end + 1):
            raise DataFormatError("the file has a header but no data rows", file=file)
        self.delimiter = next((d for d in (",", "\t", ";") if d in line), ",")
        self.header = tuple(h.strip() for h in next(csv.reader([line], delimiter=self.delimiter)))

    def read(
        self, indices: Sequence[int], *, numeric: Sequence[int] = (), text: Sequence[int] = ()
    ) -> dict[int, pa.Array]:
        """Columns by index.  ``numeric`` columns are first parsed as float64 directly (the
        fast path); when any cell does not parse, every column is read as text instead so
        that the caller can name the offending cell.  On the fast path ``text`` columns
        (probe names: a few distinct values repeated) come dictionary-encoded, so that
        they are trimmed and checked once per distinct value rather than once per row."""
        names = [f"c{i}" for i in range(len(self.header))]
        keep = [names[i] for i in indices]
        read_opts = pacsv.ReadOptions(column_names=names, skip_rows=1)
        parse_opts = pacsv.ParseOptions(delimiter=self.delimiter)
        if numeric:
            by_kind = {i: pa.float64() for i in numeric} | {
                i: pa.dictionary(pa.int32(), pa.string()) for i in text
            }
            types = {names[i]: by_kind.get(i, pa.string()) for i in indices}
            tokens = sorted({t for m in MISSING_TOKENS for t in (m, m.upper(), m.capitalize())})
            fast = pacsv.ConvertOptions(include_columns=keep, column_types=types, null_values=tokens,
                                        strings_can_be_null=False)
            try:
                table = pacsv.read_csv(pa.BufferReader(self.data), read_options=read_opts,
                                       parse_options=parse_opts, convert_options=fast)
                return {i: table.column(f"c{i}").combine_chunks() for i in indices}
            except (pa.ArrowInvalid, UnicodeDecodeError):
                pass  # fall through to the text path, which locates the problem
        conv_opts = pacsv.ConvertOptions(
            include_columns=keep, column_types=dict.fromkeys(keep, pa.string())
        )
        try:
            table = pacsv.read_csv(
                pa.BufferReader(self.data),
                read_options=read_opts,
                parse_options=parse_opts,
                convert_options=conv_opts,
            )
        except (pa.ArrowInvalid, UnicodeDecodeError):
            raise self._diagnose() from None
        return {i: table.column(f"c{i}").combine_chunks() for i in indices}

    def _diagnose(self) -> DataFormatError:
        """Re-read single-threaded to find the first malformed line."""
        bad: list[tuple[int | None, int, int]] = []

        def handler(row: pacsv.InvalidRow) -> str:
            bad.append((row.number, row.actual_columns, row.expected_columns))
            return "error"

        try:
            pacsv.read_csv(
                pa.BufferReader(self.data),
                read_options=pacsv.ReadOptions(
                    column_names=[f"c{i}" for i in range(len(self.header))],
                    skip_rows=1,
                    use_threads=False,
                ),
                parse_options=pacsv.ParseOptions(
                    delimiter=self.delimiter, invalid_row_handler=handler
                ),
                convert_options=pacsv.ConvertOptions(
                    column_types=dict.fromkeys(
                        [f"c{i}" for i in range(len(self.header))], pa.binary()
                    )
                ),
            )
        except pa.ArrowInvalid:
            pass
        if bad:
            number, actual, expected = bad[0]
            where = f"line {number}" if number is not None else "a line"
            return DataFormatError(
                f"{where} of the file has {actual} fields but the header has {expected}; "
                f"check the delimiter ('{self.delimiter}') and quoting",
                file=self.file,
            )
        return DataFormatError(
            "the file is not readable as UTF-8 CSV text (bad encoding or quoting); "
            "save it as UTF-8 CSV",
            file=self.file,
        )


_NEWLINE = re.compile(rb"\n")
#: A byte that ``bytes.strip`` would not remove (ASCII whitespace is `` \t\n\r\x0b\x0c``).
_NOT_SPACE = re.compile(rb"[^ \t\n\r\x0b\x0c]")


def _has_text(data: pa.Buffer, start: int) -> bool:
    """Whether ``data[start:]`` holds anything but whitespace (no copy of the slice)."""
    return _NOT_SPACE.search(data, start) is not None


class _ParquetTable:
    def __init__(self, data: pa.Buffer, *, file: str) -> None:
        self.data, self.file = data, file
        try:
            self.pf = pq.ParquetFile(pa.BufferReader(data))
            self.header = tuple(str(n).strip() for n in self.pf.schema_arrow.names)
        except (pa.ArrowException, OSError, ValueError):
            raise DataFormatError(
                "cannot read the file as Parquet (not Parquet, truncated or corrupt); "
                "re-export it or use CSV",
                file=file,
            ) from None
        if not self.header:
            raise DataFormatError("the Parquet file has no columns", file=file)
        if self.pf.metadata.num_rows == 0:
            raise DataFormatError("the file has columns but no data rows", file=file)

    def read(
        self, indices: Sequence[int], *, numeric: Sequence[int] = (), text: Sequence[int] = ()
    ) -> dict[int, pa.Array]:
        """Columns by index (Parquet columns are typed already; ``numeric`` is not needed).
        ``text`` columns stored as strings are read dictionary-encoded, as from CSV."""
        del numeric
        schema = self.pf.schema_arrow
        names = schema.names
        as_dictionary = [
            names[i] for i in text
            if pa.types.is_string(schema.types[i]) or pa.types.is_large_string(schema.types[i])
        ]
        try:
            pf = (
                pq.ParquetFile(pa.BufferReader(self.data), read_dictionary=as_dictionary)
                if as_dictionary
                else self.pf
            )
            table = pf.read(columns=[names[i] for i in indices])
        except (pa.ArrowException, OSError, ValueError):
            raise DataFormatError(
                "cannot read the Parquet data (truncated or corrupt); re-export the file",
                file=self.file,
            ) from None
        return {i: table.column(names[i]).combine_chunks() for i in indices}


# -- header ----------------------------------------------------------------------------


def _merge_maps(side: Mapping[str, str], cli: Mapping[str, str]) -> dict[str, str]:
    """Sidecar map overridden by the CLI map (same source or same target: CLI wins)."""
    cli = {k.strip(): v.strip() for k, v in cli.items()}
    targets = set(cli.values())
    merged = {k: v for k, v in side.items() if k not in cli and v not in targets}
    merged.update(cli)
    return merged


def _listing(header: Sequence[str]) -> str:
    shown = ", ".join(f"'{h}'" for h in header[:_MAX_LISTED])
    return shown + (f" and {len(header) - _MAX_LISTED} more" if len(header) > _MAX_LISTED else "")


def _classify(name: str, index: int, source: str) -> _Column | None:
    low = name.lower()
    if low in ("probe", "order", "time_s"):
        return _Column(index, source, "time" if low == "time_s" else low)  # type: ignore[arg-type]
    if low.startswith("time_"):
        raise UnitError(
            f"unknown time unit in column name '{name}'; the only time column is time_s (seconds)",
            column=source,
        )
    prefix, dot, suffix = name.rpartition(".")
    unit = parse_column_name(suffix) if dot and prefix.strip() else None
    if unit is not None:
        if unit.quantity == "speed":
            raise DataFormatError(
                f"per-probe speed column '{name}' is not supported; give one speed column "
                "for the whole file",
                column=source,
            )
        return _Column(index, source, unit.quantity, unit, prefix.strip())
    unit = parse_column_name(name)
    return None if unit is None else _Column(index, source, unit.quantity, unit)


def _detect(header: Sequence[str], cmap: Mapping[str, str], *, file: str) -> _Layout:
    """Apply the column map, classify each header and pick the layout."""
    missing_keys = [k for k in cmap if k not in header]
    if missing_keys:
        raise DataFormatError(
            f"column map source(s) {', '.join(repr(k) for k in missing_keys)} not in the "
            f"file; its columns are {_listing(header)}",
            file=file,
            column=missing_keys[0],
        )
    cols: list[_Column] = []
    for i, source in enumerate(header):
        try:
            col = _classify(cmap.get(source, source), i, source)
        except RunupError as exc:
            raise type(exc)(exc.message, file=file, column=source) from None
        if col is not None:
            cols.append(col)
    by_source: dict[str, list[int]] = {}
    for i, h in enumerate(header):
        by_source.setdefault(h, []).append(i + 1)
    for col in cols:
        places = by_source[col.source]
        if len(places) > 1:
            raise DataFormatError(
                f"duplicate column name '{col.source}' (columns {', '.join(map(str, places))} "
                "of the header); rename one so each name is unique",
                file=file,
                column=col.source,
            )

    def one(role: Role, *, probe: str | None = None, required: str | None = None) -> _Column | None:
        found = [c for c in cols if c.role == role and c.probe == probe]
        if len(found) > 1:
            names = ", ".join(f"'{c.source}'" for c in found)
            raise DataFormatError(
                f"ambiguous: {len(found)} {role} columns ({names})"
                + (f" for probe '{probe}'" if probe else "")
                + "; keep exactly one (remove the others or map them to other names)",
                file=file,
                column=found[1].source,
            )
        if not found and required:
            raise DataFormatError(
                f"missing required column {required}"
                + (f" for probe '{probe}'" if probe else "")
                + f"; the file has {_listing(header)}. Rename the column or map it with "
                "--column SOURCE=TARGET (or [columns] in the sidecar)",
                file=file,
            )
        return found[0] if found else None

    speed = one("speed", required="speed_<unit> (speed_rpm or speed_hz)")
    time = one("time")
    probe_col = one("probe")
    prefixed = [c for c in cols if c.probe is not None]
    if probe_col is not None:
        if prefixed:
            raise DataFormatError(
                f"column '{prefixed[0].source}' has a probe prefix but the file also has a "
                "'probe' column; use either the long layout (probe column) or the wide "
                "layout (<probe>.amplitude_..., <probe>.phase_...), not both",
                file=file,
                column=prefixed[0].source,
            )
        return _Layout(
            "long",
            speed=speed,  # type: ignore[arg-type]
            time=time,
            probe=probe_col,
            order=one("order"),
            amplitude=one("amplitude", required="amplitude_<unit>_<def> (e.g. amplitude_um_pp)"),
            phase=one("phase", required="phase_<sense>_<unit> (e.g. phase_lag_deg)"),
        )
    bare = [c for c in cols if c.probe is None and c.role in ("amplitude", "phase", "order")]
    if bare:
        col = bare[0]
        fix = (
            "the wide layout is order 1 only; use the long layout for other orders"
            if col.role == "order"
            else f"or a probe prefix such as 'B1X.{col.source}' (wide layout)"
        )
        raise DataFormatError(
            f"column '{col.source}' needs a 'probe' column (long layout) {fix}; "
            "no 'probe' column found",
            file=file,
            column=col.source,
        )
    probes = list(dict.fromkeys(c.probe for c in prefixed))
    if not probes:
        raise DataFormatError(
            "missing amplitude and phase columns: expected a 'probe' column with "
            "amplitude_<unit>_<def> and phase_<sense>_<unit> (long layout) or "
            f"<probe>.amplitude_... and <probe>.phase_... columns (wide layout); the file has "
            f"{_listing(header)}",
            file=file,
        )
    pairs = []
    for p in probes:
        amp = one("amplitude", probe=p, required=f"'{p}.amplitude_<unit>_<def>'")
        pha = one("phase", probe=p, required=f"'{p}.phase_<sense>_<unit>'")
        pairs.append((p, amp, pha))
    return _Layout("wide", speed=speed, time=time, pairs=tuple(pairs))  # type: ignore[arg-type]


# -- values ----------------------------------------------------------------------------


def _floats(arr: pa.Array, col: _Column, *, file: str) -> NDArray[np.float64]:
    """Column as float64 with NaN for missing cells; non-numeric text is an error."""
    if pa.types.is_dictionary(arr.type):
        arr = arr.dictionary_decode()
    if pa.types.is_string(arr.type) or pa.types.is_large_string(arr.type):
        arr = pc.utf8_trim_whitespace(arr)
        missing = pc.is_in(pc.utf8_lower(arr), value_set=pa.array(MISSING_TOKENS))
        arr = pc.if_else(missing, pa.scalar(None, arr.type), arr)
        try:
            arr = pc.cast(arr, pa.float64())
        except pa.ArrowInvalid:
            i = _first_bad_cast(arr)
            raise DataFormatError(
                f"non-numeric value '{arr[i].as_py()}'; expected a number with a decimal "
                "point (or an empty cell for a missing value)",
                file=file,
                column=col.source,
                row=i + 1,
            ) from None
    elif (
        pa.types.is_integer(arr.type)
        or pa.types.is_floating(arr.type)
        or pa.types.is_decimal(arr.type)
        or pa.types.is_null(arr.type)
    ):
        arr = pc.cast(arr, pa.float64())
    else:
        raise DataFormatError(
            f"column holds {arr.type} values; expected numbers", file=file, column=col.source
        )
    return arr.to_numpy(zero_copy_only=False).astype(np.float64, copy=False)


def _first_bad_cast(arr: pa.Array) -> int:
    """Index of the first string that pyarrow cannot parse as float64 (bisection)."""
    lo, hi = 0, len(arr)  # arr[:lo] casts, arr[:hi] does not
    while hi - lo > 1:
        mid = (lo + hi) // 2
        try:
            pc.cast(arr[lo:mid], pa.float64())
            lo = mid
        except pa.ArrowInvalid:
            hi = mid
    return lo


def _column(n: int, dtype: type) -> NDArray:
    """An uninitialised array of ``n`` values for a column of the samples, in Arrow's
    memory pool.

    numpy's allocator gives the pages of large arrays back to the system when they are
    freed, so that each import of a large file faults in fresh memory for every column
    (about 1 ms per 400,000 values on a virtual machine); Arrow's pool keeps its pages and
    reuses them, as it does for the parsed file.  The array is an ordinary writable
    numpy array.
    """
    kind = np.dtype(dtype)
    return np.frombuffer(pa.allocate_buffer(n * kind.itemsize), dtype=kind)


def _extremes(values: NDArray[np.float64]) -> tuple[float, float]:
    """Smallest and largest value, NaN ignored (NaN, NaN when all are NaN).

    Two reductions instead of a boolean mask per rule: the masks are built only when a
    rule fails, to find the first offending row.
    """
    with np.errstate(invalid="ignore"):
        return float(np.fmin.reduce(values)), float(np.fmax.reduce(values))


def _fail_first(
    bad: NDArray[np.bool_], values: NDArray, message: str, col: _Column, file: str
) -> None:
    if bad.any():
        i = int(np.argmax(bad))
        raise DataFormatError(
            message.format(value=f"{values[i]:g}"), file=file, column=col.source, row=i + 1
        )


def _speed(arr: pa.Array, col: _Column, *, file: str) -> NDArray[np.float64]:
    v = _floats(arr, col, file=file)
    low, high = _extremes(v)
    if low <= 0 or high == np.inf:
        _fail_first(
            np.isinf(v) | (v <= 0),
            v,
            "speed must be a positive finite number, found {value}; "
            "remove rows at standstill or leave the cell empty",
            col,
            file,
        )
    return speed_to_rpm(v, unit=col.unit.unit, out=_column(v.size, np.float64))  # type: ignore[union-attr]


def _amplitude(arr: pa.Array, col: _Column, *, file: str) -> NDArray[np.float64]:
    v = _floats(arr, col, file=file)
    low, high = _extremes(v)
    if low < 0 or high == np.inf:
        _fail_first(
            np.isinf(v) | (v < 0),
            v,
            "amplitude must be a finite number >= 0, found {value}; "
            "a 1X amplitude is a magnitude, put its sign into the phase",
            col,
            file,
        )
    unit = col.unit
    return amplitude_to_um_pp(  # type: ignore[union-attr]
        v, unit=unit.unit, definition=unit.qualifier, out=_column(v.size, np.float64)
    )


def _phase(arr: pa.Array, col: _Column, *, file: str) -> NDArray[np.float64]:
    v = _floats(arr, col, file=file)
    if np.isinf(_extremes(v)).any():
        _fail_first(np.isinf(v), v, "phase must be finite, found {value}", col, file)
    unit = col.unit
    return phase_to_lag_deg(  # type: ignore[union-attr]
        v, unit=unit.unit, sense=unit.qualifier, out=_column(v.size, np.float64)
    )


def _time(arr: pa.Array, col: _Column, *, file: str) -> NDArray[np.float64]:
    v = _floats(arr, col, file=file)
    out = _column(v.size, np.float64)
    np.copyto(out, v)  # v may be a read-only view of the parsed column
    low, high = _extremes(v)
    if np.isnan(low):  # every cell empty: the file gives no time
        return out
    if np.isinf([low, high]).any():
        _fail_first(np.isinf(v), v, "time must be finite, found {value}", col, file)
    with np.errstate(over="ignore"):  # finite values here: the sum is NaN only with a NaN
        nan = np.isnan(v) if np.isnan(np.add.reduce(v)) else None
    if nan is not None and nan.any():
        i = int(np.argmax(nan))
        raise DataFormatError(
            "time_s is empty here but given elsewhere; the acquisition order needs a time "
            "on every row (or drop the time_s column)",
            file=file,
            column=col.source,
            row=i + 1,
        )
    return out


def _order(arr: pa.Array, col: _Column, *, file: str) -> NDArray[np.int64]:
    v = _floats(arr, col, file=file)
    out = _column(v.size, np.int64)
    if (v == 1).all():  # the usual 1X-only record, without the general checks' temporaries
        out.fill(1)
        return out
    with np.errstate(invalid="ignore"):
        bad = ~np.isfinite(v) | (v < 1) | (v != np.round(v))
    if bad.any():
        i = int(np.argmax(bad))
        found = "an empty cell" if np.isnan(v[i]) else f"{v[i]:g}"
        raise DataFormatError(
            f"harmonic order must be a whole number >= 1 (1 for 1X, 2 for 2X), found {found}",
            file=file,
            column=col.source,
            row=i + 1,
        )
    np.copyto(out, v, casting="unsafe")  # whole numbers: the cast is exact
    return out


def _probe_codes(
    arr: pa.Array, col: _Column, *, file: str
) -> tuple[NDArray[np.intp], NDArray[np.object_]]:
    """Probe name of every row as ``(codes, names)``: row ``i`` names ``names[codes[i]]``.

    Names are trimmed of spaces and checked non-empty on the distinct values of the column
    (its dictionary), not row by row; ``names`` holds each distinct trimmed name once, as
    a Python string.
    """
    if pa.types.is_dictionary(arr.type) and not _is_text(arr.type.value_type):
        arr = arr.dictionary_decode()
    if not pa.types.is_dictionary(arr.type):
        if not _is_text(arr.type):
            try:
                arr = pc.cast(arr, pa.string())
            except pa.ArrowException:
                raise DataFormatError(
                    f"probe names of type {arr.type} cannot be read; expected text",
                    file=file,
                    column=col.source,
                ) from None
        arr = pc.dictionary_encode(arr)
    values = pc.utf8_trim_whitespace(arr.dictionary)
    empty_value = pc.fill_null(pc.equal(values, ""), True).to_numpy(zero_copy_only=False)
    indices = arr.indices
    if indices.null_count or empty_value.any():
        index = pc.fill_null(indices, 0).to_numpy(zero_copy_only=False)
        empty = empty_value[index] | indices.is_null().to_numpy(zero_copy_only=False)
        if empty.any():
            raise DataFormatError(
                "empty probe name; every row of the long layout names its probe",
                file=file,
                column=col.source,
                row=int(np.argmax(empty)) + 1,
            )
    # values that differ only by spaces are one probe: number the trimmed values again
    renumber, names = pd.factorize(values.to_numpy(zero_copy_only=False).astype(object))
    codes = _column(len(indices), np.intp)
    np.copyto(codes, indices.to_numpy(zero_copy_only=False))  # the parser's int32 indices
    if not np.array_equal(renumber, np.arange(renumber.size)):
        codes = renumber[codes]
    return codes, names.astype(object)


def _is_text(kind: pa.DataType) -> bool:
    return pa.types.is_string(kind) or pa.types.is_large_string(kind)


def _samples(
    layout: _Layout, arrays: Mapping[int, pa.Array], *, file: str
) -> tuple[pd.DataFrame, NDArray[np.intp], NDArray[np.object_]]:
    """The samples table (columns and dtypes of :data:`~runup.run.SAMPLE_COLUMNS`, in
    acquisition order), the probe code of each row and the distinct probe names in it
    (row ``i`` names ``names[codes[i]]``)."""
    n_rows = len(arrays[layout.speed.index])
    speed = _speed(arrays[layout.speed.index], layout.speed, file=file)
    time = (
        _time(arrays[layout.time.index], layout.time, file=file)
        if layout.time is not None
        else np.full(n_rows, np.nan)
    )
    rows = _column(n_rows, np.int64)
    rows.fill(1)
    np.cumsum(rows, out=rows)  # 1, 2, ..., n_rows in place (arange has no out argument)
    if layout.kind == "long":
        assert layout.probe and layout.amplitude and layout.phase
        codes, names = _probe_codes(arrays[layout.probe.index], layout.probe, file=file)
        order = (
            _order(arrays[layout.order.index], layout.order, file=file)
            if layout.order is not None
            else _column(n_rows, np.int64)
        )
        if layout.order is None:
            order.fill(1)
        amp = _amplitude(arrays[layout.amplitude.index], layout.amplitude, file=file)
        phase = _phase(arrays[layout.phase.index], layout.phase, file=file)
    else:
        n_p = len(layout.pairs)
        amp = np.column_stack(
            [_amplitude(arrays[a.index], a, file=file) for _, a, _ in layout.pairs]
        ).ravel()
        phase = np.column_stack(
            [_phase(arrays[p.index], p, file=file) for _, _, p in layout.pairs]
        ).ravel()
        names = np.array([p for p, _, _ in layout.pairs], dtype=object)
        codes = np.tile(np.arange(n_p), n_rows)
        order = np.ones(n_rows * n_p, dtype=np.int64)
        speed, time, rows = (np.repeat(x, n_p) for x in (speed, time, rows))
    # _time gives all NaN or all finite; and a stable sort of times already in order is
    # the identity: skip it (the usual case)
    if layout.time is not None and not np.isnan(time[0]) and np.any(time[1:] < time[:-1]):
        idx = np.argsort(time, kind="stable")
        speed, codes, order, amp, phase, time, rows = (
            x[idx] for x in (speed, codes, order, amp, phase, time, rows)
        )
    _check_counts(codes, names, order, speed, amp, phase, layout, file=file)
    columns = {
        "speed_rpm": speed,
        "probe": pd.Series(names[codes], dtype=object, copy=False),
        "order": order,
        "amplitude_um_pp": amp,
        "phase_lag_deg": phase,
        "time_s": time,
        "row": rows,
    }
    # the arrays are this function's own, so the frame takes them as they are
    return pd.DataFrame(columns, copy=False), codes, names


def _check_counts(
    codes: NDArray[np.integer],
    names: NDArray[np.object_],
    order: NDArray[np.int64],
    speed: NDArray[np.float64],
    amp: NDArray[np.float64],
    phase: NDArray[np.float64],
    layout: _Layout,
    *,
    file: str,
) -> None:
    """Every probe and order has :data:`MIN_POINTS_PER_PROBE` finite samples, or the first
    one short of them (in acquisition order) is reported."""
    # a sum is finite only when every term is: the usual all-finite case needs no mask
    with np.errstate(invalid="ignore", over="ignore"):  # an overflowing sum: masks below
        sums_finite = all(np.isfinite(np.add.reduce(a)) for a in (speed, amp, phase))
    if sums_finite:
        finite = None
    else:
        finite = np.isfinite(speed) & np.isfinite(amp) & np.isfinite(phase)
    max_order = int(order.max())
    keys = codes if max_order == 1 else codes * np.int64(max_order + 1) + order
    n_keys = int(keys.max()) + 1
    if n_keys <= keys.size:  # the usual few probe/order keys: count them without sorting
        rows_of = np.bincount(keys, minlength=n_keys)
        n_finite = rows_of if finite is None else np.bincount(keys, weights=finite, minlength=n_keys)
        if np.all((n_finite >= MIN_POINTS_PER_PROBE) | (rows_of == 0)):
            return
    if finite is None:
        finite = np.ones(keys.size, dtype=bool)
    keys_u, first, inverse = np.unique(keys, return_index=True, return_inverse=True)
    counts = np.bincount(inverse.ravel(), weights=finite, minlength=keys_u.size)
    few = np.flatnonzero(counts < MIN_POINTS_PER_PROBE)
    if few.size == 0:
        return
    k = few[np.argmin(first[few])]  # first such probe/order in acquisition order
    probe, order_k, count = names[codes[first[k]]], order[first[k]], int(counts[k])
    amp_col = next((a.source for p, a, _ in layout.pairs if p == probe), None)
    raise DataFormatError(
        f"probe '{probe}' (order {order_k}) has {count} samples with finite speed, "
        f"amplitude and phase; at least {MIN_POINTS_PER_PROBE} are needed. Check that "
        "its columns hold data, or remove the probe from the file",
        file=file,
        column=amp_col,
    )
