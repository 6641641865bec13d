"""Conditioning: from an imported :class:`~runup.run.Run` to analysis-ready curves.

:func:`condition` applies, in this order and recording every change as a
:class:`~runup.run.Correction`:

1. drop rows with a missing speed, amplitude or phase;
2. split the record into monotonic speed segments with hysteresis (:func:`split_segments`);
3. per probe, order and segment: sort by speed and merge equal speeds (complex mean);
4. remove isolated spikes (:func:`find_spikes`, a Hampel-type rule on complex vectors);
5. (phase unwrapping follows speed order; :class:`~runup.run.Curve` unwraps on access);
6. subtract the slow-roll vector (explicit window or :func:`auto_slow_roll_window`);
7. drop curves left with fewer than ``min_points`` points.

The rules, their parameters and their sources are described in ``docs/conditioning.md``.
"""

from __future__ import annotations

import math
import os
from collections.abc import Iterator
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from ..errors import DataFormatError
from ..run import ConditionedRun, Correction, Curve, Run, Segment
from ..units import to_response
from .despike import _all_finite, _spikes, find_spikes
from .segments import (
    _change,
    _check_tolerance,
    _segment_labels,
    default_segment_tolerance_rpm,
    split_segments,
)
from .slow_roll import SlowRollChoice, SlowRollOption, _slow_roll, auto_slow_roll_window

__all__ = [
    "condition",
    "split_segments",
    "default_segment_tolerance_rpm",
    "find_spikes",
    "auto_slow_roll_window",
    "SlowRollChoice",
]

#: Segments spanning less than this fraction of the record's speed range are dropped.
MIN_SEGMENT_SPAN_FRACTION = 0.05


def _check_options(slow_roll: object, spike_threshold: float, min_points: int) -> None:
    valid = "'auto', 'off' or a (low_rpm, high_rpm) tuple"
    if isinstance(slow_roll, str):
        if slow_roll not in ("auto", "off"):
            raise DataFormatError(f"unknown slow_roll choice {slow_roll!r}; use {valid}")
    elif isinstance(slow_roll, tuple) and len(slow_roll) == 2:
        try:
            low, high = (float(v) for v in slow_roll)
        except (TypeError, ValueError):
            low = high = math.nan
        if not (math.isfinite(low) and math.isfinite(high) and 0 <= low < high):
            raise DataFormatError(
                f"slow-roll window must satisfy 0 <= low < high (rpm), got {slow_roll!r}"
            )
    else:
        raise DataFormatError(f"slow_roll must be {valid}, got {slow_roll!r}")
    if not (math.isfinite(spike_threshold) and spike_threshold > 0):
        raise DataFormatError(f"spike_threshold must be positive, got {spike_threshold!r}")
    if isinstance(min_points, bool) or not isinstance(min_points, int) or min_points < 2:
        raise DataFormatError(f"min_points must be a whole number >= 2, got {min_points!r}")


def _rows_text(rows: NDArray[np.int64]) -> str:
    shown = ", ".join(str(r) for r in rows[:5])
    return shown + (f" and {rows.size - 5} more" if rows.size > 5 else "")


@dataclass(frozen=True)
class _Rows:
    """The sample columns conditioning works on, as aligned numpy arrays (one per row).

    ``probe`` holds integer codes into ``probe_names``, numbered in order of first
    appearance (:func:`pandas.factorize`), so that rows are grouped without comparing
    Python strings again.
    """

    speed: NDArray[np.float64]
    probe: NDArray[np.intp]
    probe_names: NDArray[np.object_]
    order: NDArray[np.int64]
    amplitude: NDArray[np.float64]
    phase: NDArray[np.float64]
    time: NDArray[np.float64]
    row: NDArray[np.int64]



def _missing(df: pd.DataFrame) -> tuple[NDArray[np.bool_] | None, list[Correction]]:
    """Rows with a missing speed, amplitude or phase (``None`` when there is none) and
    their records."""
    columns = [df[c].to_numpy() for c in ("speed_rpm", "amplitude_um_pp", "phase_lag_deg")]
    # a NaN makes a sum NaN: a record without missing values needs no mask (the usual case)
    with np.errstate(invalid="ignore", over="ignore"):  # inf - inf is NaN too: checked below
        if not any(np.isnan(np.add.reduce(v)) for v in columns):
            return None, []
    bad = np.isnan(columns[0]) | np.isnan(columns[1]) | np.isnan(columns[2])
    corrections: list[Correction] = []
    if not bad.any():  # the sum was an infinity minus an infinity, not a missing value
        return None, corrections
    for (probe, order), group in df.loc[bad].groupby(["probe", "order"], sort=False):
        rows = group["row"].to_numpy()
        corrections.append(Correction(
            "missing_dropped", str(probe), int(order), None, None, tuple(rows.tolist()),
            f"probe {probe} order {order}: {rows.size} row(s) with a missing speed, "
            f"amplitude or phase dropped (rows {_rows_text(rows)}).",
        ))
    return bad, corrections


def _valid_rows(
    df: pd.DataFrame,
    bad: NDArray[np.bool_] | None,
    numbering: tuple[NDArray[np.intp], NDArray[np.object_]] | None = None,
) -> _Rows:
    """The rows of ``df`` not flagged ``bad``, as arrays (views of ``df`` when ``bad`` is
    ``None``).

    Probes are numbered in order of first appearance (``pandas.factorize``).  With
    ``numbering`` (``(codes, names)``, row ``i`` of ``df`` naming ``names[codes[i]]``, names
    distinct) the integers are factorized instead of the names: names and integers are
    one to one, so the numbering is the same, without hashing every name.
    """
    columns = ("speed_rpm", "order", "amplitude_um_pp", "phase_lag_deg", "time_s", "row")
    keep = None if bad is None else ~bad
    speed, order, amp, phase, time, row = (
        df[c].to_numpy() if keep is None else df[c].to_numpy()[keep] for c in columns
    )
    if numbering is None:
        probe = df["probe"].to_numpy()
        codes, names = pd.factorize(probe if keep is None else probe[keep])
    else:
        all_codes, all_names = numbering
        codes, first = pd.factorize(all_codes if keep is None else all_codes[keep])
        names = all_names[first]
    return _Rows(speed, codes, names, order, amp, phase, time, row)


def _sample_ids(speed: NDArray[np.float64], time: NDArray[np.float64]) -> NDArray[np.int64]:
    """One id per sample: rows sharing a time stamp (or, without time, a speed) in a row."""
    sid = np.cumsum(_change(time if _all_finite(time) else speed))
    sid -= 1  # in place: the ids of a large record are a large array
    return sid


def _segments(
    rows: _Rows, tol: float, min_points: int, default_direction: str
) -> tuple[NDArray[np.int64], tuple[Segment, ...], list[Correction]]:
    """Per-row segment labels (-1 = dropped) and the kept segments."""
    speed, time = rows.speed, rows.time
    sid = _sample_ids(speed, time)
    n_samples = int(sid[-1]) + 1
    count = np.bincount(sid, minlength=n_samples)
    s_speed = np.bincount(sid, weights=speed, minlength=n_samples) / count
    s_time = np.bincount(sid, weights=time, minlength=n_samples) / count
    s_label, signs = _segment_labels(s_speed, tol)
    record_range = float(np.ptp(s_speed))
    # rows per segment, counted over the samples (label -1, non-finite speed: slot 0)
    rows_per_label = np.bincount(s_label + 1, weights=count, minlength=len(signs) + 1)[1:]
    new_index = np.full(len(signs), -1, dtype=np.int64)
    segments: list[Segment] = []
    corrections: list[Correction] = []
    for k, sign in enumerate(signs):
        members = np.flatnonzero(s_label == k)
        sp = s_speed[members]
        direction = {1: "startup", -1: "coastdown"}.get(sign, default_direction)
        span = float(np.ptp(sp))
        if (
            _distinct_at_least(sp, min_points) < min_points
            or span < MIN_SEGMENT_SPAN_FRACTION * record_range
        ):
            n_distinct = np.unique(sp).size
            dropped_rows = rows.row[np.repeat(s_label == k, count)]
            corrections.append(Correction(
                "segment_dropped", None, None, None, None, tuple(dropped_rows.tolist()),
                f"{direction} segment {sp[0]:.0f}-{sp[-1]:.0f} rpm dropped: {n_distinct} "
                f"distinct speed(s), span {span:.0f} rpm (minimum {min_points} speeds and "
                f"{MIN_SEGMENT_SPAN_FRACTION:.0%} of the {record_range:.0f} rpm range).",
            ))
            continue
        new_index[k] = len(segments)
        t = s_time[members]
        ok = np.isfinite(t)
        rate = None
        if ok.sum() >= 2:
            dt, ds = np.diff(t[ok]), np.diff(sp[ok])
            pos = dt > 0
            if pos.any():
                rate = float(np.median(np.abs(ds[pos] / dt[pos])))
        segments.append(Segment(
            len(segments), direction, float(sp[0]), float(sp[-1]), int(rows_per_label[k]), rate,
        ))
    # rows of one sample are consecutive (sid counts up), so repeating each sample's label
    # by its row count labels the rows, as new_index[s_label][sid] would
    return np.repeat(new_index[s_label], count), tuple(segments), corrections


def _distinct_at_least(values: NDArray[np.float64], n: int) -> int:
    """The number of distinct ``values`` if it is below ``n``, else some number >= ``n``.

    The first ``4 n`` values usually hold ``n`` distinct ones already, which spares the
    sort of the whole array; otherwise all values are counted.
    """
    head = np.unique(values[: 4 * n]).size
    return head if head >= n else np.unique(values).size


def _curve_rows(
    key: NDArray[np.int64], speed: NDArray[np.float64]
) -> Iterator[tuple[int, NDArray[np.intp]]]:
    """The rows of each curve: ``(key, rows sorted by speed)``, keys ascending; rows of a
    negative key belong to no curve.

    The same grouping and order as ``numpy.lexsort((speed, key))``: by key, then speed,
    then position.  lexsort of a few hundred thousand rows is slow; here the key takes few
    values (one per curve), so a stable sort on the key (numpy sorts 16-bit integers by
    radix) followed by a stable sort of each curve's speeds gives the same permutation
    faster.  Stable sorts keep rows of equal key and speed in position order, as lexsort
    does.  The speed sort is skipped where the speeds already ascend, and reused where a
    curve's speeds equal an earlier curve's (probes sampled together share their speeds).
    """
    if key.size == 0:
        return
    small = int(key.min()) >= -1 and int(key.max()) < np.iinfo(np.int16).max
    if not small:
        order = np.lexsort((speed, key))
        k_sorted = key[order]
        bounds = np.flatnonzero(k_sorted[1:] != k_sorted[:-1]) + 1
        for a, b in zip(np.append(0, bounds), np.append(bounds, key.size), strict=True):
            if k_sorted[a] >= 0:
                yield int(k_sorted[a]), order[a:b]
        return
    key16 = key.astype(np.int16)
    order = np.argsort(key16, kind="stable")
    sorted_keys = key16[order]
    keys = np.arange(int(sorted_keys[-1]) + 1, dtype=np.int16)
    starts = np.searchsorted(sorted_keys, keys, side="left")
    ends = np.searchsorted(sorted_keys, keys, side="right")
    seen: dict[tuple[int, float, float], tuple[NDArray[np.float64], NDArray[np.intp]]] = {}
    for k, a, b in zip(keys.tolist(), starts.tolist(), ends.tolist(), strict=True):
        if a < b:
            part = order[a:b]
            yield k, part[_stable_speed_order(speed[part], seen)]


def _stable_speed_order(
    sp: NDArray[np.float64],
    seen: dict[tuple[int, float, float], tuple[NDArray[np.float64], NDArray[np.intp]]],
) -> NDArray[np.intp] | slice:
    """``numpy.argsort(sp, kind="stable")``, or a slice doing the same when ``sp`` already
    ascends; ``seen`` remembers the sorts done, and an equal array reuses its own (the
    stable order depends on the values alone)."""
    if np.all(sp[1:] >= sp[:-1]):  # false at a NaN too: then sorted, NaN last as lexsort
        return slice(None)
    tag = (sp.size, float(sp[0]), float(sp[-1]))
    if tag in seen and np.array_equal(seen[tag][0], sp):
        return seen[tag][1]
    perm = np.argsort(sp, kind="stable")
    seen[tag] = (sp, perm)
    return perm


def _points(
    speed: NDArray[np.float64], x: NDArray[np.complex128], time: NDArray[np.float64]
) -> tuple[NDArray[np.float64], NDArray[np.complex128], NDArray[np.float64], NDArray[np.int64]]:
    """Merge the rows of equal speed of one curve (sorted by speed): the speeds, mean
    vectors and mean times of its points and the rows in each.

    When no two rows share a speed every mean is its one row (``v / 1 == v`` exactly in
    IEEE arithmetic), so the arrays are returned as they are: the caller passes its own.
    """
    new_point = np.ones(speed.size, dtype=bool)
    new_point[1:] = speed[1:] != speed[:-1]
    starts = np.flatnonzero(new_point)
    counts = np.diff(np.append(starts, speed.size))
    if starts.size == speed.size:
        return speed, x, time, counts
    return speed[starts], np.add.reduceat(x, starts) / counts, np.add.reduceat(time, starts) / counts, counts


@dataclass(frozen=True)
class _CurveOptions:
    """The options of :func:`condition` that act on each curve."""

    slow_roll: SlowRollOption
    despike: bool
    spike_threshold: float
    min_points: int


@dataclass(frozen=True)
class _CurveJob:
    """One curve to condition: probe, order, segment and its rows (sorted by speed)."""

    probe: str
    order: int
    segment: Segment
    rows: NDArray[np.intp]


#: Curves are conditioned in parallel threads when there are several and together they hold
#: at least this many rows.  The work per curve (complex exponentials, moving medians,
#: medians) runs mostly in numpy with the GIL released, so on a multi-core machine threads
#: shorten a large record's conditioning; below this size thread start-up outweighs it.
PARALLEL_MIN_ROWS = 50_000


def _thread_budget() -> int:
    """Threads this process may use: the CPUs it may run on, capped by ``OMP_NUM_THREADS``
    when that is set (the convention of the math libraries; :mod:`runup.batch` sets it to 1
    in its workers, whose processes are the parallelism there)."""
    try:
        cpus = len(os.sched_getaffinity(0))
    except AttributeError:  # not on every platform
        cpus = os.cpu_count() or 1
    cap = os.environ.get("OMP_NUM_THREADS", "")
    return max(1, min(cpus, int(cap))) if cap.isdigit() and int(cap) > 0 else max(1, cpus)


def _map_curves(
    rows: _Rows, jobs: list[_CurveJob], options: _CurveOptions
) -> Iterator[tuple[list[Correction], list[str], Curve | None]]:
    """:func:`_condition_curve` of each job, in the order of ``jobs``.

    Each curve is computed independently of the others, so running them in threads gives
    exactly the results of running them one after the other; ``map`` returns them in job
    order and raises the first error in that order.
    """
    workers = min(len(jobs), _thread_budget())
    if workers < 2 or sum(job.rows.size for job in jobs) < PARALLEL_MIN_ROWS:
        return (_condition_curve(rows, job, options) for job in jobs)
    with ThreadPoolExecutor(max_workers=workers) as pool:
        return iter(list(pool.map(lambda job: _condition_curve(rows, job, options), jobs)))


def _condition_curve(
    rows: _Rows, job: _CurveJob, options: _CurveOptions
) -> tuple[list[Correction], list[str], Curve | None]:
    """Steps 3 to 7 of :func:`condition` for one curve: its correction records, its
    warnings and the curve (``None`` when dropped)."""
    probe, order_n, seg, idx = job.probe, job.order, job.segment, job.rows
    where = f"probe {probe} order {order_n} {seg.label}"
    corrections: list[Correction] = []
    sp, cx, ct, cnt = _points(
        rows.speed[idx], to_response(rows.amplitude[idx], rows.phase[idx]), rows.time[idx]
    )
    c_rows = rows.row[idx]
    if np.any(cnt > 1):
        merged = c_rows[np.repeat(cnt > 1, cnt)]
        corrections.append(Correction(
            "duplicates_merged", probe, order_n, seg.index, None, tuple(merged.tolist()),
            f"{where}: {int((cnt - 1).sum())} duplicate-speed row(s) merged into "
            f"{int((cnt > 1).sum())} point(s) as complex vector means "
            f"(rows {_rows_text(merged)}).",
        ))
    noise = None  # the curve's noise sigma, when despiking found it for the same points
    if options.despike and sp.size >= 3:
        spike, score, noise = _spikes(sp, cx, options.spike_threshold)
        offsets = np.append(0, np.cumsum(cnt))
        for i in np.flatnonzero(spike):
            point_rows = c_rows[offsets[i] : offsets[i + 1]]
            corrections.append(Correction(
                "spike_removed", probe, order_n, seg.index, float(sp[i]),
                tuple(point_rows.tolist()),
                f"{where}: spike at {sp[i]:.1f} rpm removed, {score[i]:.1f} noise "
                f"sigmas from its neighbours (rows {_rows_text(point_rows)}).",
            ))
        if spike.any():
            sp, cx, ct, cnt = sp[~spike], cx[~spike], ct[~spike], cnt[~spike]
            noise = None
    if sp.size < options.min_points:
        corrections.append(Correction(
            "too_few_points", probe, order_n, seg.index, None, tuple(c_rows.tolist()),
            f"{where}: curve dropped, {sp.size} point(s) left (minimum {options.min_points}).",
        ))
        return corrections, [], None
    sr, warnings = _slow_roll(sp, cx, options.slow_roll, where, noise)
    response = cx if sr is None else cx - sr.vector_um_pp
    # each point keeps how many rows it averages (duplicate speeds merged), so that noise
    # scales downstream stay per sample
    return corrections, warnings, Curve(
        probe, order_n, seg.index, seg.direction, sp, response, cx, ct, sr, cnt
    )


def _no_curve_records(
    df: pd.DataFrame, rows: _Rows, orders: NDArray[np.int64], keep: NDArray[np.bool_],
    corrections: list[Correction], curves: list[Curve],
) -> list[Correction]:
    """``too_few_points`` records for the probe/orders of ``df`` left with neither a curve
    nor such a record, in order of first appearance."""
    accounted = {(c.probe, c.order) for c in curves}
    accounted |= {(c.probe, c.order) for c in corrections if c.kind == "too_few_points"}
    if not _may_lack_record(rows, orders, keep, corrections, accounted):
        return []
    out = []
    for probe, order_n in df[["probe", "order"]].drop_duplicates().itertuples(index=False):
        pair = (str(probe), int(order_n))
        if pair not in accounted:
            out.append(Correction(
                "too_few_points", pair[0], pair[1], None, None, (),
                f"probe {pair[0]} order {pair[1]}: no curve kept, all its rows were missing "
                "or in dropped segments.",
            ))
    return out


def _may_lack_record(
    rows: _Rows, orders: NDArray[np.int64], keep: NDArray[np.bool_],
    corrections: list[Correction], accounted: set[tuple[str, int]],
) -> bool:
    """Whether some probe/order might have neither a curve nor a ``too_few_points`` record.

    Every probe/order with a row in a kept segment gets one of the two, so only those with
    missing rows (their ``missing_dropped`` records) or rows in dropped segments can lack
    both; this spares the scan of every row of the record in the usual case.
    """
    if (rows.probe < 0).any():  # a missing probe name (user-built Run): take the long way
        return True
    pairs = {(c.probe, c.order) for c in corrections if c.kind == "missing_dropped"}
    if not keep.all():
        key = rows.probe[~keep] * orders.size + np.searchsorted(orders, rows.order[~keep])
        for k in np.unique(key):
            pairs.add((str(rows.probe_names[k // orders.size]), int(orders[k % orders.size])))
    return not pairs <= accounted


def condition(
    run: Run,
    *,
    slow_roll: SlowRollOption = "auto",
    despike: bool = True,
    spike_threshold: float = 6.0,
    min_points: int = 5,
    segment_tolerance_rpm: float | None = None,
) -> ConditionedRun:
    """Condition a run-up or coastdown record into per-segment curves.

    Parameters
    ----------
    run
        The imported record.
    slow_roll
        ``"auto"`` (window per curve, :func:`auto_slow_roll_window`), ``"off"`` (no
        compensation) or an explicit ``(low_rpm, high_rpm)`` window, inclusive.
    despike
        Remove isolated spikes (:func:`find_spikes`).
    spike_threshold
        Spike threshold in robust noise sigmas.
    min_points
        Minimum distinct speeds of a segment and of a curve.
    segment_tolerance_rpm
        Reversal hysteresis of :func:`split_segments`; default
        :func:`default_segment_tolerance_rpm` of the record.

    Returns
    -------
    ConditionedRun
        Curves sorted by ascending speed (coastdowns reversed), compensated response =
        raw response minus the slow-roll vector (vector subtraction, common practice).

    Raises
    ------
    DataFormatError
        For invalid options, a record without any valid row, or an explicit slow-roll
        window holding fewer than 2 points of a curve.

    Notes
    -----
    The curves of a large record (:data:`PARALLEL_MIN_ROWS` rows or more) are conditioned
    in parallel threads; each curve is computed on its own, so the result is the same.
    """
    _check_options(slow_roll, spike_threshold, min_points)
    df = run.samples
    numbering = run._probe_numbering()  # the importer's probe codes, when still valid
    time_all = df["time_s"].to_numpy()
    if _all_finite(time_all) and np.any(time_all[1:] < time_all[:-1]):
        by_time = np.argsort(time_all, kind="stable")
        df = df.iloc[by_time].reset_index(drop=True)
        if numbering is not None:
            numbering = (numbering[0][by_time], numbering[1])
    bad, corrections = _missing(df)
    valid = _valid_rows(df, bad, numbering)
    if valid.speed.size == 0:
        raise DataFormatError("no row has a speed, amplitude and phase; nothing to condition")
    tol = _check_tolerance(valid.speed, segment_tolerance_rpm)
    default_direction = run.metadata.direction or "startup"
    label, segments, seg_corr = _segments(valid, tol, min_points, default_direction)
    corrections += seg_corr

    probe_code, probe_names = valid.probe, valid.probe_names
    if valid.order.min() == valid.order.max():  # one order (the usual 1X record)
        orders, order_idx = valid.order[:1], 0
    else:
        orders = np.sort(pd.unique(valid.order))
        order_idx = np.searchsorted(orders, valid.order)
    n_seg = max(len(segments), 1)
    # key = (probe_code * orders.size + order_idx) * n_seg + label, built in place
    key = probe_code * orders.size
    key += order_idx
    key *= n_seg
    key += label
    keep = label >= 0
    if not keep.all():
        key[~keep] = -1  # rows of dropped segments belong to no curve

    options = _CurveOptions(slow_roll, despike, spike_threshold, min_points)
    jobs = [
        _CurveJob(
            str(probe_names[k // n_seg // orders.size]),
            int(orders[(k // n_seg) % orders.size]),
            segments[k % n_seg],
            idx,
        )
        for k, idx in _curve_rows(key, valid.speed)
    ]
    curves: list[Curve] = []
    warnings: list[str] = []
    for curve_corrections, curve_warnings, curve in _map_curves(valid, jobs, options):
        corrections += curve_corrections
        warnings += curve_warnings
        if curve is not None:
            curves.append(curve)

    corrections += _no_curve_records(df, valid, orders, keep, corrections, curves)
    if not curves:
        warnings.append("No curve kept: every probe and segment had too few valid points.")
    settings = (
        ("slow_roll", str(slow_roll)),
        ("despike", str(despike)),
        ("spike_threshold", str(spike_threshold)),
        ("min_points", str(min_points)),
        ("segment_tolerance_rpm", str(segment_tolerance_rpm)),
        ("segment_tolerance_rpm_used", f"{tol:.6g}"),
    )
    return ConditionedRun(
        run.metadata, segments, tuple(curves), tuple(corrections), tuple(warnings), settings
    )
