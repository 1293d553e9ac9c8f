"""Quitting never waits for a refit in flight: the app's executor does not wait on shutdown, and the
process leaves at once (after the session is closed) while work still runs."""

from __future__ import annotations

import asyncio
import threading
import time

import pytest

from holdfast.ui.quitting import LEAVING, PromptExecutor, leave_now_if_busy


def test_executor_counts_running_work_and_shutdown_does_not_wait():
    release = threading.Event()
    pool = PromptExecutor(max_workers=1)
    future = pool.submit(release.wait, 30)
    deadline = time.monotonic() + 5
    while pool.running == 0 and time.monotonic() < deadline:
        time.sleep(0.01)
    assert pool.running == 1
    start = time.monotonic()
    pool.shutdown(wait=True)  # what asyncio.run asks for on its way out
    assert time.monotonic() - start < 1.0
    release.set()
    assert future.result(timeout=5) is True
    deadline = time.monotonic() + 5
    while pool.running and time.monotonic() < deadline:
        time.sleep(0.01)
    assert pool.running == 0


def test_a_failing_call_is_not_counted_as_running():
    pool = PromptExecutor(max_workers=1)
    future = pool.submit(lambda: 1 / 0)
    with pytest.raises(ZeroDivisionError):
        future.result(timeout=5)
    assert pool.running == 0
    pool.shutdown()


def test_leaves_at_once_only_while_work_runs(capsys: pytest.CaptureFixture):
    exits: list[int] = []
    release = threading.Event()
    pool = PromptExecutor(max_workers=1)
    assert leave_now_if_busy(0, pool, exit_now=exits.append) == 0
    assert exits == [] and LEAVING not in capsys.readouterr().err
    pool.submit(release.wait, 30)
    while pool.running == 0:
        time.sleep(0.01)
    leave_now_if_busy(3, pool, exit_now=exits.append)
    assert exits == [3]
    assert LEAVING in capsys.readouterr().err
    assert leave_now_if_busy(0, None, exit_now=exits.append) == 0 and exits == [3]
    release.set()
    pool.shutdown()


async def test_the_app_runs_its_workers_on_the_prompt_executor(ds):
    from .inspector_kit import make_app

    app = make_app(ds)
    async with app.run_test(size=(120, 40)):
        assert isinstance(app.work_executor, PromptExecutor)
        assert asyncio.get_running_loop()._default_executor is app.work_executor
