"""Batch identification of many runs, locally (process pool) or on a dask cluster.

Each run is read, conditioned, identified and, optionally, judged against a rule set and
stored in an archive (:mod:`runup.archive`; several workers may write at once).  A run that
fails is recorded with its one-line reason and the batch carries on.

Executors: ``"local"`` uses :class:`concurrent.futures.ProcessPoolExecutor` (``workers=1``
runs in this process); ``"dask"`` uses ``dask.distributed`` (optional extra ``runup[dask]``):
a new ``LocalCluster`` of ``workers`` processes, or the scheduler at ``address``.  Results
are the same whichever executor runs them, listed in input order.
"""

from __future__ import annotations

import contextlib
import glob
import multiprocessing
import os
from collections.abc import Callable, Iterator, Sequence
from concurrent.futures import ProcessPoolExecutor, as_completed
from dataclasses import dataclass
from pathlib import Path
from typing import Literal

from .errors import DataFormatError, RunupError

__all__ = ["RUN_SUFFIXES", "BatchOptions", "BatchItem", "BatchResult", "expand_inputs", "parse_executor",
           "process_run", "run_batch"]

#: File types a batch picks up from a directory.
RUN_SUFFIXES = (".csv", ".parquet")
ExecutorKind = Literal["local", "dask"]


@dataclass(frozen=True)
class BatchOptions:
    """What every run of a batch gets: rule set, archive, tags.

    Attributes
    ----------
    rules
        Rule set name or TOML path for :func:`runup.criteria.judge`, or ``None`` (no check).
    archive
        Archive directory to store fingerprints in, or ``None``.
    replace
        Replace runs already archived under the same machine and run id.
    tags
        Condition tags given to every fingerprint.
    """

    rules: str | None = None
    archive: str | None = None
    replace: bool = False
    tags: tuple[tuple[str, str], ...] = ()


@dataclass(frozen=True)
class BatchItem:
    """The outcome of one run: ids, criticals found, check and archive outcome, or the error."""

    path: str
    ok: bool
    machine_id: str | None = None
    run_id: str | None = None
    n_criticals: int = 0
    passed: bool | None = None
    archived: bool = False
    error: str | None = None


@dataclass(frozen=True)
class BatchResult:
    """All outcomes in input order, and how they were run."""

    items: tuple[BatchItem, ...]
    executor: str
    workers: int

    @property
    def failures(self) -> tuple[BatchItem, ...]:
        return tuple(i for i in self.items if not i.ok)

    @property
    def exit_code(self) -> int:
        """0 when every run succeeded, 2 when any failed."""
        return 2 if self.failures else 0


def expand_inputs(source: str | os.PathLike[str]) -> tuple[Path, ...]:
    """Run files named by a directory (its ``*.csv`` and ``*.parquet``, recursively) or a glob.

    Sorted, without duplicates; :class:`DataFormatError` when nothing matches.
    """
    text = os.fspath(source)
    if Path(text).is_dir():
        found = [p for p in Path(text).rglob("*") if p.suffix.lower() in RUN_SUFFIXES and p.is_file()]
    else:
        found = [Path(p) for p in glob.glob(text, recursive=True) if Path(p).is_file()]
    found = [p for p in found if not any(part.startswith(".") for part in p.parts[-1:])]
    if not found:
        raise DataFormatError(f"no run files ({', '.join(RUN_SUFFIXES)}) match {text!r}")
    return tuple(sorted(set(found)))


def parse_executor(text: str) -> tuple[ExecutorKind, str | None]:
    """``"local"``, ``"dask"`` or ``"dask:ADDRESS"`` (e.g. ``dask:tcp://10.0.0.5:8786``)."""
    if text == "local":
        return "local", None
    if text == "dask":
        return "dask", None
    if text.startswith("dask:") and len(text) > 5:
        return "dask", text[5:]
    raise DataFormatError(f"executor must be 'local', 'dask' or 'dask:ADDRESS', got {text!r}")


def process_run(path: str, options: BatchOptions) -> BatchItem:
    """Identify (and check, and archive) one run; a bad file gives ``ok=False`` with the reason.

    Never raises for bad input: :class:`RunupError` and ``OSError`` become the item's
    ``error``; any other exception too, prefixed ``internal error``, so that one run cannot
    stop a batch.
    """
    from .archive.store import add_fingerprint
    from .criteria import judge, load_rules
    from .fingerprint import fingerprint
    from .identify import identify

    try:
        ident = identify(path)
        meta = ident.conditioned.metadata
        check = judge(ident, rules=load_rules(options.rules)) if options.rules is not None else None
        archived = False
        if options.archive is not None:
            fp = fingerprint(ident, check=check, tags=dict(options.tags))
            add_fingerprint(options.archive, fp, replace=options.replace)
            archived = True
        return BatchItem(path, True, meta.machine_id, meta.run_id, len(ident.criticals),
                         None if check is None else check.passed, archived)
    except (RunupError, OSError) as exc:
        return BatchItem(path, False, error=" ".join(str(exc).split()) or type(exc).__name__)
    except Exception as exc:  # one broken run must not stop the batch; reported, never hidden
        return BatchItem(path, False, error=f"internal error: {type(exc).__name__}: {' '.join(str(exc).split())}")


def _local(paths: Sequence[str], options: BatchOptions, workers: int,
           on_result: Callable[[BatchItem], None] | None) -> dict[str, BatchItem]:
    done: dict[str, BatchItem] = {}
    if workers == 1:
        for p in paths:
            done[p] = item = process_run(p, options)
            if on_result is not None:
                on_result(item)
        return done
    # spawn: a forked child of a threaded parent (pyarrow, rich) may deadlock.  One math
    # thread per worker: the workers are the parallelism; BLAS threads on top of them only
    # oversubscribe the cores (children read these variables when numpy loads).
    with _single_threaded_children(), ProcessPoolExecutor(
        max_workers=workers, mp_context=multiprocessing.get_context("spawn")
    ) as pool:
        futures = {pool.submit(process_run, p, options): p for p in paths}
        for fut in as_completed(futures):
            done[futures[fut]] = item = fut.result()
            if on_result is not None:
                on_result(item)
    return done


_THREAD_VARIABLES = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS")


@contextlib.contextmanager
def _single_threaded_children() -> Iterator[None]:
    """Set the math-library thread counts to 1 for processes started inside the block."""
    saved = {k: os.environ.get(k) for k in _THREAD_VARIABLES}
    os.environ.update(dict.fromkeys(_THREAD_VARIABLES, "1"))
    try:
        yield
    finally:
        for k, v in saved.items():
            if v is None:
                os.environ.pop(k, None)
            else:
                os.environ[k] = v


def _dask(paths: Sequence[str], options: BatchOptions, workers: int, address: str | None,
          on_result: Callable[[BatchItem], None] | None) -> dict[str, BatchItem]:
    try:
        from dask.distributed import Client, LocalCluster
        from dask.distributed import as_completed as dask_completed
    except ImportError:
        raise DataFormatError("the dask executor needs dask.distributed: pip install 'runup[dask]'") from None
    cluster = None
    try:
        if address is None:
            with _single_threaded_children():  # the worker processes inherit one math thread
                cluster = LocalCluster(n_workers=workers, threads_per_worker=1, processes=True,
                                       dashboard_address=None, host="127.0.0.1")
            client = Client(cluster)
        else:
            client = Client(address, timeout="10s")
    except OSError as exc:
        raise DataFormatError(f"cannot reach the dask scheduler {address or '(local)'}: {exc}") from None
    done: dict[str, BatchItem] = {}
    try:
        futures = client.map(process_run, list(paths), options=options, pure=False)
        index = {f.key: p for f, p in zip(futures, paths, strict=True)}
        for fut in dask_completed(futures):
            done[index[fut.key]] = item = fut.result()
            if on_result is not None:
                on_result(item)
    finally:
        client.close()
        if cluster is not None:
            cluster.close()
    return done


def run_batch(
    paths: Sequence[str | os.PathLike[str]],
    *,
    options: BatchOptions | None = None,
    workers: int = 1,
    executor: ExecutorKind = "local",
    address: str | None = None,
    on_result: Callable[[BatchItem], None] | None = None,
) -> BatchResult:
    """Process many runs; every outcome in input order.

    Parameters
    ----------
    paths
        Run files (see :func:`expand_inputs`).
    options
        Rule set, archive and tags (default: identify only).
    workers
        Worker processes (>= 1); ``1`` with the local executor runs in this process.
    executor
        ``"local"`` or ``"dask"``.
    address
        Dask scheduler address (``executor="dask"`` only); ``None`` starts a LocalCluster.
    on_result
        Called with each outcome as it completes (e.g. to advance a progress bar).
    """
    if not isinstance(workers, int) or workers < 1:
        raise DataFormatError(f"workers must be a whole number >= 1, got {workers!r}")
    if executor not in ("local", "dask"):
        raise DataFormatError(f"executor must be 'local' or 'dask', got {executor!r}")
    if address is not None and executor != "dask":
        raise DataFormatError("a scheduler address needs executor='dask'")
    opts = BatchOptions() if options is None else options
    names = [os.fspath(p) for p in paths]
    if len(set(names)) != len(names):
        raise DataFormatError("the same run file is listed twice")
    if executor == "local":
        done = _local(names, opts, workers, on_result)
    else:
        done = _dask(names, opts, workers, address, on_result)
    return BatchResult(tuple(done[p] for p in names), executor, workers)
