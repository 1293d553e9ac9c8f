"""Running many refits: in-process, on forked worker processes (Linux) or joblib threads, or on a dask
cluster.

Results come back as they finish (any order); progress and cancellation are checked between results.
"""

from __future__ import annotations

import os
from collections.abc import Callable
from typing import Any

import numpy as np

from holdfast.engine import forked
from holdfast.errors import Cancelled, UserError
from holdfast.learners.base import RefitOutcome, RefitProblem


def refit_batch(problem: RefitProblem, rows: list[int]) -> list[RefitOutcome]:
    """Refit without each of ``rows`` in turn (one task of a parallel run)."""
    return [problem.refit_without(int(r)) for r in rows]


def _one_blas_thread() -> Any:
    """BLAS on one thread while refits run: the refits are the parallel units, and a refit's small dense
    solves (a few hundred rows) were 10-100x slower with OpenBLAS threads competing for busy cores."""
    from threadpoolctl import threadpool_limits

    return threadpool_limits(limits=1, user_api="blas")


def _dask_batch(problem: RefitProblem, rows: list[int]) -> list[RefitOutcome]:
    """``refit_batch`` on a dask worker, with one BLAS thread."""
    with _one_blas_thread():
        return refit_batch(problem, rows)


def _chunks(rows: np.ndarray, size: int) -> list[list[int]]:
    return [rows[i : i + size].tolist() for i in range(0, len(rows), size)]


def effective_jobs(jobs: int) -> int:
    """-1 means all cores."""
    return (os.cpu_count() or 1) if jobs == -1 else max(1, jobs)


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
    with _one_blas_thread():
        _run_local(problem, rows, n_jobs, on_results, cancel, processes=backend != "threads")


def _run_local(
    problem: RefitProblem,
    rows: np.ndarray,
    n_jobs: int,
    on_results: Callable[[list[RefitOutcome]], None],
    cancel: Callable[[], bool],
    *,
    processes: bool = True,
) -> None:
    """Refits on this machine: in turn (one job), on forked worker processes (``processes``, Linux, enough
    refits: engine.forked), else on threads. Rows a dead worker left undone go to threads."""
    if n_jobs == 1:
        for r in rows:
            if cancel():
                raise Cancelled()
            on_results([problem.refit_without(int(r))])
        return
    size = max(1, min(8, len(rows) // (n_jobs * 8) or 1))
    chunks = _chunks(rows, size)
    if processes and forked.available() and len(rows) >= n_jobs * forked.MIN_REFITS_PER_WORKER:
        chunks = forked.refit_on_workers(problem, chunks, n_jobs, on_results, cancel)
        if not chunks:
            return
    # Threads: our solver (numba, nogil), libsvm and numpy's kernels release the GIL, the kernel matrix is
    # shared without copies, and nothing starts up; slower than processes where a refit holds the GIL often.
    from joblib import Parallel, delayed

    gen = Parallel(n_jobs=n_jobs, prefer="threads", return_as="generator_unordered")(
        delayed(refit_batch)(problem, chunk) for chunk in chunks
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
        msg = 'run.backend = "dask" needs dask.distributed: pip install "holdfast[cluster]"'
        raise UserError(msg) from None
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
        futures = [client.submit(_dask_batch, shared, chunk, pure=False) for chunk in _chunks(rows, size)]
        for fut in as_completed(futures):
            on_results(fut.result())
            if cancel():
                client.cancel(futures)
                raise Cancelled()
    finally:
        client.close()
        if cluster is not None:
            cluster.close()
