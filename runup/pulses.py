"""Once-per-turn reference pulses: edges, validation, speed per revolution.

The reference signal (a proximity probe over a notch or keyway, or any once-per-turn
sensor) is turned into one edge time per revolution in three steps:

1. **levels** (:func:`reference_levels`): baseline = median of the signal, pulse level =
   the extreme percentile farthest from it (the pulse may go up or down); the trigger and
   re-arm thresholds sit at fixed fractions of the way from baseline to pulse level;
2. **edges** (:func:`detect_edges_block`, :func:`detect_edges`): a Schmitt trigger with
   hysteresis (an edge when the signal crosses the trigger threshold towards the pulse
   level after having been beyond the re-arm threshold), a hold-off after each edge, and
   the edge time interpolated linearly between the two samples around the crossing;
   works block by block, carrying its state over (:class:`EdgeState`);
3. **validation** (:func:`validate_edges`): double triggers (an interval much shorter than
   the local median) are removed, missing pulses (an interval close to 2x or 3x the
   local median) are filled with interpolated edges, edge-time jitter is estimated from
   the residuals of a local smooth fit and propagated to the speed of each revolution.

Every removal, insertion and suspicious edge is listed in :attr:`PulseTrain.flags`.
The rules are in ``docs/waveforms.md``.
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from dataclasses import dataclass
from typing import Literal

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy.ndimage import median_filter

from .errors import DataFormatError

__all__ = [
    "PulseRules",
    "DEFAULT_RULES",
    "ReferenceLevels",
    "EdgeState",
    "FlaggedRevolution",
    "PulseTrain",
    "reference_levels",
    "level_sample",
    "detect_edges_block",
    "detect_edges",
    "validate_edges",
]

#: Fewest edges (after validation) a record needs: three revolutions.
MIN_EDGES = 4
#: Scale from the median absolute deviation to the standard deviation of a normal law.
_MAD_TO_SIGMA = 1.4826

FlagKind = Literal["double_trigger_removed", "missing_pulse_inserted", "irregular_interval", "jitter"]


@dataclass(frozen=True)
class PulseRules:
    """Rules for finding and validating reference pulses.

    Attributes
    ----------
    polarity
        ``"auto"`` (the extreme farther from the median), ``"positive"`` or ``"negative"``
        (the direction the signal moves at the pulse).
    level_percentile
        Percentile (and ``100 -`` it) taken as the pulse level; 99.9 needs the pulse to
        last at least 0.1 % of a revolution.
    trigger_fraction, rearm_fraction
        Trigger and re-arm thresholds as fractions of the way from baseline to pulse
        level (``0 < rearm < trigger < 1``).
    holdoff_s
        Quiet time after an edge during which no other edge is accepted; must be shorter
        than one revolution at top speed (0.5 ms allows up to 120,000 rpm).
    median_window
        Intervals in the running median the validation compares each interval with.
    short_ratio
        An interval shorter than ``short_ratio`` x local median is a double trigger.
    long_ratio, max_missing, missing_tolerance
        An interval longer than ``long_ratio`` x median whose ratio ``r`` is within
        ``missing_tolerance`` (relative) of a whole number ``k <= max_missing + 1`` has
        ``k - 1`` missing pulses, which are inserted; longer or non-integer gaps are
        *irregular*: no revolution is taken across them.
    fit_window
        Edges in the local quadratic fit of shaft angle against time (jitter residuals).
    jitter_window
        Edges over which the jitter (robust standard deviation) is estimated locally.
    jitter_sigmas, jitter_floor_deg
        An edge whose residual exceeds both ``jitter_sigmas`` local standard deviations and
        ``jitter_floor_deg`` degrees of shaft angle is flagged ``jitter`` (kept).
    """

    polarity: Literal["auto", "positive", "negative"] = "auto"
    level_percentile: float = 99.9
    trigger_fraction: float = 0.5
    rearm_fraction: float = 0.25
    holdoff_s: float = 0.5e-3
    median_window: int = 9
    short_ratio: float = 0.6
    long_ratio: float = 1.5
    max_missing: int = 2
    missing_tolerance: float = 0.15
    fit_window: int = 11
    jitter_window: int = 51
    jitter_sigmas: float = 5.0
    jitter_floor_deg: float = 0.5

    def __post_init__(self) -> None:
        if self.polarity not in ("auto", "positive", "negative"):
            raise DataFormatError(
                f"polarity must be 'auto', 'positive' or 'negative', found {self.polarity!r}"
            )
        checks = [
            (50.0 < self.level_percentile < 100.0, "level_percentile must be in (50, 100)"),
            (
                0.0 < self.rearm_fraction < self.trigger_fraction < 1.0,
                "need 0 < rearm_fraction < trigger_fraction < 1",
            ),
            (self.holdoff_s >= 0.0, "holdoff_s must be >= 0"),
            (self.median_window >= 3, "median_window must be >= 3"),
            (0.0 < self.short_ratio < 1.0 < self.long_ratio, "need 0 < short_ratio < 1 < long_ratio"),
            (self.max_missing >= 0, "max_missing must be >= 0"),
            (0.0 < self.missing_tolerance < 0.5, "missing_tolerance must be in (0, 0.5)"),
            (self.fit_window >= 5, "fit_window must be >= 5"),
            (self.jitter_window >= 3, "jitter_window must be >= 3"),
            (self.jitter_sigmas > 0 and self.jitter_floor_deg >= 0, "jitter limits must be > 0"),
        ]
        for ok, text in checks:
            if not ok:
                raise DataFormatError(f"pulse rules: {text}")


@dataclass(frozen=True)
class ReferenceLevels:
    """Levels of the reference signal, in its recorded unit.

    ``baseline`` is the level between pulses, ``pulse`` the level at a pulse; ``trigger``
    and ``rearm`` are the hysteresis thresholds between them.
    """

    baseline: float
    pulse: float
    trigger: float
    rearm: float

    @property
    def polarity(self) -> Literal["positive", "negative"]:
        return "positive" if self.pulse > self.baseline else "negative"


@dataclass(frozen=True)
class EdgeState:
    """What the edge detector carries from one block to the next.

    Attributes
    ----------
    state
        ``+1`` beyond the trigger threshold (in a pulse), ``-1`` re-armed, ``0`` not yet
        known (start of record).
    time_s, value
        Last sample of the previous block (NaN before the first block), so that a
        crossing between blocks is interpolated like any other.
    last_edge_s
        Time of the last accepted edge, for the hold-off.
    """

    state: int = 0
    time_s: float = math.nan
    value: float = math.nan
    last_edge_s: float = -math.inf


#: The default rules, and the detector state at the start of a record.
DEFAULT_RULES = PulseRules()
START_STATE = EdgeState()


@dataclass(frozen=True)
class FlaggedRevolution:
    """A revolution whose pulses were corrected or look suspicious.

    ``index`` is the revolution (interval between edges ``index`` and ``index + 1`` of
    :attr:`PulseTrain.edge_times_s`); ``time_s`` its start edge.
    """

    index: int
    time_s: float
    kind: FlagKind
    detail: str


@dataclass(frozen=True)
class PulseTrain:
    """Validated once-per-turn edges and the speed of each revolution.

    Attributes
    ----------
    edge_times_s
        Edge times, seconds, increasing; revolution ``j`` runs from edge ``j`` to ``j+1``.
    edge_inserted
        Per edge: inserted for a missing pulse.
    edge_jitter_s
        Per edge: local standard deviation of the edge time, seconds (NaN when too few
        edges to estimate it).
    removed_times_s
        Edges removed as double triggers.
    revolution_valid
        Per revolution: ``False`` across an irregular gap (no vector is taken).
    speed_rpm
        Mean speed of each revolution, ``60 / interval`` (NaN when not valid).
    speed_uncertainty_rpm
        Standard uncertainty of ``speed_rpm`` from the jitter of its two edges.
    flags
        Corrected or suspicious revolutions.
    levels
        Thresholds used, or ``None`` when the edges were given directly.
    """

    edge_times_s: NDArray[np.float64]
    edge_inserted: NDArray[np.bool_]
    edge_jitter_s: NDArray[np.float64]
    removed_times_s: NDArray[np.float64]
    revolution_valid: NDArray[np.bool_]
    speed_rpm: NDArray[np.float64]
    speed_uncertainty_rpm: NDArray[np.float64]
    flags: tuple[FlaggedRevolution, ...]
    levels: ReferenceLevels | None = None

    def __post_init__(self) -> None:
        for name in (
            "edge_times_s",
            "edge_inserted",
            "edge_jitter_s",
            "removed_times_s",
            "revolution_valid",
            "speed_rpm",
            "speed_uncertainty_rpm",
        ):
            arr = np.array(getattr(self, name), copy=True)
            arr.setflags(write=False)
            object.__setattr__(self, name, arr)

    @property
    def n_revolutions(self) -> int:
        return int(self.edge_times_s.size - 1)


# -- levels ---------------------------------------------------------------------------


def level_sample(blocks: Iterable[ArrayLike], *, max_points: int = 1 << 21) -> NDArray[np.float64]:
    """A bounded, evenly decimated sample of a long signal given block by block.

    Sample ``i`` (counted over the whole record) is kept when ``i % stride == 0``; the
    stride doubles whenever more than ``max_points`` are held, so the result does not
    depend on how the record was split into blocks.
    """
    kept: list[tuple[int, NDArray[np.float64]]] = []  # (global index of first, values)
    held, stride, start = 0, 1, 0
    for block in blocks:
        values = np.asarray(block, dtype=float)
        first = (-start) % stride
        kept.append((start + first, values[first::stride]))
        held += kept[-1][1].size
        start += values.size
        while held > max_points:
            # value m of an array starting at global index g has index g + m * stride;
            # keep those divisible by 2 * stride
            kept = [(g + ((g // stride) % 2) * stride, v[(g // stride) % 2 :: 2]) for g, v in kept]
            stride *= 2
            held = sum(v.size for _, v in kept)
    return np.concatenate([v for _, v in kept]) if kept else np.empty(0)


def reference_levels(values: ArrayLike, *, rules: PulseRules = DEFAULT_RULES) -> ReferenceLevels:
    """Baseline, pulse level and thresholds from the robust levels of the signal.

    Parameters
    ----------
    values
        The reference signal or an even sample of it (:func:`level_sample`).
    rules
        ``polarity``, ``level_percentile``, ``trigger_fraction``, ``rearm_fraction``.

    Raises
    ------
    DataFormatError
        When the signal shows no pulses: the pulse height is not at least ten times the
        robust noise level (1.4826 x median absolute deviation) of the signal.
    """
    x = np.asarray(values, dtype=float)
    if x.size < 16:
        raise DataFormatError(
            f"the reference signal has {x.size} samples; at least 16 are needed"
        )
    low, baseline, high = np.percentile(x, [100.0 - rules.level_percentile, 50.0, rules.level_percentile])
    if rules.polarity == "auto":
        pulse = high if high - baseline >= baseline - low else low
    else:
        pulse = high if rules.polarity == "positive" else low
    height = pulse - baseline
    noise = _MAD_TO_SIGMA * float(np.median(np.abs(x - baseline)))
    if not abs(height) > 10.0 * noise or height == 0.0:
        raise DataFormatError(
            f"the reference signal shows no pulses: pulse height {abs(height):.4g} is not "
            f"10x its noise level {noise:.3g}; check reference_channel and the sensor",
        )
    return ReferenceLevels(
        baseline=float(baseline),
        pulse=float(pulse),
        trigger=float(baseline + rules.trigger_fraction * height),
        rearm=float(baseline + rules.rearm_fraction * height),
    )


# -- edges ----------------------------------------------------------------------------


def detect_edges_block(
    time_s: ArrayLike,
    values: ArrayLike,
    *,
    levels: ReferenceLevels,
    rules: PulseRules = DEFAULT_RULES,
    state: EdgeState = START_STATE,
) -> tuple[NDArray[np.float64], EdgeState]:
    """Edges in one block of the reference signal, and the state to carry on.

    An edge is the first sample at or beyond ``levels.trigger`` after the signal was at or
    beyond ``levels.rearm`` on the baseline side; its time is interpolated linearly to
    the trigger level between that sample and the one before.  Edges closer than
    ``rules.holdoff_s`` to the previous accepted edge are dropped.

    Returns
    -------
    edges_s, state
        Edge times in the block (seconds) and the :class:`EdgeState` for the next block.
    """
    t = np.asarray(time_s, dtype=float)
    x = np.asarray(values, dtype=float)
    if t.size == 0:
        return np.empty(0), state
    sign = 1.0 if levels.polarity == "positive" else -1.0
    trig, rearm = sign * levels.trigger, sign * levels.rearm
    if math.isnan(state.time_s):
        tt, xx = t, sign * x
        events = np.where(xx >= trig, 1, np.where(xx <= rearm, -1, 0))
        prior = 0
    else:
        tt = np.concatenate(([state.time_s], t))
        xx = np.concatenate(([sign * state.value], sign * x))
        events = np.where(xx >= trig, 1, np.where(xx <= rearm, -1, 0))
        events[0] = state.state
        prior = state.state
    # forward fill of the last non-zero event: the Schmitt-trigger state at each sample
    idx = np.where(events != 0, np.arange(events.size), 0)
    np.maximum.accumulate(idx, out=idx)
    st = events[idx]
    if events[0] == 0:
        st = np.where(idx == 0, prior, st)
    rise = np.flatnonzero((st[1:] == 1) & (st[:-1] == -1)) + 1
    t0, t1, x0, x1 = tt[rise - 1], tt[rise], xx[rise - 1], xx[rise]
    frac = np.clip((trig - x0) / (x1 - x0), 0.0, 1.0)
    candidates = t0 + frac * (t1 - t0)
    accepted, last = [], state.last_edge_s
    for edge in candidates.tolist():
        if edge - last >= rules.holdoff_s:
            accepted.append(edge)
            last = edge
    new_state = EdgeState(int(st[-1]), float(t[-1]), float(x[-1]), last)
    return np.asarray(accepted, dtype=float), new_state


def detect_edges(
    blocks: Iterable[tuple[ArrayLike, ArrayLike]],
    *,
    levels: ReferenceLevels,
    rules: PulseRules = DEFAULT_RULES,
) -> NDArray[np.float64]:
    """Edge times of a reference signal given as ``(time_s, values)`` blocks."""
    state = EdgeState()
    found = []
    for time_s, values in blocks:
        edges, state = detect_edges_block(time_s, values, levels=levels, rules=rules, state=state)
        found.append(edges)
    return np.concatenate(found) if found else np.empty(0)


# -- validation -----------------------------------------------------------------------


def _running_median(d: NDArray[np.float64], window: int) -> NDArray[np.float64]:
    return median_filter(d, size=min(window, d.size) | 1, mode="nearest")


def _remove_double_triggers(
    t: NDArray[np.float64], rules: PulseRules
) -> tuple[NDArray[np.float64], list[float]]:
    removed: list[float] = []
    for _ in range(10):  # each pass removes the spurious edges found; a few suffice
        d = np.diff(t)
        m = _running_median(d, rules.median_window)
        short = np.flatnonzero(d < rules.short_ratio * m)
        if short.size == 0 or t.size <= MIN_EDGES:
            break
        drop: set[int] = set()
        for i in short.tolist():
            if i in drop or i + 1 in drop:
                continue
            # Removing edge k merges the intervals on either side of it; keep the edge
            # whose removal leaves the interval closest to the local median.
            scores = []
            for k in (i, i + 1):
                if 0 < k < t.size - 1:
                    merged = t[k + 1] - t[k - 1]
                elif k == 0:  # first edge: the interval after it must then be normal
                    merged = t[2] - t[1]
                else:  # last edge
                    merged = t[-2] - t[-3]
                scores.append((abs(merged - m[i]) / m[i], k))
            best = min(scores)
            drop.add(best[1])
        keep = np.ones(t.size, dtype=bool)
        keep[sorted(drop)] = False
        removed += t[~keep].tolist()
        t = t[keep]
    return t, sorted(removed)


def _fill_missing(
    t: NDArray[np.float64], rules: PulseRules
) -> tuple[NDArray[np.float64], NDArray[np.bool_], NDArray[np.bool_]]:
    d = np.diff(t)
    r = d / _running_median(d, rules.median_window)
    k = np.rint(r).astype(int)
    long = r > rules.long_ratio
    fill = long & (k <= rules.max_missing + 1) & (np.abs(r / np.maximum(k, 1) - 1.0) <= rules.missing_tolerance)
    irregular = long & ~fill
    # number the edges by revolution, leaving room for the missing ones
    count = np.concatenate(([0], np.cumsum(np.where(fill, k, 1))))
    rev = np.arange(count[-1] + 1)
    times = np.full(rev.size, np.nan)
    times[count] = t
    inserted = np.isnan(times)
    real = np.flatnonzero(~inserted)
    for j in np.flatnonzero(inserted).tolist():
        # cubic in revolution number through up to four real edges each side (fewer at ends)
        pos = np.searchsorted(real, j)
        near = real[max(pos - 4, 0) : pos + 4]
        coef = np.polyfit(near - j, times[near], deg=min(3, near.size - 1))
        times[j] = coef[-1]
    valid = np.ones(rev.size - 1, dtype=bool)
    valid[count[:-1][irregular]] = False
    return times, inserted, valid


def _jitter_deg(t: NDArray[np.float64], window: int) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Residual (deg) of each edge from a local quadratic fit of shaft angle on time.

    Shaft angle at edge ``j`` is ``360 j`` degrees; with constant angular acceleration it
    is exactly quadratic in time, so the residual is the edge's timing error seen as
    shaft angle.  Returns the residual divided by ``sqrt(1 - h)`` (``h`` the leverage of
    the edge in its fit), which has the variance of the jitter itself.
    """
    n = t.size
    w = min(window, n)
    if w < 4:
        return np.full(n, np.nan), np.full(n, np.nan)
    h = w // 2
    start = np.clip(np.arange(n) - h, 0, n - w)
    idx = start[:, None] + np.arange(w)[None, :]
    tw = t[idx]
    scale = (tw[:, -1] - tw[:, 0]) / (w - 1)
    x = (tw - t[:, None]) / scale[:, None]
    y = 360.0 * (idx - np.arange(n)[:, None])
    a = np.stack([np.ones_like(x), x, x * x], axis=-1)
    ata = np.einsum("nwi,nwj->nij", a, a)
    aty = np.einsum("nwi,nw->ni", a, y)
    beta = np.linalg.solve(ata, aty[..., None])[..., 0]
    resid = -beta[:, 0]  # y = 0 and x = 0 at the edge itself
    lev = np.linalg.inv(ata)[:, 0, 0]
    return resid / np.sqrt(np.clip(1.0 - lev, 1e-12, None)), 360.0 / scale


def validate_edges(
    edge_times_s: ArrayLike,
    *,
    rules: PulseRules = DEFAULT_RULES,
    levels: ReferenceLevels | None = None,
) -> PulseTrain:
    """Validate raw edges: remove double triggers, fill missing pulses, estimate jitter.

    Parameters
    ----------
    edge_times_s
        Raw edge times, seconds (from :func:`detect_edges`).
    rules
        See :class:`PulseRules`.
    levels
        Kept in the result for provenance.

    Returns
    -------
    PulseTrain

    Raises
    ------
    DataFormatError
        Fewer than four edges, or edges not increasing.

    Notes
    -----
    Speed of revolution ``j``: ``N_j = 60 / T_j`` with ``T_j = t_{j+1} - t_j`` (the mean
    speed over the revolution).  Its standard uncertainty, with independent edge errors
    of standard deviations ``s_j``: ``u(N_j) = N_j sqrt(s_j^2 + s_{j+1}^2) / T_j``
    (first-order propagation; JCGM 100:2008, *Guide to the expression of uncertainty in
    measurement*, eq. 10).
    """
    t = np.asarray(edge_times_s, dtype=float)
    if t.size < MIN_EDGES:
        raise DataFormatError(
            f"found {t.size} reference pulse(s); at least {MIN_EDGES} are needed. Check "
            "reference_channel, the sensor signal and the record length"
        )
    if not np.all(np.diff(t) > 0):
        raise DataFormatError("edge times must be strictly increasing")
    t, removed = _remove_double_triggers(t, rules)
    if t.size < MIN_EDGES:
        raise DataFormatError(f"only {t.size} reference pulses remain after validation")
    times, inserted, valid = _fill_missing(t, rules)
    n_rev = times.size - 1
    resid = np.full(times.size, np.nan)
    sigma_deg = np.full(times.size, np.nan)
    rate_deg_s = np.full(times.size, np.nan)
    # fit within stretches between irregular gaps (revolution counting restarts there)
    bounds = np.concatenate(([0], np.flatnonzero(~valid) + 1, [times.size]))
    for a, b in zip(bounds[:-1], bounds[1:], strict=True):
        r, rate = _jitter_deg(times[a:b], rules.fit_window)
        resid[a:b], rate_deg_s[a:b] = r, rate
        real = ~inserted[a:b] & np.isfinite(r)
        if real.sum() >= 3:
            s = _MAD_TO_SIGMA * median_filter(np.abs(r[real]), size=min(rules.jitter_window, int(real.sum())) | 1, mode="nearest")
            sigma_deg[a:b] = np.interp(np.arange(b - a), np.flatnonzero(real), s)
    jitter_s = sigma_deg / rate_deg_s
    d = np.diff(times)
    speed = np.where(valid, 60.0 / d, np.nan)
    unc = speed * np.sqrt(jitter_s[:-1] ** 2 + jitter_s[1:] ** 2) / d
    flags: list[FlaggedRevolution] = []
    for j in np.flatnonzero(~valid).tolist():
        flags.append(FlaggedRevolution(j, float(times[j]), "irregular_interval", f"gap of {d[j]:.6g} s is not a whole number of revolutions (up to {rules.max_missing + 1}); no revolution taken"))
    for j in np.flatnonzero(inserted).tolist():
        for k in (j - 1, j):
            if 0 <= k < n_rev:
                flags.append(FlaggedRevolution(k, float(times[k]), "missing_pulse_inserted", f"edge at {times[j]:.6f} s interpolated for a missing pulse"))
    for tr in removed:
        k = int(np.clip(np.searchsorted(times, tr) - 1, 0, n_rev - 1))
        flags.append(FlaggedRevolution(k, float(times[k]), "double_trigger_removed", f"spurious edge at {tr:.6f} s removed"))
    limit = np.maximum(rules.jitter_sigmas * sigma_deg, rules.jitter_floor_deg)
    for j in np.flatnonzero(~inserted & (np.abs(resid) > limit)).tolist():
        k = min(j, n_rev - 1)
        flags.append(FlaggedRevolution(k, float(times[k]), "jitter", f"edge at {times[j]:.6f} s is {resid[j]:.3g} deg off the local fit (local jitter {sigma_deg[j]:.3g} deg)"))
    flags.sort(key=lambda f: (f.index, f.kind))
    return PulseTrain(
        edge_times_s=times,
        edge_inserted=inserted,
        edge_jitter_s=jitter_s,
        removed_times_s=np.asarray(removed, dtype=float),
        revolution_valid=valid,
        speed_rpm=speed,
        speed_uncertainty_rpm=unc,
        flags=tuple(flags),
        levels=levels,
    )
