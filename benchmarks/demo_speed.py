"""Wall-clock time of `runup demo` (identify, check, compare, report on the sample runs).

Usage: ``python benchmarks/demo_speed.py [--profile]``

Prints the seconds of the whole demo in this process (imports excluded) and the ratio to
the 30 s budget; with ``--profile`` also the 15 functions with the most cumulative time
(cProfile).  Sample runs are synthetic (sample_runs/README.md).  Never run by the tests.
"""

from __future__ import annotations

import cProfile
import pstats
import sys
import tempfile
import time

from runup.demo import run_demo

BUDGET_S = 30.0


def main(argv: list[str]) -> int:
    """Run the demo once into a temporary folder and print its time."""
    with tempfile.TemporaryDirectory(prefix="runup-demo-bench-") as out:
        profiler = cProfile.Profile() if "--profile" in argv else None
        start = time.perf_counter()
        if profiler is not None:
            profiler.enable()
        runs = run_demo(out)
        if profiler is not None:
            profiler.disable()
        seconds = time.perf_counter() - start
    print(f"demo: {len(runs)} run(s) in {seconds:.1f} s = {seconds / BUDGET_S:.2f} of the {BUDGET_S:.0f} s budget")
    if profiler is not None:
        pstats.Stats(profiler).sort_stats("cumulative").print_stats(15)
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
