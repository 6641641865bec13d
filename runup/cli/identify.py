"""``runup identify``: the criticals of one run, as a table and JSON."""

from __future__ import annotations

import json
import math
import sys
from collections import Counter
from pathlib import Path

from rich.console import Console
from rich.table import Table

from ..critical import Identification, Interval
from ..errors import RunupError
from ..report import CAUTION, identification_to_dict
from . import app
from ._common import (
    ColumnOpt,
    JsonOpt,
    MachineIdOpt,
    NoDespikeOpt,
    NoSidecarOpt,
    NoSlowRollOpt,
    ReviewOpt,
    RunFile,
    RunIdOpt,
    RunOptions,
    SidecarOpt,
    SlowRollOpt,
    fail,
    fmt,
    fmt_ci,
    load_identification,
    out,
    write_text,
)


def render_identification(result: Identification, console: Console) -> None:
    """Print the run summary, the criticals table, split pairs, estimators and notes."""
    cond = result.conditioned
    meta = cond.metadata
    lo = min((float(c.speed_rpm[0]) for c in cond.curves), default=math.nan)
    hi = max((float(c.speed_rpm[-1]) for c in cond.curves), default=math.nan)
    probes = sorted({c.probe for c in cond.curves})
    console.print(
        f"machine {meta.machine_id}, run {meta.run_id}: {len(probes)} probe(s), "
        f"{len(cond.segments)} segment(s) ({', '.join(s.label for s in cond.segments) or 'none'}), "
        f"{fmt(lo)}-{fmt(hi)} rpm"
    )
    if not result.criticals:
        console.print("No resonance found in the record: no critical speed to report.")
    else:
        table = Table(title="Critical speeds (95 % intervals in brackets)")
        for name, justify in [
            ("segment", "left"), ("order", "right"), ("peak rpm", "right"), ("natural rpm", "right"),
            ("damping ratio", "right"), ("AF", "right"), ("half-power rpm", "right"),
            ("probes", "left"), ("evidence", "left"), ("method", "left"), ("flags", "left"),
        ]:
            table.add_column(name, justify=justify, overflow="fold")  # type: ignore[arg-type]
        for c in result.criticals:
            table.add_row(
                cond.segment(c.segment).label,
                f"{c.order}X",
                fmt(c.speed_rpm),
                fmt(c.natural_speed_rpm) + fmt_ci(c.natural_speed_ci95_rpm, 0),
                fmt(c.damping_ratio, 3) + fmt_ci(c.damping_ratio_ci95, 3),
                fmt(c.amplification_factor, 1) + fmt_ci(c.amplification_factor_ci95, 1),
                f"{fmt(c.lower_half_power_rpm)}-{fmt(c.upper_half_power_rpm)}",
                ", ".join(c.probes),
                c.evidence,
                c.method,
                ", ".join(c.flags) or "-",
            )
        console.print(table)
        for c in result.criticals:
            if c.split is not None:
                lo_b, hi_b = c.split.lower, c.split.upper
                console.print(
                    f"split critical near {fmt(c.speed_rpm)} rpm: {fmt(lo_b.natural_speed_rpm)} rpm "
                    f"(dominant {lo_b.dominant_probe}) and {fmt(hi_b.natural_speed_rpm)} rpm "
                    f"(dominant {hi_b.dominant_probe}), {c.split.separation_percent:.1f} % apart"
                )
        _render_estimators(result, console)
    counts = Counter(k.kind for k in cond.corrections)
    if counts:
        console.print("conditioning: " + ", ".join(f"{n} x {kind}" for kind, n in sorted(counts.items())))
    for w in cond.warnings:
        console.print(f"warning: {w}")
    for r in result.rejected:
        console.print(f"not reported: {r}")
    console.print(CAUTION)


def _render_estimators(result: Identification, console: Console) -> None:
    table = Table(title="AF estimators side by side (95 % intervals; headline marked *)")
    for name in ("critical rpm", "global fit", "half-power", "phase slope", "circle fit", "disagree"):
        table.add_column(name, justify="left" if name == "disagree" else "right")
    for c in result.criticals:
        est = c.estimators
        if est is None:
            continue
        cells = []
        for key in ("global_fit", "half_power", "phase_slope", "circle_fit"):
            row = est.row(key)
            if row is None or not math.isfinite(row.amplification_factor):
                cells.append("-")
                continue
            mark = "*" if key == est.headline else ""
            ci = Interval(row.af_ci95_low, row.af_ci95_high) if math.isfinite(row.af_ci95_low) else None
            cells.append(f"{mark}{fmt(row.amplification_factor, 1)}{fmt_ci(ci, 1)}")
        table.add_row(fmt(c.speed_rpm), *cells, ", ".join(est.disagree) or "-")
    console.print(table)


def emit_json(json_out: Path | None, doc: dict) -> bool:
    """Write ``doc`` to ``json_out`` ('-' is stdout). Returns True when stdout was used."""
    if json_out is None:
        return False
    text = json.dumps(doc, indent=2, allow_nan=False) + "\n"
    if str(json_out) == "-":
        sys.stdout.write(text)
        return True
    write_text(json_out, text)
    return False


@app.command()
def identify(
    run_file: RunFile,
    json_out: JsonOpt = None,
    column: ColumnOpt = None,
    sidecar: SidecarOpt = None,
    no_sidecar: NoSidecarOpt = False,
    slow_roll: SlowRollOpt = None,
    no_slow_roll: NoSlowRollOpt = False,
    no_despike: NoDespikeOpt = False,
    review: ReviewOpt = None,
    machine_id: MachineIdOpt = None,
    run_id: RunIdOpt = None,
) -> None:
    """Identify critical speeds, damping and amplification factors in one run.

    Prints a table of the criticals per speed segment and, with --json, writes every
    number with per-probe detail. Exit code 0 on success, 2 on bad input.
    """
    opts = RunOptions(run_file, tuple(column or ()), sidecar, no_sidecar, slow_roll, no_slow_roll, no_despike,
                      review, machine_id, run_id)
    try:
        result = load_identification(opts)
        doc = identification_to_dict(result)
    except RunupError as exc:
        fail(str(exc))
    if emit_json(json_out, doc):
        return
    render_identification(result, out)
    if json_out is not None:
        out.print(f"JSON written to {json_out}")
