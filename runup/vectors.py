"""Synchronous (1X, 2X, ...) vectors from raw waveforms: a :class:`~runup.run.Run`.

Each revolution between two validated reference edges (:mod:`runup.pulses`) is
resampled onto a uniform grid of shaft angle and transformed by a DFT; bin ``n`` of that
DFT is the order-``n`` vector referenced to the pulse, in the phase convention of
:mod:`runup.units`.  The probe signals are read block by block
(:func:`runup.io.waveform.iter_blocks`); a partial revolution at the end of a block is
carried over to the next, so a record never has to fit in memory.

Method (details and equations in ``docs/waveforms.md``):

* the time of shaft angle ``2 pi (j + u)``, ``0 <= u < 1``, in revolution ``j`` is the
  cubic Lagrange interpolant through the edges ``j-1 .. j+2`` (quadratic or linear
  at the ends of a stretch), which follows the speed change within the revolution;
* the signal at those times is interpolated linearly between samples;
* ``c_n = (2/M) sum_m x_m exp(-j n 2 pi m / M)`` is the order-``n`` vector (0-peak);
  amplitude ``2 |c_n|`` um pp, phase lag ``-arg c_n``.

Resampling in the angle domain before the DFT is computed order tracking: K. R. Fyfe and
E. D. S. Munck, "Analysis of computed order tracking", *Mechanical Systems and Signal
Processing* 11 (1997) 187-205.  The DFT over one revolution is common practice.
"""

from __future__ import annotations

import math
import os
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Literal

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from .errors import DataFormatError
from .io.waveform import (
    WaveformBlock,
    WaveformSpec,
    file_sha256,
    find_waveform_spec,
    iter_blocks,
    read_waveform_spec,
)
from .pulses import (
    DEFAULT_RULES,
    PulseRules,
    PulseTrain,
    detect_edges,
    level_sample,
    reference_levels,
    validate_edges,
)
from .run import SAMPLE_COLUMNS, Run, RunMetadata, SourceFile

__all__ = ["PhaseReference", "SynchronousVectors", "synchronous_vectors", "waveform_vectors"]

PhaseReference = Literal["reference_sensor", "probe"]
#: Fewest samples per revolution, per order, for an order to be measured.
MIN_SAMPLES_PER_CYCLE = 4

#: Interpolation nodes (edge offsets from the revolution's start edge) by method.
_NODES = {
    "cubic": (-1, 0, 1, 2),
    "quadratic_forward": (0, 1, 2),
    "quadratic_backward": (-1, 0, 1),
    "linear": (0, 1),
}


@dataclass(frozen=True)
class SynchronousVectors:
    """Vectors from a waveform record, with what was done to get them.

    Attributes
    ----------
    run
        Canonical run (``speed_rpm``, ``probe``, ``order``, ``amplitude_um_pp``,
        ``phase_lag_deg``, ``time_s``, ``row``), one row per vector, probe and order;
        ``time_s`` is the middle of the revolution(s), ``speed_rpm`` the mean speed over
        them, ``row`` the data row of their first sample.
    direct
        One row per vector and probe: ``time_s``, ``speed_rpm``, ``speed_uncertainty_rpm``,
        ``probe``, ``direct_um_pp`` (overall peak-to-peak of the unfiltered signal over the
        revolution(s), for information), ``row``.
    pulses
        The validated reference pulses (edges, speeds, flags).
    settings
        Options used, ``(name, value)`` pairs.
    notes
        Sentences for the user (revolutions skipped, and why).
    """

    run: Run
    direct: pd.DataFrame
    pulses: PulseTrain
    settings: tuple[tuple[str, str], ...]
    notes: tuple[str, ...] = ()


def _weights(nodes: Sequence[int], u: NDArray[np.float64]) -> NDArray[np.float64]:
    """Lagrange weights, shape ``(len(u), len(nodes))``, for evaluating at ``u``."""
    w = np.ones((u.size, len(nodes)))
    for i, a in enumerate(nodes):
        for b in nodes:
            if b != a:
                w[:, i] *= (u - b) / (a - b)
    return w


def _refine(
    node_times: NDArray[np.float64], nodes: NDArray[np.float64], tau: NDArray[np.float64]
) -> NDArray[np.float64]:
    """Times of the angle grid, refined on the shaft angle as a polynomial of time.

    ``tau`` (R, M) comes from interpolating time against angle; it is corrected by Newton
    steps on ``theta(t)``, the polynomial through ``(node_times, nodes)`` (angle in
    revolutions), which is exact for constant angular acceleration (quadratic) and for
    a linearly changing one (cubic), so that the grid times follow ``theta(t) = j + u``.
    """
    t0 = node_times[:, [int(np.flatnonzero(nodes == 0)[0])]]
    period = node_times[:, [int(np.flatnonzero(nodes == 1)[0])]] - t0
    s_nodes = (node_times - t0) / period  # (R, k), node 0 at s = 0, node 1 at s = 1
    k = nodes.size
    vander = s_nodes[:, :, None] ** np.arange(k)[None, None, :]
    coef = np.linalg.solve(vander, np.broadcast_to(nodes, s_nodes.shape)[..., None])[..., 0]
    s = (tau - t0) / period
    target = np.arange(tau.shape[1]) / tau.shape[1]
    for _ in range(3):  # Newton; from the interpolated start two steps reach round-off
        value = np.zeros_like(s)
        slope = np.zeros_like(s)
        for p in range(k - 1, -1, -1):  # Horner for the value and its derivative
            slope = slope * s + value
            value = value * s + coef[:, [p]]
        s = s - (value - target) / slope
    return t0 + s * period


def _methods(valid: NDArray[np.bool_]) -> NDArray[np.int64]:
    """Per revolution, the index in ``_NODES`` of the interpolation that its neighbours allow."""
    n = valid.size
    before = np.concatenate(([False], valid[:-1]))
    after = np.concatenate((valid[1:], [False]))
    out = np.full(n, 3)  # linear
    out[after] = 1
    out[before] = 2
    out[before & after] = 0
    return out


def synchronous_vectors(
    blocks: Iterable[WaveformBlock],
    *,
    probes: Sequence[str],
    pulses: PulseTrain,
    metadata: RunMetadata,
    orders: Sequence[int] = (1, 2),
    points_per_rev: int = 128,
    revolutions_per_vector: int = 1,
    phase_reference: PhaseReference = "reference_sensor",
    angle_from_reference_deg: Mapping[str, float | None] | None = None,
) -> SynchronousVectors:
    """Order vectors per revolution (or per block of revolutions) from probe signals.

    Parameters
    ----------
    blocks
        Probe signals in micrometres, block by block (``signals_um`` rows in the order
        of ``probes``), covering the edges of ``pulses``.
    probes
        Probe names, one per signal row.
    pulses
        Validated reference edges (:func:`runup.pulses.validate_edges`).
    metadata
        Metadata of the resulting run.
    orders
        Harmonic orders to compute (whole numbers >= 1, below ``points_per_rev / 2``).
    points_per_rev
        Points ``M`` of the uniform shaft-angle grid per revolution.
    revolutions_per_vector
        Consecutive valid revolutions averaged into one vector (complex mean, equal to
        the DFT over the concatenated revolutions); incomplete groups are dropped.
    phase_reference
        ``"reference_sensor"`` (default): the lag is measured from the reference pulse
        and includes the probe's angle from the reference sensor, as is common practice.
        ``"probe"``: the lag is measured from the instant the reference mark passes the
        probe, i.e. order ``n`` lag minus ``n * angle_from_reference_deg``.
    angle_from_reference_deg
        Per probe, shaft angle from the reference sensor to the probe in the direction of
        rotation, degrees; required for every probe when ``phase_reference="probe"``.

    Returns
    -------
    SynchronousVectors

    Raises
    ------
    DataFormatError
        Bad options; too few samples per revolution for the orders asked; the signals
        end before the last edge.
    """
    order_arr = _check_options(orders, points_per_rev, revolutions_per_vector, phase_reference)
    offsets = _offsets(probes, phase_reference, angle_from_reference_deg)
    edges = pulses.edge_times_s
    n_rev = pulses.n_revolutions
    valid = pulses.revolution_valid
    u = np.arange(points_per_rev) / points_per_rev
    weights = [_weights(nodes, u) for nodes in _NODES.values()]
    method = _methods(valid)
    dft = np.exp(-1j * np.outer(u * 2.0 * np.pi, order_arr)) * (2.0 / points_per_rev)
    n_ch = len(probes)
    vec = np.full((n_ch, n_rev, order_arr.size), np.nan + 0j)
    top = np.full((n_ch, n_rev), np.nan)
    bottom = np.full((n_ch, n_rev), np.nan)
    first_row = np.zeros(n_rev, dtype=np.int64)
    next_rev = 0
    carry: WaveformBlock | None = None
    for block in blocks:
        if block.signals_um.shape[0] != n_ch:
            raise DataFormatError(
                f"blocks hold {block.signals_um.shape[0]} signals but {n_ch} probes are named"
            )
        buf = block if carry is None else _join(carry, block)
        # a revolution is done when two samples beyond its end edge are in (cubic stencil)
        done = int(np.searchsorted(edges, buf.time_s[-3], side="right")) - 1 if buf.time_s.size > 2 else 0
        if done > next_rev:
            _process(buf, np.arange(next_rev, done), edges, valid, method, weights, dft, vec, top, bottom, first_row, order_arr)
            next_rev = done
        if next_rev >= n_rev:
            carry = None
            break
        # carry the pending partial revolution, with two samples before its start edge
        k = max(int(np.searchsorted(buf.time_s, edges[next_rev], side="left")) - 2, 0)
        carry = WaveformBlock(buf.first_row + k, buf.time_s[k:], buf.reference[:0], buf.signals_um[:, k:])
    if carry is not None and next_rev < n_rev:  # end of record: the last revolutions
        done = int(np.searchsorted(edges, carry.time_s[-1], side="right")) - 1
        if done > next_rev:
            _process(carry, np.arange(next_rev, done), edges, valid, method, weights, dft, vec, top, bottom, first_row, order_arr)
            next_rev = done
    if next_rev < n_rev:
        raise DataFormatError(
            f"the probe signals end before the last reference edge ({edges[-1]:.6g} s); "
            "give the whole record"
        )
    return _assemble(
        vec, top, bottom, first_row, pulses, probes, order_arr, offsets, revolutions_per_vector,
        metadata,
        settings=(
            ("orders", ",".join(str(o) for o in order_arr)),
            ("points_per_rev", str(points_per_rev)),
            ("revolutions_per_vector", str(revolutions_per_vector)),
            ("phase_reference", phase_reference),
        ),
    )


def _check_options(
    orders: Sequence[int], points_per_rev: int, revolutions_per_vector: int, phase_reference: str
) -> NDArray[np.int64]:
    if phase_reference not in ("reference_sensor", "probe"):
        raise DataFormatError(
            f"phase_reference must be 'reference_sensor' or 'probe', found {phase_reference!r}"
        )
    if not isinstance(points_per_rev, int) or points_per_rev < 8:
        raise DataFormatError(f"points_per_rev must be a whole number >= 8, found {points_per_rev!r}")
    if not isinstance(revolutions_per_vector, int) or revolutions_per_vector < 1:
        raise DataFormatError(
            f"revolutions_per_vector must be a whole number >= 1, found {revolutions_per_vector!r}"
        )
    arr = np.asarray(orders)
    if arr.size == 0 or arr.dtype.kind not in "iu" or np.any(arr < 1) or np.unique(arr).size != arr.size:
        raise DataFormatError(f"orders must be distinct whole numbers >= 1, found {list(orders)!r}")
    if arr.max() >= points_per_rev / 2:
        raise DataFormatError(
            f"order {int(arr.max())} needs more than {2 * int(arr.max())} points per revolution; "
            f"raise points_per_rev (now {points_per_rev})"
        )
    return arr.astype(np.int64)


def _offsets(
    probes: Sequence[str], reference: str, angles: Mapping[str, float | None] | None
) -> NDArray[np.float64]:
    if reference == "reference_sensor":
        return np.zeros(len(probes))
    angles = angles or {}
    missing = [p for p in probes if angles.get(p) is None]
    if missing:
        raise DataFormatError(
            f"phase_reference='probe' needs angle_from_reference_deg for every probe; missing "
            f"for {', '.join(missing)}: add it to [[waveform.channels]] or use 'reference_sensor'"
        )
    return np.array([float(angles[p]) for p in probes])  # type: ignore[arg-type]


def _join(a: WaveformBlock, b: WaveformBlock) -> WaveformBlock:
    return WaveformBlock(
        a.first_row,
        np.concatenate((a.time_s, b.time_s)),
        b.reference[:0],
        np.concatenate((a.signals_um, b.signals_um), axis=1),
    )


def _process(
    buf: WaveformBlock,
    js: NDArray[np.int64],
    edges: NDArray[np.float64],
    valid: NDArray[np.bool_],
    method: NDArray[np.int64],
    weights: list[NDArray[np.float64]],
    dft: NDArray[np.complex128],
    vec: NDArray[np.complex128],
    top: NDArray[np.float64],
    bottom: NDArray[np.float64],
    first_row: NDArray[np.int64],
    orders: NDArray[np.int64],
) -> None:
    """Vectors and direct peak-to-peak of revolutions ``js`` (all within ``buf``)."""
    t, x = buf.time_s, buf.signals_um
    starts = np.searchsorted(t, edges[js[0] : js[-1] + 2], side="left")
    first_row[js] = buf.first_row + starts[:-1]
    counts = np.diff(starts)
    ok = valid[js]
    if np.any(counts[ok] < MIN_SAMPLES_PER_CYCLE * orders.max()):
        bad = js[ok][np.argmin(counts[ok])]
        raise DataFormatError(
            f"the revolution starting at {edges[bad]:.6g} s has {int(counts[ok].min())} "
            f"samples; order {int(orders.max())} needs at least "
            f"{MIN_SAMPLES_PER_CYCLE * int(orders.max())} per revolution: record at a higher "
            "sample rate or ask for lower orders"
        )
    seg = x[:, starts[0] : starts[-1]]
    top[:, js] = np.maximum.reduceat(seg, starts[:-1] - starts[0], axis=1)
    bottom[:, js] = np.minimum.reduceat(seg, starts[:-1] - starts[0], axis=1)
    for m, nodes in enumerate(_NODES.values()):
        sel = js[ok & (method[js] == m)]
        if sel.size == 0:
            continue
        node_times = edges[sel[:, None] + np.asarray(nodes)[None, :]]  # (R, k)
        # element-wise products and sums (no BLAS) so that results do not depend on how
        # many revolutions a block holds: chunked and whole-record runs agree bit for bit
        first_guess = (node_times[:, None, :] * weights[m][None, :, :]).sum(axis=-1)
        tau = _refine(node_times, np.asarray(nodes, dtype=float), first_guess)
        resampled = _cubic(t, x, tau)  # (C, R, M)
        vec[:, sel, :] = (resampled[..., None] * dft).sum(axis=-2)


def _cubic(
    t: NDArray[np.float64], x: NDArray[np.float64], tau: NDArray[np.float64]
) -> NDArray[np.float64]:
    """Signals ``x`` (C, n) at times ``tau`` by 4-point (cubic) Lagrange interpolation.

    The weights are those of evenly spaced samples at the fractional position between
    the two samples around each time (samples at the ends of the record are repeated).
    The amplitude error for a sinusoid of ``p`` samples per cycle is below
    ``(2 pi / p)^4 / 16``, i.e. 2e-6 at 64 samples per cycle (linear interpolation would
    lose up to ``(2 pi / p)^2 / 8``, 1e-3).
    """
    last = t.size - 1
    i = np.clip(np.searchsorted(t, tau, side="right") - 1, 0, last - 1)
    w = (tau - t[i]) / (t[i + 1] - t[i])
    wm, w1, w2 = w + 1.0, w - 1.0, w - 2.0
    return (
        x[:, np.maximum(i - 1, 0)] * (-w * w1 * w2 / 6.0)
        + x[:, i] * (wm * w1 * w2 / 2.0)
        + x[:, i + 1] * (-wm * w * w2 / 2.0)
        + x[:, np.minimum(i + 2, last)] * (wm * w * w1 / 6.0)
    )


def _assemble(
    vec: NDArray[np.complex128],
    top: NDArray[np.float64],
    bottom: NDArray[np.float64],
    first_row: NDArray[np.int64],
    pulses: PulseTrain,
    probes: Sequence[str],
    orders: NDArray[np.int64],
    offsets_deg: NDArray[np.float64],
    per_vector: int,
    metadata: RunMetadata,
    *,
    settings: tuple[tuple[str, str], ...],
) -> SynchronousVectors:
    edges, valid = pulses.edge_times_s, pulses.revolution_valid
    # groups of `per_vector` consecutive valid revolutions
    stretch = np.cumsum(~valid)
    pos = np.zeros(valid.size, dtype=np.int64)
    for s in np.unique(stretch[valid]):
        idx = np.flatnonzero(valid & (stretch == s))
        pos[idx] = np.arange(idx.size)
    starts = np.flatnonzero(valid & (pos % per_vector == 0))
    full = np.array([s + per_vector <= valid.size and valid[s : s + per_vector].all() for s in starts], dtype=bool)
    starts = starts[full] if starts.size else starts
    notes = []
    dropped = int(valid.sum()) - starts.size * per_vector
    if (~valid).any():
        notes.append(f"{int((~valid).sum())} revolution(s) across irregular pulse gaps skipped")
    if dropped:
        notes.append(f"{dropped} revolution(s) left over from incomplete groups of {per_vector} dropped")
    g = starts[:, None] + np.arange(per_vector)[None, :]  # (G, N)
    mean = vec[:, g, :].mean(axis=2)  # (C, G, O)
    t0, t1 = edges[starts], edges[starts + per_vector]
    speed = 60.0 * per_vector / (t1 - t0)
    js = pulses.edge_jitter_s
    unc = speed * np.sqrt(js[starts] ** 2 + js[starts + per_vector] ** 2) / (t1 - t0)
    mid = 0.5 * (t0 + t1)
    rows = first_row[starts]
    direct_pp = top[:, g].max(axis=2) - bottom[:, g].min(axis=2)  # (C, G)
    lag = np.mod(
        -np.degrees(np.angle(mean)) - orders[None, None, :] * offsets_deg[:, None, None], 360.0
    )
    n_c, n_g, n_o = mean.shape
    # acquisition order: by vector, then probe, then order
    samples = pd.DataFrame(
        {
            "speed_rpm": np.broadcast_to(speed[None, :, None], mean.shape).transpose(1, 0, 2).ravel(),
            "probe": np.broadcast_to(np.asarray(probes, dtype=object)[:, None, None], mean.shape).transpose(1, 0, 2).ravel(),
            "order": np.broadcast_to(orders[None, None, :], mean.shape).transpose(1, 0, 2).ravel(),
            "amplitude_um_pp": (2.0 * np.abs(mean)).transpose(1, 0, 2).ravel(),
            "phase_lag_deg": lag.transpose(1, 0, 2).ravel(),
            "time_s": np.broadcast_to(mid[None, :, None], mean.shape).transpose(1, 0, 2).ravel(),
            "row": np.broadcast_to(rows[None, :, None], mean.shape).transpose(1, 0, 2).ravel(),
        }
    ).astype(SAMPLE_COLUMNS)
    direct = pd.DataFrame(
        {
            "time_s": np.repeat(mid, n_c),
            "speed_rpm": np.repeat(speed, n_c),
            "speed_uncertainty_rpm": np.repeat(unc, n_c),
            "probe": np.tile(np.asarray(probes, dtype=object), n_g),
            "direct_um_pp": direct_pp.T.ravel(),
            "row": np.repeat(rows, n_c),
        }
    )
    return SynchronousVectors(
        run=Run(metadata, samples),
        direct=direct,
        pulses=pulses,
        settings=settings,
        notes=tuple(notes),
    )


def waveform_vectors(
    path: str | os.PathLike,
    *,
    spec: WaveformSpec | str | os.PathLike | Literal["auto"] = "auto",
    orders: Sequence[int] = (1, 2),
    points_per_rev: int = 128,
    revolutions_per_vector: int = 1,
    phase_reference: PhaseReference = "reference_sensor",
    rules: PulseRules = DEFAULT_RULES,
    block_rows: int = 65536,
) -> SynchronousVectors:
    """Read a waveform file and return its order vectors as a run.

    Three passes over the file, each block by block: the reference channel for its
    levels (:func:`runup.pulses.level_sample`), the reference channel for its edges, and
    the probe channels for the vectors.  Memory use is bounded by ``block_rows`` (plus
    one revolution and the edge list), not by the record length.

    Parameters
    ----------
    path
        Waveform CSV or Parquet file (see ``docs/waveforms.md``).
    spec
        ``"auto"`` reads ``<stem>.toml`` beside the file; a path reads that TOML; or a
        :class:`~runup.io.waveform.WaveformSpec`.
    orders, points_per_rev, revolutions_per_vector, phase_reference
        See :func:`synchronous_vectors`.
    rules
        Pulse rules (:class:`runup.pulses.PulseRules`).
    block_rows
        Rows read at a time.

    Returns
    -------
    SynchronousVectors
    """
    _check_options(orders, points_per_rev, revolutions_per_vector, phase_reference)
    if isinstance(spec, WaveformSpec):
        wspec = spec
    else:
        wspec = read_waveform_spec(find_waveform_spec(path) if spec == "auto" else spec)
    file = str(path)

    def reference() -> Iterable[WaveformBlock]:
        return iter_blocks(path, wspec, signals="reference", block_rows=block_rows)

    levels = reference_levels(level_sample(b.reference for b in reference()), rules=rules)
    raw = detect_edges(((b.time_s, b.reference) for b in reference()), levels=levels, rules=rules)
    try:
        pulses = validate_edges(raw, rules=rules, levels=levels)
    except DataFormatError as exc:
        raise DataFormatError(exc.message, file=file, column=wspec.reference_channel) from None
    sources = [SourceFile(file, file_sha256(path))]
    if wspec.path:
        sources.append(SourceFile(wspec.path, wspec.sha256))
    meta = wspec.metadata(sources=sources, default_run_id=Path(path).stem)
    try:
        result = synchronous_vectors(
            iter_blocks(path, wspec, signals="probes", block_rows=block_rows),
            probes=[c.name for c in wspec.channels],
            pulses=pulses,
            metadata=meta,
            orders=orders,
            points_per_rev=points_per_rev,
            revolutions_per_vector=revolutions_per_vector,
            phase_reference=phase_reference,
            angle_from_reference_deg={c.name: c.angle_from_reference_deg for c in wspec.channels},
        )
    except DataFormatError as exc:
        if exc.file is not None:
            raise
        raise DataFormatError(exc.message, file=file) from None
    if not math.isfinite(result.run.speed_range_rpm[0]):
        raise DataFormatError("no complete revolution in the record", file=file)
    return result
