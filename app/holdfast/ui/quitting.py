"""Quitting while a refit runs: the inspector closes at once instead of waiting for the refit.

A refit is compiled code (our solver or libsvm) that cannot be stopped half-way; cancelling stops the scan
at the next finished refit. Without help, quitting would restore the terminal and then wait, blank, for the
refit in flight: the thread workers run on the event loop's default executor, which ``asyncio.run`` joins
on its way out, and Python joins executor threads again at exit.

* :class:`PromptExecutor` is the app's default executor: it counts the work still running, and its
  ``shutdown`` never waits for it.
* :func:`leave_now_if_busy` ends the process at once (``os._exit``), after the session is closed, when work
  is still running. Nothing is lost by that: every decision is committed to the journal before it is shown
  as done, each finished refit is committed to the refit store as it arrives (an unfinished one is simply
  redone on resume), and files are only ever renamed into place complete.
"""

from __future__ import annotations

import os
import sys
import threading
from collections.abc import Callable
from concurrent.futures import Future, ThreadPoolExecutor
from typing import Any

LEAVING = "holdfast: left the refit in progress; the next scan resumes from the finished ones"


class PromptExecutor(ThreadPoolExecutor):
    """A thread pool that counts its running work and whose shutdown returns at once."""

    def __init__(self, *args: Any, **kwargs: Any) -> None:
        super().__init__(*args, **kwargs)
        self._running = 0
        self._count_lock = threading.Lock()

    @property
    def running(self) -> int:
        """How many submitted calls have not returned yet."""
        with self._count_lock:
            return self._running

    def submit(self, fn: Callable[..., Any], /, *args: Any, **kwargs: Any) -> Future:
        def counted() -> Any:
            try:
                return fn(*args, **kwargs)
            finally:
                with self._count_lock:
                    self._running -= 1

        with self._count_lock:
            self._running += 1
        try:
            return super().submit(counted)
        except BaseException:
            with self._count_lock:
                self._running -= 1
            raise

    def shutdown(self, wait: bool = True, *, cancel_futures: bool = False) -> None:
        super().shutdown(wait=False, cancel_futures=True)


def leave_now_if_busy(
    code: int, executor: PromptExecutor | None, *, exit_now: Callable[[int], None] = os._exit
) -> int:
    """Return ``code``; but if ``executor`` still runs work, say so on stderr and end the process now."""
    if executor is not None and executor.running > 0:
        print(LEAVING, file=sys.stderr)
        sys.stdout.flush()
        sys.stderr.flush()
        exit_now(code)
    return code
