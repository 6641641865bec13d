"""Batch identification: local in-process and pool, dask, bad files, archiving, the `batch` command.

Runs are synthetic (runup.synthetic, invented modes) written with runup.io.write.write_run.
"""

import json

import numpy as np
import pytest
from typer.testing import CliRunner

import runup.cli.archive  # noqa: F401  (registers `batch` on the shared app)
from runup.archive import list_runs
from runup.batch import BatchOptions, expand_inputs, parse_executor, run_batch
from runup.cli import app
from runup.errors import DataFormatError
from runup.io.write import write_run
from runup.run import OperatingSpeeds
from runup.synthetic import SyntheticMode, SyntheticProbe, synthetic_run

runner = CliRunner()
MODES_RPM = (3500.0, 4000.0, 4500.0)


@pytest.fixture(scope="module")
def run_dir(tmp_path_factory):
    """Three small synthetic runs (one mode each, 2 probes x 300 points) and one unreadable file."""
    folder = tmp_path_factory.mktemp("runs")
    rng = np.random.default_rng(7)
    for k, natural in enumerate(MODES_RPM):
        speed = np.linspace(500.0, 8000.0, 300)
        probes = [SyntheticProbe("A-X", (10 + 0j,), complex(*rng.uniform(1, 3, 2)), "A", -45.0),
                  SyntheticProbe("A-Y", (0 + 10j,), complex(*rng.uniform(1, 3, 2)), "A", 45.0)]
        run = synthetic_run(speed, modes=[SyntheticMode(natural, 0.06)], probes=probes, noise_fraction_of_peak=0.005,
                            time_s=np.linspace(0, 300, 300), seed=k, machine_id="SYN-B", run_id=f"b{k}",
                            operating=OperatingSpeeds(5500.0, 7000.0, 7350.0))
        write_run(run, folder / f"b{k}.csv")
    (folder / "broken.csv").write_text("speed_rpm,probe\nfast,A\n")
    return folder


def _summary(result):
    return [(i.path.rsplit("/", 1)[-1], i.ok, i.run_id, i.n_criticals, i.passed, i.error is None) for i in result.items]


def test_local_in_process_and_pool_agree_and_bad_file_is_reported(run_dir):
    """workers=1 and a 2-process pool give the same outcomes in input order; the bad file fails with one line."""
    paths = expand_inputs(run_dir)
    assert [p.name for p in paths] == ["b0.csv", "b1.csv", "b2.csv", "broken.csv"]
    opts = BatchOptions(rules="api617")
    seen = []
    one = run_batch(paths, options=opts, workers=1, on_result=seen.append)
    two = run_batch(paths, options=opts, workers=2)
    assert _summary(one) == _summary(two) and len(seen) == 4
    assert [i.ok for i in one.items] == [True, True, True, False]
    assert all(i.n_criticals == 1 for i in one.items[:3])
    bad = one.failures[0]
    assert "broken.csv" in bad.path and bad.error and "\n" not in bad.error and not bad.error.startswith("internal")
    assert one.exit_code == 2


def test_batch_archives_every_good_run(tmp_path, run_dir):
    """With an archive, every good run is stored (concurrent writers: see test_archive)."""
    arc = tmp_path / "arc"
    result = run_batch(expand_inputs(str(run_dir / "b[0-9].csv")), options=BatchOptions(archive=str(arc)), workers=1)
    assert result.exit_code == 0 and all(i.archived for i in result.items)
    assert sorted(list_runs(arc)["run_id"]) == ["b0", "b1", "b2"]


def test_inputs_and_executor_parsing(tmp_path):
    """An empty match and an unknown executor are DataFormatErrors; dask:ADDRESS is split."""
    with pytest.raises(DataFormatError, match="no run files"):
        expand_inputs(str(tmp_path / "*.csv"))
    assert parse_executor("dask:tcp://127.0.0.1:8786") == ("dask", "tcp://127.0.0.1:8786")
    assert parse_executor("local") == ("local", None)
    with pytest.raises(DataFormatError):
        parse_executor("threads")
    with pytest.raises(DataFormatError):
        run_batch([], workers=0)


def test_cli_batch_lists_failures_and_exits_2(run_dir, tmp_path):
    """`runup batch` reports n of m identified, lists the failure with its reason, exit code 2; JSON has every run."""
    out = tmp_path / "batch.json"
    res = runner.invoke(app, ["batch", str(run_dir), "--json", str(out)])
    assert res.exit_code == 2
    assert "failed: " in res.output and "broken.csv" in res.output
    doc = json.loads(out.read_text())
    assert doc["n_runs"] == 4 and doc["n_failed"] == 1
    res = runner.invoke(app, ["batch", str(run_dir / "b[0-9].csv")])
    assert res.exit_code == 0 and "3 of 3 run(s) identified" in res.output
    res = runner.invoke(app, ["batch", str(run_dir), "--executor", "threads"])
    assert res.exit_code == 2 and "error: executor" in res.output


def test_dask_local_cluster_gives_the_same_results(run_dir):
    """On a dask LocalCluster (in-process worker, no network) the outcomes equal the local executor's."""
    distributed = pytest.importorskip("dask.distributed", reason="dask[distributed] is not installed (optional extra)")
    paths = expand_inputs(run_dir)
    local = run_batch(paths, workers=1)
    # processes=False: the scheduler talks to its worker in process (inproc://), no network port.
    # No warning filter is needed: distributed emits none here (pytest runs with filterwarnings=error).
    with distributed.LocalCluster(n_workers=1, threads_per_worker=2, processes=False,
                                  dashboard_address=None) as cluster:
        remote = run_batch(paths, executor="dask", address=cluster.scheduler_address)
    assert _summary(remote) == _summary(local)
    assert remote.executor == "dask"
