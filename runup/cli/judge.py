"""``runup check``, ``runup compare`` and ``runup subtract``: judge a run and relate it to others."""

from __future__ import annotations

import math
from dataclasses import replace
from pathlib import Path
from typing import Annotated

import typer
from rich.table import Table

from ..compare import Agreement, agreement_to_dict, compare
from ..criteria import available_rule_sets, judge, load_rules
from ..criteria_report import check_lines, check_to_dict
from ..errors import RunupError
from ..io import read_run
from ..io.predicted import read_predicted
from ..io.write import write_run
from ..report import CAUTION, stiffness_to_dict
from ..stiffness import (
    CAVEAT,
    StiffnessEstimate,
    estimate_support_stiffness,
    observed_from_agreement,
)
from ..subtract import subtract
from . import app
from ._common import (
    EXIT_RULE_FAILED,
    ColumnOpt,
    JsonOpt,
    MapOpt,
    NoDespikeOpt,
    NoSidecarOpt,
    NoSlowRollOpt,
    ReviewOpt,
    RunFile,
    RunOptions,
    SidecarOpt,
    SlowRollOpt,
    UsageProblem,
    fail,
    fmt,
    load_identification,
    out,
)
from .identify import emit_json

RpmOpt = Annotated[float | None, typer.Option(min=0.0, help="rpm (overrides the sidecar).")]


@app.command()
def check(
    run_file: RunFile,
    rules: Annotated[str, typer.Option("--rules", help="Rule set name (see --list-rules) or path to a rule TOML.")] = "api617",
    json_out: JsonOpt = None,
    min_operating: RpmOpt = None,
    max_continuous: RpmOpt = None,
    trip: RpmOpt = None,
    column: ColumnOpt = None,
    sidecar: SidecarOpt = None,
    no_sidecar: NoSidecarOpt = False,
    slow_roll: SlowRollOpt = None,
    no_slow_roll: NoSlowRollOpt = False,
    no_despike: NoDespikeOpt = False,
    review: ReviewOpt = None,
    list_rules: Annotated[bool, typer.Option("--list-rules", help="List the shipped rule sets and exit.")] = False,
) -> None:
    """Judge separation margins and vibration at speed against a rule set.

    Per critical: actual and required separation margin, pass/fail; per probe: 1X at the
    maximum continuous speed against the limit. Exit code 0 when every evaluated rule
    passes, 1 when any fails, 2 on bad input.
    """
    if list_rules:
        for name in available_rule_sets():
            rs = load_rules(name)
            out.print(f"{name}: {rs.title}")
        raise typer.Exit(0)
    opts = RunOptions(run_file, tuple(column or ()), sidecar, no_sidecar, slow_roll, no_slow_roll, no_despike, review)
    try:
        rule_set = load_rules(rules)
        ident = load_identification(opts)
        meta = ident.conditioned.metadata
        changes = {
            k: v
            for k, v in (("min_operating_rpm", min_operating), ("max_continuous_rpm", max_continuous), ("trip_rpm", trip))
            if v is not None
        }
        operating = replace(meta.operating, **changes) if changes else meta.operating
        result = judge(ident, rules=rule_set, operating=operating)
        doc = check_to_dict(result)
    except (RunupError, ValueError) as exc:
        fail(str(exc))
    if not emit_json(json_out, doc):
        for line in check_lines(result):
            out.print(line, markup=False)
    raise typer.Exit(result.exit_code)


def _render_agreement(agreement: Agreement, stiffness: StiffnessEstimate | None) -> None:
    table = Table(title=f"Measured against predicted critical speeds (tolerance ±{agreement.tolerance_percent:g} %)")
    for name in ("mode", "predicted rpm", "measured rpm", "error %", "AF ratio", "MAC", "score", "rules"):
        table.add_column(name, justify="left" if name in ("mode", "rules") else "right", overflow="fold")
    for m in agreement.matches:
        rules = "; ".join(f"{'pass' if c.passed else 'FAIL'}: {c.rule}" for c in m.checks)
        table.add_row(
            m.predicted.mode, fmt(m.predicted.speed_rpm), fmt(m.measured.speed_rpm),
            f"{m.speed_error_percent:+.1f}", fmt(m.af_ratio, 2), fmt(m.mac, 3), fmt(m.score, 2), rules,
        )
    out.print(table)
    for u in agreement.unmatched_predicted:
        out.print(f"predicted {u.mode.mode} ({fmt(u.mode.speed_rpm)} rpm) not matched: {u.reason}", markup=False)
    for u in agreement.unmatched_measured:
        out.print(f"measured critical at {fmt(u.critical.speed_rpm)} rpm not matched: {u.reason}", markup=False)
    for n in agreement.notes:
        out.print(f"note: {n}", markup=False)
    score = "-" if not math.isfinite(agreement.score) else f"{agreement.score:.0f}"
    out.print(f"agreement score: {score} / 100 ({'all rules pass' if agreement.passed else 'a rule fails'})")
    if stiffness is not None:
        ci = stiffness.ci95
        text = (
            f"effective support stiffness: {stiffness.stiffness_ratio:.2f} x nominal "
            f"(95 %: {ci.low:.2f}-{ci.high:.2f}; map {stiffness.map_range[0]:g}-{stiffness.map_range[1]:g})"
        )
        out.print(text, markup=False)
        for w in stiffness.warnings:
            out.print(f"warning: {w}", markup=False)
        out.print(CAVEAT, markup=False)
    out.print(CAUTION)


@app.command(name="compare")
def compare_command(
    run_file: RunFile,
    predicted: Annotated[Path, typer.Option("--predicted", help="Predicted criticals: CSV, TOML or JSON.")],
    speed_map: MapOpt = None,
    segment: Annotated[int | None, typer.Option(help="Speed segment to compare (0-based) when the run has several.")] = None,
    tolerance: Annotated[float, typer.Option(min=0.1, max=50.0, help="Speed tolerance, % (default 5).")] = 5.0,
    json_out: JsonOpt = None,
    column: ColumnOpt = None,
    sidecar: SidecarOpt = None,
    no_sidecar: NoSidecarOpt = False,
    slow_roll: SlowRollOpt = None,
    no_slow_roll: NoSlowRollOpt = False,
    no_despike: NoDespikeOpt = False,
    review: ReviewOpt = None,
) -> None:
    """Compare measured criticals with a rotordynamic prediction: scorecard and score.

    Exit code 0 when every verification rule passes, 1 when one fails, 2 on bad input.
    """
    opts = RunOptions(run_file, tuple(column or ()), sidecar, no_sidecar, slow_roll, no_slow_roll, no_despike, review)
    try:
        pred = read_predicted(predicted, critical_speed_map=speed_map)
        ident = load_identification(opts)
        segs = {c.segment for c in ident.criticals if c.order == 1}
        seg = segment if segment is not None else (segs.pop() if len(segs) == 1 else None)
        cond = ident.conditioned
        lo = min((float(c.speed_rpm[0]) for c in cond.curves), default=math.nan)
        hi = max((float(c.speed_rpm[-1]) for c in cond.curves), default=math.nan)
        agreement = compare(
            ident.criticals, pred, tolerance_percent=tolerance, probes=cond.metadata.probes,
            speed_range_rpm=(lo, hi) if math.isfinite(lo) else None, segment=seg,
        )
        stiffness = None
        if pred.critical_speed_map is not None:
            observed = observed_from_agreement(agreement, pred.critical_speed_map)
            if observed:
                stiffness = estimate_support_stiffness(pred.critical_speed_map, observed)
        doc = agreement_to_dict(agreement)
        if stiffness is not None:
            doc["support_stiffness"] = _stiffness_dict(stiffness)
    except RunupError as exc:
        fail(str(exc))
    if not emit_json(json_out, doc):
        _render_agreement(agreement, stiffness)
    raise typer.Exit(0 if agreement.passed else EXIT_RULE_FAILED)


def _stiffness_dict(s: StiffnessEstimate) -> dict:
    return stiffness_to_dict(s)


@app.command(name="subtract")
def subtract_command(
    with_weight: Annotated[Path, typer.Argument(help="Run with the test weight installed.")],
    residual: Annotated[Path, typer.Argument(help="Residual (reference) run, same probes.")],
    output: Annotated[Path, typer.Option("-o", "--output", help="Run file to write: .csv or .parquet (+ .toml sidecar).")],
    no_despike: NoDespikeOpt = False,
) -> None:
    """Vector subtraction speed by speed: the response to a known test weight alone.

    Writes a run in the canonical long layout that every command accepts.
    """
    try:
        resolved = {p.resolve() for p in (with_weight, residual)}
        sidecars = {p.with_suffix(".toml").resolve() for p in (with_weight, residual)}
        if output.resolve() in resolved or output.with_suffix(".toml").resolve() in sidecars:
            raise UsageProblem(f"{output}: would overwrite an input run or its sidecar; choose another output")
        run = subtract(read_run(with_weight), read_run(residual), despike=not no_despike)
        path = write_run(run, output)
    except RunupError as exc:
        fail(str(exc))
    out.print(f"difference run written to {path} ({len(run.samples)} samples, {len(run.probe_names)} probe(s))")
