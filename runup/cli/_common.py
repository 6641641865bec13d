"""Shared pieces of the command line: consoles, option types, loading a run, failing cleanly.

Exit codes (documented in ``docs/cli.md``): 0 success; 1 a judged rule failed (``check``,
``compare``); 2 bad input or usage, reported on one line on stderr without a traceback.
"""

from __future__ import annotations

import math
import shutil
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Annotated, NoReturn

import typer
from rich.console import Console

from ..conditioning import condition
from ..critical import Identification, Interval
from ..errors import RunupError
from ..identify import identify_conditioned
from ..io import parse_column_map, read_run
from ..io.atomic import write_text_atomic
from ..io.waveform import is_waveform
from ..review import read_review
from ..run import Run
from ..vectors import waveform_vectors

EXIT_RULE_FAILED = 1
EXIT_BAD_INPUT = 2

# tables are wide: never squeeze them below 150 columns when output goes to a file or pipe
_WIDTH = max(150, shutil.get_terminal_size((150, 24)).columns)
out = Console(highlight=False, width=_WIDTH)
err = Console(stderr=True, highlight=False, soft_wrap=True)


class UsageProblem(RunupError):
    """A usage problem found by the CLI itself (reported like any RunupError)."""


def fail(message: str) -> NoReturn:
    """Print ``error: message`` on stderr and exit with code 2."""
    err.print(f"error: {message}", markup=False)
    raise typer.Exit(EXIT_BAD_INPUT)


# Options shared by every command that reads a run (one definition each).
RunFile = Annotated[Path, typer.Argument(help="Run table: CSV or Parquet, long or wide layout.")]
ColumnOpt = Annotated[
    list[str] | None,
    typer.Option("--column", "-c", help="Map a header: SOURCE=TARGET (repeatable), e.g. 'Speed=speed_rpm'."),
]
SidecarOpt = Annotated[
    Path | None, typer.Option("--sidecar", help="Sidecar TOML with metadata (default: <file stem>.toml beside the data).")
]
NoSidecarOpt = Annotated[bool, typer.Option("--no-sidecar", help="Read no sidecar.")]
SlowRollOpt = Annotated[
    str | None, typer.Option("--slow-roll", help="Slow-roll window LOW:HIGH in rpm (default: automatic).")
]
NoSlowRollOpt = Annotated[bool, typer.Option("--no-slow-roll", help="Skip slow-roll compensation.")]
NoDespikeOpt = Annotated[bool, typer.Option("--no-despike", help="Keep isolated spikes.")]
ReviewOpt = Annotated[
    Path | None, typer.Option("--review", help="Review TOML: accept, reject or add criticals, each with a reason.")
]
JsonOpt = Annotated[Path | None, typer.Option("--json", help="Write the results as JSON to this file ('-' for stdout).")]
PredictedOpt = Annotated[Path | None, typer.Option("--predicted", help="Predicted criticals: CSV, TOML or JSON.")]
MapOpt = Annotated[Path | None, typer.Option("--map", help="Predicted critical speed map (CSV), if not in the file.")]
MachineIdOpt = Annotated[str | None, typer.Option("--machine-id", help="Machine id (overrides the sidecar).")]
RunIdOpt = Annotated[str | None, typer.Option("--run-id", help="Run id (overrides the sidecar).")]


@dataclass(frozen=True)
class RunOptions:
    """What a command needs to read, condition and identify a run."""

    run_file: Path
    column: tuple[str, ...] = ()
    sidecar: Path | None = None
    no_sidecar: bool = False
    slow_roll: str | None = None
    no_slow_roll: bool = False
    no_despike: bool = False
    review: Path | None = None
    machine_id: str | None = None
    run_id: str | None = None


def parse_window(text: str) -> tuple[float, float]:
    """``LOW:HIGH`` in rpm, ``0 < LOW < HIGH``."""
    try:
        low_s, high_s = text.split(":")
        low, high = float(low_s), float(high_s)
    except ValueError:
        raise UsageProblem(f"--slow-roll expects LOW:HIGH in rpm, e.g. 300:600; got '{text}'") from None
    if not (math.isfinite(low) and math.isfinite(high) and 0 < low < high):
        raise UsageProblem(f"--slow-roll window must satisfy 0 < LOW < HIGH; got '{text}'")
    return (low, high)


def load_run(opts: RunOptions) -> Run:
    """Read a run table, or compute the run from a waveform record (``[waveform]`` in its TOML)."""
    if is_waveform(opts.run_file):
        if opts.column or opts.sidecar is not None or opts.no_sidecar:
            raise UsageProblem("--column and --sidecar options apply to run tables, not to waveform records")
        run = waveform_vectors(opts.run_file).run
        if opts.machine_id or opts.run_id:
            run = Run(
                replace(run.metadata, machine_id=opts.machine_id or run.metadata.machine_id,
                        run_id=opts.run_id or run.metadata.run_id),
                run.samples,
            )
        return run
    return read_run(
        opts.run_file,
        column_map=parse_column_map(list(opts.column)),
        sidecar=None if opts.no_sidecar else (opts.sidecar if opts.sidecar is not None else "auto"),
        machine_id=opts.machine_id,
        run_id=opts.run_id,
    )


def load_identification(opts: RunOptions) -> Identification:
    """Read, condition and identify a run from CLI options (raises RunupError on bad input)."""
    if opts.slow_roll is not None and opts.no_slow_roll:
        raise UsageProblem("give either --slow-roll LOW:HIGH or --no-slow-roll, not both")
    if opts.sidecar is not None and opts.no_sidecar:
        raise UsageProblem("give either --sidecar PATH or --no-sidecar, not both")
    window: str | tuple[float, float] = "off" if opts.no_slow_roll else "auto"
    if opts.slow_roll is not None:
        window = parse_window(opts.slow_roll)
    run = load_run(opts)
    decisions = read_review(opts.review) if opts.review is not None else None
    return identify_conditioned(condition(run, slow_roll=window, despike=not opts.no_despike), review=decisions)


def write_text(path: Path, text: str) -> None:
    """Write a file atomically (temporary file, then rename): no half-written output remains."""
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        write_text_atomic(path, text)
    except OSError as exc:
        fail(f"{path}: cannot write ({exc.strerror})")


def fmt(value: float | None, digits: int = 0) -> str:
    """A number with thousands separators, or '-' when missing."""
    if value is None or not math.isfinite(value):
        return "-"
    return f"{value:,.{digits}f}"


def fmt_ci(ci: Interval | None, digits: int) -> str:
    """`` [low, high]`` or nothing."""
    return "" if ci is None else f" [{fmt(ci.low, digits)}, {fmt(ci.high, digits)}]"
