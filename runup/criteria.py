"""Judging identified criticals and run-up vibration against a rule set.

Verdicts are pure functions of an :class:`~runup.critical.Identification`, the operating
speeds and a :class:`~runup.rules.RuleSet` (see :mod:`runup.rules` for the rule forms and the
rule files; ``docs/criteria.md`` for the user's description):

* **Separation margin** of each critical, judged at its peak-response speed ``N_c``
  (API RP 684's ``N_c``, 2nd ed. 2005 -- from memory).  Actual margin below the minimum
  operating speed ``(MOS - N_c)/MOS``, above the maximum continuous speed ``(N_c - MCS)/MCS``
  (percent); between MCS and trip counts as above.  A critical inside ``[MOS, MCS]`` fails
  unless the rule requires no margin at its AF (critically damped, AF < 2.5 in the API form).
  Pass when actual >= required.  The 95 % intervals give a conservative figure as information.
* **Vibration at MCS**: the 1X amplitude of every probe and segment interpolated at MCS on the
  slow-roll-compensated complex curve, against the limit (pass when amplitude <= limit); its
  zone as information only.

Anything that cannot be judged (missing speeds, an AF that is not determinable, a record that
does not reach MCS) gives a verdict ``"not_evaluated"`` with the reason, never an exception.
Acceptance follows the purchase specification and the text of the standard the user holds.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Literal

import numpy as np

from .critical import Critical, Identification, Interval
from .rules import (
    AfMarginForm,
    FlatMarginForm,
    MarginForm,
    MarginRule,
    RuleRef,
    RuleSet,
    RuleSource,
    VibrationLimit,
    Zone,
    ZoneRule,
    available_rule_sets,
    load_rules,
    margin_form_percent,
    required_margin_percent,
    vibration_limit_um_pp,
    zone_boundaries_um_pp,
    zone_of,
)
from .run import ConditionedRun, Curve, OperatingSpeeds

__all__ = [
    "Status",
    "Side",
    "MarginVerdict",
    "VibrationVerdict",
    "CheckResult",
    "check_margins",
    "check_vibration",
    "judge",
    # re-exported from runup.rules, so that one import serves
    "RuleSource",
    "RuleRef",
    "AfMarginForm",
    "FlatMarginForm",
    "MarginRule",
    "VibrationLimit",
    "ZoneRule",
    "RuleSet",
    "available_rule_sets",
    "load_rules",
    "required_margin_percent",
    "vibration_limit_um_pp",
    "zone_boundaries_um_pp",
    "zone_of",
]

Status = Literal["pass", "fail", "not_evaluated"]
Side = Literal["below_min_operating", "inside_operating_range", "above_max_continuous"]


# ------------------------------------------------------------------------------- verdicts
@dataclass(frozen=True)
class MarginVerdict:
    """Separation-margin verdict on one critical speed.

    Attributes
    ----------
    segment, direction, order
        Where the critical was seen.
    speed_rpm, amplification_factor
        Peak-response speed ``N_c`` (rpm) and API half-power AF of the critical.
    side
        ``"below_min_operating"``, ``"inside_operating_range"`` or ``"above_max_continuous"``
        (between MCS and trip counts as above); ``None`` when it cannot be told.
    reference_speed_rpm
        MOS (below), MCS (above) or the nearer of the two (inside); ``None`` if unknown.
    margin_percent
        ``(MOS - N_c)/MOS`` or ``(N_c - MCS)/MCS`` in percent; inside the range the larger
        (nearer-edge) of the two, negative; ``nan`` when not evaluated.
    required_margin_percent
        What the rule asks at this AF (0 when critically damped); ``nan`` when not evaluated.
    status
        ``"pass"``, ``"fail"`` or ``"not_evaluated"`` (the sentence gives the reason).
    rule
        The rule with its source, edition and checked marker.
    sentence
        One sentence for the report.
    critically_damped
        True when the rule required no margin because of the AF (or the critical's flag).
    speed_ci95_rpm
        95 % interval of ``N_c``: the natural-speed interval scaled by ``N_c / N_n``
        (``None`` without one).
    worst_margin_percent, worst_required_margin_percent, worst_passed
        Information only: the margin at the interval end nearer the operating range and the
        requirement at the upper end of the AF interval (``nan``/``None`` when unknown).
    """

    segment: int
    direction: str
    order: int
    speed_rpm: float
    amplification_factor: float
    side: Side | None
    reference_speed_rpm: float | None
    margin_percent: float
    required_margin_percent: float
    status: Status
    rule: RuleRef
    sentence: str
    critically_damped: bool = False
    speed_ci95_rpm: Interval | None = None
    worst_margin_percent: float = math.nan
    worst_required_margin_percent: float = math.nan
    worst_passed: bool | None = None

    @property
    def passed(self) -> bool:
        return self.status == "pass"


@dataclass(frozen=True)
class VibrationVerdict:
    """1X vibration of one probe and segment at the maximum continuous speed.

    Attributes
    ----------
    probe, segment, direction
        Which curve.
    speed_rpm
        The MCS the amplitude is taken at (``nan`` when not given).
    amplitude_um_pp, raw_amplitude_um_pp
        Slow-roll-compensated and uncompensated 1X amplitude there, interpolated linearly on
        the complex vectors (``nan`` when not evaluated).
    limit_um_pp
        The rule's limit at MCS (``nan`` without a limit rule or MCS).
    status
        ``"pass"`` (amplitude <= limit), ``"fail"`` or ``"not_evaluated"``.
    rule, zone_rule
        The limit and zone rules applied (``None`` where the set has none).
    zone, zone_boundaries_um_pp
        Zone of the compensated amplitude and the A/B, B/C, C/D boundaries at MCS:
        information, never pass/fail (zones judge steady running, not run-ups).
    sentence
        One sentence for the report.
    """

    probe: str
    segment: int
    direction: str
    speed_rpm: float
    amplitude_um_pp: float
    raw_amplitude_um_pp: float
    limit_um_pp: float
    status: Status
    rule: RuleRef | None
    zone: Zone | None
    zone_boundaries_um_pp: tuple[float, float, float] | None
    zone_rule: RuleRef | None
    sentence: str

    @property
    def passed(self) -> bool:
        return self.status == "pass"


@dataclass(frozen=True)
class CheckResult:
    """All verdicts of one rule set on one run.

    ``passed`` is True when no evaluated rule failed (verdicts "not evaluated" do not fail);
    ``exit_code`` is 0 then, else 1.  ``notes`` say what could not be judged and why.
    """

    rule_set: str
    title: str
    file: str
    rules: tuple[RuleRef, ...]
    machine_id: str
    run_id: str
    operating: OperatingSpeeds
    margins: tuple[MarginVerdict, ...]
    vibration: tuple[VibrationVerdict, ...]
    notes: tuple[str, ...] = ()

    @property
    def verdicts(self) -> tuple[MarginVerdict | VibrationVerdict, ...]:
        return self.margins + self.vibration

    @property
    def n_failed(self) -> int:
        return sum(v.status == "fail" for v in self.verdicts)

    @property
    def n_evaluated(self) -> int:
        return sum(v.status != "not_evaluated" for v in self.verdicts)

    @property
    def passed(self) -> bool:
        return self.n_failed == 0

    @property
    def exit_code(self) -> int:
        return 0 if self.passed else 1


# ------------------------------------------------------------------------------- judging
def _rpm(x: float) -> str:
    return f"{x:,.0f} rpm"


def _short(ref: RuleRef) -> str:
    return f"{ref.rule_set} ({ref.source.document}, {ref.source.checked})"


def _required_at(critical: Critical, form: MarginForm, amplification_factor: float) -> float:
    """The form's margin at an AF; a critical flagged critically damped whose AF is not finite
    (no peak at all) needs none where the form exempts critically damped modes."""
    exempt = form.no_margin_below_af is not None and critical.critically_damped
    if not math.isfinite(amplification_factor) and exempt:
        return 0.0
    return margin_form_percent(form, amplification_factor=amplification_factor)


def _margin(side: str, nc: float, mos: float | None, mcs: float | None) -> float:
    below = 100.0 * (mos - nc) / mos if mos is not None else -math.inf
    above = 100.0 * (nc - mcs) / mcs if mcs is not None else -math.inf
    return (
        below
        if side == "below_min_operating"
        else above
        if side == "above_max_continuous"
        else max(below, above)
    )


def _classify(nc: float, op: OperatingSpeeds) -> tuple[Side | None, str]:
    mos, mcs = op.min_operating_rpm, op.max_continuous_rpm
    if mos is not None and nc < mos:
        return "below_min_operating", ""
    if mcs is not None and nc > mcs:
        return "above_max_continuous", ""
    if mos is not None and mcs is not None:
        return "inside_operating_range", ""
    if mos is None and mcs is None:
        return None, "neither the minimum operating nor the maximum continuous speed is given"
    missing = "maximum continuous" if mcs is None else "minimum operating"
    return (
        None,
        f"the {missing} speed is not given, so it cannot be told whether the critical lies inside the operating range",
    )


def _peak_interval(c: Critical) -> Interval | None:
    ci = c.natural_speed_ci95_rpm
    if ci is None or not (c.natural_speed_rpm > 0 and math.isfinite(c.speed_rpm)):
        return None
    k = c.speed_rpm / c.natural_speed_rpm
    return Interval(ci.low * k, ci.high * k)


def _margin_verdict(c: Critical, op: OperatingSpeeds, rule: MarginRule) -> MarginVerdict:
    nc, af = c.speed_rpm, c.amplification_factor
    af_text = f"AF {af:.1f}" if math.isfinite(af) else "AF not determinable"
    head = f"Critical at {_rpm(nc)} ({af_text}, segment {c.segment + 1} {c.direction})"
    base = dict(
        segment=c.segment,
        direction=c.direction,
        order=c.order,
        speed_rpm=nc,
        amplification_factor=af,
        rule=rule.ref,
    )
    side, reason = _classify(nc, op)
    forms = {
        "below_min_operating": [rule.below_min_operating],
        "above_max_continuous": [rule.above_max_continuous],
        "inside_operating_range": [rule.below_min_operating, rule.above_max_continuous],
    }.get(side or "", [])
    forms = [f for f in forms if f is not None]
    if side is not None and not forms:
        reason = f"{_short(rule.ref)} has no margin rule for criticals {side.replace('_', ' ')}"
    required = max((_required_at(c, f, af) for f in forms), default=math.nan)
    if side is not None and forms and math.isnan(required):
        caps = max(f.cap_percent for f in forms if isinstance(f, AfMarginForm))
        reason = f"the AF is not determinable ({', '.join(c.flags) or 'no half-power points'}); the rule's cap would require {caps:g} %"
    if reason:
        return MarginVerdict(
            **base,
            side=side,
            reference_speed_rpm=None,
            margin_percent=math.nan,
            required_margin_percent=math.nan,
            status="not_evaluated",
            sentence=f"{head}: not evaluated: {reason}.",
        )
    mos, mcs, trip = op.min_operating_rpm, op.max_continuous_rpm, op.trip_rpm
    margin = _margin(side, nc, mos, mcs)
    damped = required == 0.0

    if side == "inside_operating_range":
        ref_speed = mos if (mos - nc) / mos >= (nc - mcs) / mcs else mcs
        status: Status = "pass" if damped else "fail"
        text = (
            f"{head} lies inside the operating range {mos:,.0f}-{_rpm(mcs)}; {_short(rule.ref)} accepts a critical "
            f"there only when it requires no margin at its AF (critically damped){'' if damped else ', which it is not'}"
        )
    else:
        ref_speed = mos if side == "below_min_operating" else mcs
        status = "pass" if margin >= required else "fail"
        where = (
            f"below the minimum operating speed {_rpm(mos)}"
            if side == "below_min_operating"
            else f"above the maximum continuous speed {_rpm(mcs)}"
        )
        if side == "above_max_continuous" and trip is not None:
            where += f" ({'between it and' if nc <= trip else 'above'} the trip speed {_rpm(trip)})"
        text = f"{head} lies {margin:.1f} % {where}; {_short(rule.ref)} requires " + (
            "no margin at this AF (critically damped)" if damped else f"{required:.1f} %"
        )
    text += f": {status}."
    interval = _peak_interval(c)
    worst_m, worst_r, worst_ok = math.nan, math.nan, None
    if side != "inside_operating_range" and (
        interval is not None or c.amplification_factor_ci95 is not None
    ):
        if interval is None:
            end = nc
        else:
            end = interval.high if side == "below_min_operating" else interval.low
        worst_m = _margin(side, end, mos, mcs)
        af_high = c.amplification_factor_ci95.high if c.amplification_factor_ci95 else af
        worst_r = _required_at(c, forms[0], af_high)
        worst_ok = bool(worst_m >= worst_r) if math.isfinite(worst_r) else None
        text += (
            f" At the 95 % intervals' worst ends ({_rpm(end)}, AF {af_high:.1f}) the margin is {worst_m:.1f} % "
            f"against {worst_r:.1f} % required (information)."
        )
    edge = [f for f in c.flags if f in ("peak_at_range_edge", "outside_record")]
    if edge:
        text += f" Flagged {', '.join(edge)}: the critical may lie outside the record."
    return MarginVerdict(
        **base,
        side=side,
        reference_speed_rpm=ref_speed,
        margin_percent=margin,
        required_margin_percent=required,
        status=status,
        sentence=text,
        critically_damped=damped,
        speed_ci95_rpm=interval,
        worst_margin_percent=worst_m,
        worst_required_margin_percent=worst_r,
        worst_passed=worst_ok,
    )


def check_margins(
    criticals: Sequence[Critical], operating: OperatingSpeeds, rules: RuleSet
) -> tuple[MarginVerdict, ...]:
    """Separation-margin verdict on every critical (empty when the set has no margin rule).

    The critical speed judged is the peak-response ``speed_rpm`` (API RP 684's ``N_c``);
    missing operating speeds give verdicts "not evaluated" with the reason.  A split
    critical is judged at both of its speeds (each branch with its own AF and interval):
    either branch may be the one nearer the operating range.
    """
    if rules.margin is None:
        return ()
    return tuple(_margin_verdict(b, operating, rules.margin) for c in criticals for b in c.branches())



def _at_speed(curve: Curve, speed_rpm: float) -> tuple[float, float]:
    s = curve.speed_rpm
    z, raw = curve.response_um_pp, curve.raw_response_um_pp
    compensated = np.interp(speed_rpm, s, z.real) + 1j * np.interp(speed_rpm, s, z.imag)
    uncompensated = np.interp(speed_rpm, s, raw.real) + 1j * np.interp(speed_rpm, s, raw.imag)
    return float(abs(compensated)), float(abs(uncompensated))


def _vibration_verdict(curve: Curve, op: OperatingSpeeds, rules: RuleSet) -> VibrationVerdict:
    mcs, limit_rule, zones = op.max_continuous_rpm, rules.vibration_limit, rules.zones
    head = f"Probe {curve.probe}, segment {curve.segment + 1} {curve.direction}"
    base = dict(
        probe=curve.probe,
        segment=curve.segment,
        direction=curve.direction,
        rule=None if limit_rule is None else limit_rule.ref,
        zone_rule=None if zones is None else zones.ref,
    )
    reached = (
        curve.speed_rpm.size > 0
        and mcs is not None
        and curve.speed_rpm[0] <= mcs <= curve.speed_rpm[-1]
    )
    if not reached:
        why = (
            "the maximum continuous speed is not given"
            if mcs is None
            else f"the record ({_rpm(curve.speed_rpm[0])} to {_rpm(curve.speed_rpm[-1])}) does not reach the maximum continuous speed {_rpm(mcs)}"
        )
        return VibrationVerdict(
            **base,
            speed_rpm=math.nan if mcs is None else mcs,
            amplitude_um_pp=math.nan,
            raw_amplitude_um_pp=math.nan,
            limit_um_pp=math.nan,
            status="not_evaluated",
            zone=None,
            zone_boundaries_um_pp=None,
            sentence=f"{head}: not evaluated: {why}.",
        )
    amp, raw = _at_speed(curve, mcs)
    text = f"{head}: 1X {amp:.1f} um pp at the maximum continuous speed {_rpm(mcs)} (uncompensated {raw:.1f})"
    if limit_rule is None:
        limit, status = math.nan, "not_evaluated"
        text += f"; not evaluated: {rules.name} holds no vibration limit"
    else:
        limit = vibration_limit_um_pp(limit_rule, speed_rpm=mcs)
        status = "pass" if amp <= limit else "fail"
        text += f"; limit {limit:.1f} um pp, {_short(limit_rule.ref)}: {status}"
    zone, bounds = None, None
    if zones is not None and zones.min_speed_rpm <= mcs <= zones.max_speed_rpm:
        bounds = zone_boundaries_um_pp(zones, speed_rpm=mcs)
        zone = zone_of(zones, amplitude_um_pp=amp, speed_rpm=mcs)
        text += (
            f". Zone {zone} of {_short(zones.ref)} (A/B {bounds[0]:.0f}, B/C {bounds[1]:.0f}, C/D {bounds[2]:.0f} um pp), "
            "information only: zones judge steady running, not a run-up"
        )
    elif zones is not None:
        text += f". No zone: {_rpm(mcs)} lies outside the zones' range {zones.min_speed_rpm:,.0f}-{_rpm(zones.max_speed_rpm)}"
    return VibrationVerdict(
        **base,
        speed_rpm=mcs,
        amplitude_um_pp=amp,
        raw_amplitude_um_pp=raw,
        limit_um_pp=limit,
        status=status,
        zone=zone,
        zone_boundaries_um_pp=bounds,
        sentence=text + ".",
    )


def check_vibration(
    conditioned: ConditionedRun, operating: OperatingSpeeds, rules: RuleSet
) -> tuple[VibrationVerdict, ...]:
    """1X amplitude at MCS of every probe and segment against the set's limit (and zone).

    Empty when the set has neither a vibration limit nor zones.  Only 1X curves are judged.
    """
    if rules.vibration_limit is None and rules.zones is None:
        return ()
    return tuple(
        _vibration_verdict(c, operating, rules) for c in conditioned.curves if c.order == 1
    )


def judge(
    identification: Identification, *, rules: RuleSet, operating: OperatingSpeeds | None = None
) -> CheckResult:
    """Judge an identification against a rule set.

    Parameters
    ----------
    identification
        From :func:`runup.identify`.
    rules
        From :func:`load_rules`.
    operating
        Operating speeds; default those of the run's metadata (sidecar ``[speeds]``).
    """
    meta = identification.conditioned.metadata
    op = meta.operating if operating is None else operating
    margins = check_margins(identification.criticals, op, rules)
    vibration = check_vibration(identification.conditioned, op, rules)
    notes = []
    if rules.margin is not None and not identification.criticals:
        notes.append(
            "no critical speed was identified in the record: no separation margin to judge"
        )
    if rules.margin is None:
        notes.append(f"{rules.name} holds no separation-margin rule")
    if rules.vibration_limit is None:
        notes.append(f"{rules.name} holds no vibration limit")
    if op.min_operating_rpm is None or op.max_continuous_rpm is None:
        notes.append(
            "operating speeds incomplete: give the minimum operating and maximum continuous speeds"
        )
    return CheckResult(
        rules.name,
        rules.title,
        rules.file,
        rules.rules,
        meta.machine_id,
        meta.run_id,
        op,
        margins,
        vibration,
        tuple(notes),
    )
