"""Read raw probe waveforms (CSV or Parquet) block by block.

A waveform file holds sampled signals: one column per proximity probe, one column with
the once-per-turn reference signal and, optionally, a ``time_s`` column.  A TOML file
beside it (``<data stem>.toml``) says which column is the reference, the sample rate
(when there is no ``time_s``) and, per probe, its unit and sensitivity.  The layout and
every key are documented in ``docs/waveforms.md``.

Files are never read whole: :func:`iter_blocks` yields :class:`WaveformBlock` objects of
a bounded number of rows (``pyarrow.parquet.ParquetFile.iter_batches`` /
``pyarrow.csv.open_csv``), with probe signals already converted to micrometres of
displacement, so that the processing in :mod:`runup.pulses` and :mod:`runup.vectors`
works block by block.
"""

from __future__ import annotations

import csv
import hashlib
import math
import os
import re
import tomllib
from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Literal

import numpy as np
import pyarrow as pa
import pyarrow.csv as pacsv
import pyarrow.parquet as pq
from numpy.typing import NDArray

from ..errors import DataFormatError, UnitError
from ..run import OperatingSpeeds, Probe, RunMetadata, SourceFile
from ..units import MICROMETRES_PER_MIL
from .sidecar import _build as _build_run_sidecar

__all__ = [
    "SIGNAL_UNITS",
    "WaveformChannel",
    "WaveformSpec",
    "WaveformBlock",
    "read_waveform_spec",
    "find_waveform_spec",
    "iter_blocks",
    "blocks_from_arrays",
    "file_sha256",
]

#: Units a probe waveform column may be recorded in.
SIGNAL_UNITS = ("um", "mil", "mV", "V")
_CHANNEL_KEYS = (
    "name",
    "column",
    "unit",
    "sensitivity_mv_per_um",
    "angle_from_reference_deg",
    "plane",
    "angle_deg",
)
_WAVEFORM_KEYS = ("sample_rate_hz", "reference_channel", "channels")
_EXTENSIONS: dict[str, Literal["csv", "parquet"]] = {
    ".csv": "csv",
    ".txt": "csv",
    ".parquet": "parquet",
    ".pq": "parquet",
}
#: Relative disagreement allowed between ``time_s`` steps and ``sample_rate_hz``.
_RATE_TOLERANCE = 1e-3


@dataclass(frozen=True)
class WaveformChannel:
    """One probe waveform column.

    Attributes
    ----------
    name
        Probe name used in the resulting run.
    column
        Header of the column in the data file (defaults to ``name``).
    unit
        ``"um"`` or ``"mil"`` (displacement), ``"mV"`` or ``"V"`` (probe output, converted
        with ``sensitivity_mv_per_um``).
    sensitivity_mv_per_um
        Probe sensitivity, mV per micrometre, > 0; required for ``"mV"`` and ``"V"``
        (7.87 mV/um, i.e. 200 mV/mil, is a common proximity-probe value; common practice).
    angle_from_reference_deg
        Shaft angle, degrees, from the once-per-turn reference sensor to this probe,
        measured in the direction of rotation (0 to 360); ``None`` when unknown.
    plane, angle_deg
        As :class:`runup.run.Probe` (mounting angle from vertical-up, + counter-clockwise
        viewed from the driver end).
    """

    name: str
    column: str
    unit: Literal["um", "mil", "mV", "V"]
    sensitivity_mv_per_um: float | None = None
    angle_from_reference_deg: float | None = None
    plane: str | None = None
    angle_deg: float | None = None

    def __post_init__(self) -> None:
        if self.unit not in SIGNAL_UNITS:
            raise UnitError(
                f"channel '{self.name}': unknown unit {self.unit!r}; use one of "
                f"{', '.join(SIGNAL_UNITS)}"
            )
        if self.unit in ("mV", "V"):
            s = self.sensitivity_mv_per_um
            if s is None or not (math.isfinite(s) and s > 0):
                raise UnitError(
                    f"channel '{self.name}' is in {self.unit}: give sensitivity_mv_per_um > 0 "
                    f"(e.g. 7.87), found {s!r}"
                )

    @property
    def um_per_unit(self) -> float:
        """Factor from the recorded unit to micrometres of displacement."""
        if self.unit == "um":
            return 1.0
        if self.unit == "mil":
            return MICROMETRES_PER_MIL
        mv = 1.0 if self.unit == "mV" else 1000.0
        return mv / float(self.sensitivity_mv_per_um)  # type: ignore[arg-type]


@dataclass(frozen=True)
class WaveformSpec:
    """What a waveform file holds and how to read it (the ``[waveform]`` TOML table).

    Attributes
    ----------
    reference_channel
        Header of the once-per-turn reference signal column.
    channels
        Probe waveform columns, in output order.
    sample_rate_hz
        Samples per second; required when the file has no ``time_s`` column.
    machine_id, run_id, direction, rotation, operating
        Run metadata (TOML ``[run]`` and ``[speeds]`` tables, as for run tables).
    path, sha256
        The TOML file and its SHA-256 (empty when the spec was built in Python).
    """

    reference_channel: str
    channels: tuple[WaveformChannel, ...]
    sample_rate_hz: float | None = None
    machine_id: str | None = None
    run_id: str | None = None
    direction: Literal["startup", "coastdown"] | None = None
    rotation: Literal["ccw", "cw"] | None = None
    operating: OperatingSpeeds = field(default_factory=OperatingSpeeds)
    path: str = ""
    sha256: str = ""

    def __post_init__(self) -> None:
        if self.sample_rate_hz is not None and not (
            math.isfinite(self.sample_rate_hz) and self.sample_rate_hz > 0
        ):
            raise DataFormatError(
                f"sample_rate_hz must be a positive number, found {self.sample_rate_hz!r}"
            )
        if not self.channels:
            raise DataFormatError(
                "no probe channels: describe at least one under [[waveform.channels]]"
            )
        names = [c.name for c in self.channels]
        columns = [c.column for c in self.channels] + [self.reference_channel]
        for label, items in (("channel name", names), ("column", columns)):
            dupes = sorted({n for n in items if items.count(n) > 1})
            if dupes:
                raise DataFormatError(
                    f"{label} used more than once in the waveform description: "
                    f"{', '.join(dupes)}; each probe needs its own column"
                )

    def probes(self) -> tuple[Probe, ...]:
        """Probe definitions for the run's metadata."""
        return tuple(Probe(c.name, c.plane, c.angle_deg) for c in self.channels)

    def metadata(self, *, sources: Sequence[SourceFile], default_run_id: str) -> RunMetadata:
        """Run metadata built from the spec."""
        return RunMetadata(
            machine_id=self.machine_id or "unknown",
            run_id=self.run_id or default_run_id,
            direction=self.direction,
            rotation=self.rotation,
            probes=self.probes(),
            operating=self.operating,
            sources=tuple(sources),
        )


@dataclass(frozen=True)
class WaveformBlock:
    """A block of consecutive samples.

    Attributes
    ----------
    first_row
        1-based data row of the block's first sample in the file.
    time_s
        Sample times, seconds, strictly increasing.
    reference
        Reference signal as recorded (any unit), or an empty array when not requested.
    signals_um
        Probe displacements, micrometres, shape ``(n_channels, n_samples)`` in the
        order of :attr:`WaveformSpec.channels` (``(0, n)`` when not requested).
    """

    first_row: int
    time_s: NDArray[np.float64]
    reference: NDArray[np.float64]
    signals_um: NDArray[np.float64]


# -- the TOML description -------------------------------------------------------------


def find_waveform_spec(path: str | os.PathLike) -> Path:
    """The TOML file beside a waveform file (``<folder>/<stem>.toml``); error if absent."""
    candidate = Path(path).with_suffix(".toml")
    if not candidate.is_file():
        raise DataFormatError(
            f"no waveform description {candidate.name} beside the data file; write one with "
            "a [waveform] table (reference_channel, sample_rate_hz, [[waveform.channels]]), "
            "see docs/waveforms.md",
            file=str(path),
        )
    return candidate


def read_waveform_spec(path: str | os.PathLike) -> WaveformSpec:
    """Read and validate a waveform description TOML file.

    Parameters
    ----------
    path
        TOML file with a ``[waveform]`` table, ``[[waveform.channels]]`` entries and the
        optional ``[run]`` and ``[speeds]`` tables of a run sidecar.

    Returns
    -------
    WaveformSpec

    Raises
    ------
    DataFormatError, UnitError
        Missing file, TOML syntax, unknown or missing keys, wrong types, unknown units.
    """
    file = str(path)
    try:
        data = Path(path).read_bytes()
    except OSError:
        raise DataFormatError("waveform description not found or unreadable", file=file) from None
    try:
        doc = tomllib.loads(data.decode("utf-8"))
    except (UnicodeDecodeError, tomllib.TOMLDecodeError) as exc:
        raise DataFormatError(
            f"invalid TOML ({exc}); see docs/waveforms.md", file=file
        ) from None
    doc = dict(doc)
    wave = doc.pop("waveform", None)
    if not isinstance(wave, dict):
        raise DataFormatError(
            "expected a [waveform] table with reference_channel and [[waveform.channels]]; "
            "see docs/waveforms.md",
            file=file,
        )
    for key in ("probes", "columns"):
        if key in doc:
            raise DataFormatError(
                f"[{key}] is not used for waveforms; describe probes under "
                "[[waveform.channels]] (name, column, unit, ...)",
                file=file,
            )
    side = _build_run_sidecar(doc, file=file, sha256="")
    for key in wave:
        if key not in _WAVEFORM_KEYS:
            raise DataFormatError(
                f"unknown key '{key}' in [waveform]; valid keys are {', '.join(_WAVEFORM_KEYS)}",
                file=file,
            )
    ref = wave.get("reference_channel")
    if not isinstance(ref, str) or not ref.strip():
        raise DataFormatError(
            "waveform.reference_channel must name the reference-signal column in quotes, "
            f"found {ref!r}",
            file=file,
        )
    rate = _number(wave, "waveform.sample_rate_hz", file=file)
    items = wave.get("channels", [])
    if not isinstance(items, list) or not all(isinstance(i, dict) for i in items):
        raise DataFormatError("channels must be written as [[waveform.channels]] tables", file=file)
    channels = tuple(_channel(item, i, file=file) for i, item in enumerate(items, start=1))
    try:
        return WaveformSpec(
            reference_channel=ref.strip(),
            channels=channels,
            sample_rate_hz=rate,
            machine_id=side.machine_id,
            run_id=side.run_id,
            direction=side.direction,
            rotation=side.rotation,
            operating=side.operating,
            path=file,
            sha256=hashlib.sha256(data).hexdigest(),
        )
    except DataFormatError as exc:
        raise DataFormatError(exc.message, file=file) from None


def _number(table: Mapping[str, Any], where: str, *, file: str) -> float | None:
    value = table.get(where.rsplit(".", 1)[-1])
    if value is None:
        return None
    if isinstance(value, bool) or not isinstance(value, int | float) or not math.isfinite(value):
        raise DataFormatError(
            f"{where} must be a finite number without quotes, found {value!r}", file=file
        )
    return float(value)


def _channel(item: Mapping[str, Any], i: int, *, file: str) -> WaveformChannel:
    where = f"waveform.channels[{i}]"
    for key in item:
        if key not in _CHANNEL_KEYS:
            raise DataFormatError(
                f"unknown key '{key}' in {where}; valid keys are {', '.join(_CHANNEL_KEYS)}",
                file=file,
            )
    texts = {}
    for key in ("name", "column", "unit", "plane"):
        value = item.get(key)
        if value is not None and (not isinstance(value, str) or not value.strip()):
            raise DataFormatError(
                f"{where}.{key} must be a non-empty string in quotes, found {value!r}", file=file
            )
        texts[key] = value.strip() if isinstance(value, str) else None
    if texts["name"] is None:
        raise DataFormatError(f"{where} lacks 'name'; give the probe name", file=file)
    if texts["unit"] is None:
        raise UnitError(
            f"{where} lacks 'unit'; give one of {', '.join(SIGNAL_UNITS)}", file=file
        )
    offset = _number(item, f"{where}.angle_from_reference_deg", file=file)
    if offset is not None and not 0.0 <= offset < 360.0:
        raise DataFormatError(
            f"{where}.angle_from_reference_deg must be in [0, 360) degrees, measured in the "
            f"direction of rotation from the reference sensor to the probe; found {offset:g}",
            file=file,
        )
    try:
        return WaveformChannel(
            name=texts["name"],
            column=texts["column"] or texts["name"],
            unit=texts["unit"],  # type: ignore[arg-type]
            sensitivity_mv_per_um=_number(item, f"{where}.sensitivity_mv_per_um", file=file),
            angle_from_reference_deg=offset,
            plane=texts["plane"],
            angle_deg=_number(item, f"{where}.angle_deg", file=file),
        )
    except UnitError as exc:
        raise UnitError(exc.message, file=file) from None


# -- the data file --------------------------------------------------------------------


def file_sha256(path: str | os.PathLike, *, chunk_bytes: int = 1 << 22) -> str:
    """Hex SHA-256 of a file, read in chunks (for provenance of large records)."""
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        while chunk := fh.read(chunk_bytes):
            digest.update(chunk)
    return digest.hexdigest()


def iter_blocks(
    path: str | os.PathLike,
    spec: WaveformSpec,
    *,
    signals: Literal["reference", "probes", "all"] = "all",
    block_rows: int = 65536,
) -> Iterator[WaveformBlock]:
    """Yield the file's samples in blocks of about ``block_rows`` rows.

    Parameters
    ----------
    path
        Waveform CSV (``.csv``, ``.txt``) or Parquet (``.parquet``, ``.pq``) file.
    spec
        Its description (:func:`read_waveform_spec`).
    signals
        Which signals to read: the reference only, the probes only, or both (fewer
        columns read means less work for Parquet files).
    block_rows
        Rows per block (CSV blocks are sized in bytes to about this many rows).

    Yields
    ------
    WaveformBlock
        Probe signals in micrometres; times from ``time_s`` or ``row / sample_rate_hz``
        (the first sample at ``t = 0``).

    Raises
    ------
    DataFormatError
        Unreadable file, missing column, non-numeric or non-finite cell, time not
        strictly increasing or inconsistent with ``sample_rate_hz``, no data rows.
    """
    file = str(path)
    kind = _EXTENSIONS.get(Path(path).suffix.lower())
    if kind is None:
        raise DataFormatError(
            f"unknown file extension '{Path(path).suffix}'; accepted: {', '.join(_EXTENSIONS)}",
            file=file,
        )
    if block_rows < 2:
        raise DataFormatError(f"block_rows must be at least 2, found {block_rows}")
    if not Path(path).is_file():
        raise DataFormatError("waveform file not found; check the path", file=file)
    header = _csv_header(path) if kind == "csv" else _parquet_header(path)
    has_time = "time_s" in header
    if not has_time and spec.sample_rate_hz is None:
        raise DataFormatError(
            "the file has no time_s column and no sample rate is given; add "
            "sample_rate_hz to [waveform] or a time_s column to the file",
            file=file,
        )
    wanted = [spec.reference_channel] if signals in ("reference", "all") else []
    if signals in ("probes", "all"):
        wanted += [c.column for c in spec.channels]
    missing = [c for c in wanted if c not in header]
    if missing:
        raise DataFormatError(
            f"column(s) {', '.join(repr(m) for m in missing)} not in the file, which has "
            f"{', '.join(repr(h) for h in header[:20])}; check [waveform] in the TOML",
            file=file,
        )
    for name in wanted + (["time_s"] if has_time else []):
        if header.count(name) > 1:
            raise DataFormatError(f"column '{name}' appears more than once", file=file)
    columns = (["time_s"] if has_time else []) + wanted
    batches = (
        _csv_batches(path, header, columns, block_rows)
        if kind == "csv"
        else _parquet_batches(path, columns, block_rows)
    )
    factors = np.array([c.um_per_unit for c in spec.channels])
    row = 1
    last_time = -math.inf
    seen = False
    for batch in batches:
        arrays = {name: _floats(batch, name, row, file=file) for name in columns}
        n = len(next(iter(arrays.values())))
        if n == 0:
            continue
        seen = True
        if has_time:
            t = arrays["time_s"]
            _check_time(t, last_time, spec.sample_rate_hz, row, file=file)
        else:
            t = (np.arange(row - 1, row - 1 + n, dtype=float)) / spec.sample_rate_hz
        last_time = float(t[-1])
        ref = arrays[spec.reference_channel] if signals != "probes" else np.empty(0)
        if signals == "reference":
            sig = np.empty((0, n))
        else:
            sig = np.stack([arrays[c.column] for c in spec.channels]) * factors[:, None]
        yield WaveformBlock(first_row=row, time_s=t, reference=ref, signals_um=sig)
        row += n
    if not seen:
        raise DataFormatError("the file has a header but no data rows", file=file)


def blocks_from_arrays(
    time_s: NDArray[np.float64],
    reference: NDArray[np.float64],
    signals_um: NDArray[np.float64],
    *,
    block_rows: int,
) -> Iterator[WaveformBlock]:
    """Split in-memory arrays into :class:`WaveformBlock` objects (for tests and notebooks).

    ``signals_um`` has shape ``(n_channels, n_samples)``, already in micrometres.
    """
    t = np.asarray(time_s, dtype=float)
    ref = np.asarray(reference, dtype=float)
    sig = np.atleast_2d(np.asarray(signals_um, dtype=float))
    if ref.shape != t.shape or sig.shape[1] != t.size:
        raise DataFormatError(
            f"time ({t.size} samples), reference ({ref.size}) and signals ({sig.shape[1]}) "
            "must have the same length"
        )
    if t.size > 1 and not np.all(np.diff(t) > 0):
        raise DataFormatError("time_s must be strictly increasing")
    for start in range(0, t.size, block_rows):
        stop = start + block_rows
        yield WaveformBlock(start + 1, t[start:stop], ref[start:stop], sig[:, start:stop])


def _csv_header(path: str | os.PathLike) -> list[str]:
    with open(path, "rb") as fh:
        first = fh.readline().rstrip(b"\r\n")
    try:
        line = first.decode("utf-8-sig")
    except UnicodeDecodeError:
        raise DataFormatError("the header line is not UTF-8 text", file=str(path)) from None
    if not line.strip():
        raise DataFormatError(
            "the first line must be the header naming the columns; it is empty", file=str(path)
        )
    delimiter = next((d for d in (",", "\t", ";") if d in line), ",")
    return [h.strip() for h in next(csv.reader([line], delimiter=delimiter))]


def _parquet_header(path: str | os.PathLike) -> list[str]:
    try:
        return [str(n).strip() for n in pq.ParquetFile(path).schema_arrow.names]
    except (pa.ArrowException, OSError, ValueError):
        raise DataFormatError(
            "cannot read the file as Parquet (not Parquet, truncated or corrupt)", file=str(path)
        ) from None


def _csv_batches(
    path: str | os.PathLike, header: list[str], columns: list[str], block_rows: int
) -> Iterator[pa.RecordBatch]:
    with open(path, "rb") as fh:
        first = fh.readline()
        sample = fh.read(1 << 16)
    delimiter = next((d for d in (",", "\t", ";") if d in first.decode("utf-8-sig")), ",")
    lines = max(sample.count(b"\n"), 1)
    bytes_per_row = max(len(sample) / lines, 1.0)
    names = [f"c{i}" for i in range(len(header))]
    rename = {f"c{header.index(c)}": c for c in columns}
    try:
        reader = pacsv.open_csv(
            path,
            read_options=pacsv.ReadOptions(
                column_names=names,
                skip_rows=1,
                block_size=max(int(block_rows * bytes_per_row), 1 << 12),
                use_threads=False,
            ),
            parse_options=pacsv.ParseOptions(delimiter=delimiter),
            convert_options=pacsv.ConvertOptions(
                include_columns=list(rename), column_types=dict.fromkeys(rename, pa.float64())
            ),
        )
        for batch in reader:
            yield batch.rename_columns([rename[n] for n in batch.schema.names])
    except pa.ArrowInvalid as exc:
        raise _csv_error(str(exc), header, file=str(path)) from None


def _csv_error(text: str, header: list[str], *, file: str) -> DataFormatError:
    col = re.search(r"column #(\d+)", text)
    found = re.search(r"invalid value '([^']*)'", text)
    column = header[int(col.group(1))] if col and int(col.group(1)) < len(header) else None
    if found is not None:
        return DataFormatError(
            f"expected a number, found {found.group(1)!r}; fix or remove the cell",
            file=file,
            column=column,
        )
    return DataFormatError(
        f"cannot parse the CSV ({text.splitlines()[0]}); check the delimiter and that every "
        "line has as many fields as the header",
        file=file,
    )


def _parquet_batches(
    path: str | os.PathLike, columns: list[str], block_rows: int
) -> Iterator[pa.RecordBatch]:
    try:
        pf = pq.ParquetFile(path)
        names = [str(n).strip() for n in pf.schema_arrow.names]
        real = [pf.schema_arrow.names[names.index(c)] for c in columns]
        for batch in pf.iter_batches(batch_size=block_rows, columns=real):
            yield batch.rename_columns(columns)
    except (pa.ArrowException, OSError) as exc:
        raise DataFormatError(
            f"cannot read the Parquet data ({type(exc).__name__}); re-export the file",
            file=str(path),
        ) from None


def _floats(batch: pa.RecordBatch, name: str, row: int, *, file: str) -> NDArray[np.float64]:
    col = batch.column(name)
    if not (pa.types.is_floating(col.type) or pa.types.is_integer(col.type)):
        raise DataFormatError(
            f"expected numbers, found values of type {col.type}; store the signal as numbers",
            file=file,
            column=name,
        )
    values = col.to_numpy(zero_copy_only=False).astype(float, copy=False)
    bad = ~np.isfinite(values)
    if bad.any():
        i = int(np.argmax(bad))
        raise DataFormatError(
            f"expected a finite number, found {'an empty cell' if col.is_null()[i].as_py() else values[i]}; "
            "waveforms may not have gaps: fill or cut the record",
            file=file,
            column=name,
            row=row + i,
        )
    return values


def _check_time(
    t: NDArray[np.float64], last: float, rate_hz: float | None, row: int, *, file: str
) -> None:
    steps = np.diff(np.concatenate(([last], t))) if math.isfinite(last) else np.diff(t)
    offset = 0 if math.isfinite(last) else 1
    if steps.size and not np.all(steps > 0):
        i = int(np.argmax(~(steps > 0)))
        raise DataFormatError(
            "time_s must increase strictly from row to row; found a step of "
            f"{steps[i]:g} s; sort the record or remove repeated rows",
            file=file,
            column="time_s",
            row=row + i + offset,
        )
    if rate_hz is not None and steps.size:
        step = float(np.median(steps))
        if abs(step * rate_hz - 1.0) > _RATE_TOLERANCE:
            raise DataFormatError(
                f"time_s steps ({1.0 / step:.6g} Hz) disagree with sample_rate_hz "
                f"({rate_hz:g}); remove sample_rate_hz or correct it",
                file=file,
                column="time_s",
                row=row,
            )


def is_waveform(path: str | os.PathLike) -> bool:
    """Whether ``path`` is a waveform record: its ``<stem>.toml`` holds a ``[waveform]`` table.

    A run table's sidecar never has one (its reader refuses unknown tables), so the two
    kinds of file cannot be confused.  An unreadable TOML counts as "not a waveform"; the
    run-table reader then reports it properly.
    """
    candidate = Path(path).with_suffix(".toml")
    if not candidate.is_file():
        return False
    try:
        doc = tomllib.loads(candidate.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError):
        return False
    return isinstance(doc.get("waveform"), dict)
