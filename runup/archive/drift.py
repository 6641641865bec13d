"""Trends over a machine's history and drift of a run against its baseline (pure functions).

Drift checks and their defaults (runup's defaults, overridable; each is common practice in
machinery condition monitoring, not a published limit):

* **critical-speed shift**: ``100 (N - N0) / N0`` beyond +-3 %;
* **AF change**: ``100 (AF / AF0 - 1)`` beyond +-25 %;
* **slow-roll vector change**: ``|v - v0|`` beyond ``max(0.25 |v0|, 5 um pp)``;
* **2X near half a critical**: a 2X peak at a shaft speed within +-5 % of half a 1X critical
  that the baseline did not show, or that grew by more than 25 % (a crack indicator,
  common practice);
* a baseline critical with no match (**critical missing**) or a new one (**critical new**).

Criticals (order 1) are matched to the baseline's by nearest speed: an optimal one-to-one
assignment (``scipy.optimize.linear_sum_assignment``) on the relative speed difference,
pairs farther apart than the gate (default 15 %) left unmatched.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, fields
from typing import Literal

import numpy as np
import pandas as pd
from scipy.optimize import linear_sum_assignment

from ..errors import DataFormatError
from ..fingerprint import CriticalPrint, Fingerprint

__all__ = [
    "TWICE_X_PROMINENCE",
    "DriftThresholds",
    "match_criticals",
    "CriticalMatch",
    "SlowRollChange",
    "TwiceXPeak",
    "twice_x_peaks",
    "Alert",
    "Drift",
    "diff",
    "TrendPoint",
    "Trend",
    "trend",
]

#: A 2X curve maximum counts as a peak when it exceeds this multiple of the curve's median
#: amplitude (runup's choice, common practice: a clear hump above the 2X floor).
TWICE_X_PROMINENCE = 2.0


@dataclass(frozen=True)
class DriftThresholds:
    """Alert thresholds of :func:`diff` (see module notes for the defaults and their basis)."""

    critical_speed_shift_percent: float = 3.0
    amplification_factor_change_percent: float = 25.0
    slow_roll_change_fraction: float = 0.25
    slow_roll_change_min_um_pp: float = 5.0
    twice_x_window_percent: float = 5.0
    twice_x_growth_percent: float = 25.0
    match_gate_percent: float = 15.0

    def __post_init__(self) -> None:
        for f in fields(self):
            value = getattr(self, f.name)
            if not (isinstance(value, int | float) and math.isfinite(value) and value > 0):
                raise DataFormatError(f"drift threshold {f.name} must be a positive number, got {value!r}")


def _first_order(fp: Fingerprint) -> list[CriticalPrint]:
    return [c for c in fp.criticals if c.order == 1 and math.isfinite(c.speed_rpm)]


def match_criticals(
    baseline: Sequence[CriticalPrint], current: Sequence[CriticalPrint], *, gate_percent: float
) -> list[tuple[int | None, int | None]]:
    """Optimal one-to-one pairs ``(i_baseline, i_current)`` by relative speed difference.

    Cost ``100 |N_j - N0_i| / N0_i``; pairs above ``gate_percent`` are split into
    ``(i, None)`` and ``(None, j)``.  Sorted by baseline speed, unmatched current last.
    """
    pairs: list[tuple[int | None, int | None]] = []
    used_b: set[int] = set()
    used_c: set[int] = set()
    if baseline and current:
        b = np.array([c.speed_rpm for c in baseline])
        cur = np.array([c.speed_rpm for c in current])
        cost = 100.0 * np.abs(cur[None, :] - b[:, None]) / b[:, None]
        rows, cols = linear_sum_assignment(np.where(cost <= gate_percent, cost, 1e6))
        for i, j in zip(rows, cols, strict=True):
            if cost[i, j] <= gate_percent:
                pairs.append((int(i), int(j)))
                used_b.add(int(i))
                used_c.add(int(j))
    pairs += [(i, None) for i in range(len(baseline)) if i not in used_b]
    pairs.sort(key=lambda p: baseline[p[0]].speed_rpm)  # type: ignore[index]
    pairs += [(None, j) for j in range(len(current)) if j not in used_c]
    return pairs


@dataclass(frozen=True)
class CriticalMatch:
    """A baseline critical and the current one matched to it (either may be ``None``)."""

    baseline: CriticalPrint | None
    current: CriticalPrint | None

    @property
    def speed_shift_percent(self) -> float:
        """``100 (N - N0) / N0``, ``nan`` when unmatched."""
        if self.baseline is None or self.current is None:
            return math.nan
        return 100.0 * (self.current.speed_rpm / self.baseline.speed_rpm - 1.0)

    @property
    def af_change_percent(self) -> float:
        """``100 (AF / AF0 - 1)``, ``nan`` when unmatched or an AF is not determinable."""
        if self.baseline is None or self.current is None:
            return math.nan
        af0, af = self.baseline.amplification_factor, self.current.amplification_factor
        if not (math.isfinite(af0) and math.isfinite(af) and af0 > 0):
            return math.nan
        return 100.0 * (af / af0 - 1.0)


@dataclass(frozen=True)
class SlowRollChange:
    """Slow-roll vector of one probe (order 1, first segment with one) against the baseline's."""

    probe: str
    baseline_um_pp: complex
    current_um_pp: complex
    threshold_um_pp: float

    @property
    def change_um_pp(self) -> float:
        """Magnitude of the vector difference ``|v - v0|``, um pp."""
        return float(abs(self.current_um_pp - self.baseline_um_pp))


@dataclass(frozen=True)
class TwiceXPeak:
    """A 2X peak at shaft speed near half a 1X critical.

    ``source`` is ``"critical"`` (an order-2 critical of the identification) or the name of
    the 2X curve whose maximum it is.
    """

    critical_speed_rpm: float
    shaft_speed_rpm: float
    amplitude_um_pp: float
    source: str


AlertKind = Literal[
    "critical_speed_shift", "amplification_factor_change", "slow_roll_change", "twice_x_near_half_critical",
    "critical_missing", "critical_new",
]


@dataclass(frozen=True)
class Alert:
    """One drift alert: what, about what, the value, the threshold and a sentence."""

    kind: AlertKind
    subject: str
    value: float
    threshold: float
    sentence: str


@dataclass(frozen=True)
class Drift:
    """A run against its machine's baseline: matches, slow-roll changes, 2X peaks, alerts."""

    machine_id: str
    run_id: str
    baseline_run_id: str
    thresholds: DriftThresholds
    matches: tuple[CriticalMatch, ...]
    slow_roll: tuple[SlowRollChange, ...]
    twice_x: tuple[TwiceXPeak, ...]
    alerts: tuple[Alert, ...]

    @property
    def exit_code(self) -> int:
        """1 when any alert fires, else 0."""
        return 1 if self.alerts else 0


def _slow_roll_vectors(fp: Fingerprint) -> dict[str, complex]:
    out: dict[str, complex] = {}
    for s in sorted(fp.slow_roll, key=lambda s: s.segment):
        if s.order == 1 and s.probe not in out:
            out[s.probe] = s.vector_um_pp
    return out


def twice_x_peaks(fp: Fingerprint, *, window_percent: float = 5.0) -> tuple[TwiceXPeak, ...]:
    """2X peaks at shaft speeds within ``+-window_percent`` of half of each 1X critical.

    From order-2 criticals (frequency ``speed_rpm`` near the 1X critical's speed) and from
    the 2X grid curves of the probes: the largest 2X amplitude inside the window counts when
    it is not at the window's edge and exceeds :data:`TWICE_X_PROMINENCE` times the curve's
    median amplitude.  The largest per 1X critical is kept.
    """
    found: list[TwiceXPeak] = []
    for c1 in _first_order(fp):
        half = c1.speed_rpm / 2.0
        lo, hi = half * (1 - window_percent / 100.0), half * (1 + window_percent / 100.0)
        best: TwiceXPeak | None = None
        for c2 in fp.criticals:
            if c2.order == 2 and lo <= c2.shaft_speed_rpm <= hi:
                cand = TwiceXPeak(c1.speed_rpm, c2.shaft_speed_rpm, c2.peak_amplitude_um_pp, "critical")
                best = cand if best is None or cand.amplitude_um_pp > best.amplitude_um_pp else best
        for g in fp.curves:
            if g.order != 2 or g.kind != "probe":
                continue
            amp = np.abs(g.response_um_pp)
            ok = np.isfinite(amp)
            inside = ok & (g.speed_rpm >= lo) & (g.speed_rpm <= hi)
            if inside.sum() < 3:
                continue
            idx = np.flatnonzero(inside)
            k = idx[int(np.argmax(amp[idx]))]
            if k in (idx[0], idx[-1]) or amp[k] <= TWICE_X_PROMINENCE * float(np.median(amp[ok])):
                continue
            cand = TwiceXPeak(c1.speed_rpm, float(g.speed_rpm[k]), float(amp[k]), g.name)
            best = cand if best is None or cand.amplitude_um_pp > best.amplitude_um_pp else best
        if best is not None:
            found.append(best)
    return tuple(found)


def _fmt(x: float) -> str:
    return f"{x:,.0f}"


def diff(current: Fingerprint, baseline: Fingerprint, *, thresholds: DriftThresholds | None = None) -> Drift:
    """Drift of ``current`` against ``baseline`` (see module notes for every check)."""
    th = DriftThresholds() if thresholds is None else thresholds
    b_crit, c_crit = _first_order(baseline), _first_order(current)
    matches = tuple(
        CriticalMatch(None if i is None else b_crit[i], None if j is None else c_crit[j])
        for i, j in match_criticals(b_crit, c_crit, gate_percent=th.match_gate_percent)
    )
    alerts: list[Alert] = []
    for m in matches:
        if m.current is None:
            n0 = m.baseline.speed_rpm  # type: ignore[union-attr]
            alerts.append(Alert("critical_missing", f"{_fmt(n0)} rpm", n0, th.match_gate_percent,
                                f"baseline critical at {_fmt(n0)} rpm has no match within {th.match_gate_percent:g} %"))
            continue
        if m.baseline is None:
            n = m.current.speed_rpm
            alerts.append(Alert("critical_new", f"{_fmt(n)} rpm", n, th.match_gate_percent,
                                f"critical at {_fmt(n)} rpm has no baseline critical within {th.match_gate_percent:g} %"))
            continue
        subject = f"{_fmt(m.baseline.speed_rpm)} rpm"
        shift = m.speed_shift_percent
        if abs(shift) > th.critical_speed_shift_percent:
            alerts.append(Alert("critical_speed_shift", subject, shift, th.critical_speed_shift_percent,
                                f"critical {subject} moved {shift:+.1f} % to {_fmt(m.current.speed_rpm)} rpm "
                                f"(threshold +-{th.critical_speed_shift_percent:g} %)"))
        change = m.af_change_percent
        if math.isfinite(change) and abs(change) > th.amplification_factor_change_percent:
            alerts.append(Alert("amplification_factor_change", subject, change, th.amplification_factor_change_percent,
                                f"AF of critical {subject} changed {change:+.0f} % "
                                f"({m.baseline.amplification_factor:.1f} to {m.current.amplification_factor:.1f}; "
                                f"threshold +-{th.amplification_factor_change_percent:g} %)"))
    v0s, vs = _slow_roll_vectors(baseline), _slow_roll_vectors(current)
    changes = []
    for probe in sorted(set(v0s) & set(vs)):
        v0 = v0s[probe]
        limit = max(th.slow_roll_change_fraction * abs(v0), th.slow_roll_change_min_um_pp)
        ch = SlowRollChange(probe, v0, vs[probe], float(limit))
        changes.append(ch)
        if ch.change_um_pp > limit:
            alerts.append(Alert("slow_roll_change", probe, ch.change_um_pp, ch.threshold_um_pp,
                                f"slow-roll vector of {probe} changed by {ch.change_um_pp:.1f} um pp "
                                f"(threshold {limit:.1f} um pp)"))
    now = twice_x_peaks(current, window_percent=th.twice_x_window_percent)
    before = twice_x_peaks(baseline, window_percent=th.twice_x_window_percent)
    for p in now:
        near = [q for q in before if abs(q.critical_speed_rpm / p.critical_speed_rpm - 1) * 100 <= th.match_gate_percent]
        subject = f"2X at {_fmt(p.shaft_speed_rpm)} rpm"
        if not near:
            alerts.append(Alert("twice_x_near_half_critical", subject, p.amplitude_um_pp, math.nan,
                                f"2X peak of {p.amplitude_um_pp:.1f} um pp at {_fmt(p.shaft_speed_rpm)} rpm, near half "
                                f"the critical at {_fmt(p.critical_speed_rpm)} rpm, not in the baseline "
                                "(a crack indicator: investigate)"))
            continue
        growth = 100.0 * (p.amplitude_um_pp / max(q.amplitude_um_pp for q in near) - 1.0)
        if growth > th.twice_x_growth_percent:
            alerts.append(Alert("twice_x_near_half_critical", subject, growth, th.twice_x_growth_percent,
                                f"2X peak at {_fmt(p.shaft_speed_rpm)} rpm, near half the critical at "
                                f"{_fmt(p.critical_speed_rpm)} rpm, grew {growth:+.0f} % over the baseline "
                                f"(threshold {th.twice_x_growth_percent:g} %; a crack indicator: investigate)"))
    return Drift(current.machine_id, current.run_id, baseline.run_id, th, matches, tuple(changes), now, tuple(alerts))


# ----------------------------------------------------------------------------- trend
TrendQuantity = Literal["critical_speed_rpm", "amplification_factor", "slow_roll_amplitude_um_pp"]


@dataclass(frozen=True)
class TrendPoint:
    """One value of one series at one run; ``series`` names the mode or the probe."""

    run_id: str
    time_key: str
    start_time: str | None
    quantity: TrendQuantity
    series: str
    value: float


@dataclass(frozen=True)
class Trend:
    """A machine's history as trend points; criticals tracked as modes of the reference run."""

    machine_id: str
    reference_run_id: str | None
    points: tuple[TrendPoint, ...]

    def to_frame(self) -> pd.DataFrame:
        """The points as a long DataFrame, one row each."""
        cols = [f.name for f in fields(TrendPoint)]
        return pd.DataFrame([[getattr(p, c) for c in cols] for p in self.points], columns=cols)

    def series(self, quantity: TrendQuantity) -> dict[str, list[TrendPoint]]:
        """Points of one quantity by series name, in history order."""
        out: dict[str, list[TrendPoint]] = {}
        for p in self.points:
            if p.quantity == quantity:
                out.setdefault(p.series, []).append(p)
        return out


def trend(
    fingerprints: Sequence[Fingerprint], *, reference: Fingerprint | None = None, gate_percent: float = 15.0
) -> Trend:
    """Critical speeds, AFs and slow-roll amplitudes over a history.

    Parameters
    ----------
    fingerprints
        One machine's runs in history order (:func:`runup.archive.history`).
    reference
        The run whose order-1 criticals define the modes (the baseline); default the first.
    gate_percent
        Matching gate, % of the reference speed.

    Each run's order-1 criticals are matched to the reference's (:func:`match_criticals`);
    a mode is named ``"mode K (N rpm)"`` after its reference speed.  Criticals with no match
    are left out of the trend; a run without a match for a mode has no point for it.
    """
    if not fingerprints:
        return Trend("", None, ())
    ref = fingerprints[0] if reference is None else reference
    ref_crit = sorted(_first_order(ref), key=lambda c: c.speed_rpm)
    names = [f"mode {k + 1} ({_fmt(c.speed_rpm)} rpm)" for k, c in enumerate(ref_crit)]
    points: list[TrendPoint] = []
    for fp in fingerprints:
        cur = _first_order(fp)
        for i, j in match_criticals(ref_crit, cur, gate_percent=gate_percent):
            if i is None or j is None:
                continue
            c = cur[j]
            points.append(TrendPoint(fp.run_id, fp.time_key, fp.start_time, "critical_speed_rpm", names[i], c.speed_rpm))
            points.append(TrendPoint(fp.run_id, fp.time_key, fp.start_time, "amplification_factor", names[i],
                                     c.amplification_factor))
        for probe, v in sorted(_slow_roll_vectors(fp).items()):
            points.append(TrendPoint(fp.run_id, fp.time_key, fp.start_time, "slow_roll_amplitude_um_pp", probe,
                                     float(abs(v))))
    return Trend(fingerprints[0].machine_id, ref.run_id, tuple(points))
