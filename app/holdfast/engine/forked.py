"""Refits on worker processes forked from this one (Linux): the problem is shared, not copied or pickled.

Why processes and not threads: a refit alternates between compiled code that releases the GIL and short
stretches of Python and numpy that hold it, so threads wait on each other. On a 2-core machine, 2 forked
workers did refits 1.3-1.5x faster than 2 threads (2,000 to 20,000 rows, RBF; tests/bench/README.md), and
the gap grows with the number of cores.

How the problem gets there: ``fork`` gives each worker a copy-on-write view of the parent's memory, so the
kernel matrix or stored kernel rows (up to gigabytes) are shared, not copied, as long as nobody writes to
them (a refit only reads its problem: threads share it the same way). Only row numbers go to a worker and
only outcomes come back.

A worker ignores Ctrl+C (the parent cancels and ends the workers), writes nothing to the terminal (its
standard output and error go to /dev/null, so that nothing the parent had buffered is written twice), and
is killed by the kernel when the thread that started it ends (``PR_SET_PDEATHSIG``), so no worker outlives
a cancelled or killed scan. Not on macOS or Windows, where forking a process with threads is unsafe or
unavailable: threads are used there.
"""

from __future__ import annotations

import contextlib
import multiprocessing
import os
import signal
import sys
from collections.abc import Callable, Iterator
from concurrent.futures import FIRST_COMPLETED, Future, ProcessPoolExecutor, wait
from concurrent.futures.process import BrokenProcessPool

from holdfast.errors import Cancelled
from holdfast.learners.base import RefitOutcome, RefitProblem

#: Fewer refits than this per worker run on threads: starting worker processes would not pay off.
MIN_REFITS_PER_WORKER = 16

#: The problem a forked worker refits (set in the worker by ``_start_worker``; None in the parent).
_PROBLEM: RefitProblem | None = None

_PR_SET_PDEATHSIG = 1  # linux/prctl.h


def available() -> bool:
    """True where workers can be forked safely: Linux (not macOS, where forking a process that has
    threads is unsafe, nor Windows, which cannot fork)."""
    return sys.platform.startswith("linux") and "fork" in multiprocessing.get_all_start_methods()


def _die_with_parent() -> None:
    """Ask the kernel to kill this process when the thread that forked it ends (Linux prctl(2))."""
    import ctypes

    with contextlib.suppress(OSError, AttributeError):
        libc = ctypes.CDLL(None, use_errno=True)
        libc.prctl(_PR_SET_PDEATHSIG, int(signal.SIGKILL), 0, 0, 0)


def _start_worker(problem: RefitProblem) -> None:
    """Set up a forked worker (module docstring); ``problem`` arrives by inheritance, not pickled."""
    global _PROBLEM
    _die_with_parent()
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    with contextlib.suppress(ValueError, OSError):
        signal.set_wakeup_fd(-1)  # an event loop's wake-up socket belongs to the parent
    null = os.open(os.devnull, os.O_WRONLY)
    os.dup2(null, 1)
    os.dup2(null, 2)
    os.close(null)
    from threadpoolctl import threadpool_limits

    threadpool_limits(limits=1, user_api="blas")  # the workers are the parallel units (parallel.py)
    _PROBLEM = problem


def _refit_rows(rows: list[int]) -> list[RefitOutcome]:
    """One task on a worker: refit without each of ``rows``."""
    assert _PROBLEM is not None
    return [_PROBLEM.refit_without(int(r)) for r in rows]


def _flush_streams() -> None:
    """Flush the parent's output before forking, so that a worker inherits no buffered text."""
    for stream in (sys.stdout, sys.stderr):
        with contextlib.suppress(Exception):
            stream.flush()


@contextlib.contextmanager
def _pool(problem: RefitProblem, n_jobs: int) -> Iterator[ProcessPoolExecutor]:
    _flush_streams()
    pool = ProcessPoolExecutor(
        max_workers=n_jobs,
        mp_context=multiprocessing.get_context("fork"),
        initializer=_start_worker,
        initargs=(problem,),
    )
    ended = False
    try:
        yield pool
        pool.shutdown(wait=True)
        ended = True
    finally:
        if not ended:  # cancelled or failed: end the workers now, mid-refit if need be
            procs = list((getattr(pool, "_processes", None) or {}).values())
            manager = getattr(pool, "_executor_manager_thread", None)
            pool.shutdown(wait=False, cancel_futures=True)
            for proc in procs:
                with contextlib.suppress(Exception):
                    proc.kill()
            for proc in procs:
                with contextlib.suppress(Exception):
                    proc.join(timeout=5)
            # The pool's own thread also reaps the workers; until it has recorded their exit, a worker it
            # reaped first still counts as alive here (multiprocessing.active_children). It ends once it
            # sees them gone.
            if manager is not None:
                with contextlib.suppress(Exception):
                    manager.join(timeout=5)


def refit_on_workers(
    problem: RefitProblem,
    chunks: list[list[int]],
    n_jobs: int,
    on_results: Callable[[list[RefitOutcome]], None],
    cancel: Callable[[], bool],
) -> list[list[int]]:
    """Refit the rows of ``chunks`` on ``n_jobs`` forked workers, passing outcomes to ``on_results`` as they
    finish; checks ``cancel`` between results (raises :class:`Cancelled`).

    Returns the chunks left undone when a worker died (killed by the system, e.g. for memory; the pool has
    then ended the others), for the caller to refit another way so that no refit is lost; [] when all are
    done.
    """
    with _pool(problem, n_jobs) as pool:
        pending: dict[Future[list[RefitOutcome]], list[int]] = {
            pool.submit(_refit_rows, chunk): chunk for chunk in chunks
        }
        while pending:
            finished, _ = wait(pending, timeout=0.1, return_when=FIRST_COMPLETED)
            for fut in finished:
                try:
                    outcomes = fut.result()
                except BrokenProcessPool:
                    return list(pending.values())
                del pending[fut]
                on_results(outcomes)
            if cancel():
                raise Cancelled()
    return []
