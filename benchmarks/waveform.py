"""Speed benchmark: waveform record -> synchronous vectors, block by block.

A synthetic record (invented: 8 probes and a once-per-turn reference at 25.6 kHz,
speed ramp 300 -> 12,000 rpm over ``--minutes`` minutes, 1X + 2X + noise) is generated
block by block straight into a temporary Parquet file, so that neither the generator nor
runup ever holds the whole record.  ``runup.vectors.waveform_vectors`` then processes
the file (three streamed passes: reference levels, edges, probe vectors).

Printed: record duration, processing time, real-time factor (record duration /
processing time), revolutions, and peak memory: the Python heap peak during processing
(tracemalloc, which sees numpy buffers) and the process peak RSS (resource.getrusage).

Run ``python benchmarks/waveform.py [--minutes 10] [--probes 8] [--block-rows 65536]``.
"""

from __future__ import annotations

import argparse
import resource
import tempfile
import time
import tracemalloc
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

from runup.vectors import waveform_vectors

FS_HZ = 25600.0


def write_record(folder: Path, minutes: float, n_probes: int, seed: int) -> Path:
    """Write the synthetic record and its TOML description; return the Parquet path."""
    rng = np.random.default_rng(seed)
    duration = 60.0 * minutes
    f0, f1 = 5.0, 200.0  # rev/s
    a = (f1 - f0) / duration
    n = int(duration * FS_HZ)
    amp = rng.uniform(10.0, 60.0, n_probes)
    lag = rng.uniform(0.0, 2 * np.pi, n_probes)
    names = [f"ch{i}" for i in range(n_probes)]
    schema = pa.schema([("ref", pa.float64())] + [(c, pa.float64()) for c in names])
    path = folder / "record.parquet"
    with pq.ParquetWriter(path, schema) as writer:
        for start in range(0, n, 1 << 20):
            t = np.arange(start, min(start + (1 << 20), n)) / FS_HZ
            rev = f0 * t + 0.5 * a * t * t
            psi = (np.mod(rev + 0.5, 1.0) - 0.5) * 360.0
            ref = -8.0 - 2.0 * np.minimum(np.clip((psi + 4) / 8, 0, 1), np.clip((24 - psi) / 8, 0, 1))
            cols = [ref + rng.normal(0, 2e-3, t.size)]
            for k in range(n_probes):
                th = 2 * np.pi * rev
                cols.append(amp[k] / 2 * np.cos(th - lag[k]) + 0.1 * amp[k] * np.cos(2 * th) + rng.normal(0, 0.2, t.size))
            writer.write_table(pa.Table.from_arrays([pa.array(c) for c in cols], schema=schema))
    channels = "".join(f'\n[[waveform.channels]]\nname = "P{i}"\ncolumn = "ch{i}"\nunit = "um"\n' for i in range(n_probes))
    path.with_suffix(".toml").write_text(
        f'[waveform]\nsample_rate_hz = {FS_HZ}\nreference_channel = "ref"\n{channels}', encoding="utf-8"
    )
    return path


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--minutes", type=float, default=10.0)
    parser.add_argument("--probes", type=int, default=8)
    parser.add_argument("--block-rows", type=int, default=65536)
    parser.add_argument("--seed", type=int, default=1)
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        t0 = time.perf_counter()
        path = write_record(Path(tmp), args.minutes, args.probes, args.seed)
        gen = time.perf_counter() - t0
        size_mb = path.stat().st_size / 1e6
        tracemalloc.start()
        t0 = time.perf_counter()
        result = waveform_vectors(path, block_rows=args.block_rows)
        elapsed = time.perf_counter() - t0
        _, heap_peak = tracemalloc.get_traced_memory()
        tracemalloc.stop()
    rss_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0  # kB on Linux
    duration = 60.0 * args.minutes
    raw_mb = duration * FS_HZ * (args.probes + 1) * 8 / 1e6
    print(f"record: {args.probes} probes + reference at {FS_HZ:g} Hz, {duration:g} s "
          f"({raw_mb:.0f} MB as float64; Parquet file {size_mb:.0f} MB, written in {gen:.1f} s)")
    print(f"revolutions: {result.pulses.n_revolutions}, vectors: {len(result.run.samples)}, "
          f"flags: {len(result.pulses.flags)}")
    print(f"processing time: {elapsed:.2f} s   real-time factor: {duration / elapsed:.0f}x")
    print(f"peak memory: Python heap {heap_peak / 1e6:.0f} MB (tracemalloc), "
          f"process RSS {rss_mb:.0f} MB (getrusage, includes the generator)")


if __name__ == "__main__":
    main()
