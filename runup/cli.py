"""Command-line interface (a leaf: it parses, calls the library and renders).

Exit codes: 0 success; 2 bad input or usage (one line on stderr, no traceback).
"""

from __future__ import annotations

import json
import math
import shutil
import sys
from collections import Counter
from pathlib import Path
from typing import Annotated

import typer
from rich.console import Console
from rich.table import Table

from ._version import __version__
from .conditioning import condition
from .critical import Identification, Interval
from .errors import RunupError
from .identify import identify_conditioned
from .io import parse_column_map, read_run
from .report import CAUTION, identification_to_dict

HELP = (
    "runup: critical speeds, amplification factors and damping from rotating-machinery "
    "startup and coastdown records (1X amplitude and phase versus speed).\n\n" + CAUTION
)

app = typer.Typer(
    help=HELP,
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
    rich_markup_mode=None,
)
# tables are wide: never squeeze them below 150 columns when output goes to a file or pipe
_WIDTH = max(150, shutil.get_terminal_size((150, 24)).columns)
_out = Console(highlight=False, width=_WIDTH)
_err = Console(stderr=True, highlight=False, soft_wrap=True)

EXIT_BAD_INPUT = 2


class _Fail(Exception):
    """A usage problem found by the CLI itself (reported like a RunupError)."""


def _version(value: bool) -> None:
    if value:
        _out.print(f"runup {__version__}")
        raise typer.Exit(0)


@app.callback()
def _main(
    version: Annotated[
        bool, typer.Option("--version", callback=_version, is_eager=True, help="Print the version and exit.")
    ] = False,
) -> None:
    """Top-level options."""


def _parse_window(text: str) -> tuple[float, float]:
    try:
        low_s, high_s = text.split(":")
        low, high = float(low_s), float(high_s)
    except ValueError:
        raise _Fail(f"--slow-roll expects LOW:HIGH in rpm, e.g. 300:600; got '{text}'") from None
    if not (math.isfinite(low) and math.isfinite(high) and 0 < low < high):
        raise _Fail(f"--slow-roll window must satisfy 0 < LOW < HIGH; got '{text}'")
    return (low, high)


def _fmt(value: float | None, digits: int = 0) -> str:
    if value is None or not math.isfinite(value):
        return "-"
    return f"{value:,.{digits}f}"


def _fmt_ci(ci: Interval | None, digits: int) -> str:
    return "" if ci is None else f" [{_fmt(ci.low, digits)}, {_fmt(ci.high, digits)}]"


def _render(result: Identification, console: Console) -> None:
    cond = result.conditioned
    meta = cond.metadata
    lo, hi = (math.nan, math.nan)
    if cond.curves:
        lo = min(float(c.speed_rpm[0]) for c in cond.curves)
        hi = max(float(c.speed_rpm[-1]) for c in cond.curves)
    probes = sorted({c.probe for c in cond.curves})
    console.print(
        f"machine {meta.machine_id}, run {meta.run_id}: {len(probes)} probe(s), "
        f"{len(cond.segments)} segment(s) ({', '.join(s.label for s in cond.segments) or 'none'}), "
        f"{_fmt(lo)}-{_fmt(hi)} rpm"
    )
    if not result.criticals:
        console.print("No resonance found in the record: no critical speed to report.")
    else:
        table = Table(title="Critical speeds (95 % intervals in brackets)", show_lines=False)
        for name, justify in [
            ("segment", "left"), ("order", "right"), ("peak rpm", "right"), ("natural rpm", "right"),
            ("damping ratio", "right"), ("AF", "right"), ("half-power rpm", "right"),
            ("probes", "left"), ("evidence", "left"), ("method", "left"), ("flags", "left"),
        ]:
            table.add_column(name, justify=justify)  # type: ignore[arg-type]
        for c in result.criticals:
            table.add_row(
                cond.segment(c.segment).label,
                f"{c.order}X",
                _fmt(c.speed_rpm),
                _fmt(c.natural_speed_rpm) + _fmt_ci(c.natural_speed_ci95_rpm, 0),
                _fmt(c.damping_ratio, 3) + _fmt_ci(c.damping_ratio_ci95, 3),
                _fmt(c.amplification_factor, 1) + _fmt_ci(c.amplification_factor_ci95, 1),
                f"{_fmt(c.lower_half_power_rpm)}-{_fmt(c.upper_half_power_rpm)}",
                ",".join(c.probes),
                c.evidence,
                c.method,
                ",".join(c.flags) or "-",
            )
        console.print(table)
    counts = Counter(k.kind for k in cond.corrections)
    if counts:
        console.print("conditioning: " + ", ".join(f"{n} x {kind}" for kind, n in sorted(counts.items())))
    for w in cond.warnings:
        console.print(f"warning: {w}")
    for r in result.rejected:
        console.print(f"not reported: {r}")
    console.print(CAUTION)


def _fail(message: str) -> None:
    _err.print(f"error: {message}", markup=False)
    raise typer.Exit(EXIT_BAD_INPUT)


@app.command()
def identify(
    run_file: Annotated[Path, typer.Argument(help="Run table: CSV or Parquet, long or wide layout.")],
    json_out: Annotated[
        Path | None, typer.Option("--json", help="Write the results as JSON to this file ('-' for stdout).")
    ] = None,
    column: Annotated[
        list[str] | None,
        typer.Option("--column", "-c", help="Map a header: SOURCE=TARGET (repeatable), e.g. 'Speed=speed_rpm'."),
    ] = None,
    sidecar: Annotated[
        Path | None, typer.Option(help="Sidecar TOML with metadata (default: <file stem>.toml beside the data).")
    ] = None,
    no_sidecar: Annotated[bool, typer.Option("--no-sidecar", help="Read no sidecar.")] = False,
    slow_roll: Annotated[
        str | None, typer.Option("--slow-roll", help="Slow-roll window LOW:HIGH in rpm (default: automatic).")
    ] = None,
    no_slow_roll: Annotated[bool, typer.Option("--no-slow-roll", help="Skip slow-roll compensation.")] = False,
    no_despike: Annotated[bool, typer.Option("--no-despike", help="Keep isolated spikes.")] = False,
    machine_id: Annotated[str | None, typer.Option(help="Machine id (overrides the sidecar).")] = None,
    run_id: Annotated[str | None, typer.Option(help="Run id (overrides the sidecar).")] = None,
) -> None:
    """Identify critical speeds, damping and amplification factors in one run.

    Prints a table of the criticals per speed segment and, with --json, writes every
    number with per-probe detail. Exit code 0 on success, 2 on bad input.
    """
    try:
        if slow_roll is not None and no_slow_roll:
            raise _Fail("give either --slow-roll LOW:HIGH or --no-slow-roll, not both")
        if sidecar is not None and no_sidecar:
            raise _Fail("give either --sidecar PATH or --no-sidecar, not both")
        window: str | tuple[float, float] = "off" if no_slow_roll else "auto"
        if slow_roll is not None:
            window = _parse_window(slow_roll)
        run = read_run(
            run_file,
            column_map=parse_column_map(column or []),
            sidecar=None if no_sidecar else (sidecar if sidecar is not None else "auto"),
            machine_id=machine_id,
            run_id=run_id,
        )
        result = identify_conditioned(condition(run, slow_roll=window, despike=not no_despike))
        doc = identification_to_dict(result)
    except (RunupError, _Fail) as exc:
        _fail(str(exc))
        return
    if json_out is not None and str(json_out) == "-":
        sys.stdout.write(json.dumps(doc, indent=2) + "\n")
        return
    _render(result, _out)
    if json_out is not None:
        _write_text(json_out, json.dumps(doc, indent=2) + "\n")
        _out.print(f"JSON written to {json_out}")


def _write_text(path: Path, text: str) -> None:
    """Write a file atomically (temporary file, then rename), so no half-written output remains."""
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        tmp = path.with_name(f".{path.name}.tmp")
        tmp.write_text(text, encoding="utf-8")
        tmp.replace(path)
    except OSError as exc:
        _fail(f"{path}: cannot write ({exc.strerror})")


def main() -> None:
    """Console-script entry point."""
    app()
