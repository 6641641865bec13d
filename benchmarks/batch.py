"""Batch and archive benchmark (synthetic runs, invented data).

1. Throughput of ``runup.batch.run_batch`` on N small synthetic runs (2 probes x 300 points,
   one mode, CSV + sidecar written to a temporary directory) with 1 and 2 local workers:
   runs/s and the speed-up ratio (ideal 2.0 on 2 free cores; process start-up and a shared
   machine lower it).
2. Archive query time: N runs archived over 10 machines; the time to load one machine's
   history (``runup.archive.history``) against the time to load one run
   (``runup.archive.load_run``), best of ``--repeat``.

Run ``python benchmarks/batch.py [--quick] [--runs N] [--repeat N]`` (``--quick``: 100 runs).
The machine is shared: read the ratios rather than the seconds.
"""

from __future__ import annotations

import argparse
import dataclasses
import tempfile
import time
from pathlib import Path

import numpy as np

from runup.archive import add_fingerprint, history, load_run
from runup.batch import run_batch
from runup.fingerprint import fingerprint
from runup.identify import identify
from runup.io.write import write_run
from runup.run import OperatingSpeeds
from runup.synthetic import SyntheticMode, SyntheticProbe, synthetic_run

N_MACHINES = 10


def make_run(k: int, rng: np.random.Generator):
    speed = np.linspace(500.0, 8000.0, 300)
    probes = [SyntheticProbe("A-X", (10 + 0j,), complex(*rng.uniform(1, 3, 2)), "A", -45.0),
              SyntheticProbe("A-Y", (0 + 10j,), complex(*rng.uniform(1, 3, 2)), "A", 45.0)]
    return synthetic_run(speed, modes=[SyntheticMode(float(rng.uniform(3500, 4500)), 0.06)], probes=probes,
                         noise_fraction_of_peak=0.005, time_s=np.linspace(0, 300, 300), seed=k,
                         machine_id=f"SYN-{k % N_MACHINES:02d}", run_id=f"run{k:05d}",
                         operating=OperatingSpeeds(5500.0, 7000.0, 7350.0))


def best(fn, repeat: int) -> float:
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return min(times)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--runs", type=int, default=1000)
    ap.add_argument("--quick", action="store_true", help="100 runs")
    ap.add_argument("--repeat", type=int, default=3)
    args = ap.parse_args()
    n = 100 if args.quick else args.runs
    rng = np.random.default_rng(2024)
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp) / "runs"
        folder.mkdir()
        paths = [write_run(make_run(k, rng), folder / f"run{k:05d}.csv") for k in range(n)]
        rates = {}
        for workers in (1, 2):
            t0 = time.perf_counter()
            result = run_batch(paths, workers=workers)
            dt = time.perf_counter() - t0
            assert result.exit_code == 0, result.failures[:3]
            rates[workers] = n / dt
            print(f"batch identify, {workers} worker(s): {n} runs in {dt:.1f} s = {rates[workers]:.1f} runs/s")
        print(f"speed-up 2 vs 1 worker: {rates[2] / rates[1]:.2f}x")

        arc = Path(tmp) / "arc"
        fp0 = fingerprint(identify(make_run(0, rng)))
        t0 = time.perf_counter()
        for k in range(n):
            add_fingerprint(arc, dataclasses.replace(fp0, machine_id=f"SYN-{k % N_MACHINES:02d}", run_id=f"run{k:05d}"))
        dt = time.perf_counter() - t0
        print(f"archive add: {n} runs in {dt:.1f} s = {n / dt:.0f} runs/s")
        t_hist = best(lambda: history(arc, "SYN-03"), args.repeat)
        t_one = best(lambda: load_run(arc, "SYN-03", "run00003"), args.repeat)
        n_hist = len(history(arc, "SYN-03"))
        print(f"query one machine's history ({n_hist} of {n} runs): {1e3 * t_hist:.1f} ms; "
              f"one run: {1e3 * t_one:.1f} ms; ratio {t_hist / t_one:.1f}x")


if __name__ == "__main__":
    main()
