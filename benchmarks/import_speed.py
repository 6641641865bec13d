"""Speed benchmark of the import and conditioning stages against plain pandas reading.

The synthetic run of ``identify_speed.py`` (invented: two modes, 8 probes x 50,000 samples,
long layout) is written once as CSV and as Parquet to a temporary directory.  For each
file, best of ``--repeat`` (default 5) in this process:

* ``pandas.read_csv`` / ``pandas.read_parquet`` of the file alone (the reference);
* ``runup.io.read_run`` (import: header, unit conversion, checks);
* ``runup.conditioning.condition`` of that run (segments, duplicates, spikes, slow roll).

Wall and CPU seconds are printed with the ratio to the pandas read; the machine is shared,
so read the ratios rather than the seconds.  ``--profile`` prints the top cProfile entries
of one ``read_run`` and one ``condition`` on the CSV file.

Run ``python benchmarks/import_speed.py [--points N] [--probes N] [--repeat N] [--profile]``.
"""

from __future__ import annotations

import argparse
import cProfile
import io
import pstats
import sys
import tempfile
import time
from collections.abc import Callable
from pathlib import Path

import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parent))
from identify_speed import write_run  # noqa: E402  (the same synthetic run, written the same way)

from runup.conditioning import condition  # noqa: E402
from runup.io import read_run  # noqa: E402


def best_of(fn: Callable[[], object], repeat: int) -> tuple[float, float]:
    """Best wall and best CPU time of ``repeat`` calls, seconds."""
    wall, cpu = [], []
    for _ in range(repeat):
        w0, c0 = time.perf_counter(), time.process_time()
        fn()
        wall.append(time.perf_counter() - w0)
        cpu.append(time.process_time() - c0)
    return min(wall), min(cpu)


def stages(path: Path, reader: Callable[[Path], object], repeat: int) -> None:
    """Print the pandas read, read_run and condition times of one file."""
    pd_wall, pd_cpu = best_of(lambda: reader(path), repeat)
    run = read_run(path)
    read_wall, read_cpu = best_of(lambda: read_run(path), repeat)
    cond_wall, cond_cpu = best_of(lambda: condition(run), repeat)
    kind = path.suffix[1:]
    print(f"  {kind:<8} pandas read {pd_wall:.4f} s (cpu {pd_cpu:.4f})")
    print(f"  {kind:<8} read_run    {read_wall:.4f} s (cpu {read_cpu:.4f})  {read_wall / pd_wall:.2f}x pandas")
    print(f"  {kind:<8} condition   {cond_wall:.4f} s (cpu {cond_cpu:.4f})  {cond_wall / pd_wall:.2f}x pandas")
    total = read_wall + cond_wall
    print(f"  {kind:<8} read + condition {total:.4f} s = {total / pd_wall:.2f}x the pandas read")


def profile(path: Path, top: int) -> None:
    """Top cProfile entries (own time) of one read_run and one condition."""
    run = read_run(path)
    for label, fn in (("read_run", lambda: read_run(path)), ("condition", lambda: condition(run))):
        prof = cProfile.Profile()
        prof.runcall(fn)
        out = io.StringIO()
        pstats.Stats(prof, stream=out).sort_stats("tottime").print_stats(top)
        lines = [ln for ln in out.getvalue().splitlines() if ln.strip()]
        start = next(i for i, ln in enumerate(lines) if ln.lstrip().startswith("ncalls"))
        print(f"\ncProfile of {label} ({path.name}), top {top} by own time:")
        print("\n".join(lines[start:]))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--points", type=int, default=50_000, help="samples per probe")
    parser.add_argument("--probes", type=int, default=8)
    parser.add_argument("--repeat", type=int, default=5)
    parser.add_argument("--seed", type=int, default=11)
    parser.add_argument("--profile", action="store_true", help="cProfile one read_run and one condition")
    parser.add_argument("--top", type=int, default=15, help="profile entries shown")
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        csv, parquet = write_run(Path(tmp), args.points, args.probes, args.seed)
        print(f"synthetic run: {args.probes} probes x {args.points} points = {args.probes * args.points} "
              f"rows; CSV {csv.stat().st_size / 1e6:.1f} MB, Parquet {parquet.stat().st_size / 1e6:.1f} MB; "
              f"best of {args.repeat}")
        stages(csv, pd.read_csv, args.repeat)
        stages(parquet, pd.read_parquet, args.repeat)
        if args.profile:
            profile(csv, args.top)


if __name__ == "__main__":
    main()
