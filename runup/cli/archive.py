"""``runup archive add|list|show|trend|diff`` and ``runup batch``: fingerprints over time and at scale.

Exit codes: 0 success; 1 ``archive diff`` found a drift alert; 2 bad input or usage, and
``batch`` when any run failed (the others are still processed and reported).
"""

from __future__ import annotations

import math
from dataclasses import asdict
from pathlib import Path
from typing import Annotated, Literal

import numpy as np
import pandas as pd
import typer
from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeRemainingColumn
from rich.table import Table

from ..archive import (
    DriftThresholds,
    Trend,
    add_fingerprint,
    diff,
    history,
    list_runs,
    load_run,
    open_archive,
    read_baseline,
    trend,
)
from ..archive.render import drift_to_dict, fingerprint_to_dict, trend_to_dict
from ..batch import BatchItem, BatchOptions, expand_inputs, parse_executor, run_batch
from ..criteria import judge, load_rules
from ..errors import RunupError
from ..fingerprint import Fingerprint, fingerprint
from ..report import CAUTION
from . import app
from ._common import (
    EXIT_BAD_INPUT,
    EXIT_RULE_FAILED,
    ColumnOpt,
    JsonOpt,
    NoDespikeOpt,
    NoSidecarOpt,
    NoSlowRollOpt,
    ReviewOpt,
    RunOptions,
    SidecarOpt,
    SlowRollOpt,
    UsageProblem,
    err,
    fail,
    fmt,
    load_identification,
    out,
)
from .identify import emit_json

archive_app = typer.Typer(
    help="Machine fingerprints: store runs, list them, trend them, compare a run with the baseline.",
    no_args_is_help=True, rich_markup_mode=None,
)
app.add_typer(archive_app, name="archive")

ArchiveOpt = Annotated[Path, typer.Option("--archive", help="Archive directory (created by the first add).")]
MachineOpt = Annotated[str, typer.Option("--machine", help="Machine id.")]
TagOpt = Annotated[list[str] | None, typer.Option("--tag", help="Condition tag KEY=VALUE (repeatable), e.g. start=cold, "
                                                  "oil_temp_c=48, start_time=2024-05-17T08:30.")]
RulesOpt = Annotated[str | None, typer.Option("--rules", help="Also judge against this rule set (name or TOML path).")]
Quantity = Literal["critical_speed_rpm", "amplification_factor", "slow_roll_amplitude_um_pp"]
_UNITS = {"critical_speed_rpm": "rpm", "amplification_factor": "–", "slow_roll_amplitude_um_pp": "µm pp"}
_LABELS = {"critical_speed_rpm": "critical speed", "amplification_factor": "amplification factor",
           "slow_roll_amplitude_um_pp": "slow-roll amplitude"}


def parse_tags(items: list[str] | None) -> dict[str, str]:
    """``KEY=VALUE`` items as a dict (a key given twice is a usage error)."""
    tags: dict[str, str] = {}
    for item in items or []:
        key, sep, value = item.partition("=")
        if not sep or not key.strip():
            raise UsageProblem(f"--tag expects KEY=VALUE, got '{item}'")
        if key.strip() in tags:
            raise UsageProblem(f"--tag {key.strip()} given twice")
        tags[key.strip()] = value.strip()
    return tags


@archive_app.command("add")
def add(
    run_file: Annotated[Path, typer.Argument(help="Run table: CSV or Parquet.")],
    archive: ArchiveOpt,
    machine: Annotated[str | None, typer.Option("--machine", help="Machine id (overrides the sidecar).")] = None,
    run_id: Annotated[str | None, typer.Option("--run-id", help="Run id (overrides the sidecar and file name).")] = None,
    baseline: Annotated[bool, typer.Option("--baseline", help="Mark this run as the machine's baseline.")] = False,
    tag: TagOpt = None,
    rules: RulesOpt = None,
    replace: Annotated[bool, typer.Option("--replace", help="Replace a run of the same id.")] = False,
    column: ColumnOpt = None,
    sidecar: SidecarOpt = None,
    no_sidecar: NoSidecarOpt = False,
    slow_roll: SlowRollOpt = None,
    no_slow_roll: NoSlowRollOpt = False,
    no_despike: NoDespikeOpt = False,
    review: ReviewOpt = None,
) -> None:
    """Identify a run (optionally judge it) and store its fingerprint in the archive."""
    opts = RunOptions(run_file, tuple(column or ()), sidecar, no_sidecar, slow_roll, no_slow_roll, no_despike,
                      review, machine, run_id)
    try:
        tags = parse_tags(tag)
        rule_set = load_rules(rules) if rules is not None else None
        ident = load_identification(opts)
        check = judge(ident, rules=rule_set) if rule_set is not None else None
        fp = fingerprint(ident, check=check, tags=tags)
        commit = add_fingerprint(archive, fp, replace=replace, baseline=baseline)
    except RunupError as exc:
        fail(str(exc))
    what = "replaced" if commit.replaced else "added"
    out.print(f"{what} run {commit.run_id} of machine {commit.machine_id}: {len(fp.criticals)} critical(s)"
              + (", baseline" if baseline else "") + (f", check {'passed' if check.passed else 'FAILED'}"
                                                       if check is not None else ""), markup=False)


@archive_app.command("list")
def list_command(
    archive: ArchiveOpt,
    machine: Annotated[str | None, typer.Option("--machine", help="Only this machine.")] = None,
    json_out: JsonOpt = None,
) -> None:
    """List the archived runs (baseline marked *)."""
    try:
        runs = list_runs(archive, machine_id=machine)
    except RunupError as exc:
        fail(str(exc))
    cols = ["machine_id", "run_id", "time_key", "direction", "n_criticals", "rule_set", "baseline", "committed_utc"]
    doc = {"runs": [{c: (None if isinstance(v, float) and math.isnan(v) else v) for c, v in zip(cols, row, strict=True)}
                    for row in runs[cols].astype(object).itertuples(index=False)]}
    if emit_json(json_out, doc):
        return
    table = Table(title=f"{len(runs)} run(s) in {archive}")
    for c in ("machine", "run", "time", "direction", "criticals", "rule set", "committed (UTC)"):
        table.add_column(c, overflow="fold")
    for r in runs.itertuples(index=False):
        table.add_row(r.machine_id, ("* " if r.baseline else "") + r.run_id, r.time_key, r.direction or "-",
                      str(r.n_criticals), r.rule_set or "-", r.committed_utc)
    out.print(table)


def _render_fingerprint(fp: Fingerprint) -> None:
    tags = ", ".join(f"{k}={v}" for k, v in fp.tags) or "none"
    out.print(f"machine {fp.machine_id}, run {fp.run_id} ({fp.direction or '-'}), time {fp.time_key}; tags: {tags}",
              markup=False)
    for s in fp.segments:
        out.print(f"segment {s.index}: {s.direction} {fmt(s.start_rpm)}-{fmt(s.end_rpm)} rpm, "
                  f"sweep {fmt(s.sweep_rate_rpm_per_s, 1)} rpm/s", markup=False)
    table = Table(title="Criticals (95 % intervals in brackets)")
    for c in ("segment", "order", "peak rpm", "natural rpm", "damping ratio", "AF", "flags"):
        table.add_column(c, justify="left" if c == "flags" else "right", overflow="fold")
    for c in fp.criticals:
        table.add_row(str(c.segment), f"{c.order}X", fmt(c.speed_rpm),
                      f"{fmt(c.natural_speed_rpm)} [{fmt(c.natural_speed_ci95_low_rpm)}, {fmt(c.natural_speed_ci95_high_rpm)}]",
                      f"{fmt(c.damping_ratio, 3)} [{fmt(c.damping_ratio_ci95_low, 3)}, {fmt(c.damping_ratio_ci95_high, 3)}]",
                      f"{fmt(c.amplification_factor, 1)} [{fmt(c.amplification_factor_ci95_low, 1)}, "
                      f"{fmt(c.amplification_factor_ci95_high, 1)}]", ", ".join(c.flags) or "-")
    out.print(table)
    for s in fp.slow_roll:
        out.print(f"slow roll {s.probe} {s.order}X: {abs(s.vector_um_pp):.2f} um pp "
                  f"({fmt(s.low_rpm)}-{fmt(s.high_rpm)} rpm)", markup=False)
    for r in fp.running_speed:
        out.print(f"1X at {fmt(r.speed_rpm)} rpm ({r.basis}) {r.probe}: {fmt(abs(r.response_um_pp), 2)} um pp",
                  markup=False)
    for v in fp.verdicts:
        out.print(f"{v.status}: {v.kind} {v.subject} {fmt(v.value, 1)} (limit {fmt(v.limit, 1)})", markup=False)
    for s in fp.sources:
        out.print(f"source {s.path} sha256 {s.sha256}", markup=False)
    out.print(f"runup {fp.tool_version}", markup=False)


@archive_app.command("show")
def show(
    run_id: Annotated[str, typer.Argument(help="Run id.")],
    archive: ArchiveOpt,
    machine: MachineOpt,
    json_out: JsonOpt = None,
    curves: Annotated[bool, typer.Option("--curves", help="Include the grid curves in the JSON.")] = False,
) -> None:
    """Show one archived fingerprint."""
    try:
        fp = load_run(archive, machine, run_id)
    except RunupError as exc:
        fail(str(exc))
    if not emit_json(json_out, fingerprint_to_dict(fp, curves=curves)):
        _render_fingerprint(fp)


@archive_app.command("trend")
def trend_command(
    machine: Annotated[str, typer.Argument(help="Machine id.")],
    archive: ArchiveOpt,
    output: Annotated[Path | None, typer.Option("-o", "--output", help="Plot file (.png, .svg, .pdf).")] = None,
    quantity: Annotated[Quantity, typer.Option("--quantity", help="What the plot shows.")] = "critical_speed_rpm",
    json_out: JsonOpt = None,
) -> None:
    """Critical speeds, AF and slow-roll amplitude over the machine's history (table, JSON, plot).

    Criticals are tracked as the modes of the baseline run (else the first run).
    """
    try:
        runs = history(archive, machine)
        if not runs:
            raise UsageProblem(f"no runs of machine {machine} in {archive}")
        base_id = read_baseline(archive, machine)
        ref = next((f for f in runs if f.run_id == base_id), None)
        result = trend(runs, reference=ref)
    except RunupError as exc:
        fail(str(exc))
    if not emit_json(json_out, trend_to_dict(result)):
        frame = result.to_frame()
        table = Table(title=f"Trend of machine {machine} (reference run {result.reference_run_id})")
        table.add_column("run")
        table.add_column("time")
        keys = list(dict.fromkeys(zip(frame["quantity"], frame["series"], strict=True))) if len(frame) else []
        for q, s in keys:
            table.add_column(f"{_LABELS[q]} {s}", justify="right", overflow="fold")
        for fp in runs:
            cells = []
            for q, s in keys:
                sel = frame[(frame.run_id == fp.run_id) & (frame.quantity == q) & (frame.series == s)]
                digits = 0 if q == "critical_speed_rpm" else (1 if q == "amplification_factor" else 2)
                cells.append(fmt(float(sel["value"].iloc[0]), digits) if len(sel) else "-")
            table.add_row(fp.run_id, fp.time_key, *cells)
        out.print(table)
    if output is not None:
        _plot_trend(result, runs, quantity, output)


def _plot_trend(result: Trend, runs: tuple[Fingerprint, ...], quantity: Quantity, output: Path) -> None:
    from .. import plots

    dated = all(fp.start_time is not None for fp in runs)
    position = {fp.run_id: i for i, fp in enumerate(runs)}
    drawn = None
    for k, (series, points) in enumerate(result.series(quantity).items()):
        times = (pd.to_datetime([p.start_time for p in points], utc=True).tz_convert(None).to_numpy() if dated
                 else np.array([float(position[p.run_id]) for p in points]))
        drawn = plots.trend(times, [p.value for p in points], label=f"{_LABELS[quantity]} {series}",
                            unit=_UNITS[quantity], ax=None if drawn is None else drawn.ax)
        drawn.line.set_color(f"C{k % 10}")
    if drawn is None:
        fail(f"nothing to plot: no {_LABELS[quantity]} in the history")
    drawn.ax.set_ylabel(f"{_LABELS[quantity]} ({_UNITS[quantity]})")
    if not dated:
        drawn.ax.set_xlabel("run (history order)")
    drawn.ax.legend(fontsize="small")
    try:
        path = plots.save_figure(drawn.figure, output)
    except (RunupError, OSError) as exc:
        fail(str(exc))
    out.print(f"trend plot written to {path}")


@archive_app.command("diff")
def diff_command(
    run: Annotated[str, typer.Argument(help="Archived run id, or a run file to identify (not stored).")],
    archive: ArchiveOpt,
    machine: MachineOpt,
    against: Annotated[str | None, typer.Option("--against", help="Run id to compare with (default: the baseline).")] = None,
    speed_shift: Annotated[float, typer.Option("--speed-shift", min=0.01, help="Critical-speed shift alert, % (default 3).")] = 3.0,
    af_change: Annotated[float, typer.Option("--af-change", min=0.01, help="AF change alert, % (default 25).")] = 25.0,
    slow_roll_fraction: Annotated[float, typer.Option("--slow-roll-fraction", min=0.001, help="Slow-roll change alert, fraction of the baseline vector (default 0.25).")] = 0.25,
    slow_roll_min: Annotated[float, typer.Option("--slow-roll-min", min=0.001, help="Slow-roll change alert floor, um pp (default 5).")] = 5.0,
    twice_x_window: Annotated[float, typer.Option("--twice-x-window", min=0.01, help="2X near half a critical: window, % (default 5).")] = 5.0,
    gate: Annotated[float, typer.Option("--gate", min=0.01, help="Critical matching gate, % (default 15).")] = 15.0,
    json_out: JsonOpt = None,
) -> None:
    """Compare a run with the machine's baseline; alerts printed, exit code 1 when any fires."""
    try:
        reference = against if against is not None else read_baseline(archive, machine)
        if reference is None:
            raise UsageProblem(f"machine {machine} has no baseline; add one with `archive add --baseline` or give --against")
        base = load_run(archive, machine, reference)
        if Path(run).is_file():
            open_archive(archive)
            current = fingerprint(load_identification(RunOptions(Path(run), machine_id=machine)))
        else:
            current = load_run(archive, machine, run)
        th = DriftThresholds(critical_speed_shift_percent=speed_shift, amplification_factor_change_percent=af_change,
                             slow_roll_change_fraction=slow_roll_fraction, slow_roll_change_min_um_pp=slow_roll_min,
                             twice_x_window_percent=twice_x_window, match_gate_percent=gate)
        result = diff(current, base, thresholds=th)
    except RunupError as exc:
        fail(str(exc))
    if not emit_json(json_out, drift_to_dict(result)):
        out.print(f"run {result.run_id} against baseline {result.baseline_run_id} of machine {machine}", markup=False)
        for m in result.matches:
            if m.baseline is not None and m.current is not None:
                out.print(f"critical {fmt(m.baseline.speed_rpm)} -> {fmt(m.current.speed_rpm)} rpm "
                          f"({m.speed_shift_percent:+.1f} %), AF {fmt(m.baseline.amplification_factor, 1)} -> "
                          f"{fmt(m.current.amplification_factor, 1)}", markup=False)
        for s in result.slow_roll:
            out.print(f"slow roll {s.probe}: change {s.change_um_pp:.1f} um pp (threshold {s.threshold_um_pp:.1f})",
                      markup=False)
        for a in result.alerts:
            out.print(f"ALERT {a.kind}: {a.sentence}", markup=False)
        if not result.alerts:
            out.print("no drift alert")
        out.print(CAUTION)
    raise typer.Exit(EXIT_RULE_FAILED if result.alerts else 0)


@app.command("batch")
def batch_command(
    source: Annotated[str, typer.Argument(help="Directory (its *.csv and *.parquet) or a glob such as 'runs/*.csv'.")],
    archive: Annotated[Path | None, typer.Option("--archive", help="Store every fingerprint in this archive.")] = None,
    rules: RulesOpt = None,
    workers: Annotated[int, typer.Option("--workers", min=1, help="Worker processes (1 runs in this process).")] = 1,
    executor: Annotated[str, typer.Option("--executor", help="local, dask (a LocalCluster) or dask:ADDRESS.")] = "local",
    tag: TagOpt = None,
    replace: Annotated[bool, typer.Option("--replace", help="Replace runs already archived.")] = False,
    json_out: JsonOpt = None,
) -> None:
    """Identify many runs (optionally judge and archive them), continuing past bad files.

    Exit code 0 when every run succeeds, 2 when any failed (failures listed at the end).
    """
    try:
        kind, address = parse_executor(executor)
        paths = expand_inputs(source)
        options = BatchOptions(rules, None if archive is None else str(archive), replace, tuple(parse_tags(tag).items()))
        if rules is not None:
            load_rules(rules)  # a bad rule set name fails once, not once per run
        with Progress(TextColumn("{task.description}"), BarColumn(), MofNCompleteColumn(), TimeRemainingColumn(),
                      console=err, transient=True) as progress:
            task = progress.add_task("identifying", total=len(paths))

            def advance(_: BatchItem) -> None:
                progress.advance(task)

            result = run_batch(paths, options=options, workers=workers, executor=kind, address=address,
                               on_result=advance)
    except RunupError as exc:
        fail(str(exc))
    doc = {
        "document": "runup batch", "executor": result.executor, "workers": result.workers,
        "n_runs": len(result.items), "n_failed": len(result.failures), "exit_code": result.exit_code,
        "runs": [asdict(i) for i in result.items],
    }
    if not emit_json(json_out, doc):
        ok = len(result.items) - len(result.failures)
        out.print(f"{ok} of {len(result.items)} run(s) identified"
                  + (f", archived in {archive}" if archive is not None else ""), markup=False)
        if rules is not None:
            failed = sum(1 for i in result.items if i.passed is False)
            out.print(f"{failed} run(s) failed a rule of {rules}", markup=False)
    for item in result.failures:
        err.print(f"failed: {item.path}: {item.error}", markup=False)
    raise typer.Exit(EXIT_BAD_INPUT if result.failures else 0)


__all__ = ["archive_app", "batch_command", "parse_tags"]
