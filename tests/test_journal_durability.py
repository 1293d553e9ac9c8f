"""Durability: a writer process killed with SIGKILL at a random moment loses no committed decision.

The writer (tests/journal_writer.py) prints ``committed <row_id>`` only after ``Journal.record`` returned.
After the kill, every reported row must be in the journal with its planned decision, at most one step
beyond the last reported one may be there (committed but not yet printed), and the file must open cleanly.
SQLite promises that a committed transaction survives a process crash in WAL mode (SQLite documentation,
"Atomic Commit In SQLite" and "Write-Ahead Logging"); this checks that our writes really commit.

A second series runs the writer as the inspector runs: holding the session lock. After each kill the lock
file still names the killed process, and the next opener must take the lock over (the kernel released it)
and find every acknowledged decision.
"""

from __future__ import annotations

import importlib.util
import os
import random
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import pytest

import holdfast
from holdfast.review.journal import Journal

WRITER = Path(__file__).with_name("journal_writer.py")
_spec = importlib.util.spec_from_file_location("journal_writer", WRITER)
assert _spec is not None and _spec.loader is not None
_writer = importlib.util.module_from_spec(_spec)
_spec.loader.exec_module(_writer)
planned = _writer.planned
RUNS = 30
RUNS_LOCKED = 20

pytestmark = pytest.mark.skipif(not hasattr(signal, "SIGKILL"), reason="needs SIGKILL (POSIX)")


def _env() -> dict[str, str]:
    env = dict(os.environ)
    package_root = str(Path(holdfast.__file__).resolve().parent.parent)
    env["PYTHONPATH"] = os.pathsep.join(p for p in (package_root, env.get("PYTHONPATH", "")) if p)
    return env


def _step_of(row_id: str) -> int:
    return int(row_id[1:].split("-")[0])


def _kill_after(path: Path, delay: float, *, lock: bool = False) -> tuple[list[str], int]:
    """Run the writer, SIGKILL it ``delay`` seconds after it is ready; return reported row ids, exit code."""
    proc = subprocess.Popen(
        [sys.executable, str(WRITER), str(path), *(["--lock"] if lock else [])],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        env=_env(),
    )
    assert proc.stdout is not None and proc.stderr is not None
    try:
        first = proc.stdout.readline()
        assert first == b"ready\n", proc.stderr.read().decode(errors="replace")
        time.sleep(delay)
        proc.send_signal(signal.SIGKILL)
        rest = proc.stdout.read()
    finally:
        proc.kill()
        proc.wait()
        proc.stdout.close()
        proc.stderr.close()
    lines = rest.split(b"\n")[:-1]  # the part after the last newline may be cut short: not reported
    reported = [line.decode().split(" ", 1)[1] for line in lines if line.startswith(b"committed ")]
    return reported, proc.returncode


def _check_run(path: Path, run: int, delay: float, reported: list[str]) -> None:
    """Every reported row is in the journal as planned; steps are whole; the file is intact."""
    with Journal.open(path) as journal:  # opens cleanly (includes SQLite's quick_check)
        current = journal.current(include_notes_only=True)
    con = sqlite3.connect(path)
    assert con.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
    con.close()
    last = max((_step_of(r) for r in reported), default=-1)
    for row_id in reported:
        step = _step_of(row_id)
        (_, decision, label, note) = next(c for c in planned(step) if c[0] == row_id)
        got = current.get(row_id)
        assert got is not None, f"run {run} (delay {delay:.3f}s): committed row {row_id} was lost"
        assert (got.decision, got.new_label, got.note) == (decision, label, note)
    steps_in_journal = {_step_of(r) for r in current}
    assert steps_in_journal <= set(range(last + 2)), f"run {run}: unexpected rows in the journal"
    assert steps_in_journal >= set(range(last + 1)), f"run {run}: a reported step is missing"
    for step in steps_in_journal:  # a step is one transaction: all of its rows or none
        assert {c[0] for c in planned(step)} <= set(current), f"run {run}: step {step} half written"


def test_committed_decisions_survive_sigkill_of_a_lock_holder(tmp_path: Path) -> None:
    from holdfast.review.lock import acquire, lock_path, read_holder

    rng = random.Random(20261204)
    total = 0
    for run in range(RUNS_LOCKED):
        path = tmp_path / f"locked{run}.holdfast.db"
        Journal.create(
            path, fingerprint="fp", data_path="d.parquet", spec_text="", label_column="g", id_column="i"
        ).close()
        delay = rng.uniform(0.0, 0.25)
        reported, code = _kill_after(path, delay, lock=True)
        assert code == -signal.SIGKILL, f"run {run}: writer ended on its own (exit {code})"
        assert read_holder(lock_path(path)).pid not in (0, os.getpid())  # the killed writer's, stale
        taken = acquire(path)  # taken over at once: the kernel freed the killed holder's lock
        assert taken is not None and read_holder(lock_path(path)).pid == os.getpid()
        taken.release()
        _check_run(path, run, delay, reported)
        total += len(reported)
    assert total > 5 * RUNS_LOCKED


def test_committed_decisions_survive_sigkill(tmp_path: Path) -> None:
    rng = random.Random(20240611)
    total = 0
    runs_with_commits = 0
    for run in range(RUNS):
        path = tmp_path / f"run{run}.holdfast.db"
        Journal.create(
            path,
            fingerprint="fp",
            data_path="packhouse.parquet",
            spec_text="",
            label_column="fruit",
            id_column="crate_id",
        ).close()
        delay = rng.uniform(0.0, 0.25)
        reported, code = _kill_after(path, delay)
        assert code == -signal.SIGKILL, f"run {run}: writer ended on its own (exit {code})"

        _check_run(path, run, delay, reported)
        total += len(reported)
        runs_with_commits += bool(reported)
    assert runs_with_commits >= RUNS // 2, "the writer was killed before writing in most runs"
    assert total > 10 * RUNS
