"""Measured versus predicted critical speeds: assignment, errors, verification rules, score.

:func:`compare` pairs the criticals identified in one run (one speed segment, order 1X)
with the modes of a rotordynamic prediction (:func:`runup.io.predicted.read_predicted`):

1. **Assignment** by ``scipy.optimize.linear_sum_assignment`` (Kuhn–Munkres) on the cost
   ``d = |ln(N_m / N_p)| + (1 - MAC)``, the MAC term only where both sides give a mode
   shape; a pair whose speeds differ by more than ``gate_percent`` of the predicted speed
   is never matched.  MAC: Allemang & Brown, "A correlation coefficient for modal vector
   analysis", Proc. 1st IMAC, 1982.  Measured shapes are the fitted participations
   (:attr:`runup.critical.ProbeDetail.modal_constant_um_pp`) of the probes of each plane,
   taken direction by direction (the first probe of every plane, then the second ...);
   the MAC is the mean over the directions available in every shaped plane.
2. **Per matched mode**: speed error ``100 (N_m - N_p) / N_p`` %, AF ratio ``AF_m / AF_p``,
   amplitude ratio per plane (the largest single-probe peak of the plane's probes over the
   predicted one), and the verification rules below, each with its text and source.
3. **Unmatched** predicted modes are explained, unmatched measured ones called a model gap.
4. **Score** 0-100, formula in :data:`SCORE_FORMULA` and ``docs/compare.md``.

Verification rules, as recalled from API 617 (8th ed., 2014) and API RP 684 (2nd ed.,
2005) for the shop unbalance-response verification test -- from memory; check the edition
named in the purchase specification:

* measured critical within +-5 % of the predicted;
* for a predicted split pair, measured between 5 % below the lower and 5 % above the
  higher predicted speed;
* measured peak amplitude not above the predicted (same unbalance, same planes).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy.optimize import linear_sum_assignment

from .critical import CRITICALLY_DAMPED_AF, Critical
from .errors import DataFormatError
from .io.predicted import Predicted, PredictedMode
from .report import json_number as _num
from .run import Probe

__all__ = [
    "RULE_SOURCE",
    "SCORE_FORMULA",
    "RuleCheck",
    "PlaneAmplitude",
    "ModeMatch",
    "UnmatchedPredicted",
    "UnmatchedMeasured",
    "Agreement",
    "mac",
    "compare",
    "agreement_to_dict",
]

#: Source of the verification rules (recalled, not checked against the text).
RULE_SOURCE = (
    "API 617 8th ed. (2014) and API RP 684 2nd ed. (2005), unbalance-response verification "
    "test -- from memory"
)

#: The agreement score, exactly as computed.
SCORE_FORMULA = (
    "score = 100 * sum(s_g) / (G + U): g runs over the scored predicted groups (a single mode, "
    "or both members of a split pair), G their number, U the number of unmatched measured "
    "criticals; s_g = exp(-(e/tol)^2) for a single mode, e its speed error in percent; for a "
    "split pair s_g is the mean of exp(-(e/tol)^2) over its matched members, e the percent by "
    "which the measured speed lies outside [lower, higher] (0 inside); s_g = 0 for a group with "
    "no match. A group with no match is not scored when each member is predicted critically "
    "damped (AF < 2.5) or lies outside the record's speed range."
)

_BIG = 1.0e6  # cost of a forbidden (gated-out) pair in the assignment


@dataclass(frozen=True)
class RuleCheck:
    """One verification rule applied to one matched mode.

    Attributes
    ----------
    rule
        The rule in words, with its limits.
    source
        Where the rule comes from.
    passed
        Whether the measured value satisfies it.
    value, low, high
        The value judged and its admissible range (``-inf``/``inf`` for an open side), in the
        unit named by ``unit``.
    unit
        ``"rpm"`` or ``"um_pp"``.
    plane
        Probe plane for amplitude rules, else ``None``.
    """

    rule: str
    source: str
    passed: bool
    value: float
    low: float
    high: float
    unit: str
    plane: str | None = None


@dataclass(frozen=True)
class PlaneAmplitude:
    """Measured (largest single-probe peak of the plane's probes) and predicted peak, um pp."""

    plane: str
    measured_um_pp: float
    predicted_um_pp: float

    @property
    def ratio(self) -> float:
        """Measured over predicted (``inf`` for a zero prediction)."""
        return self.measured_um_pp / self.predicted_um_pp if self.predicted_um_pp > 0 else math.inf


@dataclass(frozen=True)
class ModeMatch:
    """A measured critical matched to a predicted mode.

    Attributes
    ----------
    predicted, measured
        The pair.
    speed_error_percent
        ``100 (N_m - N_p) / N_p`` with ``N_m`` the measured peak-response speed.
    af_ratio
        Measured over predicted AF, ``nan`` when either is unknown.
    amplitudes
        Per plane, where both sides give one.
    mac
        Modal assurance criterion of the shapes, ``nan`` when not computed.
    distance
        The assignment cost ``|ln(N_m/N_p)| + (1 - MAC)``.
    score
        The per-mode score ``exp(-(e/tol)^2)`` (split pairs: ``e`` outside the band).
    checks
        Verification rules applied.
    """

    predicted: PredictedMode
    measured: Critical
    speed_error_percent: float
    af_ratio: float
    amplitudes: tuple[PlaneAmplitude, ...]
    mac: float
    distance: float
    score: float
    checks: tuple[RuleCheck, ...]

    @property
    def passed(self) -> bool:
        """All rule checks pass."""
        return all(c.passed for c in self.checks)


@dataclass(frozen=True)
class UnmatchedPredicted:
    """A predicted mode with no measured counterpart; ``scored`` says whether it counts 0."""

    mode: PredictedMode
    reason: str
    scored: bool


@dataclass(frozen=True)
class UnmatchedMeasured:
    """A measured critical with no predicted counterpart."""

    critical: Critical
    reason: str


@dataclass(frozen=True)
class Agreement:
    """Result of :func:`compare`.

    Attributes
    ----------
    matches
        Matched pairs, by predicted speed.
    unmatched_predicted, unmatched_measured
        What found no partner, with the explanation.
    score
        0-100 (:data:`SCORE_FORMULA`); ``nan`` when nothing could be scored.
    tolerance_percent, gate_percent
        Options used.
    speed_range_rpm
        The record's speed range, when given.
    notes
        Sentences about the choices made (segment, shapes, amplitudes).
    """

    matches: tuple[ModeMatch, ...]
    unmatched_predicted: tuple[UnmatchedPredicted, ...]
    unmatched_measured: tuple[UnmatchedMeasured, ...]
    score: float
    tolerance_percent: float
    gate_percent: float
    speed_range_rpm: tuple[float, float] | None
    notes: tuple[str, ...] = ()

    @property
    def passed(self) -> bool:
        """Every rule check of every match passes (unmatched modes are reported, not judged)."""
        return all(m.passed for m in self.matches)

    def to_frame(self) -> pd.DataFrame:
        """One row per predicted mode and per unmatched measured critical."""
        rows = []
        for m in self.matches:
            rows.append({
                "mode": m.predicted.mode, "predicted_speed_rpm": m.predicted.speed_rpm,
                "measured_speed_rpm": m.measured.speed_rpm, "speed_error_percent": m.speed_error_percent,
                "af_ratio": m.af_ratio, "mac": m.mac, "score": m.score,
                "passed": m.passed, "note": "",
            })
        for u in self.unmatched_predicted:
            rows.append({"mode": u.mode.mode, "predicted_speed_rpm": u.mode.speed_rpm, "note": u.reason})
        for u in self.unmatched_measured:
            rows.append({"measured_speed_rpm": u.critical.speed_rpm, "note": u.reason})
        columns = ["mode", "predicted_speed_rpm", "measured_speed_rpm", "speed_error_percent",
                   "af_ratio", "mac", "score", "passed", "note"]
        return pd.DataFrame(rows, columns=columns)


def mac(a: Sequence[complex], b: Sequence[complex]) -> float:
    """Modal assurance criterion ``|a^H b|^2 / ((a^H a)(b^H b))``, in [0, 1].

    Allemang & Brown, "A correlation coefficient for modal vector analysis", Proc. 1st
    IMAC, 1982.  ``nan`` when either vector is zero or not finite.
    """
    x = np.asarray(a, dtype=complex)
    y = np.asarray(b, dtype=complex)
    den = float(np.vdot(x, x).real * np.vdot(y, y).real)
    if not (np.isfinite(x).all() and np.isfinite(y).all()) or den <= 0:
        return math.nan
    return float(abs(np.vdot(x, y)) ** 2 / den)


def _measured_mac(mode: PredictedMode, critical: Critical, probes: Sequence[Probe]) -> float:
    """Mean MAC over probe directions (k-th probe of each shaped plane), ``nan`` if none."""
    planes = [p for p, _ in mode.shape]
    if len(planes) < 2:
        return math.nan
    participation = {d.probe: d.modal_constant_um_pp for d in critical.detail}
    by_plane = {pl: [p.name for p in probes if p.plane == pl] for pl in planes}
    values = []
    for k in range(min(len(v) for v in by_plane.values())):
        measured = [participation.get(by_plane[pl][k], complex(math.nan, math.nan)) for pl in planes]
        value = mac([z for _, z in mode.shape], measured)
        if math.isfinite(value):
            values.append(value)
    return float(np.mean(values)) if values else math.nan


def _amplitudes(mode: PredictedMode, critical: Critical, probes: Sequence[Probe]) -> tuple[PlaneAmplitude, ...]:
    peaks = {d.probe: d.peak_amplitude_um_pp for d in critical.detail}
    out = []
    for plane, predicted in mode.peak_amplitude_um_pp:
        seen = [peaks[p.name] for p in probes if p.plane == plane and p.name in peaks]
        seen = [a for a in seen if math.isfinite(a)]
        if seen:
            out.append(PlaneAmplitude(plane, max(seen), predicted))
    return tuple(out)


def _band_error_percent(speed_rpm: float, low_rpm: float, high_rpm: float) -> float:
    if speed_rpm < low_rpm:
        return 100.0 * (low_rpm - speed_rpm) / low_rpm
    if speed_rpm > high_rpm:
        return 100.0 * (speed_rpm - high_rpm) / high_rpm
    return 0.0


def _checks(
    mode: PredictedMode, partner: PredictedMode | None, critical: Critical,
    amplitudes: tuple[PlaneAmplitude, ...], tol: float,
) -> tuple[RuleCheck, ...]:
    n = critical.speed_rpm
    out = []
    if partner is None:
        low, high = mode.speed_rpm * (1 - tol / 100), mode.speed_rpm * (1 + tol / 100)
        out.append(RuleCheck(
            f"measured critical within +-{tol:g} % of the predicted {mode.speed_rpm:.0f} rpm",
            RULE_SOURCE, low <= n <= high, n, low, high, "rpm",
        ))
    else:
        lo_p, hi_p = sorted((mode.speed_rpm, partner.speed_rpm))
        low, high = lo_p * (1 - tol / 100), hi_p * (1 + tol / 100)
        out.append(RuleCheck(
            f"split pair {mode.split_pair!r}: measured critical between {tol:g} % below the lower "
            f"({lo_p:.0f} rpm) and {tol:g} % above the higher ({hi_p:.0f} rpm) predicted speed",
            RULE_SOURCE, low <= n <= high, n, low, high, "rpm",
        ))
    for a in amplitudes:
        out.append(RuleCheck(
            f"measured peak amplitude at plane {a.plane} not above the predicted "
            f"{a.predicted_um_pp:.1f} um pp", RULE_SOURCE,
            a.measured_um_pp <= a.predicted_um_pp, a.measured_um_pp, -math.inf, a.predicted_um_pp,
            "um_pp", a.plane,
        ))
    return tuple(out)


def _select(
    criticals: Sequence[Critical], segment: int | None, *, split_pairs_predicted: bool
) -> tuple[list[Critical], list[str]]:
    notes = []
    first = [c for c in criticals if c.order == 1]
    if len(first) < len(criticals):
        notes.append(f"{len(criticals) - len(first)} critical(s) of orders other than 1X ignored")
    if any(c.split is not None for c in first):
        if split_pairs_predicted:
            notes.append("split criticals compared at both of their speeds (shapes shared by the two branches)")
            first = [b for c in first for b in c.branches()]
        else:
            notes.append(
                "split criticals compared at their headline speed: the prediction has no split pairs "
                "(an isotropic model predicts one speed for the pair)"
            )
    segments = sorted({c.segment for c in first})
    if segment is None:
        if len(segments) > 1:
            raise DataFormatError(
                f"the criticals come from {len(segments)} speed segments ({segments}); a prediction "
                "is compared with one segment at a time: choose one with segment="
            )
        return first, notes
    chosen = [c for c in first if c.segment == segment]
    if not chosen and first:
        raise DataFormatError(f"no 1X critical in segment {segment}; segments present: {segments}")
    return chosen, notes


def compare(
    criticals: Sequence[Critical],
    predicted: Predicted,
    *,
    tolerance_percent: float = 5.0,
    gate_percent: float = 25.0,
    probes: Sequence[Probe] = (),
    speed_range_rpm: tuple[float, float] | None = None,
    segment: int | None = None,
) -> Agreement:
    """Compare the criticals of one run with a rotordynamic prediction.

    Parameters
    ----------
    criticals
        From :func:`runup.identify` (order 1X is used).
    predicted
        From :func:`runup.io.predicted.read_predicted`.
    tolerance_percent
        Speed tolerance of the verification rule and of the score (5 % as recalled from
        API 617/684, from memory).
    gate_percent
        Pairs whose speeds differ by more than this percentage of the predicted speed are
        never matched.
    probes
        Probe definitions of the run (``Identification.conditioned.metadata.probes``); their
        planes give the measured mode shapes and plane amplitudes.  Without them, no MAC and
        no amplitude comparison.
    speed_range_rpm
        The record's speed range (``Run.speed_range_rpm``), used to explain unseen modes.
    segment
        Speed segment to compare; required when the criticals come from several.

    Returns
    -------
    Agreement

    Raises
    ------
    DataFormatError
        Non-positive tolerance or gate, or criticals from several segments without ``segment``.
    """
    for name, value in (("tolerance_percent", tolerance_percent), ("gate_percent", gate_percent)):
        if not (math.isfinite(value) and value > 0):
            raise DataFormatError(f"{name} must be a positive number, got {value!r}")
    measured, notes = _select(
        criticals, segment, split_pairs_predicted=any(m.split_pair is not None for m in predicted.modes)
    )
    modes = list(predicted.modes)
    tol = float(tolerance_percent)
    shapes_used = False
    cost = np.full((len(measured), len(modes)), _BIG)
    macs = np.full(cost.shape, math.nan)
    for i, c in enumerate(measured):
        for j, m in enumerate(modes):
            if abs(c.speed_rpm - m.speed_rpm) > gate_percent / 100 * m.speed_rpm:
                continue
            macs[i, j] = _measured_mac(m, c, probes)
            shapes_used |= math.isfinite(macs[i, j])
            shape_term = 1.0 - macs[i, j] if math.isfinite(macs[i, j]) else 0.0
            cost[i, j] = abs(math.log(c.speed_rpm / m.speed_rpm)) + shape_term
    pairs = []
    if cost.size:
        rows, cols = linear_sum_assignment(cost)
        pairs = [(int(i), int(j)) for i, j in zip(rows, cols, strict=True) if cost[i, j] < _BIG]
    if any(m.shape for m in modes):
        notes.append("mode shapes used in the assignment (MAC)" if shapes_used else
                     "predicted mode shapes not used: no measured participations by plane "
                     "(give the probes' planes, and criticals from the modal fit)")
    matches = []
    for i, j in pairs:
        c, m = measured[i], modes[j]
        partner = predicted.partner(m)
        amps = _amplitudes(m, c, probes)
        error = 100.0 * (c.speed_rpm - m.speed_rpm) / m.speed_rpm
        if partner is None:
            e = error
        else:
            e = _band_error_percent(c.speed_rpm, *sorted((m.speed_rpm, partner.speed_rpm)))
        af_ratio = (
            c.amplification_factor / m.amplification_factor
            if m.amplification_factor and math.isfinite(c.amplification_factor) else math.nan
        )
        matches.append(ModeMatch(
            m, c, error, af_ratio, amps, float(macs[i, j]), float(cost[i, j]),
            math.exp(-((e / tol) ** 2)), _checks(m, partner, c, amps, tol),
        ))
    matches.sort(key=lambda x: x.predicted.speed_rpm)
    matched_modes = {x.predicted.mode: x for x in matches}
    unmatched_p = [
        _explain(m, predicted, matched_modes, speed_range_rpm) for m in modes if m.mode not in matched_modes
    ]
    matched_c = {id(x.measured) for x in matches}
    unmatched_m = [
        UnmatchedMeasured(c, f"not predicted: a model gap (no predicted mode within {gate_percent:g} % "
                             f"of {c.speed_rpm:.0f} rpm)")
        for c in measured if id(c) not in matched_c
    ]
    score = _score(predicted, matches, unmatched_p, len(unmatched_m))
    return Agreement(
        tuple(matches), tuple(unmatched_p), tuple(unmatched_m), score, tol, float(gate_percent),
        speed_range_rpm, tuple(notes),
    )


def _explain(
    mode: PredictedMode, predicted: Predicted, matched: dict[str, ModeMatch],
    speed_range_rpm: tuple[float, float] | None,
) -> UnmatchedPredicted:
    partner = predicted.partner(mode)
    if partner is not None and partner.mode in matched:
        seen = matched[partner.mode].measured.speed_rpm
        return UnmatchedPredicted(
            mode, f"not seen separately: the critical at {seen:.0f} rpm matched to its split-pair "
                  f"partner {partner.mode!r} may be the pair unresolved", scored=False,
        )
    reasons = []
    excused = False
    if mode.amplification_factor is not None and mode.amplification_factor < CRITICALLY_DAMPED_AF:
        reasons.append(f"may be critically damped (predicted AF {mode.amplification_factor:.2g} "
                       f"< {CRITICALLY_DAMPED_AF:g})")
        excused = True
    if speed_range_rpm is not None:
        a, b = speed_range_rpm
        if not a <= mode.speed_rpm <= b:
            reasons.append(f"outside the record's speed range [{a:.0f}, {b:.0f}] rpm")
            excused = True
    if not reasons:
        reasons.append("not excited or not seen by the probes (an unbalance or a probe plane "
                       "near a node of the mode), or more than the gate away from any measured critical")
    return UnmatchedPredicted(mode, "not seen: " + "; ".join(reasons), scored=not excused)


def _score(
    predicted: Predicted, matches: Sequence[ModeMatch], unmatched: Sequence[UnmatchedPredicted],
    n_unmatched_measured: int,
) -> float:
    by_mode = {m.predicted.mode: m for m in matches}
    excused = {u.mode.mode for u in unmatched if not u.scored}
    total, count = 0.0, n_unmatched_measured
    done: set[str] = set()
    for mode in predicted.modes:
        if mode.mode in done:
            continue
        partner = predicted.partner(mode)
        group = [mode] if partner is None else [mode, partner]
        done.update(g.mode for g in group)
        hits = [by_mode[g.mode].score for g in group if g.mode in by_mode]
        if hits:
            total += float(np.mean(hits))
            count += 1
        elif not all(g.mode in excused for g in group):
            count += 1
    return 100.0 * total / count if count else math.nan


def agreement_to_dict(agreement: Agreement) -> dict:
    """The agreement as a JSON-ready dictionary (non-finite numbers become ``None``)."""

    def critical(c: Critical) -> dict:
        return {
            "speed_rpm": _num(c.speed_rpm), "natural_speed_rpm": _num(c.natural_speed_rpm),
            "damping_ratio": _num(c.damping_ratio), "amplification_factor": _num(c.amplification_factor),
            "segment": c.segment, "direction": c.direction, "probes": list(c.probes), "flags": list(c.flags),
        }

    def mode(m: PredictedMode) -> dict:
        return {
            "mode": m.mode, "speed_rpm": _num(m.speed_rpm), "af": _num(m.amplification_factor),
            "split_pair": m.split_pair,
            "peak_amplitude_um_pp": {p: _num(a) for p, a in m.peak_amplitude_um_pp},
        }

    return {
        "kind": "agreement",
        "score": _num(agreement.score),
        "score_formula": SCORE_FORMULA,
        "passed": agreement.passed,
        "tolerance_percent": agreement.tolerance_percent,
        "gate_percent": agreement.gate_percent,
        "speed_range_rpm": None if agreement.speed_range_rpm is None else list(agreement.speed_range_rpm),
        "matches": [
            {
                "predicted": mode(m.predicted), "measured": critical(m.measured),
                "speed_error_percent": _num(m.speed_error_percent), "af_ratio": _num(m.af_ratio),
                "mac": _num(m.mac), "distance": _num(m.distance), "score": _num(m.score),
                "passed": m.passed,
                "amplitudes": [
                    {"plane": a.plane, "measured_um_pp": _num(a.measured_um_pp),
                     "predicted_um_pp": _num(a.predicted_um_pp), "ratio": _num(a.ratio)}
                    for a in m.amplitudes
                ],
                "checks": [
                    {"rule": r.rule, "source": r.source, "passed": r.passed, "value": _num(r.value),
                     "low": _num(r.low), "high": _num(r.high), "unit": r.unit, "plane": r.plane}
                    for r in m.checks
                ],
            }
            for m in agreement.matches
        ],
        "unmatched_predicted": [
            {"predicted": mode(u.mode), "reason": u.reason, "scored": u.scored}
            for u in agreement.unmatched_predicted
        ],
        "unmatched_measured": [
            {"measured": critical(u.critical), "reason": u.reason} for u in agreement.unmatched_measured
        ],
        "notes": list(agreement.notes),
    }
