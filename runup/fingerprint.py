"""Machine fingerprints: what one run says about a machine, in a form that can be archived.

A :class:`Fingerprint` is a pure function of an :class:`~runup.critical.Identification`
(and, optionally, the :class:`~runup.criteria.CheckResult` of a rule set): run metadata and
condition tags, sweep rates, the conditioned 1X and 2X curves on a standard speed grid (per
probe and per X-Y plane major axis), the criticals with their 95 % intervals, slow-roll
vectors, 1X at running speed, verdicts and provenance (input SHA-256, tool version).

Everything is held in frozen dataclasses; :mod:`runup.archive` stores them as Parquet and
:mod:`runup.archive.drift` compares them.
"""

from __future__ import annotations

import math
import re
from collections.abc import Mapping
from dataclasses import dataclass
from datetime import datetime
from typing import TYPE_CHECKING, Literal

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ._version import __version__
from .critical import Critical, Identification
from .errors import DataFormatError
from .geometry import major_axis_response, orbit, probe_pairs
from .run import Curve, SourceFile

if TYPE_CHECKING:  # annotation only: criteria is not needed to build a fingerprint
    from .criteria import CheckResult

__all__ = [
    "GRID_STEP_RPM",
    "FINGERPRINT_ORDERS",
    "GridCurve",
    "CriticalPrint",
    "SlowRollPrint",
    "RunningSpeedPrint",
    "SegmentPrint",
    "VerdictPrint",
    "Fingerprint",
    "fingerprint",
    "speed_grid_rpm",
    "interp_complex",
]

#: Default spacing of the standard speed grid, rpm.
GRID_STEP_RPM = 50.0
#: Harmonic orders kept on the grid.
FINGERPRINT_ORDERS = (1, 2)

CurveKind = Literal["probe", "major_axis"]
RunningBasis = Literal["max_continuous", "top_speed"]
_TAG_KEY = re.compile(r"^[A-Za-z][A-Za-z0-9_.-]{0,63}$")


@dataclass(frozen=True)
class GridCurve:
    """One conditioned curve resampled on the standard speed grid.

    Attributes
    ----------
    name
        Probe name, or the plane name for a major-axis curve.
    kind
        ``"probe"`` or ``"major_axis"`` (X-Y plane, :func:`runup.geometry.major_axis_response`).
    order, segment
        Harmonic order and speed segment.
    speed_rpm
        The fingerprint's grid (multiples of the grid step), rpm.
    response_um_pp
        Complex slow-roll-compensated vectors, um pp, linear in real and imaginary part
        between measured speeds; ``nan`` outside the measured range.
    """

    name: str
    kind: CurveKind
    order: int
    segment: int
    speed_rpm: NDArray[np.float64]
    response_um_pp: NDArray[np.complex128]

    def __post_init__(self) -> None:
        for attr, dtype in (("speed_rpm", np.float64), ("response_um_pp", np.complex128)):
            arr = np.array(getattr(self, attr), dtype=dtype, copy=True)
            arr.setflags(write=False)
            object.__setattr__(self, attr, arr)
        if self.speed_rpm.shape != self.response_um_pp.shape:
            raise DataFormatError(f"grid curve {self.name}: speeds and vectors of different lengths")


@dataclass(frozen=True)
class CriticalPrint:
    """A critical as archived: headline values, 95 % intervals (``nan`` when none), flags.

    ``split_lower_rpm``/``split_upper_rpm`` are the natural speeds of a split pair's branches
    (``nan`` when not split); ``peak_amplitude_um_pp`` is the largest probe peak.
    """

    segment: int
    direction: str
    order: int
    speed_rpm: float
    natural_speed_rpm: float
    natural_speed_ci95_low_rpm: float
    natural_speed_ci95_high_rpm: float
    damping_ratio: float
    damping_ratio_ci95_low: float
    damping_ratio_ci95_high: float
    amplification_factor: float
    amplification_factor_ci95_low: float
    amplification_factor_ci95_high: float
    peak_amplitude_um_pp: float
    method: str
    probes: tuple[str, ...]
    flags: tuple[str, ...]
    split_lower_rpm: float = math.nan
    split_upper_rpm: float = math.nan

    @property
    def shaft_speed_rpm(self) -> float:
        """Shaft speed of the peak, ``speed_rpm / order``."""
        return self.speed_rpm / self.order


@dataclass(frozen=True)
class SlowRollPrint:
    """Slow-roll (runout) vector of one probe, order and segment, um pp, and its window."""

    probe: str
    order: int
    segment: int
    vector_um_pp: complex
    low_rpm: float
    high_rpm: float


@dataclass(frozen=True)
class RunningSpeedPrint:
    """1X of one probe and segment at running speed (``nan`` when the record does not reach it).

    ``basis`` says whether ``speed_rpm`` is the maximum continuous speed of the metadata or,
    without one, the top speed of the curve.
    """

    probe: str
    segment: int
    speed_rpm: float
    basis: RunningBasis
    response_um_pp: complex


@dataclass(frozen=True)
class SegmentPrint:
    """A monotonic speed segment: direction, speed span, sweep rate (``nan`` without time)."""

    index: int
    direction: str
    start_rpm: float
    end_rpm: float
    sweep_rate_rpm_per_s: float


@dataclass(frozen=True)
class VerdictPrint:
    """One verdict of a rule set, flattened.

    ``kind`` is ``"margin"`` (``subject`` the critical's peak speed as text, ``value`` the
    margin %, ``limit`` the required margin %) or ``"vibration"`` (``subject`` the probe,
    ``value`` the amplitude um pp, ``limit`` the limit um pp).
    """

    kind: Literal["margin", "vibration"]
    segment: int
    subject: str
    value: float
    limit: float
    status: str
    rule: str


@dataclass(frozen=True)
class Fingerprint:
    """Everything runup keeps of one run of one machine.

    Attributes
    ----------
    machine_id, run_id
        Identifiers (archive ids must match ``^[A-Za-z0-9][A-Za-z0-9._-]{0,63}$``).
    start_time
        ISO 8601 start time from the ``start_time`` tag, or ``None`` when not given
        (:attr:`time_key` then falls back to the run id).
    direction, rotation
        Run direction (metadata, else that of the first segment) and shaft rotation.
    tags
        Condition tags, sorted ``(key, value)`` pairs (e.g. ``start=cold``, ``oil_temp_c=48``).
    segments
        Speed segments with their sweep rates.
    grid_step_rpm
        Spacing of the standard speed grid.
    curves
        Grid curves per probe and plane major axis, orders 1 and 2.
    criticals, slow_roll, running_speed
        See :class:`CriticalPrint`, :class:`SlowRollPrint`, :class:`RunningSpeedPrint`.
    rule_set, verdicts
        Rule set name and its verdicts when a check was given (``None`` and ``()`` otherwise).
    sources
        Input files and their SHA-256.
    tool_version
        runup version that made the fingerprint.
    """

    machine_id: str
    run_id: str
    start_time: str | None
    direction: str | None
    rotation: str | None
    tags: tuple[tuple[str, str], ...]
    segments: tuple[SegmentPrint, ...]
    grid_step_rpm: float
    curves: tuple[GridCurve, ...]
    criticals: tuple[CriticalPrint, ...]
    slow_roll: tuple[SlowRollPrint, ...]
    running_speed: tuple[RunningSpeedPrint, ...]
    rule_set: str | None
    verdicts: tuple[VerdictPrint, ...]
    sources: tuple[SourceFile, ...]
    tool_version: str

    @property
    def time_key(self) -> str:
        """What runs are ordered by in a history: the start time, else the run id."""
        return self.start_time if self.start_time is not None else self.run_id

    def tag(self, key: str) -> str | None:
        """The value of one condition tag, or ``None``."""
        return dict(self.tags).get(key)

    def curve(self, name: str, *, kind: CurveKind = "probe", order: int = 1, segment: int = 0) -> GridCurve:
        """One grid curve; ``KeyError`` if there is none."""
        for c in self.curves:
            if (c.name, c.kind, c.order, c.segment) == (name, kind, order, segment):
                return c
        raise KeyError(f"no {kind} curve {name!r}, order {order}, segment {segment}")


# ----------------------------------------------------------------------------- helpers
def interp_complex(speed_rpm: ArrayLike, xp_rpm: ArrayLike, fp_um_pp: ArrayLike) -> NDArray[np.complex128]:
    """Complex vectors at ``speed_rpm``, linear in real and imaginary part; ``nan`` outside ``xp``.

    ``xp_rpm`` must be increasing.  Outside ``[xp[0], xp[-1]]`` (or with no points) the
    result is ``nan``, never an extrapolation.
    """
    x = np.asarray(speed_rpm, dtype=float)
    xp = np.asarray(xp_rpm, dtype=float)
    fp = np.asarray(fp_um_pp, dtype=complex)
    if xp.size == 0:
        return np.full(x.shape, complex(math.nan, math.nan))
    re = np.interp(x, xp, fp.real, left=math.nan, right=math.nan)
    im = np.interp(x, xp, fp.imag, left=math.nan, right=math.nan)
    return re + 1j * im


def speed_grid_rpm(low_rpm: float, high_rpm: float, *, step_rpm: float = GRID_STEP_RPM) -> NDArray[np.float64]:
    """Multiples of ``step_rpm`` from ``floor(low/step)`` to ``ceil(high/step)`` steps, rpm."""
    if not (math.isfinite(step_rpm) and step_rpm > 0):
        raise DataFormatError(f"grid step must be a positive number of rpm, got {step_rpm!r}")
    if not (math.isfinite(low_rpm) and math.isfinite(high_rpm)) or high_rpm < low_rpm:
        return np.empty(0)
    first, last = math.floor(low_rpm / step_rpm), math.ceil(high_rpm / step_rpm)
    return step_rpm * np.arange(first, last + 1, dtype=float)


def _ci(interval: object, attr: str) -> float:
    return math.nan if interval is None else float(getattr(interval, attr))


def _critical_print(c: Critical) -> CriticalPrint:
    peaks = [d.peak_amplitude_um_pp for d in c.detail if math.isfinite(d.peak_amplitude_um_pp)]
    return CriticalPrint(
        segment=c.segment,
        direction=c.direction,
        order=c.order,
        speed_rpm=float(c.speed_rpm),
        natural_speed_rpm=float(c.natural_speed_rpm),
        natural_speed_ci95_low_rpm=_ci(c.natural_speed_ci95_rpm, "low"),
        natural_speed_ci95_high_rpm=_ci(c.natural_speed_ci95_rpm, "high"),
        damping_ratio=float(c.damping_ratio),
        damping_ratio_ci95_low=_ci(c.damping_ratio_ci95, "low"),
        damping_ratio_ci95_high=_ci(c.damping_ratio_ci95, "high"),
        amplification_factor=float(c.amplification_factor),
        amplification_factor_ci95_low=_ci(c.amplification_factor_ci95, "low"),
        amplification_factor_ci95_high=_ci(c.amplification_factor_ci95, "high"),
        peak_amplitude_um_pp=max(peaks) if peaks else math.nan,
        method=c.method,
        probes=tuple(c.probes),
        flags=tuple(c.flags),
        split_lower_rpm=math.nan if c.split is None else float(c.split.lower.natural_speed_rpm),
        split_upper_rpm=math.nan if c.split is None else float(c.split.upper.natural_speed_rpm),
    )


def _grid_curves(ident: Identification, grid: NDArray[np.float64]) -> list[GridCurve]:
    cond = ident.conditioned
    kept = [c for c in cond.curves if c.order in FINGERPRINT_ORDERS]
    out = [
        GridCurve(c.probe, "probe", c.order, c.segment, grid, interp_complex(grid, c.speed_rpm, c.response_um_pp))
        for c in kept
    ]
    by_key: dict[tuple[str, int, int], GridCurve] = {(g.name, g.order, g.segment): g for g in out}
    for pair in probe_pairs(cond.metadata):
        for order, segment in sorted({(c.order, c.segment) for c in kept}):
            a = by_key.get((pair.first.name, order, segment))
            b = by_key.get((pair.second.name, order, segment))
            if a is None or b is None:
                continue
            both = np.isfinite(a.response_um_pp) & np.isfinite(b.response_um_pp)
            major = np.full(grid.shape, complex(math.nan, math.nan))
            if both.any():
                orb = orbit(
                    grid[both], a.response_um_pp[both], b.response_um_pp[both],
                    first_angle_deg=float(pair.first.angle_deg),  # type: ignore[arg-type]
                    second_angle_deg=float(pair.second.angle_deg),  # type: ignore[arg-type]
                    rotation=cond.metadata.rotation,
                )
                major[both] = major_axis_response(orb)
            out.append(GridCurve(pair.plane, "major_axis", order, segment, grid, major))
    return out


def _running_speed(curves: tuple[Curve, ...], mcs_rpm: float | None) -> list[RunningSpeedPrint]:
    rows = []
    for c in curves:
        if c.order != 1 or c.speed_rpm.size == 0:
            continue
        if mcs_rpm is not None:
            speed, basis = float(mcs_rpm), "max_continuous"
        else:
            speed, basis = float(c.speed_rpm[-1]), "top_speed"
        value = complex(interp_complex([speed], c.speed_rpm, c.response_um_pp)[0])
        rows.append(RunningSpeedPrint(c.probe, c.segment, speed, basis, value))  # type: ignore[arg-type]
    return rows


def _verdicts(check: CheckResult) -> list[VerdictPrint]:
    rows = [
        VerdictPrint("margin", v.segment, f"{v.speed_rpm:.0f} rpm", float(v.margin_percent),
                     float(v.required_margin_percent), v.status, v.rule.label)
        for v in check.margins
    ]
    rows += [
        VerdictPrint("vibration", v.segment, v.probe, float(v.amplitude_um_pp), float(v.limit_um_pp),
                     v.status, "" if v.rule is None else v.rule.label)
        for v in check.vibration
    ]
    return rows


def _check_tags(tags: Mapping[str, str]) -> tuple[tuple[str, str], ...]:
    for key, value in tags.items():
        if not isinstance(key, str) or not _TAG_KEY.match(key):
            raise DataFormatError(
                f"tag key {key!r} is not valid: use a letter then letters, digits, '_', '.', '-' (64 at most)"
            )
        if not isinstance(value, str) or "\n" in value or len(value) > 256:
            raise DataFormatError(f"tag {key}: value must be one line of text (256 characters at most)")
    return tuple(sorted(tags.items()))


def _start_time(tags: Mapping[str, str]) -> str | None:
    text = tags.get("start_time")
    if text is None:
        return None
    try:
        return datetime.fromisoformat(text).isoformat()
    except ValueError:
        raise DataFormatError(
            f"tag start_time={text!r} is not an ISO 8601 date-time; write e.g. 2024-05-17T08:30:00"
        ) from None


# ----------------------------------------------------------------------------- the function
def fingerprint(
    identification: Identification,
    *,
    check: CheckResult | None = None,
    tags: Mapping[str, str] | None = None,
    grid_step_rpm: float = GRID_STEP_RPM,
) -> Fingerprint:
    """The fingerprint of one identified run.

    Parameters
    ----------
    identification
        From :func:`runup.identify`.
    check
        Verdicts of a rule set (:func:`runup.criteria.judge`), or ``None``.
    tags
        Condition tags, e.g. ``{"start": "cold", "oil_temp_c": "48"}``; the tag
        ``start_time`` (ISO 8601) gives the run's start time.
    grid_step_rpm
        Spacing of the standard speed grid, rpm (default 50).

    Returns
    -------
    Fingerprint

    Notes
    -----
    The grid spans the multiples of ``grid_step_rpm`` that cover every order-1 and order-2
    curve of the run; each curve is ``nan`` outside its own measured range.  Running speed
    is the maximum continuous speed of the metadata, else each curve's top speed.
    """
    tag_map = dict(tags or {})
    tag_pairs = _check_tags(tag_map)
    cond = identification.conditioned
    meta = cond.metadata
    kept = [c for c in cond.curves if c.order in FINGERPRINT_ORDERS and c.speed_rpm.size]
    low = min((float(c.speed_rpm[0]) for c in kept), default=math.nan)
    high = max((float(c.speed_rpm[-1]) for c in kept), default=math.nan)
    grid = speed_grid_rpm(low, high, step_rpm=grid_step_rpm)
    direction = meta.direction or (cond.segments[0].direction if cond.segments else None)
    return Fingerprint(
        machine_id=meta.machine_id,
        run_id=meta.run_id,
        start_time=_start_time(tag_map),
        direction=direction,
        rotation=meta.rotation,
        tags=tag_pairs,
        segments=tuple(
            SegmentPrint(s.index, s.direction, float(s.start_rpm), float(s.end_rpm),
                         math.nan if s.sweep_rate_rpm_per_s is None else float(s.sweep_rate_rpm_per_s))
            for s in cond.segments
        ),
        grid_step_rpm=float(grid_step_rpm),
        curves=tuple(_grid_curves(identification, grid)),
        criticals=tuple(_critical_print(c) for c in identification.criticals),
        slow_roll=tuple(
            SlowRollPrint(c.probe, c.order, c.segment, complex(c.slow_roll.vector_um_pp),
                          float(c.slow_roll.low_rpm), float(c.slow_roll.high_rpm))
            for c in cond.curves
            if c.slow_roll is not None
        ),
        running_speed=tuple(_running_speed(cond.curves, meta.operating.max_continuous_rpm)),
        rule_set=None if check is None else check.rule_set,
        verdicts=() if check is None else tuple(_verdicts(check)),
        sources=tuple(meta.sources),
        tool_version=__version__,
    )
