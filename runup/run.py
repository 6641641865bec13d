"""The data model that flows through runup: Run, then ConditionedRun.

``Run`` is what an importer returns: metadata plus one tidy long table of samples in
canonical units (see :mod:`runup.units`).  ``ConditionedRun`` is what
:func:`runup.conditioning.condition` returns: per probe, order and monotonic speed
segment, one :class:`Curve` sorted by speed, with the slow-roll-compensated and the
uncompensated complex vectors side by side, and a record of every correction made.

All classes are frozen dataclasses validated on construction.  Arrays held by them are
made read-only so that a result cannot be changed behind its provenance.
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from dataclasses import dataclass, field
from typing import Literal

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from .errors import DataFormatError
from .units import amplitude_of, phase_lag_deg_of

#: pandas copies a shared column before changing it (copy-on-write), always from pandas 3;
#: :meth:`Run._probe_numbering` relies on it and is off with older pandas.
_COPY_ON_WRITE = int(pd.__version__.split(".")[0]) >= 3

__all__ = [
    "SAMPLE_COLUMNS",
    "Probe",
    "OperatingSpeeds",
    "SourceFile",
    "RunMetadata",
    "Run",
    "Segment",
    "Correction",
    "SlowRoll",
    "Curve",
    "ConditionedRun",
]

Direction = Literal["startup", "coastdown"]
Rotation = Literal["ccw", "cw"]

#: Columns of ``Run.samples``, in order, with their dtypes.
SAMPLE_COLUMNS: dict[str, str] = {
    "speed_rpm": "float64",
    "probe": "object",
    "order": "int64",
    "amplitude_um_pp": "float64",
    "phase_lag_deg": "float64",
    "time_s": "float64",
    "row": "int64",
}


def _readonly(values: NDArray, dtype: type | str) -> NDArray:
    arr = np.array(values, dtype=dtype, copy=True)
    arr.setflags(write=False)
    return arr


def _check_finite_positive(value: float | None, name: str) -> None:
    if value is not None and not (math.isfinite(value) and value > 0):
        raise DataFormatError(f"{name} must be a positive number of rpm, got {value!r}")


@dataclass(frozen=True)
class Probe:
    """One proximity probe.

    Attributes
    ----------
    name
        Identifier used in the data file (``probe`` column or wide-layout prefix).
    plane
        Measurement plane (bearing) the probe belongs to; X-Y probes share a plane.
    angle_deg
        Mounting angle in degrees from vertical-up, positive counter-clockwise when viewed
        from the driver end looking toward the driven end; ``None`` when unknown.
    """

    name: str
    plane: str | None = None
    angle_deg: float | None = None

    def __post_init__(self) -> None:
        if not isinstance(self.name, str) or not self.name.strip():
            raise DataFormatError(f"probe name must be a non-empty string, got {self.name!r}")
        if self.angle_deg is not None and not math.isfinite(self.angle_deg):
            raise DataFormatError(f"probe '{self.name}': angle_deg must be finite")


@dataclass(frozen=True)
class OperatingSpeeds:
    """Operating speeds of the machine, rpm; each may be unknown (``None``).

    Must satisfy ``min_operating_rpm <= max_continuous_rpm <= trip_rpm`` where given.
    """

    min_operating_rpm: float | None = None
    max_continuous_rpm: float | None = None
    trip_rpm: float | None = None

    def __post_init__(self) -> None:
        values = [self.min_operating_rpm, self.max_continuous_rpm, self.trip_rpm]
        names = ["min_operating_rpm", "max_continuous_rpm", "trip_rpm"]
        for value, name in zip(values, names, strict=True):
            _check_finite_positive(value, name)
        given = [(n, v) for n, v in zip(names, values, strict=True) if v is not None]
        for (n1, v1), (n2, v2) in zip(given, given[1:], strict=False):
            if v1 > v2:
                raise DataFormatError(f"{n1} ({v1:g}) must not exceed {n2} ({v2:g})")


@dataclass(frozen=True)
class SourceFile:
    """An input file and its SHA-256, for provenance."""

    path: str
    sha256: str


@dataclass(frozen=True)
class RunMetadata:
    """What is known about a run besides its samples.

    Attributes
    ----------
    machine_id, run_id
        Identifiers; ``run_id`` defaults to the data file's stem at import.
    direction
        ``"startup"``, ``"coastdown"`` or ``None`` when the record itself must tell
        (conditioning labels each monotonic segment from the data in any case).
    rotation
        Shaft rotation ``"ccw"`` or ``"cw"`` viewed from the driver end, or ``None``.
    probes
        Probe definitions; every probe in the samples has one (the importer adds bare
        definitions for probes the sidecar does not describe).
    operating
        Minimum operating, maximum continuous and trip speeds.
    sources
        Files the run was read from.
    """

    machine_id: str = "unknown"
    run_id: str = "unknown"
    direction: Direction | None = None
    rotation: Rotation | None = None
    probes: tuple[Probe, ...] = ()
    operating: OperatingSpeeds = field(default_factory=OperatingSpeeds)
    sources: tuple[SourceFile, ...] = ()

    def __post_init__(self) -> None:
        if self.direction not in (None, "startup", "coastdown"):
            raise DataFormatError(
                f"direction must be 'startup' or 'coastdown', got {self.direction!r}"
            )
        if self.rotation not in (None, "ccw", "cw"):
            raise DataFormatError(f"rotation must be 'ccw' or 'cw', got {self.rotation!r}")
        names = [p.name for p in self.probes]
        dupes = sorted({n for n in names if names.count(n) > 1})
        if dupes:
            raise DataFormatError(f"probe defined more than once: {', '.join(dupes)}")

    def probe(self, name: str) -> Probe:
        """The definition of probe ``name`` (a bare one if it is not described)."""
        for p in self.probes:
            if p.name == name:
                return p
        return Probe(name)


@dataclass(frozen=True)
class Run:
    """A run-up or coastdown record as imported: metadata and samples.

    Attributes
    ----------
    metadata
        See :class:`RunMetadata`.
    samples
        Long table, one row per probe per sample, columns :data:`SAMPLE_COLUMNS`:
        ``speed_rpm`` (> 0), ``probe``, ``order`` (harmonic order, >= 1),
        ``amplitude_um_pp`` (>= 0), ``phase_lag_deg`` (any real value, not necessarily
        wrapped), ``time_s`` (NaN when the file has none), ``row`` (1-based data row of
        the source file, for messages).  Rows are in acquisition order (time order when
        ``time_s`` is given, else file order).  ``NaN`` in speed, amplitude or phase marks
        a missing value: conditioning drops such rows and records it.
    """

    metadata: RunMetadata
    samples: pd.DataFrame

    def __post_init__(self) -> None:
        df = self.samples
        missing = [c for c in SAMPLE_COLUMNS if c not in df.columns]
        if missing:
            raise DataFormatError(f"Run.samples lacks columns {missing}")
        df = df.loc[:, list(SAMPLE_COLUMNS)].astype(SAMPLE_COLUMNS).reset_index(drop=True)
        speed, amp = df["speed_rpm"].to_numpy(), df["amplitude_um_pp"].to_numpy()
        bad_speed = np.isfinite(speed) & (speed <= 0)
        if bad_speed.any():
            i = int(np.argmax(bad_speed))
            raise DataFormatError(
                f"speed must be positive, found {speed[i]:g} rpm",
                column="speed_rpm",
                row=int(df["row"].iloc[i]),
            )
        bad_amp = np.isfinite(amp) & (amp < 0)
        if bad_amp.any():
            i = int(np.argmax(bad_amp))
            raise DataFormatError(
                f"amplitude must not be negative, found {amp[i]:g} um pp",
                column="amplitude_um_pp",
                row=int(df["row"].iloc[i]),
            )
        bad_order = df["order"].to_numpy() < 1
        if bad_order.any():
            i = int(np.argmax(bad_order))
            raise DataFormatError(
                "harmonic order must be a whole number >= 1",
                column="order",
                row=int(df["row"].iloc[i]),
            )
        object.__setattr__(self, "metadata", _with_probes(self.metadata, df["probe"].unique()))
        object.__setattr__(self, "samples", df)

    @classmethod
    def _from_checked(
        cls,
        metadata: RunMetadata,
        samples: pd.DataFrame,
        probe_names: Iterable[object],
        *,
        probe_codes: NDArray[np.intp] | None = None,
    ) -> Run:
        """A Run of samples its importer has built and checked already (private).

        ``samples`` must have exactly the columns and dtypes of :data:`SAMPLE_COLUMNS`,
        the default index, and satisfy every rule checked by ``__post_init__``;
        ``probe_names`` are its distinct probe names.  Such a table is kept as it is, not
        copied and checked again (some 10 ms for 400,000 rows); only the
        probe definitions are completed.  Any other table goes through ``__post_init__``.

        ``probe_codes`` (optional) numbers the probe of every row, ``samples["probe"][i] ==
        probe_names[probe_codes[i]]``, with distinct ``probe_names``; conditioning then
        groups rows by these integers instead of hashing every name again (see
        :meth:`_probe_numbering`).
        """
        shaped = (
            list(samples.columns) == list(SAMPLE_COLUMNS)
            and [str(t) for t in samples.dtypes] == list(SAMPLE_COLUMNS.values())
            and samples.index.equals(pd.RangeIndex(len(samples)))
        )
        if not shaped:
            return cls(metadata, samples)
        run = object.__new__(cls)  # frozen dataclass: set the fields, skipping __init__
        object.__setattr__(run, "metadata", _with_probes(metadata, probe_names))
        object.__setattr__(run, "samples", samples)
        if probe_codes is not None and _COPY_ON_WRITE:
            names = np.asarray(list(probe_names), dtype=object)
            if len(probe_codes) == len(samples) and len(set(names.tolist())) == names.size:
                # the probe column as it is now: holding it makes pandas copy the column
                # before any later change (copy-on-write), so an unchanged buffer in
                # samples["probe"] means unchanged names
                object.__setattr__(run, "_probe_numbering_cache", (samples["probe"], probe_codes, names))
        return run

    def __getstate__(self) -> dict[str, object]:
        # a copy (pickle, deepcopy) leaves the importer's probe numbering behind: the
        # copied table's buffers are no longer tied to it by copy-on-write
        return {k: v for k, v in self.__dict__.items() if k != "_probe_numbering_cache"}

    def _probe_numbering(self) -> tuple[NDArray[np.intp], NDArray[np.object_]] | None:
        """``(codes, names)`` with ``samples["probe"][i] == names[codes[i]]`` for every row,
        when the importer's numbering still describes the table (private); else ``None``.

        From pandas 3 every change to a DataFrame column that another object still
        refers to copies the column first (copy-on-write, always on), and the arrays a
        DataFrame hands out are read-only.  The Run keeps the probe column it was built
        with, so while ``samples["probe"]`` still holds that very buffer (same address,
        length and stride) its values are the importer's; any edit (``loc`` assignment,
        a replaced column, rows dropped or reordered in place) gives it a new buffer, and
        then ``None`` (the caller numbers the names itself).
        """
        cached = self.__dict__.get("_probe_numbering_cache")
        if cached is None:
            return None
        column, codes, names = cached
        now = self.samples["probe"].to_numpy()
        then = column.to_numpy()
        same = (
            now.shape == then.shape
            and now.strides == then.strides
            and now.__array_interface__["data"][0] == then.__array_interface__["data"][0]
        )
        return (codes, names) if same else None

    @property
    def probe_names(self) -> tuple[str, ...]:
        """Probes present in the samples, in order of first appearance."""
        return tuple(pd.unique(self.samples["probe"]))

    @property
    def orders(self) -> tuple[int, ...]:
        """Harmonic orders present, ascending."""
        return tuple(sorted(int(o) for o in self.samples["order"].unique()))

    @property
    def speed_range_rpm(self) -> tuple[float, float]:
        """Lowest and highest finite speed in the record."""
        s = self.samples["speed_rpm"].to_numpy()
        s = s[np.isfinite(s)]
        return (float(s.min()), float(s.max())) if s.size else (math.nan, math.nan)


def _with_probes(meta: RunMetadata, names: Iterable[object]) -> RunMetadata:
    """``meta`` with a bare :class:`Probe` appended for each name it does not describe
    (sorted by name)."""
    known = {p.name for p in meta.probes}
    unknown = sorted(set(names) - known)
    if not unknown:
        return meta
    return _replace_probes(meta, meta.probes + tuple(Probe(str(n)) for n in unknown))


def _replace_probes(meta: RunMetadata, probes: tuple[Probe, ...]) -> RunMetadata:
    from dataclasses import replace

    return replace(meta, probes=probes)


@dataclass(frozen=True)
class Segment:
    """One monotonic speed segment of a record.

    Attributes
    ----------
    index
        0-based position in acquisition order.
    direction
        ``"startup"`` (speed rising) or ``"coastdown"`` (falling).
    start_rpm, end_rpm
        Speeds at the segment's first and last sample, in acquisition order.
    n_samples
        Rows of the run (all probes) in the segment.
    sweep_rate_rpm_per_s
        Median absolute rate of speed change, or ``None`` without ``time_s``.
    """

    index: int
    direction: Direction
    start_rpm: float
    end_rpm: float
    n_samples: int
    sweep_rate_rpm_per_s: float | None = None

    @property
    def label(self) -> str:
        """Human label such as ``"startup #1"`` (1-based)."""
        return f"{self.direction} #{self.index + 1}"


CorrectionKind = Literal[
    "missing_dropped",
    "duplicates_merged",
    "spike_removed",
    "segment_dropped",
    "too_few_points",
]


@dataclass(frozen=True)
class Correction:
    """One change conditioning made to the data, so that none is silent.

    Attributes
    ----------
    kind
        What was done.
    probe, order, segment
        Where (``None`` when it applies to all probes or before segmentation).
    speed_rpm
        Speed of the affected point(s), when one.
    rows
        Source rows involved (1-based data rows).
    detail
        One sentence for the log.
    """

    kind: CorrectionKind
    probe: str | None
    order: int | None
    segment: int | None
    speed_rpm: float | None
    rows: tuple[int, ...]
    detail: str


@dataclass(frozen=True)
class SlowRoll:
    """The slow-roll (runout) vector subtracted from one curve.

    Attributes
    ----------
    low_rpm, high_rpm
        Speed window the vector was averaged over.
    vector_um_pp
        Complex mean of the uncompensated response in the window.
    n_points
        Points averaged.
    automatic
        Whether the window was chosen automatically.
    """

    low_rpm: float
    high_rpm: float
    vector_um_pp: complex
    n_points: int
    automatic: bool

    @property
    def amplitude_um_pp(self) -> float:
        return float(abs(self.vector_um_pp))

    @property
    def phase_lag_deg(self) -> float:
        return float(np.mod(-np.degrees(np.angle(self.vector_um_pp)), 360.0))


@dataclass(frozen=True)
class Curve:
    """Conditioned response of one probe, one order, one monotonic segment.

    Attributes
    ----------
    probe, order
        Which probe and harmonic order.
    segment
        Index of the :class:`Segment`.
    direction
        ``"startup"`` or ``"coastdown"`` (copied from the segment).
    speed_rpm
        Strictly increasing speeds (coastdowns are reversed for analysis).
    response_um_pp
        Complex vectors after slow-roll compensation (equal to the raw vectors when
        compensation is off).
    raw_response_um_pp
        Complex vectors after sorting, merging and despiking, before compensation.
    time_s
        Mean acquisition time of each point (NaN without ``time_s``).
    slow_roll
        The vector subtracted, or ``None``.
    sample_counts
        How many samples each point averages (default 1 each); identification averages
        points closer than its speed resolution and carries the counts, so that noise
        scales and fit weights stay per sample (:mod:`runup.fit.binning`); conditioning
        sets it for points that merge rows of equal speed.
    """

    probe: str
    order: int
    segment: int
    direction: Direction
    speed_rpm: NDArray[np.float64]
    response_um_pp: NDArray[np.complex128]
    raw_response_um_pp: NDArray[np.complex128]
    time_s: NDArray[np.float64]
    slow_roll: SlowRoll | None = None
    sample_counts: NDArray[np.float64] | None = None

    def __post_init__(self) -> None:
        if self.sample_counts is None:
            object.__setattr__(self, "sample_counts", np.ones(np.size(self.speed_rpm)))
        for name, dtype in (
            ("speed_rpm", np.float64),
            ("response_um_pp", np.complex128),
            ("raw_response_um_pp", np.complex128),
            ("time_s", np.float64),
            ("sample_counts", np.float64),
        ):
            object.__setattr__(self, name, _readonly(getattr(self, name), dtype))
        n = self.speed_rpm.size
        arrays = ("response_um_pp", "raw_response_um_pp", "time_s", "sample_counts")
        if any(getattr(self, a).size != n for a in arrays):
            raise DataFormatError(f"curve {self.probe}: arrays of different lengths")
        if not np.all(self.sample_counts >= 1):
            raise DataFormatError(f"curve {self.probe}: sample counts must be at least 1")
        if n > 1 and not np.all(np.diff(self.speed_rpm) > 0):
            raise DataFormatError(f"curve {self.probe}: speeds must be strictly increasing")

    @property
    def amplitude_um_pp(self) -> NDArray[np.float64]:
        """Compensated amplitude, um pp."""
        return amplitude_of(self.response_um_pp)

    @property
    def phase_lag_deg(self) -> NDArray[np.float64]:
        """Compensated phase lag, degrees, unwrapped along speed."""
        return phase_lag_deg_of(self.response_um_pp)

    @property
    def raw_amplitude_um_pp(self) -> NDArray[np.float64]:
        return amplitude_of(self.raw_response_um_pp)

    @property
    def raw_phase_lag_deg(self) -> NDArray[np.float64]:
        return phase_lag_deg_of(self.raw_response_um_pp)

    @property
    def key(self) -> tuple[str, int, int]:
        """``(probe, order, segment)``."""
        return (self.probe, self.order, self.segment)


@dataclass(frozen=True)
class ConditionedRun:
    """A run after conditioning: curves per probe/order/segment and the correction log.

    Attributes
    ----------
    metadata
        As imported.
    segments
        Monotonic speed segments found, in acquisition order.
    curves
        One :class:`Curve` per probe, order and segment that kept enough points.
    corrections
        Every change made to the data.
    warnings
        Sentences for the user (e.g. a slow-roll window overlapping dynamic response).
    settings
        The conditioning options used, as ``(name, value)`` pairs for provenance.
    """

    metadata: RunMetadata
    segments: tuple[Segment, ...]
    curves: tuple[Curve, ...]
    corrections: tuple[Correction, ...] = ()
    warnings: tuple[str, ...] = ()
    settings: tuple[tuple[str, str], ...] = ()

    def curve(self, probe: str, *, order: int = 1, segment: int = 0) -> Curve:
        """The curve of one probe, order and segment; ``KeyError`` if there is none."""
        for c in self.curves:
            if c.key == (probe, order, segment):
                return c
        raise KeyError(f"no curve for probe {probe!r}, order {order}, segment {segment}")

    def segment(self, index: int) -> Segment:
        for s in self.segments:
            if s.index == index:
                return s
        raise KeyError(f"no segment {index}")
