"""What a report is made of: the results of one run, gathered once, in one record.

:func:`gather` runs the library's own steps — :func:`runup.criteria.judge`,
:func:`runup.compare.compare`, :func:`runup.stiffness.estimate_support_stiffness` — on an
identification, exactly as ``runup check`` and ``runup compare`` do, and keeps the result
objects beside their JSON renderings (``identification_to_dict``, ``check_to_dict``,
``agreement_to_dict``, ``stiffness_to_dict``).  The writers format those JSON documents
and nothing else, so the report's numbers equal the JSON output.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field
from datetime import UTC, datetime
from typing import Any

from ..compare import Agreement, agreement_to_dict, compare
from ..criteria import CheckResult, MarginVerdict, RuleSet, judge
from ..criteria_report import check_to_dict
from ..critical import Identification
from ..io.predicted import Predicted
from ..report import identification_to_dict, stiffness_to_dict
from ..run import OperatingSpeeds
from ..stiffness import StiffnessEstimate, estimate_support_stiffness, observed_from_agreement

__all__ = ["ReportInputs", "Progress", "gather", "compare_run", "margin_bands_rpm", "record_speed_range_rpm"]

#: Called with a short description of each step as it starts (e.g. to drive a progress bar).
Progress = Callable[[str], None]


@dataclass(frozen=True)
class ReportInputs:
    """Everything one run's report shows.

    Attributes
    ----------
    identification, identification_doc
        The identification and its JSON document (``identification_to_dict``).
    check, check_doc
        The check against a rule set and its document (``check_to_dict``), or ``None``.
    predicted, agreement, agreement_doc
        The prediction, the comparison and its document (``agreement_to_dict``, with
        ``support_stiffness`` added when a map allowed an estimate), or ``None``.
    stiffness
        The support-stiffness estimate, or ``None``.
    generated_at
        When the report was made (UTC).
    note
        One line shown under the title (e.g. "synthetic data").
    """

    identification: Identification
    identification_doc: dict[str, Any]
    check: CheckResult | None = None
    check_doc: dict[str, Any] | None = None
    predicted: Predicted | None = None
    agreement: Agreement | None = None
    agreement_doc: dict[str, Any] | None = None
    stiffness: StiffnessEstimate | None = None
    generated_at: datetime = field(default_factory=lambda: datetime.now(UTC))
    note: str = ""


def record_speed_range_rpm(identification: Identification) -> tuple[float, float] | None:
    """Lowest and highest speed of the conditioned curves, rpm (``None`` without curves)."""
    curves = identification.conditioned.curves
    if not curves:
        return None
    return (min(float(c.speed_rpm[0]) for c in curves), max(float(c.speed_rpm[-1]) for c in curves))


def compare_run(
    identification: Identification, predicted: Predicted, *, tolerance_percent: float = 5.0,
    segment: int | None = None,
) -> tuple[Agreement, StiffnessEstimate | None]:
    """Compare a run's criticals with a prediction, as ``runup compare`` does.

    The segment defaults to the only one holding 1X criticals (``None`` when several do);
    the record's speed range and probes are passed on; the support stiffness is estimated
    when the prediction has a critical speed map and a matched mode is on it.
    """
    if segment is None:
        segs = {c.segment for c in identification.criticals if c.order == 1}
        segment = segs.pop() if len(segs) == 1 else None
    agreement = compare(
        identification.criticals, predicted, tolerance_percent=tolerance_percent,
        probes=identification.conditioned.metadata.probes,
        speed_range_rpm=record_speed_range_rpm(identification), segment=segment,
    )
    stiffness = None
    if predicted.critical_speed_map is not None:
        observed = observed_from_agreement(agreement, predicted.critical_speed_map)
        if observed:
            stiffness = estimate_support_stiffness(predicted.critical_speed_map, observed)
    return agreement, stiffness


def gather(
    identification: Identification,
    *,
    rules: RuleSet | None = None,
    predicted: Predicted | None = None,
    operating: OperatingSpeeds | None = None,
    tolerance_percent: float = 5.0,
    generated_at: datetime | None = None,
    note: str = "",
    progress: Progress | None = None,
) -> ReportInputs:
    """Judge and compare one identification and keep every result with its JSON document.

    Parameters
    ----------
    identification
        From :func:`runup.identify`.
    rules
        Rule set to judge against (:func:`runup.criteria.load_rules`), or ``None``.
    predicted
        Rotordynamic prediction (:func:`runup.io.predicted.read_predicted`), or ``None``.
    operating
        Operating speeds for the check; default the run's metadata.
    tolerance_percent
        Speed tolerance of the comparison, %.
    generated_at
        Date of the report; default now (UTC).
    note
        One line for under the title.
    progress
        Called with the name of each step.
    """
    step = progress or (lambda _text: None)
    step("rendering the identification")
    doc = identification_to_dict(identification)
    check = check_doc = None
    if rules is not None:
        step(f"judging against {rules.name}")
        check = judge(identification, rules=rules, operating=operating)
        check_doc = check_to_dict(check)
    agreement = agreement_doc = stiffness = None
    if predicted is not None:
        step("comparing with the prediction")
        agreement, stiffness = compare_run(identification, predicted, tolerance_percent=tolerance_percent)
        agreement_doc = agreement_to_dict(agreement)
        if stiffness is not None:
            agreement_doc["support_stiffness"] = stiffness_to_dict(stiffness)
    return ReportInputs(
        identification=identification, identification_doc=doc, check=check, check_doc=check_doc,
        predicted=predicted, agreement=agreement, agreement_doc=agreement_doc, stiffness=stiffness,
        generated_at=generated_at or datetime.now(UTC), note=note,
    )


def margin_bands_rpm(check: CheckResult, *, segment: int | None = None) -> tuple[tuple[float, float], ...]:
    """Speed bands the separation-margin verdicts keep clear, from the verdicts' own numbers.

    A band runs from the reference speed to the reference ``-+`` the required margin, on the
    side the margin is measured: below the minimum operating speed ``[MOS (1 - m/100), MOS]``,
    above the maximum continuous speed ``[MCS, MCS (1 + m/100)]`` — the definitions of
    ``MarginVerdict.margin_percent``.  Each side shows the band of its nearest critical
    (smallest margin) among the evaluated verdicts with a positive requirement: bands of
    farther criticals start at the same speed and would only overlap it.  The rule itself
    is not evaluated here.
    """
    op = check.operating
    nearest: dict[bool, MarginVerdict] = {}
    for v in check.margins:
        ref, req = v.reference_speed_rpm, v.required_margin_percent
        if (segment is not None and v.segment != segment) or ref is None or v.status == "not_evaluated":
            continue
        if not (math.isfinite(req) and req > 0 and math.isfinite(v.margin_percent)):
            continue
        below = v.side == "below_min_operating" or (
            v.side == "inside_operating_range" and op.min_operating_rpm is not None and ref == op.min_operating_rpm
        )
        if below not in nearest or v.margin_percent < nearest[below].margin_percent:
            nearest[below] = v
    bands = []
    for below, v in sorted(nearest.items(), reverse=True):
        ref, req = v.reference_speed_rpm, v.required_margin_percent
        assert ref is not None  # filtered above
        bands.append((ref * (1.0 - req / 100.0), ref) if below else (ref, ref * (1.0 + req / 100.0)))
    return tuple(bands)
