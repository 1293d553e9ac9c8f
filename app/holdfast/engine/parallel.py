"""Running many refits: in-process, with joblib worker processes, or on a dask cluster.

Results come back as they finish (any order); progress and cancellation are checked between results.
"""

from __future__ import annotations

import os
import tempfile
import time
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from dataclasses import replace
from pathlib import Path
from typing import Any

import numpy as np

from holdfast.errors import Cancelled, UserError
from holdfast.learners.base import RefitOutcome, RefitProblem


#: below this estimated serial time, refits run in-process (no worker start-up)
IN_PROCESS_SECONDS = 4.0


def refit_batch(problem: RefitProblem, rows: list[int]) -> list[RefitOutcome]:
    """Refit without each of ``rows`` in turn (one task of a parallel run)."""
    return [problem.refit_without(int(r)) for r in rows]


def _chunks(rows: np.ndarray, size: int) -> list[list[int]]:
    return [rows[i : i + size].tolist() for i in range(0, len(rows), size)]


def effective_jobs(jobs: int) -> int:
    """-1 means all cores."""
    return (os.cpu_count() or 1) if jobs == -1 else max(1, jobs)


@contextmanager
def _memmapped(problem: Any) -> Iterator[Any]:
    """Put a large kernel matrix into a read-only memory-mapped .npy so workers share it, not copy it."""
    K = getattr(problem, "K", None)
    if K is None or K.nbytes < (8 << 20):
        yield problem
        return
    with tempfile.TemporaryDirectory(prefix="holdfast-") as tmp:
        path = Path(tmp) / "kernel.npy"
        np.save(path, K)
        yield replace(problem, K=np.load(path, mmap_mode="r"))


def run_refits(
    problem: RefitProblem,
    rows: np.ndarray,
    *,
    jobs: int = 1,
    backend: str = "joblib",
    scheduler: str | None = None,
    on_results: Callable[[list[RefitOutcome]], None],
    should_cancel: Callable[[], bool] | None = None,
) -> None:
    """Refit without each row in ``rows``; pass finished outcomes to ``on_results`` as they arrive.

    Raises :class:`Cancelled` when ``should_cancel()`` turns true; outcomes already passed stay valid.
    """
    cancel = should_cancel or (lambda: False)
    rows = np.asarray(rows, dtype=np.int64)
    if len(rows) == 0:
        return
    n_jobs = effective_jobs(jobs)
    if backend == "dask":
        _run_dask(problem, rows, n_jobs, scheduler, on_results, cancel)
        return
    if n_jobs > 1:
        # Starting worker processes costs seconds: time one refit here and stay in-process when the
        # whole job is short anyway.
        t0 = time.perf_counter()
        on_results([problem.refit_without(int(rows[0]))])
        rows = rows[1:]
        if (time.perf_counter() - t0) * len(rows) < IN_PROCESS_SECONDS:
            n_jobs = 1
    if n_jobs == 1:
        for r in rows:
            if cancel():
                raise Cancelled()
            on_results([problem.refit_without(int(r))])
        return
    from joblib import Parallel, delayed

    size = max(1, min(8, len(rows) // (n_jobs * 8) or 1))
    with _memmapped(problem) as shared:
        gen = Parallel(n_jobs=n_jobs, return_as="generator_unordered", max_nbytes=None)(
            delayed(refit_batch)(shared, chunk) for chunk in _chunks(rows, size)
        )
        try:
            for outcomes in gen:
                on_results(outcomes)
                if cancel():
                    raise Cancelled()
        finally:
            close = getattr(gen, "close", None)
            if close is not None:
                close()


def _run_dask(
    problem: RefitProblem,
    rows: np.ndarray,
    n_jobs: int,
    scheduler: str | None,
    on_results: Callable[[list[RefitOutcome]], None],
    cancel: Callable[[], bool],
) -> None:
    try:
        from distributed import Client, LocalCluster, as_completed
    except ImportError:  # pragma: no cover - depends on the install
        raise UserError("run.backend = \"dask\" needs dask.distributed: pip install \"holdfast[cluster]\"") from None
    cluster = None
    if scheduler:
        try:
            client = Client(scheduler, timeout="10s")
        except OSError as exc:
            raise UserError(f"run.scheduler: cannot reach dask scheduler at {scheduler} ({exc})") from None
    else:
        cluster = LocalCluster(
            n_workers=n_jobs, threads_per_worker=1, host="127.0.0.1", dashboard_address=None, processes=True
        )
        client = Client(cluster)
    try:
        shared = client.scatter(problem, broadcast=True)
        size = max(1, min(8, len(rows) // (n_jobs * 8) or 1))
        futures = [client.submit(refit_batch, shared, chunk, pure=False) for chunk in _chunks(rows, size)]
        for fut in as_completed(futures):
            on_results(fut.result())
            if cancel():
                client.cancel(futures)
                raise Cancelled()
    finally:
        client.close()
        if cluster is not None:
            cluster.close()
