"""The report's content: blocks built from the JSON documents of one run (formatting only).

Every number comes from ``identification_to_dict``, ``check_to_dict`` and
``agreement_to_dict`` (with ``stiffness_to_dict``) as held by :class:`ReportInputs`;
nothing is recomputed, only formatted (:mod:`.blocks`).
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Callable, Sequence
from typing import Any

from ..report import CAUTION
from .blocks import (
    MISSING,
    Block,
    Bullets,
    Caution,
    FigureRef,
    Heading,
    Paragraph,
    Table,
    ci,
    num,
    rpm,
)
from .figures import ReportFigure
from .inputs import ReportInputs

__all__ = ["report_title", "report_blocks", "METHOD_NOTES"]

#: Short notes on the methods, each pointing to its reference (details: docs/methods.md).
METHOD_NOTES = (
    "Conditioning: the record is cut into monotonic speed segments, duplicate speeds merged, isolated spikes "
    "removed (each correction recorded), and the slow-roll 1X vector — the runout — subtracted from every "
    "vector of the probe (docs/conditioning.md).",
    "Peak-response speed N_c and the half-power amplification factor AF = N_c / (N_2 − N_1), N_1 and N_2 "
    "where the amplitude is 0.707 of the peak (API RP 684, 2nd ed., 2005 — from memory).",
    "Modal fit: the single-mode unbalance response A r²/(1 − r² + 2jζr) of every mode, with residual terms, "
    "fitted by least squares to all probes at once; 95 % intervals from the fit covariance (docs/methods.md).",
    "Circle fit of X/r (Kennedy & Pancu, 1947; Ewins, Modal Testing, 2000, sec. 4.3.2); phase slope "
    "dφ/dr = 1/ζ at r = 1 (Rao, Mechanical Vibrations, 2011, sec. 3.7); intervals of these by parametric "
    "bootstrap (Efron & Tibshirani, 1993).",
    "Separation margins and vibration limits: the rule set named above, each rule with its source and how "
    "it was checked (docs/criteria.md).",
    "Measured against predicted: assignment by Kuhn–Munkres on speed and mode shape (MAC, Allemang & Brown, "
    "1982), verification rules and score as in docs/compare.md.",
)


def report_title(inputs: ReportInputs) -> str:
    """``"Run-up report — <machine> — <run>"``."""
    run = inputs.identification_doc["run"]
    return f"Run-up report — {run['machine_id']} — {run['run_id']}"


def _yes(value: bool | None) -> str:
    return MISSING if value is None else ("yes" if value else "no")


def _status(value: str | bool | None) -> str:
    if isinstance(value, bool):
        return "pass" if value else "FAIL"
    return {"pass": "pass", "fail": "FAIL", "not_evaluated": "not evaluated"}.get(str(value), str(value))


def _summary(inputs: ReportInputs) -> list[Block]:
    doc = inputs.identification_doc
    crits = doc["criticals"]
    items = [doc["message"] + (": " + ", ".join(
        f"{rpm(c['speed_rpm'])} rpm (AF {num(c['amplification_factor'], 1)})" for c in crits) if crits else "")]
    if inputs.check_doc is not None:
        chk = inputs.check_doc
        items.append(
            f"Check against {chk['rule_set']['name']}: {'passed' if chk['passed'] else 'FAILED'} — "
            f"{chk['n_failed']} of {chk['n_evaluated']} evaluated verdict(s) failed."
        )
    if inputs.agreement_doc is not None:
        agr = inputs.agreement_doc
        items.append(
            f"Agreement with the prediction: score {num(agr['score'], 0)} / 100, "
            f"{'all verification rules pass' if agr['passed'] else 'a verification rule fails'}."
        )
        stiff = agr.get("support_stiffness")
        if stiff is not None:
            items.append(f"Effective support stiffness {num(stiff['stiffness_ratio'], 2)} × nominal"
                         f"{ci(stiff['ci95'], 2)} (a suggestion for the modeller; see the caveat below).")
    return [Heading("Summary", "summary"), Bullets(tuple(items))]


def _provenance(inputs: ReportInputs) -> list[Block]:
    doc = inputs.identification_doc
    run, cond = doc["run"], doc["conditioning"]
    op = run["operating"]
    label = _segment_labels(inputs)
    blocks: list[Block] = [
        Heading("Provenance", "provenance"),
        Paragraph(
            f"Machine {run['machine_id']}, run {run['run_id']}, direction {run['direction'] or MISSING}, "
            f"rotation {run['rotation'] or MISSING}. Operating speeds: minimum operating {rpm(op['min_operating_rpm'])} "
            f"rpm, maximum continuous {rpm(op['max_continuous_rpm'])} rpm, trip {rpm(op['trip_rpm'])} rpm. "
            f"Report made {inputs.generated_at:%Y-%m-%d %H:%M} UTC by {doc['tool']['name']} "
            f"{doc['tool']['version']} (JSON schema {doc['schema_version']})."
        ),
        Table("sources", "Input files", ("file", "SHA-256"),
              tuple((s["path"], s["sha256"]) for s in run["sources"])),
        Table("probes", "Probes", ("probe", "plane", "mounting angle (deg)"),
              tuple((p["name"], p["plane"] or MISSING, num(p["angle_deg"], 0)) for p in run["probes"])),
        Table("segments", "Speed segments", ("segment", "direction", "speed range (rpm)", "samples",
                                              "sweep rate (rpm/s)"),
              tuple((s["label"], s["direction"], f"{rpm(s['start_rpm'])} → {rpm(s['end_rpm'])}",
                     str(s["n_samples"]), num(s["sweep_rate_rpm_per_s"], 1)) for s in cond["segments"])),
        Table("slow_roll", "Slow-roll vectors subtracted (the runout)",
              ("probe", "segment", "window (rpm)", "amplitude (µm pk-pk)", "phase lag (deg)", "points", "window chosen"),
              tuple((s["probe"], label(s["segment"]), f"{rpm(s['low_rpm'])}–{rpm(s['high_rpm'])}",
                     num(s["amplitude_um_pp"], 1), num(s["phase_lag_deg"], 0), str(s["n_points"]),
                     "automatically" if s["automatic"] else "by the user") for s in cond["slow_roll"])),
    ]
    kinds = Counter(k["kind"] for k in cond["corrections"])
    rows = Counter()
    for k in cond["corrections"]:
        rows[k["kind"]] += k["n_rows"]
    blocks.append(Table("corrections", "Corrections made by conditioning (every one is in the JSON)",
                        ("kind", "corrections", "source rows"),
                        tuple((kind, str(n), str(rows[kind])) for kind, n in sorted(kinds.items()))))
    settings = [(f"conditioning: {k}", str(v)) for k, v in cond["settings"].items()]
    settings += [(f"identification: {k}", str(v)) for k, v in doc["settings"].items()]
    blocks.append(Table("settings", "Settings", ("setting", "value"), tuple(settings)))
    if inputs.check_doc is not None:
        chk = inputs.check_doc
        blocks.append(Table(
            "rules", f"Rule set {chk['rule_set']['name']}: {chk['rule_set']['title']} ({chk['rule_set']['file']})",
            ("rule set", "rule", "source", "edition", "clause", "checked"),
            tuple((r["rule_set"], r["title"], r["source"], r["edition"], r["clause"] or MISSING, r["checked"])
                  for r in chk["rules"]),
        ))
    if inputs.predicted is not None:
        pred = inputs.predicted
        files = ", ".join(f"{s.path} (SHA-256 {s.sha256})" for s in pred.sources) or MISSING
        blocks.append(Paragraph(f"Prediction: {pred.model or MISSING}; files {files}."))
    notes = [f"warning: {w}" for w in cond["warnings"]]
    if notes:
        blocks.append(Bullets(tuple(notes)))
    return blocks


def _segment_labels(inputs: ReportInputs) -> Callable[[int], str]:
    """Segment index -> its label ("startup #1"), as the tables name segments."""
    labels = {s["index"]: s["label"] for s in inputs.identification_doc["conditioning"]["segments"]}
    return lambda index: labels.get(index, str(index))


def _criticals(inputs: ReportInputs) -> list[Block]:
    doc = inputs.identification_doc
    label = _segment_labels(inputs)
    crits = doc["criticals"]
    blocks: list[Block] = [Heading("Critical speeds", "criticals")]
    if not crits:
        return [*blocks, Paragraph("No resonance found in the record: no critical speed to report.")]
    blocks.append(Table(
        "criticals", "Critical speeds (95 % intervals in brackets)",
        ("segment", "order", "peak speed (rpm)", "natural speed (rpm)", "damping ratio", "AF",
         "half-power speeds (rpm)", "probes", "evidence", "method", "flags"),
        tuple((label(c["segment"]), f"{c['order']}X", rpm(c["speed_rpm"]),
               rpm(c["natural_speed_rpm"]) + ci(c["natural_speed_ci95_rpm"], 0),
               num(c["damping_ratio"], 3) + ci(c["damping_ratio_ci95"], 3),
               num(c["amplification_factor"], 1) + ci(c["amplification_factor_ci95"], 1),
               f"{rpm(c['lower_half_power_rpm'])}–{rpm(c['upper_half_power_rpm'])}",
               ", ".join(c["probes"]), c["evidence"], c["method"], ", ".join(c["flags"]) or MISSING)
              for c in crits),
    ))
    split_rows = []
    for c in crits:
        if c["split"] is not None:
            for name in ("lower", "upper"):
                b = c["split"][name]
                split_rows.append((rpm(c["speed_rpm"]), name, rpm(b["speed_rpm"]),
                                   rpm(b["natural_speed_rpm"]) + ci(b["natural_speed_ci95_rpm"], 0),
                                   num(b["damping_ratio"], 3), num(b["amplification_factor"], 1),
                                   b["dominant_probe"], num(b["direction_deg"], 0),
                                   num(c["split"]["separation_percent"], 1)))
    if split_rows:
        blocks.append(Table(
            "split", "Split criticals: both branches",
            ("critical (rpm)", "branch", "peak speed (rpm)", "natural speed (rpm)", "damping ratio", "AF",
             "dominant probe", "major axis (deg from vertical)", "separation (%)"), tuple(split_rows)))
    blocks.append(Table(
        "detail", "What each probe showed (peak amplitude in µm pk-pk)",
        ("critical (rpm)", "probe", "evidence", "peak speed (rpm)", "peak amplitude (µm pk-pk)",
         "phase rise (deg)", "half-power AF", "circle-fit AF", "flags"),
        tuple((rpm(c["speed_rpm"]), d["probe"], d["evidence"], rpm(d["peak_speed_rpm"]),
               num(d["peak_amplitude_um_pp"], 1), num(d["phase_rise_deg"], 0),
               num(d["half_power"]["amplification_factor"], 1) if d["half_power"] else MISSING,
               num(d["circle_fit"]["amplification_factor"], 1) if d["circle_fit"] else MISSING,
               ", ".join(d["flags"]) or MISSING) for c in crits for d in c["detail"]),
    ))
    blocks += _estimators(crits)
    notes = [f"{rpm(c['speed_rpm'])} rpm: {n}" for c in crits for n in c["notes"]]
    notes += [f"not reported: {r}" for r in doc["rejected_candidates"]]
    blocks.append(Bullets(tuple(notes), summary="How each critical was obtained (notes of the identification)"))
    return blocks


_ESTIMATORS = (("global_fit", "global fit"), ("half_power", "half-power"), ("phase_slope", "phase slope"),
               ("circle_fit", "circle fit"))


def _estimators(crits: Sequence[dict[str, Any]]) -> list[Block]:
    rows = []
    for c in crits:
        est = c["estimators"]
        if est is None:
            continue
        by_name = {r["estimator"]: r for r in est["rows"]}
        cells = []
        for key, _label in _ESTIMATORS:
            r = by_name.get(key)
            af = None if r is None else r["amplification_factor"]
            mark = " (headline)" if key == est["headline"] and af is not None else ""
            cells.append(MISSING if af is None else num(af, 1) + ci(r["amplification_factor_ci95"], 1) + mark)
        rows.append((rpm(c["speed_rpm"]), *cells, ", ".join(est["disagree"]) or MISSING))
    if not rows:
        return []
    return [Table("estimators", "AF estimators side by side (95 % intervals in brackets)",
                  ("critical (rpm)", *(label for _k, label in _ESTIMATORS), "disagree with the headline"),
                  tuple(rows))]


def _verdicts(inputs: ReportInputs) -> list[Block]:
    chk = inputs.check_doc
    if chk is None:
        return []
    label = _segment_labels(inputs)
    blocks: list[Block] = [
        Heading(f"Verdicts against {chk['rule_set']['name']}", "verdicts"),
        Paragraph(f"{'Passed' if chk['passed'] else 'FAILED'}: {chk['n_failed']} of {chk['n_evaluated']} evaluated "
                  f"verdict(s) failed; operating speeds {rpm(chk['operating']['min_operating_rpm'])}–"
                  f"{rpm(chk['operating']['max_continuous_rpm'])} rpm.", strong=True),
    ]
    if chk["margins"]:
        blocks.append(Table(
            "margins", "Separation margins", ("status", "segment", "critical (rpm)", "AF", "side", "reference (rpm)",
                                              "margin (%)", "required (%)", "at the 95 % ends: margin / required (%)"),
            tuple((_status(v["status"]), label(v["segment"]), rpm(v["speed_rpm"]), num(v["amplification_factor"], 1),
                   (v["side"] or MISSING).replace("_", " "), rpm(v["reference_speed_rpm"]), num(v["margin_percent"], 1),
                   num(v["required_margin_percent"], 1),
                   f"{num(v['worst_margin_percent'], 1)} / {num(v['worst_required_margin_percent'], 1)}")
                  for v in chk["margins"]), status=0))
    if chk["vibration"]:
        blocks.append(Table(
            "vibration", "1X vibration at the maximum continuous speed",
            ("status", "probe", "segment", "speed (rpm)", "compensated (µm pk-pk)", "uncompensated (µm pk-pk)",
             "limit (µm pk-pk)", "zone (information only)"),
            tuple((_status(v["status"]), v["probe"], label(v["segment"]), rpm(v["speed_rpm"]),
                   num(v["amplitude_um_pp"], 1), num(v["raw_amplitude_um_pp"], 1), num(v["limit_um_pp"], 1),
                   v["zone"] or MISSING) for v in chk["vibration"]), status=0))
    sentences = [v["sentence"] for v in chk["margins"] + chk["vibration"]] + [f"note: {n}" for n in chk["notes"]]
    blocks.append(Bullets(tuple(sentences), summary="Each verdict in words, with its source"))
    return blocks


def _comparison(inputs: ReportInputs) -> list[Block]:
    agr = inputs.agreement_doc
    if agr is None:
        return []
    blocks: list[Block] = [
        Heading("Measured against predicted", "comparison"),
        Paragraph(f"Agreement score {num(agr['score'], 0)} / 100 "
                  f"({'all verification rules pass' if agr['passed'] else 'a verification rule fails'}); "
                  f"speed tolerance ±{agr['tolerance_percent']:g} %.", strong=True),
        Table("scorecard", "Scorecard", ("status", "mode", "predicted (rpm)", "measured (rpm)", "error (%)",
                                          "AF ratio", "MAC", "score", "verification rules"),
              tuple((_status(m["passed"]), m["predicted"]["mode"], rpm(m["predicted"]["speed_rpm"]),
                     rpm(m["measured"]["speed_rpm"]), num(m["speed_error_percent"], 1, sign=True),
                     num(m["af_ratio"], 2), num(m["mac"], 3), num(m["score"], 2),
                     "; ".join(f"{_status(r['passed'])}: {r['rule']}" for r in m["checks"]))
                    for m in agr["matches"]), status=0),
    ]
    items = [f"predicted {u['predicted']['mode']} ({rpm(u['predicted']['speed_rpm'])} rpm) not matched: {u['reason']}"
             for u in agr["unmatched_predicted"]]
    items += [f"measured critical at {rpm(u['measured']['speed_rpm'])} rpm not matched: {u['reason']}"
              for u in agr["unmatched_measured"]]
    items += [f"note: {n}" for n in agr["notes"]]
    blocks += [Bullets(tuple(items)), Bullets((agr["score_formula"],), summary="How the score is computed")]
    stiff = agr.get("support_stiffness")
    if stiff is not None:
        blocks += [
            Heading("Effective support stiffness", "stiffness", 3),
            Paragraph(f"{num(stiff['stiffness_ratio'], 2)} × nominal, 95 %{ci(stiff['ci95'], 2)}; chi-square "
                      f"{num(stiff['chi_square'], 1)} on {stiff['degrees_of_freedom']} degree(s) of freedom "
                      f"(p = {stiff['p_value']:.2g}); map {stiff['map_range'][0]:g}–{stiff['map_range'][1]:g}."
                      if stiff["p_value"] is not None else
                      f"{num(stiff['stiffness_ratio'], 2)} × nominal, 95 %{ci(stiff['ci95'], 2)}."),
            Table("stiffness_residuals", "Measured natural speeds against the map at that stiffness",
                  ("mode", "measured natural speed (rpm)", "map speed (rpm)", "residual (%)"),
                  tuple((r["mode"], rpm(r["measured_speed_rpm"]), rpm(r["map_speed_rpm"]),
                         num(r["residual_percent"], 1, sign=True)) for r in stiff["residuals"])),
            Bullets(tuple(f"warning: {w}" for w in stiff["warnings"])),
            Paragraph(stiff["caveat"], strong=True),
        ]
    return blocks


def report_blocks(inputs: ReportInputs, figures: Sequence[ReportFigure]) -> tuple[Block, ...]:
    """The whole report, top to bottom, with the caution first and last."""
    blocks: list[Block] = [Caution(CAUTION)]
    if inputs.note:
        blocks.append(Paragraph(inputs.note, strong=True))
    blocks += _summary(inputs) + _criticals(inputs) + _verdicts(inputs) + _comparison(inputs)
    if figures:
        blocks.append(Heading("Plots", "plots"))
        blocks += [FigureRef(f.key) for f in figures]
    blocks += _provenance(inputs)
    blocks += [Heading("Methods", "methods"), Bullets(METHOD_NOTES), Caution(CAUTION)]
    return tuple(blocks)
