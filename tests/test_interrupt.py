"""Ctrl+C stops ``holdfast scan`` promptly, also while the solver (C code) is busy with one long fit.

The data are 3,000 rows of pure noise with C = 1e5 (inside the accepted range): every libsvm fit then runs
for seconds, and before the fix SIGINT was only seen when the fit returned (the scan kept going for
minutes). The process must end within a few seconds with exit code 130 and one line on stderr, whether
the signal comes during the first fit or during the refits.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import holdfast

pytestmark = pytest.mark.skipif(not hasattr(signal, "SIGINT") or os.name != "posix", reason="POSIX signals")


def _env(cache: Path) -> dict[str, str]:
    env = dict(os.environ)
    root = str(Path(holdfast.__file__).resolve().parent.parent)
    env["PYTHONPATH"] = os.pathsep.join(p for p in (root, env.get("PYTHONPATH", "")) if p)
    env["HOLDFAST_CACHE_DIR"] = str(cache)
    return env


def _sigint_as_usual() -> None:
    """In the scan's process before it starts: Ctrl+C back to its default. A shell starts background jobs
    with SIGINT ignored, Python then keeps it ignored, and a test run started that way (``pytest &``)
    would see a scan that never stops."""
    signal.signal(signal.SIGINT, signal.SIG_DFL)


def test_sigint_during_long_fits_exits_promptly_with_one_line(tmp_path: Path) -> None:
    rng = np.random.default_rng(0)
    n = 3000
    frame = pd.DataFrame(rng.normal(size=(n, 8)), columns=[f"x{i}" for i in range(8)])
    frame["grade"] = np.where(rng.integers(0, 2, n) == 1, "premium", "processing")  # noise: no rule
    data = tmp_path / "noise.parquet"
    frame.to_parquet(data, index=False)
    spec = tmp_path / "noise.toml"
    spec.write_text('[data]\nlabel = "grade"\n[learner]\nC = 1e5\n')
    out = tmp_path / "out"
    proc = subprocess.Popen(
        [sys.executable, "-m", "holdfast.cli", "scan", str(data), "--spec", str(spec), "--out", str(out)],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        env=_env(tmp_path / "cache"),
        preexec_fn=_sigint_as_usual,
    )
    assert proc.stderr is not None
    try:
        # `scan` makes the --out folder in its worker before it reads the data: the work has started
        deadline = time.monotonic() + 60
        while not out.exists() and time.monotonic() < deadline and proc.poll() is None:
            time.sleep(0.05)
        time.sleep(2.0)  # reading, preparing: now inside the first long fit (or its refits)
        assert proc.poll() is None
    except BaseException:
        proc.kill()
        proc.wait()
        raise
    _interrupt(proc)
    assert not (out / "rows.parquet").exists()


def _interrupt(proc: subprocess.Popen) -> None:
    """Ctrl+C to a running scan: it ends within 8 s, with exit code 130 and the one usual line."""
    try:
        start = time.monotonic()
        proc.send_signal(signal.SIGINT)
        _, err = proc.communicate(timeout=20)
        waited = time.monotonic() - start
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
    assert proc.returncode == 130
    text = err if isinstance(err, str) else err.decode()
    lines = [x for x in text.splitlines() if not x.startswith("refits")]
    assert lines == ["holdfast: cancelled; finished refits are kept and the next run resumes from them"]
    assert waited < 8.0, f"took {waited:.1f} s to stop"


def _alive_with(text: str) -> list[int]:
    """Processes (other than this one) whose command line contains ``text``."""
    pids = []
    for entry in Path("/proc").iterdir():
        if not entry.name.isdigit() or int(entry.name) == os.getpid():
            continue
        try:
            cmd = (entry / "cmdline").read_bytes().replace(b"\0", b" ").decode(errors="replace")
            state = (entry / "stat").read_text().split(") ", 1)[1][:1]
        except OSError:
            continue
        if text in cmd and state != "Z":
            pids.append(int(entry.name))
    return pids


def _scan_on_workers(tmp_path: Path) -> tuple[subprocess.Popen[str], Path]:
    """Start a two-job scan of 3,000 noise rows (about 20 s of refits on forked workers, engine.forked)
    and return once refits have finished on the workers; asserts that worker processes run."""
    rng = np.random.default_rng(1)
    n = 3000
    frame = pd.DataFrame(rng.normal(size=(n, 8)), columns=[f"x{i}" for i in range(8)])
    frame["grade"] = np.where(rng.integers(0, 2, n) == 1, "premium", "processing")
    data = tmp_path / "noise-workers.parquet"
    frame.to_parquet(data, index=False)
    spec = tmp_path / "noise.toml"
    spec.write_text('[data]\nlabel = "grade"\n[learner]\nC = 1.0\n[run]\njobs = 2\n')
    cmd = [sys.executable, "-m", "holdfast.cli", "scan", str(data), "--spec", str(spec)]
    cmd += ["--out", str(tmp_path)]
    proc = subprocess.Popen(
        cmd,
        stdout=subprocess.DEVNULL,
        stderr=subprocess.PIPE,
        env=_env(tmp_path / "cache"),
        preexec_fn=_sigint_as_usual,
        text=True,
    )
    assert proc.stderr is not None
    seen: list[str] = []
    try:
        for line in proc.stderr:
            seen.append(line.rstrip("\n"))
            if line.startswith("refits: ") and not line.startswith("refits: 0/"):
                break
        assert proc.poll() is None, f"the scan ended before its refits could be interrupted: {seen[-3:]}"
        assert [p for p in _alive_with(str(data)) if p != proc.pid], "no worker processes were started"
    except BaseException:
        proc.kill()
        proc.wait()
        raise
    return proc, data


def _no_worker_left(data: Path) -> None:
    deadline = time.monotonic() + 5
    while _alive_with(str(data)) and time.monotonic() < deadline:
        time.sleep(0.1)
    left = _alive_with(str(data))
    for pid in left:  # leave no stray process behind a failing test
        os.kill(pid, signal.SIGKILL)
    assert not left, "a worker outlived the scan"


@pytest.mark.skipif(not Path("/proc/self/cmdline").exists(), reason="reads /proc")
def test_sigint_during_refits_on_worker_processes_leaves_no_worker(tmp_path: Path) -> None:
    """Ctrl+C during refits on worker processes: the usual line and exit code, and no worker stays."""
    proc, data = _scan_on_workers(tmp_path)
    _interrupt(proc)
    _no_worker_left(data)


@pytest.mark.skipif(not Path("/proc/self/cmdline").exists(), reason="reads /proc")
def test_workers_die_with_a_killed_scan(tmp_path: Path) -> None:
    """The scan killed outright (SIGKILL: no clean-up runs): the kernel ends its workers too."""
    proc, data = _scan_on_workers(tmp_path)
    proc.kill()
    proc.wait()
    _no_worker_left(data)
