"""Rendering of :class:`runup.criteria.CheckResult` as a JSON-ready dict and as text lines.

A leaf: it computes nothing.  Non-finite numbers become ``null``; every rule appears with its
source, edition and checked marker; the caution of :mod:`runup.report` is included.
"""

from __future__ import annotations

from typing import Any

from ._version import __version__
from .criteria import CheckResult, MarginVerdict, VibrationVerdict
from .critical import Interval
from .report import CAUTION
from .report import json_number as _num
from .rules import RuleRef

__all__ = ["CHECK_SCHEMA_VERSION", "check_to_dict", "check_lines"]

#: Changes whenever a field of the check document changes meaning or is removed.
CHECK_SCHEMA_VERSION = 1


def _rule(ref: RuleRef | None) -> dict[str, Any] | None:
    if ref is None:
        return None
    s = ref.source
    return {
        "rule_set": ref.rule_set,
        "title": ref.title,
        "source": s.document,
        "edition": s.edition,
        "clause": s.clause,
        "checked": s.checked,
        "note": ref.note,
    }


def _interval(ci: Interval | None) -> list[float | None] | None:
    return None if ci is None else [_num(ci.low), _num(ci.high)]


def _margin(v: MarginVerdict) -> dict[str, Any]:
    return {
        "segment": v.segment,
        "direction": v.direction,
        "order": v.order,
        "speed_rpm": _num(v.speed_rpm),
        "amplification_factor": _num(v.amplification_factor),
        "side": v.side,
        "reference_speed_rpm": _num(v.reference_speed_rpm),
        "margin_percent": _num(v.margin_percent),
        "required_margin_percent": _num(v.required_margin_percent),
        "status": v.status,
        "critically_damped": v.critically_damped,
        "speed_ci95_rpm": _interval(v.speed_ci95_rpm),
        "worst_margin_percent": _num(v.worst_margin_percent),
        "worst_required_margin_percent": _num(v.worst_required_margin_percent),
        "worst_passed": v.worst_passed,
        "rule": _rule(v.rule),
        "sentence": v.sentence,
    }


def _vibration(v: VibrationVerdict) -> dict[str, Any]:
    return {
        "probe": v.probe,
        "segment": v.segment,
        "direction": v.direction,
        "speed_rpm": _num(v.speed_rpm),
        "amplitude_um_pp": _num(v.amplitude_um_pp),
        "raw_amplitude_um_pp": _num(v.raw_amplitude_um_pp),
        "limit_um_pp": _num(v.limit_um_pp),
        "status": v.status,
        "rule": _rule(v.rule),
        "zone": v.zone,
        "zone_boundaries_um_pp": None
        if v.zone_boundaries_um_pp is None
        else [_num(b) for b in v.zone_boundaries_um_pp],
        "zone_rule": _rule(v.zone_rule),
        "sentence": v.sentence,
    }


def check_to_dict(result: CheckResult) -> dict[str, Any]:
    """The check as a JSON-ready dict (``json.dumps(..., allow_nan=False)`` succeeds)."""
    op = result.operating
    return {
        "schema_version": CHECK_SCHEMA_VERSION,
        "document": "runup check",
        "runup_version": __version__,
        "machine_id": result.machine_id,
        "run_id": result.run_id,
        "rule_set": {"name": result.rule_set, "title": result.title, "file": result.file},
        "rules": [_rule(r) for r in result.rules],
        "operating": {
            "min_operating_rpm": _num(op.min_operating_rpm),
            "max_continuous_rpm": _num(op.max_continuous_rpm),
            "trip_rpm": _num(op.trip_rpm),
        },
        "passed": result.passed,
        "exit_code": result.exit_code,
        "n_evaluated": result.n_evaluated,
        "n_failed": result.n_failed,
        "margins": [_margin(v) for v in result.margins],
        "vibration": [_vibration(v) for v in result.vibration],
        "notes": list(result.notes),
        "caution": CAUTION,
    }


def check_lines(result: CheckResult) -> tuple[str, ...]:
    """Plain-text lines for a terminal or a log: rules with sources, verdicts, notes, caution."""
    lines = [f"rule set {result.rule_set}: {result.title} ({result.file})"]
    lines += [f"  rule {r.label}" for r in result.rules]
    lines += [f"[{v.status}] {v.sentence}" for v in result.verdicts]
    lines += [f"note: {n}" for n in result.notes]
    failed, evaluated = result.n_failed, result.n_evaluated
    lines.append(
        f"{'FAILED' if failed else 'passed'}: {failed} of {evaluated} evaluated verdict(s) failed, "
        f"{len(result.verdicts) - evaluated} not evaluated"
    )
    lines.append(CAUTION)
    return tuple(lines)
