"""``runup vectors``: 1X/2X vectors from a raw waveform record, written as a run table."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated, Literal

import typer

from ..errors import RunupError
from ..io.write import write_run
from ..vectors import waveform_vectors
from . import app
from ._common import UsageProblem, fail, out


@app.command()
def vectors(
    waveform: Annotated[Path, typer.Argument(help="Waveform CSV/Parquet with a <stem>.toml [waveform] description.")],
    output: Annotated[Path, typer.Option("-o", "--output", help="Run file to write: .csv or .parquet (+ .toml).")],
    orders: Annotated[str, typer.Option(help="Harmonic orders, comma-separated.")] = "1,2",
    points_per_rev: Annotated[int, typer.Option(min=16, help="Angle-domain samples per revolution.")] = 128,
    revs_per_vector: Annotated[int, typer.Option(min=1, help="Revolutions averaged per vector.")] = 1,
    phase_reference: Annotated[
        Literal["reference_sensor", "probe"],
        typer.Option(help="Phase from the reference pulse as measured, or from the mark passing the probe."),
    ] = "reference_sensor",
    block_rows: Annotated[int, typer.Option(min=1024, help="Rows read at a time (memory bound).")] = 65536,
) -> None:
    """Per-revolution 1X/2X amplitude and phase lag from probe waveforms and a once-per-turn reference.

    The result is a run table every other command accepts; `runup identify WAVEFORM` does the
    same on the fly.
    """
    try:
        try:
            order_list = tuple(int(o) for o in orders.split(","))
        except ValueError:
            raise UsageProblem(f"--orders expects whole numbers separated by commas, e.g. 1,2; got '{orders}'") from None
        result = waveform_vectors(
            waveform, orders=order_list, points_per_rev=points_per_rev, revolutions_per_vector=revs_per_vector,
            phase_reference=phase_reference, block_rows=block_rows,
        )
        path = write_run(result.run, output)
    except RunupError as exc:
        fail(str(exc))
    flagged = len(result.pulses.flags)
    out.print(
        f"{len(result.run.samples)} vectors ({len(result.run.probe_names)} probe(s), orders {orders}) from "
        f"{result.pulses.speed_rpm.size} revolutions written to {path}; {flagged} revolution(s) flagged"
    )
    for note in result.notes:
        out.print(f"note: {note}", markup=False)
