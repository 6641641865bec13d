"""Speed benchmark: import and identification of a large run against plain pandas reading.

A synthetic run (invented: two modes, 8 probes x 50,000 samples, long layout) is written
once as CSV and as Parquet to a temporary directory.  Each of these is timed, best of
``--repeat`` (default 3):

* ``pandas.read_csv`` / ``pandas.read_parquet`` of the file alone (the reference);
* ``runup.identify.identify(path)`` (import + conditioning + identification);
* each stage alone, in this process: ``read_run``, ``condition``, ``identify_conditioned``.

Both the reference and ``identify`` are timed *warm* (repeated calls in this process) and
*cold* (a first call in a fresh child process, which pays the page faults of new memory
and the start-up of pyarrow's threads); each ratio compares like with like (target:
identify <= 3x the pandas read).  The machine is shared, so read the ratios rather than
the seconds.  A child still running after ``--timeout`` seconds is stopped (then only a
lower bound of its time and ratio is printed, and it is not repeated).  A scaling series (identify on
1,000-8,000 points per probe) gives the growth exponent of identify's time with record
length; ``--profile`` prints the top cProfile entries of one identify on
``--profile-points`` points per probe.

Run ``python benchmarks/identify_speed.py [--points N] [--probes N] [--repeat N] [--timeout S] [--profile]``.
"""

from __future__ import annotations

import argparse
import cProfile
import io
import multiprocessing as mp
import pstats
import tempfile
import time
from collections.abc import Callable
from pathlib import Path

import numpy as np
import pandas as pd

from runup.conditioning import condition
from runup.identify import identify, identify_conditioned
from runup.io import read_run
from runup.synthetic import SyntheticMode, SyntheticProbe, synthetic_samples

TARGET_RATIO = 3.0


def write_run(folder: Path, n_points: int, n_probes: int, seed: int) -> tuple[Path, Path]:
    """Write the synthetic run as ``big.csv`` and ``big.parquet``; return both paths."""
    rng = np.random.default_rng(seed)
    modes = (SyntheticMode(3600.0, 0.06), SyntheticMode(8200.0, 0.09))
    probes = tuple(
        SyntheticProbe(
            f"B{p // 2 + 1}{'XY'[p % 2]}",
            tuple(complex(a * np.exp(1j * t)) for a, t in zip(rng.uniform(5, 30, 2), rng.uniform(0, 2 * np.pi, 2), strict=True)),
            complex(rng.uniform(1, 8) * np.exp(1j * rng.uniform(0, 2 * np.pi))),
        )
        for p in range(n_probes)
    )
    time_s = np.linspace(0.0, 600.0, n_points)
    speed = 300.0 + (12000.0 - 300.0) * time_s / 600.0 + rng.normal(0.0, 1.0, n_points)
    df = synthetic_samples(speed, modes=modes, probes=probes, noise_fraction_of_peak=0.02, time_s=time_s, seed=seed)
    df = df.drop(columns="row")
    csv, parquet = folder / "big.csv", folder / "big.parquet"
    df.to_csv(csv, index=False, float_format="%.6g")
    df.to_parquet(parquet, index=False)
    return csv, parquet


def best_of(fn: Callable[[], object], repeat: int) -> float:
    """Best wall time of ``repeat`` calls, seconds."""
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return min(times)


def _timed_child(kind: str, path: Path, queue: mp.Queue) -> None:
    t0 = time.perf_counter()
    if kind == "pandas":
        (pd.read_csv if path.suffix == ".csv" else pd.read_parquet)(path)
        found = []
    else:
        ident = identify(path)
        found = [(c.natural_speed_rpm, c.damping_ratio) for c in ident.criticals]
    queue.put((time.perf_counter() - t0, found))


def cold_seconds(kind: str, path: Path, repeat: int, timeout_s: float) -> tuple[float, bool, list]:
    """Best time of a first call in a fresh child process: ``kind`` is ``"pandas"`` (the
    pandas read) or ``"identify"``; returns ``(seconds, finished, criticals)``.

    A child still running after ``timeout_s`` is stopped: ``(timeout_s, False, [])``.
    Both are timed the same way, so that the page faults and thread start-up a first call
    pays in a new process count for both.
    """
    best, found = float("inf"), []
    for _ in range(repeat):
        queue: mp.Queue = mp.Queue()
        child = mp.Process(target=_timed_child, args=(kind, path, queue))
        child.start()
        child.join(timeout_s)
        if child.is_alive():
            child.terminate()
            child.join()
            return timeout_s, False, []
        seconds, found = queue.get()
        best = min(best, seconds)
    return best, True, found


def scaling(folder: Path, n_probes: int, seed: int, sizes: tuple[int, ...], timeout_s: float) -> None:
    """Identify time against points per probe, and the fitted growth exponent."""
    print("\nscaling of identify (CSV, best of 1):")
    ns, ts = [], []
    for n in sizes:
        csv, _ = write_run(folder, n, n_probes, seed)
        t_pd = best_of(lambda p=csv: pd.read_csv(p), 3)
        t_id, done, _ = cold_seconds("identify", csv, 1, timeout_s)
        mark = "" if done else "> "
        print(f"  {n:>7} points/probe: pandas read {t_pd:.3f} s, identify {mark}{t_id:.2f} s, "
              f"ratio {mark}{t_id / t_pd:.0f}")
        if done:
            ns.append(n)
            ts.append(t_id)
        else:
            break
    if len(ns) >= 2:
        slope = np.polyfit(np.log(ns), np.log(ts), 1)[0]
        print(f"  identify time grows as n^{slope:.2f} (pandas read grows about linearly)")


def profile(folder: Path, n_points: int, n_probes: int, seed: int) -> None:
    """Top 10 cProfile entries (own time, then cumulative) of one identify."""
    csv, _ = write_run(folder, n_points, n_probes, seed)
    prof = cProfile.Profile()
    prof.runcall(identify, csv)
    for key in ("tottime", "cumulative"):
        out = io.StringIO()
        pstats.Stats(prof, stream=out).sort_stats(key).print_stats(10)
        lines = [ln for ln in out.getvalue().splitlines() if ln.strip()]
        start = next(i for i, ln in enumerate(lines) if ln.lstrip().startswith("ncalls"))
        print(f"\ncProfile of identify, {n_points} points/probe, top 10 by {key}:")
        print("\n".join(lines[start:]))


def stages(csv: Path, parquet: Path, repeat: int) -> None:
    """Best in-process time of each stage (import, conditioning, identification) per file."""
    print("\nstages, best of", repeat, "in this process (seconds, and share of the pandas read):")
    for path, reader in ((csv, pd.read_csv), (parquet, pd.read_parquet)):
        t_pd = best_of(lambda p=path, r=reader: r(p), repeat)
        run = read_run(path)
        conditioned = condition(run)
        t_read = best_of(lambda p=path: read_run(p), repeat)
        t_cond = best_of(lambda r=run: condition(r), repeat)
        t_ident = best_of(lambda c=conditioned: identify_conditioned(c), repeat)
        total = t_read + t_cond + t_ident
        print(f"  {path.suffix[1:]:<8} read {t_read:.3f} ({t_read / t_pd:.1f}x), condition {t_cond:.3f} "
              f"({t_cond / t_pd:.1f}x), identify {t_ident:.3f} ({t_ident / t_pd:.1f}x); sum {total:.3f} "
              f"= {total / t_pd:.1f}x the pandas read ({t_pd:.3f})")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--points", type=int, default=50_000, help="samples per probe")
    parser.add_argument("--probes", type=int, default=8)
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--seed", type=int, default=11)
    parser.add_argument("--timeout", type=float, default=120.0, help="seconds before one identify call is stopped")
    parser.add_argument("--no-scaling", action="store_true", help="skip the scaling series")
    parser.add_argument("--profile", action="store_true", help="cProfile one identify()")
    parser.add_argument("--profile-points", type=int, default=4000)
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        csv, parquet = write_run(folder, args.points, args.probes, args.seed)
        print(f"synthetic run: {args.probes} probes x {args.points} points = {args.probes * args.points} rows; "
              f"CSV {csv.stat().st_size / 1e6:.1f} MB, Parquet {parquet.stat().st_size / 1e6:.1f} MB; "
              f"best of {args.repeat}; truth 3600 rpm (zeta 0.060), 8200 rpm (0.090)")
        row = "  {:<8}{:>14}{:>16}{:>7}{:>14}{:>16}{:>7}{:>9}"
        print(row.format("file", "pandas warm s", "identify warm s", "ratio", "pandas cold s",
                         "identify cold s", "ratio", "target"))
        found = []
        for path, reader in ((csv, pd.read_csv), (parquet, pd.read_parquet)):
            # warm: repeated calls in this process; cold: a first call in a fresh process
            t_pd = best_of(lambda p=path, r=reader: r(p), args.repeat)
            identify(path)
            t_id_warm = best_of(lambda p=path: identify(p), args.repeat)
            t_pd_cold, _, _ = cold_seconds("pandas", path, args.repeat, args.timeout)
            t_id, done, crit = cold_seconds("identify", path, args.repeat, args.timeout)
            found = found or crit
            mark = "" if done else "> "
            print(row.format(path.suffix[1:], f"{t_pd:.3f}", f"{t_id_warm:.3f}", f"{t_id_warm / t_pd:.1f}",
                             f"{t_pd_cold:.3f}", f"{mark}{t_id:.3f}", f"{mark}{t_id / t_pd_cold:.1f}",
                             f"<= {TARGET_RATIO:g}"))
        if found:
            print("  criticals: " + ", ".join(f"{fn:.0f} rpm (zeta {z:.3f})" for fn, z in found))
        stages(csv, parquet, args.repeat)
        if not args.no_scaling:
            scaling(folder, args.probes, args.seed, (1000, 2000, 4000, 8000), args.timeout)
        if args.profile:
            profile(folder, args.profile_points, args.probes, args.seed)


if __name__ == "__main__":
    main()
