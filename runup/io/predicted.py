"""Read rotordynamic predictions: predicted critical speeds, AFs, amplitudes, mode shapes
and the undamped critical speed map.

One reader, :func:`read_predicted`, takes a TOML, JSON or CSV file (chosen by extension);
the three formats hold the same content and are described, with complete synthetic
examples, in ``docs/compare.md``.  The map may also be read on its own
(:func:`read_critical_speed_map`, a CSV of support-stiffness ratio against the speed of
each mode).

Amplitudes are converted once, here, to runup's canonical micrometres peak-to-peak
(:func:`runup.units.amplitude_to_um_pp`).  runup measures *single-probe* peak-to-peak
amplitudes; predicted amplitudes of the orbit's major axis cannot be compared with them
and are refused.
"""

from __future__ import annotations

import csv
import hashlib
import io
import json
import math
import os
import re
import tomllib
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Literal

import numpy as np
from numpy.typing import NDArray

from ..errors import DataFormatError, UnitError
from ..run import SourceFile
from ..units import amplitude_to_um_pp, parse_column_name, speed_to_rpm

__all__ = [
    "AmplitudeDefinition",
    "PredictedMode",
    "CriticalSpeedMap",
    "Predicted",
    "read_predicted",
    "read_critical_speed_map",
]

AmplitudeScale = Literal["pp", "0p"]
AmplitudeBasis = Literal["single_probe", "major_axis"]
_SCALES = ("pp", "0p")
_BASES = ("single_probe", "major_axis")
_TOP_KEYS = (
    "schema_version", "machine_id", "model", "description", "amplitude_definition",
    "critical_speed_map", "modes",
)
_MODE_KEYS = ("mode", "speed_rpm", "speed_hz", "af", "split_pair", "shape")  # + peak_amplitude_*
_MAP_KEYS = ("stiffness_ratio", "speed_rpm")
_AMPLITUDE_PREFIX = "peak_amplitude_"


@dataclass(frozen=True)
class AmplitudeDefinition:
    """How predicted amplitudes are defined: ``scale`` ``"pp"``/``"0p"`` and ``basis``
    ``"single_probe"`` (what one probe sees) or ``"major_axis"`` (orbit semi-major axis)."""

    scale: AmplitudeScale
    basis: AmplitudeBasis

    @property
    def text(self) -> str:
        return f"{self.scale} {self.basis}"


@dataclass(frozen=True)
class PredictedMode:
    """One predicted mode.

    Attributes
    ----------
    mode
        Label, unique in the file (e.g. ``"1st forward"``).
    speed_rpm
        Predicted critical speed: the peak of the predicted unbalance response, rpm.
    amplification_factor
        Predicted AF, or ``None``.
    peak_amplitude_um_pp
        Predicted single-probe peak amplitude per probe plane, ``(plane, um pp)`` pairs.
    shape
        Mode-shape components at the probe planes, ``(plane, complex)`` pairs, in runup's
        phase convention (``amplitude * exp(-1j * lag)``, see :mod:`runup.units`); real
        components have zero imaginary part.  Normalisation is free.
    split_pair
        Group label shared by the two members of a predicted split pair, or ``None``.
    """

    mode: str
    speed_rpm: float
    amplification_factor: float | None = None
    peak_amplitude_um_pp: tuple[tuple[str, float], ...] = ()
    shape: tuple[tuple[str, complex], ...] = ()
    split_pair: str | None = None

    def amplitude_at(self, plane: str) -> float | None:
        """Predicted peak amplitude (um pp) at ``plane``, or ``None``."""
        return next((a for p, a in self.peak_amplitude_um_pp if p == plane), None)


@dataclass(frozen=True)
class CriticalSpeedMap:
    """Predicted undamped critical speed map.

    Attributes
    ----------
    stiffness_ratio
        Support stiffness relative to nominal, strictly increasing, positive (typically
        0.1 to 10, log-spaced).
    modes
        Mode labels, one per column of ``speed_rpm``.
    speed_rpm
        Undamped critical speeds, rpm, shape ``(len(stiffness_ratio), len(modes))``.
    source
        File the map was read from (for messages).
    """

    stiffness_ratio: NDArray[np.float64]
    modes: tuple[str, ...]
    speed_rpm: NDArray[np.float64]
    source: str = ""

    def __post_init__(self) -> None:
        k = np.array(self.stiffness_ratio, dtype=float, copy=True)
        s = np.array(self.speed_rpm, dtype=float, copy=True)
        file = self.source or None
        if k.ndim != 1 or k.size < 2:
            raise DataFormatError(
                f"critical speed map needs at least 2 stiffness ratios, found {k.size}",
                file=file, column="stiffness_ratio",
            )
        if s.ndim == 1 and len(self.modes) == 1:
            s = s[:, None]
        if s.shape != (k.size, len(self.modes)):
            raise DataFormatError(
                f"critical speed map: expected {k.size} speeds for each of {len(self.modes)} "
                f"mode(s), found an array of shape {s.shape}", file=file,
            )
        _check_labels(self.modes, file=file, column="mode")
        bad = ~(np.isfinite(k) & (k > 0))
        if bad.any():
            i = int(np.argmax(bad))
            raise DataFormatError(
                f"stiffness ratio must be a positive number, found {k[i]!r}; give the support "
                "stiffness relative to nominal", file=file, column="stiffness_ratio", row=i + 1,
            )
        step = np.diff(k) <= 0
        if step.any():
            i = int(np.argmax(step)) + 1
            raise DataFormatError(
                f"stiffness ratios must increase strictly, found {k[i]:g} after {k[i - 1]:g}; "
                "sort the map by stiffness ratio and remove repeats",
                file=file, column="stiffness_ratio", row=i + 1,
            )
        for j, label in enumerate(self.modes):
            bad = ~(np.isfinite(s[:, j]) & (s[:, j] > 0))
            if bad.any():
                i = int(np.argmax(bad))
                raise DataFormatError(
                    f"critical speed must be a positive number of rpm, found {s[i, j]!r}",
                    file=file, column=label, row=i + 1,
                )
        k.setflags(write=False)
        s.setflags(write=False)
        object.__setattr__(self, "stiffness_ratio", k)
        object.__setattr__(self, "speed_rpm", s)

    def curve(self, mode: str) -> NDArray[np.float64]:
        """Speeds (rpm) of one mode along ``stiffness_ratio``; ``KeyError`` if not mapped."""
        if mode not in self.modes:
            raise KeyError(f"mode {mode!r} is not in the critical speed map ({', '.join(self.modes)})")
        return self.speed_rpm[:, self.modes.index(mode)]


@dataclass(frozen=True)
class Predicted:
    """A rotordynamic prediction as read from file.

    Attributes
    ----------
    modes
        Predicted modes in file order.
    amplitude_definition
        As declared (amplitudes are already converted to pp), ``None`` without amplitudes.
    critical_speed_map
        The undamped critical speed map, or ``None``.
    machine_id, model
        Identifiers given in the file, or ``None``.
    sources
        Files read (the prediction and a separate map), with SHA-256.
    """

    modes: tuple[PredictedMode, ...]
    amplitude_definition: AmplitudeDefinition | None = None
    critical_speed_map: CriticalSpeedMap | None = None
    machine_id: str | None = None
    model: str | None = None
    sources: tuple[SourceFile, ...] = field(default=())

    def __post_init__(self) -> None:
        if not self.modes:
            raise DataFormatError("a prediction needs at least one mode")
        _check_labels(tuple(m.mode for m in self.modes), file=None, column="mode")

    def mode(self, label: str) -> PredictedMode:
        """The predicted mode called ``label``; ``KeyError`` if there is none."""
        for m in self.modes:
            if m.mode == label:
                return m
        raise KeyError(f"no predicted mode {label!r}")

    def partner(self, mode: PredictedMode) -> PredictedMode | None:
        """The other member of ``mode``'s split pair, or ``None``."""
        if mode.split_pair is None:
            return None
        return next(
            (m for m in self.modes if m.split_pair == mode.split_pair and m.mode != mode.mode), None
        )


# ---------------------------------------------------------------------------- readers
def read_predicted(
    path: str | os.PathLike[str], *, critical_speed_map: str | os.PathLike[str] | None = None
) -> Predicted:
    """Read a prediction file (``.toml``, ``.json`` or ``.csv``).

    Parameters
    ----------
    path
        The prediction file; formats in ``docs/compare.md``.
    critical_speed_map
        A map CSV to attach (overrides one the file names or holds).

    Returns
    -------
    Predicted

    Raises
    ------
    DataFormatError
        Unreadable file or syntax; a missing, unknown or mistyped field; a speed that is not
        positive; duplicate mode labels; a split pair without exactly two members; an
        unknown or unreconcilable amplitude definition; a stiffness axis that does not
        increase strictly.  The message names the file, the field (``column``) and the row
        (CSV data row, or the 1-based entry of ``modes``).
    UnitError
        An amplitude or speed field whose unit is unknown.
    """
    file = str(path)
    suffix = Path(path).suffix.lower()
    if suffix not in (".toml", ".json", ".csv"):
        raise DataFormatError(
            f"unknown prediction file extension '{Path(path).suffix}'; use .toml, .json or .csv",
            file=file,
        )
    data = _read_bytes(path)
    text = _decode(data, file)
    if suffix == ".csv":
        doc = _csv_document(text, file)
    elif suffix == ".toml":
        try:
            doc = tomllib.loads(text)
        except tomllib.TOMLDecodeError as exc:
            raise DataFormatError(f"invalid TOML: {exc}", file=file) from None
    else:
        try:
            doc = json.loads(text)
        except json.JSONDecodeError as exc:
            raise DataFormatError(
                f"invalid JSON at line {exc.lineno}, column {exc.colno}: {exc.msg}", file=file
            ) from None
        if not isinstance(doc, dict):
            raise DataFormatError("a JSON prediction must be an object {...}", file=file)
    sources = [SourceFile(file, hashlib.sha256(data).hexdigest())]
    predicted = _build(doc, file=file)
    speed_map = predicted.critical_speed_map
    map_ref = critical_speed_map if critical_speed_map is not None else doc.get("critical_speed_map")
    if isinstance(map_ref, str | os.PathLike):
        map_path = Path(map_ref)
        if not map_path.is_absolute() and critical_speed_map is None:
            map_path = Path(path).parent / map_path
        speed_map = read_critical_speed_map(map_path)
        sources.append(SourceFile(str(map_path), hashlib.sha256(_read_bytes(map_path)).hexdigest()))
    if speed_map is not None:
        labels = {m.mode for m in predicted.modes}
        unknown = [m for m in speed_map.modes if m not in labels]
        if unknown:
            raise DataFormatError(
                f"critical speed map has mode(s) {unknown} that the prediction does not list "
                f"(modes: {sorted(labels)}); use the same labels in both",
                file=speed_map.source or file, column=unknown[0],
            )
    return Predicted(
        modes=predicted.modes,
        amplitude_definition=predicted.amplitude_definition,
        critical_speed_map=speed_map,
        machine_id=predicted.machine_id,
        model=predicted.model,
        sources=tuple(sources),
    )


def read_critical_speed_map(path: str | os.PathLike[str]) -> CriticalSpeedMap:
    """Read an undamped critical speed map CSV.

    The first column is ``stiffness_ratio`` (support stiffness over nominal), every other
    column one mode, its header the mode label, its cells undamped critical speeds in rpm.
    Lines starting with ``#`` before the header are comments.
    """
    file = str(path)
    header, rows = _csv_rows(_decode(_read_bytes(path), file), file)
    if not header or header[0] != "stiffness_ratio":
        raise DataFormatError(
            f"the first column of a critical speed map must be 'stiffness_ratio', found "
            f"{header[0] if header else 'nothing'!r}; then one column per mode label",
            file=file,
        )
    if len(header) < 2:
        raise DataFormatError("critical speed map has no mode columns", file=file)
    values = np.array(
        [[_cell_float(cell, file=file, column=header[j], row=i) for j, cell in enumerate(r)]
         for i, r in enumerate(rows, start=1)],
        dtype=float,
    ).reshape(len(rows), len(header))
    return CriticalSpeedMap(values[:, 0], tuple(header[1:]), values[:, 1:], source=file)


# ---------------------------------------------------------------------------- helpers
def _read_bytes(path: str | os.PathLike[str]) -> bytes:
    try:
        return Path(path).read_bytes()
    except FileNotFoundError:
        raise DataFormatError("file not found; check the path", file=str(path)) from None
    except OSError as exc:
        raise DataFormatError(
            f"cannot read file ({exc.strerror or type(exc).__name__})", file=str(path)
        ) from None


def _decode(data: bytes, file: str) -> str:
    try:
        return data.decode("utf-8-sig")
    except UnicodeDecodeError:
        raise DataFormatError("file is not UTF-8 text; save it as UTF-8", file=file) from None


def _check_labels(labels: tuple[str, ...], *, file: str | None, column: str) -> None:
    for i, label in enumerate(labels, start=1):
        if not isinstance(label, str) or not label.strip():
            raise DataFormatError(
                f"mode label must be non-empty text, found {label!r}", file=file, column=column, row=i
            )
    seen: set[str] = set()
    for i, label in enumerate(labels, start=1):
        if label in seen:
            raise DataFormatError(
                f"mode label {label!r} appears twice; give every mode its own label",
                file=file, column=column, row=i,
            )
        seen.add(label)


def _csv_rows(text: str, file: str) -> tuple[list[str], list[list[str]]]:
    """Header and data rows of a comma-separated file; leading '#' lines are comments."""
    lines = text.splitlines()
    start = 0
    while start < len(lines) and (not lines[start].strip() or lines[start].lstrip().startswith("#")):
        start += 1
    table = [r for r in csv.reader(io.StringIO("\n".join(lines[start:]))) if any(c.strip() for c in r)]
    if not table:
        raise DataFormatError("file has no header line", file=file)
    header = [h.strip() for h in table[0]]
    rows = table[1:]
    if not rows:
        raise DataFormatError("file has a header but no data rows", file=file)
    for i, r in enumerate(rows, start=1):
        if len(r) != len(header):
            raise DataFormatError(
                f"expected {len(header)} cells as in the header, found {len(r)}", file=file, row=i
            )
    return header, [[c.strip() for c in r] for r in rows]


def _cell_float(cell: str, *, file: str, column: str, row: int) -> float:
    try:
        return float(cell)
    except ValueError:
        raise DataFormatError(
            f"expected a number, found {cell!r}", file=file, column=column, row=row
        ) from None


def _csv_document(text: str, file: str) -> dict[str, Any]:
    """Turn a prediction CSV into the document structure of the TOML/JSON formats."""
    header, rows = _csv_rows(text, file)
    dupes = sorted({h for h in header if header.count(h) > 1})
    if dupes:
        raise DataFormatError(f"column given twice: {dupes[0]!r}", file=file, column=dupes[0])
    modes: list[dict[str, Any]] = []
    definitions: set[str] = set()
    for i, r in enumerate(rows, start=1):
        entry: dict[str, Any] = {}
        for name, cell in zip(header, r, strict=True):
            if cell == "":
                continue
            if name in ("mode", "split_pair"):
                entry[name] = cell
            elif name == "amplitude_definition":
                definitions.add(cell)
            elif "." in name:
                key, _, plane = name.partition(".")
                if key not in ("shape", "shape_im") and not key.startswith(_AMPLITUDE_PREFIX):
                    raise DataFormatError(
                        f"unknown column '{name}'; per-plane columns are "
                        "peak_amplitude_<unit>_<def>.<plane>, shape.<plane>, shape_im.<plane>",
                        file=file, column=name,
                    )
                value = _cell_float(cell, file=file, column=name, row=i)
                if key == "shape_im":
                    old = entry.setdefault("shape", {}).get(plane, 0.0)
                    entry["shape"][plane] = [float(np.real(old)), value]
                elif key == "shape":
                    old = entry.setdefault("shape", {}).get(plane)
                    entry["shape"][plane] = [value, old[1]] if isinstance(old, list) else value
                else:
                    entry.setdefault(key, {})[plane] = value
            elif name in _MODE_KEYS:
                entry[name] = _cell_float(cell, file=file, column=name, row=i)
            else:
                raise DataFormatError(
                    f"unknown column '{name}'; valid columns are mode, speed_rpm, af, split_pair, "
                    "amplitude_definition and the per-plane columns of docs/compare.md",
                    file=file, column=name,
                )
        modes.append(entry)
    if len(definitions) > 1:
        raise DataFormatError(
            f"amplitude_definition differs between rows ({sorted(definitions)}); one definition "
            "applies to the whole file", file=file, column="amplitude_definition",
        )
    doc: dict[str, Any] = {"modes": modes}
    if definitions:
        doc["amplitude_definition"] = definitions.pop()
    return doc


def _parse_definition(value: Any, *, file: str) -> AmplitudeDefinition:
    words = re.split(r"[\s,;/]+", value.strip().lower()) if isinstance(value, str) else []
    scale = next((w for w in words if w in _SCALES), None)
    basis = next((w for w in words if w in _BASES), None)
    if len(words) != 2 or scale is None or basis is None:
        raise DataFormatError(
            f"unknown amplitude_definition {value!r}; write two words, the scale "
            f"({' or '.join(_SCALES)}) and the basis ({' or '.join(_BASES)}), e.g. "
            "'pp single_probe'", file=file, column="amplitude_definition",
        )
    return AmplitudeDefinition(scale, basis)  # type: ignore[arg-type]


def _string(value: Any, *, file: str, column: str, row: int | None) -> str:
    if not isinstance(value, str) or not value.strip():
        raise DataFormatError(
            f"expected non-empty text, found {value!r}", file=file, column=column, row=row
        )
    return value.strip()


def _number(value: Any, *, file: str, column: str, row: int) -> float:
    if isinstance(value, bool) or not isinstance(value, int | float) or not math.isfinite(value):
        raise DataFormatError(
            f"expected a finite number, found {value!r}", file=file, column=column, row=row
        )
    return float(value)


def _positive(value: Any, *, file: str, column: str, row: int, what: str) -> float:
    v = _number(value, file=file, column=column, row=row)
    if v <= 0:
        raise DataFormatError(f"{what} must be positive, found {v:g}", file=file, column=column, row=row)
    return v


def _planes(value: Any, *, file: str, column: str, row: int) -> Mapping[str, Any]:
    if not isinstance(value, Mapping) or not value:
        raise DataFormatError(
            f"expected a table of plane = value, e.g. {{ DE = 1.0, NDE = 0.8 }}, found {value!r}",
            file=file, column=column, row=row,
        )
    return value


def _mode(entry: Any, *, row: int, file: str, definition: AmplitudeDefinition | None) -> PredictedMode:
    if not isinstance(entry, Mapping):
        raise DataFormatError("each mode must be a table ([[modes]])", file=file, row=row)
    for key in entry:
        if key not in _MODE_KEYS and not key.startswith(_AMPLITUDE_PREFIX):
            raise DataFormatError(
                f"unknown field '{key}'; valid fields are {', '.join(_MODE_KEYS)} and "
                "peak_amplitude_<unit>_<definition>", file=file, column=key, row=row,
            )
    if "mode" not in entry:
        raise DataFormatError("missing field 'mode' (the mode label)", file=file, column="mode", row=row)
    label = _string(entry["mode"], file=file, column="mode", row=row)
    speed_keys = [k for k in ("speed_rpm", "speed_hz") if k in entry]
    if len(speed_keys) != 1:
        raise DataFormatError(
            "give the predicted critical speed once, as speed_rpm (or speed_hz)",
            file=file, column="speed_rpm", row=row,
        )
    key = speed_keys[0]
    unit = parse_column_name(key)
    assert unit is not None
    speed = float(speed_to_rpm(
        _positive(entry[key], file=file, column=key, row=row, what="predicted critical speed"),
        unit=unit.unit,
    ))
    af = None
    if "af" in entry:
        af = _positive(entry["af"], file=file, column="af", row=row, what="amplification factor")
    split = _string(entry["split_pair"], file=file, column="split_pair", row=row) if "split_pair" in entry else None
    amp_keys = [k for k in entry if k.startswith(_AMPLITUDE_PREFIX)]
    if len(amp_keys) > 1:
        raise DataFormatError(
            f"peak amplitudes given twice ({', '.join(amp_keys)}); keep one",
            file=file, column=amp_keys[1], row=row,
        )
    amplitudes: list[tuple[str, float]] = []
    if amp_keys:
        amplitudes = _amplitudes(amp_keys[0], entry[amp_keys[0]], row=row, file=file, definition=definition)
    shape: list[tuple[str, complex]] = []
    if "shape" in entry:
        for plane, v in _planes(entry["shape"], file=file, column="shape", row=row).items():
            if isinstance(v, list) and len(v) == 2:
                z = complex(*(_number(x, file=file, column=f"shape.{plane}", row=row) for x in v))
            else:
                z = complex(_number(v, file=file, column=f"shape.{plane}", row=row))
            shape.append((str(plane), z))
        if all(z == 0 for _, z in shape):
            raise DataFormatError(
                "mode shape is zero at every plane", file=file, column="shape", row=row
            )
    return PredictedMode(label, speed, af, tuple(amplitudes), tuple(shape), split)


def _amplitudes(
    key: str, value: Any, *, row: int, file: str, definition: AmplitudeDefinition | None
) -> list[tuple[str, float]]:
    try:
        unit = parse_column_name(key.removeprefix("peak_"))
    except UnitError as exc:
        raise UnitError(
            f"unknown amplitude field '{key}': write peak_amplitude_<unit>_<definition>, e.g. "
            f"peak_amplitude_um_pp ({exc.message})", file=file, column=key, row=row,
        ) from None
    assert unit is not None
    if definition is None:
        raise DataFormatError(
            "peak amplitudes are given but the file has no amplitude_definition; add e.g. "
            "amplitude_definition = 'pp single_probe'", file=file, column="amplitude_definition",
        )
    if definition.basis == "major_axis":
        raise DataFormatError(
            "predicted amplitudes are major-axis (orbit) amplitudes, but runup measures "
            "single-probe amplitudes, which cannot be compared with them; export the predicted "
            "response at the probe angles (single_probe) or remove the amplitudes",
            file=file, column="amplitude_definition",
        )
    if unit.qualifier != definition.scale:
        raise DataFormatError(
            f"field '{key}' says '{unit.qualifier}' but amplitude_definition says "
            f"'{definition.scale}'; make them agree", file=file, column=key, row=row,
        )
    out = []
    for plane, v in _planes(value, file=file, column=key, row=row).items():
        a = _number(v, file=file, column=f"{key}.{plane}", row=row)
        if a < 0:
            raise DataFormatError(
                f"amplitude must not be negative, found {a:g}", file=file, column=f"{key}.{plane}", row=row
            )
        out.append((str(plane), float(amplitude_to_um_pp(a, unit=unit.unit, definition=unit.qualifier))))
    return out


def _inline_map(value: Any, *, file: str) -> CriticalSpeedMap:
    if not isinstance(value, Mapping) or set(value) != set(_MAP_KEYS):
        raise DataFormatError(
            "critical_speed_map must be a file name or a table with 'stiffness_ratio' (array) and "
            "'speed_rpm' (a table of mode label = array of rpm)", file=file, column="critical_speed_map",
        )
    speeds = value["speed_rpm"]
    if not isinstance(speeds, Mapping) or not speeds:
        raise DataFormatError(
            "critical_speed_map.speed_rpm must be a table of mode label = array of rpm",
            file=file, column="critical_speed_map.speed_rpm",
        )
    stiffness = value["stiffness_ratio"]
    arrays = [stiffness, *speeds.values()]
    names = ["stiffness_ratio", *speeds]
    for name, arr in zip(names, arrays, strict=True):
        if not isinstance(arr, list) or len(arr) != len(stiffness):
            raise DataFormatError(
                f"expected an array of {len(stiffness) if isinstance(stiffness, list) else 'n'} "
                f"numbers, found {arr!r:.60}", file=file, column=name,
            )
        for i, v in enumerate(arr, start=1):
            _number(v, file=file, column=name, row=i)
    return CriticalSpeedMap(
        np.asarray(stiffness, dtype=float), tuple(str(k) for k in speeds),
        np.column_stack([np.asarray(v, dtype=float) for v in speeds.values()]), source=file,
    )


def _build(doc: Mapping[str, Any], *, file: str) -> Predicted:
    for key in doc:
        if key not in _TOP_KEYS:
            raise DataFormatError(
                f"unknown top-level field '{key}'; valid fields are {', '.join(_TOP_KEYS)}",
                file=file, column=key,
            )
    if doc.get("schema_version", 1) != 1:
        raise DataFormatError(
            f"schema_version {doc['schema_version']!r} is not known; this runup reads version 1",
            file=file, column="schema_version",
        )
    entries = doc.get("modes")
    if not isinstance(entries, list) or not entries:
        raise DataFormatError(
            "no predicted modes; give at least one [[modes]] entry with mode and speed_rpm",
            file=file, column="modes",
        )
    definition = None
    if "amplitude_definition" in doc:
        definition = _parse_definition(doc["amplitude_definition"], file=file)
    modes = tuple(_mode(e, row=i, file=file, definition=definition) for i, e in enumerate(entries, start=1))
    _check_labels(tuple(m.mode for m in modes), file=file, column="mode")
    groups: dict[str, list[int]] = {}
    for i, m in enumerate(modes, start=1):
        if m.split_pair is not None:
            groups.setdefault(m.split_pair, []).append(i)
    for name, rows in groups.items():
        if len(rows) != 2:
            raise DataFormatError(
                f"split pair {name!r} has {len(rows)} member(s); a split pair groups exactly two "
                "predicted modes", file=file, column="split_pair", row=rows[-1],
            )
    speed_map = None
    ref = doc.get("critical_speed_map")
    if ref is not None and not isinstance(ref, str):
        speed_map = _inline_map(ref, file=file)
    texts = {}
    for key in ("machine_id", "model"):
        texts[key] = _string(doc[key], file=file, column=key, row=None) if key in doc else None
    return Predicted(modes, definition, speed_map, texts["machine_id"], texts["model"])
