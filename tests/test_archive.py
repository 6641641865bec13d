"""The archive: round trip, plain-Parquet readers, ids, duplicates, concurrency, crash safety, v1 fixture.

Fingerprints come from synthetic runs (runup.synthetic, invented data).
"""

import dataclasses
import multiprocessing as mp
import os
import signal
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.dataset as ds
import pyarrow.parquet as pq
import pytest
from numpy.testing import assert_allclose
from typer.testing import CliRunner

import runup.cli.archive  # noqa: F401  (registers the archive commands on the shared app)
from runup.archive import (
    ArchiveError,
    add_fingerprint,
    history,
    list_runs,
    load_run,
    open_archive,
    read_baseline,
    read_table,
    set_baseline,
    validate_id,
)
from runup.cli import app
from runup.errors import DataFormatError
from runup.fingerprint import fingerprint
from tests.test_fingerprint import synthetic_identification

FIXTURE_V1 = Path(__file__).parent / "fixtures" / "archive_v1"
SAMPLES = Path(__file__).resolve().parents[1] / "sample_runs"
runner = CliRunner()


@pytest.fixture(scope="module")
def fp():
    return fingerprint(synthetic_identification(), tags={"start": "cold", "oil_temp_c": "48"})


def assert_same_fingerprint(got, want):
    """Field-by-field equality; complex vectors survive amplitude/phase storage to 1e-12 (float64 round-off)."""
    for f in dataclasses.fields(want):
        a, b = getattr(got, f.name), getattr(want, f.name)
        if f.name == "curves":
            assert len(a) == len(b)
            for ga, gb in zip(a, b, strict=True):
                assert (ga.name, ga.kind, ga.order, ga.segment) == (gb.name, gb.kind, gb.order, gb.segment)
                assert_allclose(ga.speed_rpm, gb.speed_rpm)
                assert_allclose(ga.response_um_pp, gb.response_um_pp, rtol=1e-12, atol=1e-12, equal_nan=True)
        elif f.name in ("slow_roll", "running_speed"):
            assert len(a) == len(b)
            for x, y in zip(a, b, strict=True):
                za = x.vector_um_pp if f.name == "slow_roll" else x.response_um_pp
                zb = y.vector_um_pp if f.name == "slow_roll" else y.response_um_pp
                assert_allclose(za, zb, rtol=1e-12)
                assert x.probe == y.probe and x.segment == y.segment
        elif f.name == "criticals":
            assert len(a) == len(b)
            for x, y in zip(a, b, strict=True):
                for g in dataclasses.fields(y):
                    va, vb = getattr(x, g.name), getattr(y, g.name)
                    if isinstance(vb, float):
                        assert_allclose(va, vb, equal_nan=True)
                    else:
                        assert va == vb
        elif f.name == "segments":
            assert [dataclasses.astuple(s)[:4] for s in a] == [dataclasses.astuple(s)[:4] for s in b]
        else:
            assert a == b, f.name


def test_round_trip(tmp_path, fp):
    """A fingerprint written and read back is the same fingerprint (one machine, one run)."""
    commit = add_fingerprint(tmp_path / "arc", fp)
    assert commit.files[-1].parent.parent.name == "runs"  # runs is renamed in last: the commit
    assert_same_fingerprint(load_run(tmp_path / "arc", "K-301", "r001"), fp)
    assert_same_fingerprint(history(tmp_path / "arc", "K-301")[0], fp)
    assert open_archive(tmp_path / "arc").schema_version == 1


def test_readable_with_plain_pyarrow_dataset_and_pandas(tmp_path, fp):
    """Without runup: pyarrow.dataset (hive partitioning) and pandas read the tables (independent readers)."""
    root = tmp_path / "arc"
    for i in range(3):
        add_fingerprint(root, dataclasses.replace(fp, run_id=f"r{i}"))
    add_fingerprint(root, dataclasses.replace(fp, machine_id="P-12", run_id="x1"))
    runs = ds.dataset(root / "runs", format="parquet", partitioning="hive").to_table().to_pandas()
    assert sorted(zip(runs["machine_id"], runs["run_id"], strict=True)) == [
        ("K-301", "r0"), ("K-301", "r1"), ("K-301", "r2"), ("P-12", "x1")]
    curves = pd.read_parquet(root / "curves" / "machine_id=K-301")
    n_grid = sum(c.speed_rpm.size for c in fp.curves)
    assert len(curves) == 3 * n_grid
    crit = pd.read_parquet(root / "criticals")
    assert_allclose(crit["speed_rpm"].to_numpy(), [fp.criticals[0].speed_rpm] * 4)
    assert len(read_table(root, "runs")) == 4


@pytest.mark.parametrize("bad", ["", "../etc", "a/b", "..", "a..b", ".hidden", "-x", "x" * 65, "K 301", "ü"])
def test_rejected_ids(tmp_path, fp, bad):
    """Ids that are empty, too long, hidden, contain '..', separators or other characters are refused."""
    with pytest.raises(DataFormatError) as info:
        validate_id(bad, what="run id")
    assert "\n" not in str(info.value)
    with pytest.raises(DataFormatError):
        add_fingerprint(tmp_path / "arc", dataclasses.replace(fp, run_id=bad))
    with pytest.raises(DataFormatError):
        add_fingerprint(tmp_path / "arc", dataclasses.replace(fp, machine_id=bad))
    assert not (tmp_path / "etc").exists()
    assert validate_id("K-301_a.b", what="machine id") == "K-301_a.b" and validate_id("x" * 64, what="id")


def test_duplicate_run_is_refused_and_replace_keeps_one(tmp_path, fp):
    """A run id already present is an error; with replace the new write wins and the old files go."""
    root = tmp_path / "arc"
    add_fingerprint(root, fp)
    with pytest.raises(ArchiveError, match="--replace"):
        add_fingerprint(root, fp)
    changed = dataclasses.replace(fp, tags=(("start", "hot"),))
    commit = add_fingerprint(root, changed, replace=True)
    assert len(commit.replaced) == len(commit.files)
    runs = list_runs(root)
    assert list(runs["run_id"]) == ["r001"]
    assert load_run(root, "K-301", "r001").tags == (("start", "hot"),)
    assert len(list((root / "curves" / "machine_id=K-301").glob("*.parquet"))) == 1


def test_baseline_can_change_without_rewriting_runs(tmp_path, fp):
    """The baseline is a per-machine JSON file; changing it keeps the history and touches no run file."""
    root = tmp_path / "arc"
    add_fingerprint(root, fp, baseline=True)
    add_fingerprint(root, dataclasses.replace(fp, run_id="r002"))
    before = {p: p.stat().st_mtime_ns for p in (root / "runs").rglob("*.parquet")}
    set_baseline(root, "K-301", "r002")
    assert read_baseline(root, "K-301") == "r002"
    assert {p: p.stat().st_mtime_ns for p in (root / "runs").rglob("*.parquet")} == before
    assert list(list_runs(root)["baseline"]) == [False, True]
    with pytest.raises(ArchiveError):
        set_baseline(root, "K-301", "nope")


def test_uncommitted_and_temporary_files_are_invisible(tmp_path, fp):
    """Files of a write with no runs row, and hidden temp files, are ignored by runup and by pyarrow.dataset."""
    root = tmp_path / "arc"
    add_fingerprint(root, fp)
    folder = root / "curves" / "machine_id=K-301"
    orphan = pq.read_table(next(folder.glob("*.parquet")))
    orphan = orphan.set_column(1, "write_id", pa.array(["deadbeef"] * orphan.num_rows))
    pq.write_table(orphan, folder / "r999~deadbeef.parquet")  # a write whose runs row never came: no commit
    (folder / ".r998~x.parquet.1234.tmp").write_bytes(b"half a file")  # a killed writer's temp file
    assert len(history(root, "K-301")[0].curves) == len(fp.curves)
    assert len(read_table(root, "curves")) == sum(c.speed_rpm.size for c in fp.curves)
    ds.dataset(root / "curves", format="parquet", partitioning="hive").to_table()  # no error on the temp file


def _writer(root, fp, start, count):
    for i in range(start, start + count):
        add_fingerprint(root, dataclasses.replace(fp, run_id=f"w{i:04d}"))


def test_concurrent_writers_lose_nothing(tmp_path, fp):
    """Three processes adding five runs each to one machine at once: all fifteen runs are committed."""
    root = tmp_path / "arc"
    add_fingerprint(root, fp)  # create the archive first, as the CLI's first add does
    ctx = mp.get_context("spawn")
    procs = [ctx.Process(target=_writer, args=(root, fp, 5 * k, 5)) for k in range(3)]
    for p in procs:
        p.start()
    for p in procs:
        p.join(60)
        assert p.exitcode == 0
    ids = set(list_runs(root, machine_id="K-301")["run_id"])
    assert ids == {"r001"} | {f"w{i:04d}" for i in range(15)}
    assert all(len(f.curves) == len(fp.curves) for f in history(root, "K-301"))


def _looping_writer(root, fp, conn):
    for i in range(100_000):
        add_fingerprint(root, dataclasses.replace(fp, run_id=f"k{i:05d}"))
        conn.send(i)


@pytest.mark.parametrize("seed", [1, 2])
def test_sigkill_mid_append_keeps_every_committed_run(tmp_path, fp, seed):
    """A writer killed with SIGKILL at a random moment: every run it reported committed loads whole; no partial run.

    The kill time is drawn from a seeded generator; whichever file the writer was in, the
    archive must load (runup and plain pyarrow), hold every reported run, and any visible
    run must be complete.
    """
    rng = np.random.default_rng(seed)
    root = tmp_path / "arc"
    add_fingerprint(root, fp)
    ctx = mp.get_context("spawn")
    parent, child = ctx.Pipe(duplex=False)
    proc = ctx.Process(target=_looping_writer, args=(root, fp, child))
    proc.start()
    committed = []
    while len(committed) < int(rng.integers(3, 8)):
        assert parent.poll(60), "writer produced nothing"
        committed.append(parent.recv())
    time.sleep(float(rng.uniform(0.0, 0.03)))
    os.kill(proc.pid, signal.SIGKILL)
    proc.join(10)
    while parent.poll(0.2):
        committed.append(parent.recv())
    visible = set(list_runs(root)["run_id"])
    reported = {f"k{i:05d}" for i in committed}
    assert reported <= visible
    assert visible - reported - {"r001"} <= {f"k{max(committed) + 1:05d}"}  # at most the one in flight
    for f in history(root, "K-301"):
        assert len(f.curves) == len(fp.curves) and len(f.criticals) == len(fp.criticals)
        assert len(f.slow_roll) == len(fp.slow_roll) and len(f.segments) == len(fp.segments)
    ds.dataset(root / "curves", format="parquet", partitioning="hive").to_table()


def test_v1_fixture_loads():
    """The committed archive written by schema version 1 loads through the versioned upgrade path.

    Truth of the fixture (tests/fixtures/archive_v1/README.md, synthetic): machine SYN-F1, runs
    f01 (baseline) and f02; one mode each near 4,000 and 4,100 rpm natural speed.
    """
    info = open_archive(FIXTURE_V1)
    assert info.schema_version == 1
    runs = list_runs(FIXTURE_V1)
    assert list(runs["run_id"]) == ["f01", "f02"] and list(runs["baseline"]) == [True, False]
    h = history(FIXTURE_V1, "SYN-F1")
    # 0.5 % noise on a dense synthetic run: natural speed within 1 % of the invented truth
    assert_allclose([f.criticals[0].natural_speed_rpm for f in h], [4000.0, 4100.0], rtol=0.01)
    assert h[0].tag("start") == "cold" and h[1].start_time == "2024-06-01T09:00:00"


def test_newer_schema_version_is_refused(tmp_path, fp):
    """An archive of a schema version newer than this runup is refused with a clear message."""
    root = tmp_path / "arc"
    add_fingerprint(root, fp)
    meta = (root / "archive.json").read_text().replace('"schema_version": 1', '"schema_version": 99')
    (root / "archive.json").write_text(meta)
    with pytest.raises(DataFormatError, match="upgrade runup"):
        list_runs(root)


def test_cli_add_list_show(tmp_path):
    """`archive add` identifies a sample run and stores it; `list` and `show` print it; a duplicate exits 2."""
    arc = str(tmp_path / "arc")
    run = str(SAMPLES / "compressor_startup.csv")
    res = runner.invoke(app, ["archive", "add", run, "--archive", arc, "--baseline", "--tag", "start=cold",
                              "--rules", "api617"])
    assert res.exit_code == 0, res.output
    assert "added run SYN-K7-startup-01" in res.output
    res = runner.invoke(app, ["archive", "add", run, "--archive", arc])
    assert res.exit_code == 2 and "error: " in res.output and "--replace" in res.output
    res = runner.invoke(app, ["archive", "list", "--archive", arc])
    assert res.exit_code == 0 and "* SYN-K7-startup-01" in res.output
    res = runner.invoke(app, ["archive", "show", "SYN-K7-startup-01", "--archive", arc, "--machine", "SYN-K7",
                              "--json", "-"])
    assert res.exit_code == 0
    import json

    doc = json.loads(res.stdout)
    assert len(doc["criticals"]) == 2 and doc["rule_set"] == "api617" and doc["tags"] == {"start": "cold"}
    res = runner.invoke(app, ["archive", "add", run, "--archive", arc, "--tag", "oops"])
    assert res.exit_code == 2 and "KEY=VALUE" in res.output
