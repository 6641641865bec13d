"""The whole job on the bundled synthetic sample runs: identify, check, compare, report.

:func:`run_demo` runs, for each sample run, what an engineer does after a startup or a
coastdown: identify the criticals, judge them against a rule set (API 617 for the
compressor, API 610 for the pump), compare them with the sample rotordynamic prediction
and its critical speed map (compressor), and write the JSON documents, the plots and one
HTML report per run into a folder.  All data are synthetic (``sample_runs/README.md``).

The sample runs are found relative to the package (``Path(__file__).parents[1] /
"sample_runs"``): they are there when runup is installed in editable mode from the
repository.
"""

from __future__ import annotations

import json
import math
import os
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

from .criteria import load_rules
from .errors import DataFormatError
from .identify import identify
from .io.predicted import read_predicted
from .plots import save_figure
from .reporting import Progress, gather, write_report, write_text_atomic

__all__ = ["SAMPLE_RUNS", "DemoRun", "DemoCase", "DEMO_CASES", "sample_runs_folder", "run_demo"]

#: Where the sample runs live when runup is installed in editable mode from the repository.
SAMPLE_RUNS = Path(__file__).resolve().parents[1] / "sample_runs"

NOTE = ("Demo on a synthetic sample run: an invented machine with invented numbers "
        "(sample_runs/README.md). It describes no real machine.")


@dataclass(frozen=True)
class DemoCase:
    """One sample run of the demo: file, rule set, prediction (``None`` for none)."""

    file: str
    rules: str
    predicted: str | None


DEMO_CASES = (
    DemoCase("compressor_startup.csv", "api617", "compressor_predicted.toml"),
    DemoCase("compressor_coastdown.csv", "api617", "compressor_predicted.toml"),
    DemoCase("pump_startup.parquet", "api610", None),
)


@dataclass(frozen=True)
class DemoRun:
    """What the demo found in one run and where it wrote it.

    Attributes
    ----------
    name
        The run file's stem.
    criticals
        ``(speed_rpm, amplification_factor, split branch speeds or ())`` per critical.
    rule_set, passed, n_failed, n_evaluated
        The check: rule set name, whether every evaluated verdict passed, counts.
    score
        Agreement score with the prediction (``nan`` without one).
    report, files
        The HTML report and every file written for the run.
    """

    name: str
    criticals: tuple[tuple[float, float, tuple[float, ...]], ...]
    rule_set: str
    passed: bool
    n_failed: int
    n_evaluated: int
    score: float
    report: Path
    files: tuple[Path, ...]


def sample_runs_folder(folder: Path = SAMPLE_RUNS) -> Path:
    """The sample-run folder, or a clear error when it is not there."""
    if not (folder / DEMO_CASES[0].file).is_file():
        raise DataFormatError(
            f"sample runs not found in {folder}: the demo needs the repository's sample_runs folder; "
            "install runup from a clone of the repository with 'pip install -e .'"
        )
    return folder


def _json(path: Path, doc: dict) -> Path:
    return write_text_atomic(path, json.dumps(doc, indent=2, allow_nan=False) + "\n")


def run_demo(
    out_dir: str | os.PathLike[str] = "runup-demo",
    *,
    cases: Sequence[DemoCase] = DEMO_CASES,
    samples: Path | None = None,
    progress: Progress | None = None,
) -> tuple[DemoRun, ...]:
    """Identify, check, compare and report every demo case into ``out_dir``.

    Per run ``<stem>``: ``<stem>.identify.json``, ``<stem>.check.json``,
    ``<stem>.compare.json`` (with a prediction), ``<stem>.html`` (the report) and the
    report's plots as PNG in ``<stem>_plots/``.

    Raises
    ------
    DataFormatError
        When the sample runs cannot be found.
    """
    step = progress or (lambda _text: None)
    folder = sample_runs_folder(samples if samples is not None else SAMPLE_RUNS)
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    results = []
    for case in cases:
        stem = Path(case.file).stem
        step(f"{stem}: identifying")
        ident = identify(str(folder / case.file))
        predicted = read_predicted(folder / case.predicted) if case.predicted else None
        inputs = gather(ident, rules=load_rules(case.rules), predicted=predicted, note=NOTE,
                        progress=lambda text, s=stem: step(f"{s}: {text}"))
        files = [_json(out / f"{stem}.identify.json", inputs.identification_doc)]
        assert inputs.check_doc is not None  # a rule set was given
        files.append(_json(out / f"{stem}.check.json", inputs.check_doc))
        if inputs.agreement_doc is not None:
            files.append(_json(out / f"{stem}.compare.json", inputs.agreement_doc))
        report, figures = write_report(inputs, out / f"{stem}.html",
                                       progress=lambda text, s=stem: step(f"{s}: {text}"))
        plots_dir = out / f"{stem}_plots"
        plots_dir.mkdir(exist_ok=True)
        for f in figures:
            step(f"{stem}: writing {f.key}.png")
            files.append(save_figure(f.figure, plots_dir / f"{f.key}.png", dpi=110))
        files.append(report)
        check = inputs.check_doc
        results.append(DemoRun(
            name=stem,
            criticals=tuple(
                (c.speed_rpm, c.amplification_factor,
                 (c.split.lower.speed_rpm, c.split.upper.speed_rpm) if c.split is not None else ())
                for c in ident.criticals
            ),
            rule_set=case.rules, passed=bool(check["passed"]), n_failed=int(check["n_failed"]),
            n_evaluated=int(check["n_evaluated"]),
            score=inputs.agreement.score if inputs.agreement is not None else math.nan,
            report=report, files=tuple(files),
        ))
    return tuple(results)
