"""``runup plot``, ``runup report`` and ``runup demo``: see it and file it.

Leaves: they parse, call the library (:mod:`runup.plots`, :mod:`runup.reporting`,
:mod:`runup.demo`) and print where the output went.  Progress goes to stderr through
``rich.progress`` and only when stderr is a terminal.
"""

from __future__ import annotations

import math
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Annotated, Literal

import typer
from rich.console import Console
from rich.progress import Progress, SpinnerColumn, TextColumn, TimeElapsedColumn

from .. import plots
from ..criteria import judge, load_rules
from ..critical import Identification
from ..demo import run_demo
from ..errors import RunupError
from ..io.predicted import Predicted, read_predicted
from ..report import CAUTION
from ..reporting import Progress as ProgressCallback
from ..reporting import (
    compare_run,
    comparison_plot,
    gather,
    images_folder,
    margin_bands_rpm,
    plane_groups,
    speed_map_plot,
    write_report,
)
from . import app
from ._common import (
    ColumnOpt,
    MachineIdOpt,
    MapOpt,
    NoDespikeOpt,
    NoSidecarOpt,
    NoSlowRollOpt,
    PredictedOpt,
    ReviewOpt,
    RunFile,
    RunIdOpt,
    RunOptions,
    SidecarOpt,
    SlowRollOpt,
    UsageProblem,
    fail,
    fmt,
    load_identification,
    out,
)

RulesOpt = Annotated[str | None, typer.Option("--rules", help="Rule set name or rule TOML: shade or judge margins.")]


@contextmanager
def _progress() -> Iterator[ProgressCallback]:
    """A step callback drawing a transient spinner on stderr (silent when not a terminal)."""
    console = Console(stderr=True)
    columns = (SpinnerColumn(), TextColumn("{task.description}"), TimeElapsedColumn())
    with Progress(*columns, console=console, transient=True, disable=not console.is_terminal) as bar:
        task = bar.add_task("reading the run", total=None)
        yield lambda text: bar.update(task, description=text)


def _predicted(path: Path | None, speed_map: Path | None) -> Predicted | None:
    if path is None:
        if speed_map is not None:
            raise UsageProblem("--map needs --predicted: give the predicted criticals too")
        return None
    return read_predicted(path, critical_speed_map=speed_map)


def _figure(
    ident: Identification, kind: str, *, probes: list[str] | None, segment: int, order: int, log: bool,
    no_raw: bool, predicted: Predicted | None, rules: str | None,
) -> plots.BodePlot | plots.PolarPlot | plots.ComparisonPlot | plots.CriticalSpeedMapPlot:
    if kind == "bode":
        groups = plane_groups(ident, segment=segment, order=order)
        chosen = probes or (groups[0][1] if groups else None)
        bands = margin_bands_rpm(judge(ident, rules=load_rules(rules)), segment=segment) if rules else ()
        return plots.bode(ident, probes=chosen, segment=segment, order=order,
                          amplitude_scale="log" if log else "linear", show_raw=not no_raw, margin_bands=bands,
                          predicted_speeds_rpm=[m.speed_rpm for m in predicted.modes] if predicted else ())
    if kind == "polar":
        if probes and len(probes) > 1:
            raise UsageProblem(f"a polar plot shows one probe; give one --probe, got {len(probes)}")
        if not probes:
            crit = [p for c in ident.criticals if c.segment == segment and c.order == order for p in c.probes]
            curves = [c.probe for c in ident.conditioned.curves if c.segment == segment and c.order == order]
            probes = [crit[0] if crit else (curves[0] if curves else "")]
        return plots.polar(ident, probe=probes[0], segment=segment, order=order)
    if predicted is None:
        raise UsageProblem(f"--kind {kind} needs --predicted PRED")
    agreement, _ = compare_run(ident, predicted, segment=segment)
    if kind == "compare":
        return comparison_plot(agreement)
    if predicted.critical_speed_map is None:
        raise UsageProblem("--kind map needs a critical speed map: name it in the predicted file or give --map")
    return speed_map_plot(agreement, predicted.critical_speed_map, ident.conditioned.metadata.operating)


@app.command()
def plot(
    run_file: RunFile,
    output: Annotated[Path, typer.Option("-o", "--output", help="Figure file: .png, .svg or .pdf.")],
    kind: Annotated[Literal["bode", "polar", "compare", "map"], typer.Option(help="What to draw.")] = "bode",
    probe: Annotated[list[str] | None, typer.Option("--probe", help="Probe to show (repeatable; default the first X-Y plane).")] = None,
    segment: Annotated[int, typer.Option(min=0, help="Speed segment (0-based).")] = 0,
    order: Annotated[int, typer.Option(min=1, help="Harmonic order.")] = 1,
    log: Annotated[bool, typer.Option("--log", help="Logarithmic amplitude axis (Bode).")] = False,
    no_raw: Annotated[bool, typer.Option("--no-raw", help="Leave out the uncompensated response (Bode).")] = False,
    predicted: PredictedOpt = None,
    speed_map: MapOpt = None,
    rules: RulesOpt = None,
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
    """Draw a Bode, polar, measured-against-predicted or critical speed map plot of one run.

    Bode: one X-Y plane (the first) unless --probe is given; the operating range shaded,
    with --rules the required separation margins hatched, with --predicted the predicted
    criticals dash-dotted. Exit code 0 on success, 2 on bad input.
    """
    opts = RunOptions(run_file, tuple(column or ()), sidecar, no_sidecar, slow_roll, no_slow_roll, no_despike,
                      review, machine_id, run_id)
    try:
        pred = _predicted(predicted, speed_map)
        ident = load_identification(opts)
        drawn = _figure(ident, kind, probes=probe, segment=segment, order=order, log=log, no_raw=no_raw,
                        predicted=pred, rules=rules)
        path = plots.save_figure(drawn.figure, output)
    except (RunupError, OSError) as exc:
        fail(str(exc))
    out.print(f"{kind} plot written to {path}", markup=False)


@app.command()
def report(
    run_file: RunFile,
    output: Annotated[Path, typer.Option("-o", "--output", help="Report file (report.html or report.md).")],
    format: Annotated[Literal["html", "md"], typer.Option("--format", help="html: one self-contained file; md: Markdown + PNG folder.")] = "html",
    predicted: PredictedOpt = None,
    speed_map: MapOpt = None,
    rules: RulesOpt = None,
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
    """Write one report of a run: provenance, criticals, verdicts, comparison, plots, methods.

    HTML is one self-contained file (plots as inline SVG, no external assets); Markdown
    puts the plots as PNG in a folder beside it. Exit code 0 on success, 2 on bad input.
    """
    opts = RunOptions(run_file, tuple(column or ()), sidecar, no_sidecar, slow_roll, no_slow_roll, no_despike,
                      review, machine_id, run_id)
    try:
        with _progress() as step:
            pred = _predicted(predicted, speed_map)
            rule_set = load_rules(rules) if rules else None
            ident = load_identification(opts)
            inputs = gather(ident, rules=rule_set, predicted=pred, progress=step)
            path, figures = write_report(inputs, output, format=format, progress=step)
    except (RunupError, OSError) as exc:
        fail(str(exc))
    where = f" and {len(figures)} PNG plot(s) in {images_folder(path)}" if format == "md" else ""
    out.print(f"report written to {path}{where} ({len(figures)} plot(s))", markup=False)
    out.print(CAUTION, markup=False)


@app.command()
def demo(
    out_dir: Annotated[Path, typer.Option("--out", help="Folder to write into (created if missing).")] = Path("runup-demo"),
) -> None:
    """The whole job on the bundled synthetic sample runs: identify, check, compare, report.

    Writes JSON, plots and one HTML report per run into --out and prints what was found.
    """
    try:
        with _progress() as step:
            runs = run_demo(out_dir, progress=step)
    except (RunupError, OSError) as exc:
        fail(str(exc))
    out.print(f"runup demo on synthetic sample runs (invented machine and numbers), written to {out_dir}", markup=False)
    for r in runs:
        crits = "; ".join(
            (f"split {fmt(s[0])} / {fmt(s[1])} rpm" if s else f"{fmt(v)} rpm") + f" (AF {fmt(af, 1)})"
            for v, af, s in r.criticals
        ) or "none"
        score = "" if math.isnan(r.score) else f"; agreement score {r.score:.0f} / 100"
        verdict = "passed" if r.passed else f"FAILED ({r.n_failed} of {r.n_evaluated} evaluated verdicts)"
        out.print(f"{r.name}: criticals {crits}; {r.rule_set} {verdict}{score}", markup=False)
        out.print(f"  report: {r.report}", markup=False)
    out.print(CAUTION, markup=False)
