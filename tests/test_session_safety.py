"""One session, several openers and hostile places: the lock, undo across openers, read-only folders,
leftover temporary files, position ids after the data changed, and the cluster a session file may name.

Read-only folders: root ignores permission bits, so a folder is made read-only for real by ``chmod`` when
the tests run as another user, and by a read-only tmpfs mount when they run as root and may mount (the
test is skipped otherwise). The same code paths are also exercised everywhere by making
:func:`os.access` answer "not writable" for the folder (``monkeypatch``), which is what the journal checks.
"""

from __future__ import annotations

import json
import os
import shutil
import signal
import socket
import subprocess
import sys
import textwrap
from pathlib import Path

import pandas as pd
import pytest

import holdfast
from holdfast.cli import main
from holdfast.data.load import fingerprint_file
from holdfast.data.spec import spec_from_text
from holdfast.errors import SessionError
from holdfast.review import journal as journal_module
from holdfast.review.journal import Journal
from holdfast.review.lock import LockBusy, acquire, lock_path, read_holder
from holdfast.review.sessionfiles import remove_stale_temp_files, temp_name
from holdfast.ui.session import open_session

SAMPLE = Path(__file__).resolve().parents[1] / "sample_data"
SPEC = spec_from_text('[data]\nlabel = "grade"\nid = "lot_id"\n')


def _env() -> dict[str, str]:
    env = dict(os.environ)
    root = str(Path(holdfast.__file__).resolve().parent.parent)
    env["PYTHONPATH"] = os.pathsep.join(p for p in (root, env.get("PYTHONPATH", "")) if p)
    return env


@pytest.fixture
def data(tmp_path: Path) -> Path:
    path = tmp_path / "packhouse.parquet"
    pd.read_parquet(SAMPLE / "packhouse.parquet").head(200).to_parquet(path, index=False)
    return path


def _deny_write(monkeypatch: pytest.MonkeyPatch, folder: Path) -> None:
    """Make ``os.access`` say that nothing in ``folder`` can be written (as a read-only mount would)."""
    real = os.access

    def access(path, mode, *args, **kwargs):  # type: ignore[no-untyped-def]
        p = Path(path).absolute()
        if mode & os.W_OK and (p == folder.absolute() or p.parent == folder.absolute()):
            return False
        return real(path, mode, *args, **kwargs)

    monkeypatch.setattr(os, "access", access)


# ------------------------------------------------------------------------------------- two openers
def test_second_opener_gets_the_session_read_only_with_a_notice(data: Path) -> None:
    first = open_session(data, SPEC)
    try:
        assert not first.read_only and first.read_only_note is None
        first.journal.record("L00001", "confirm")
        second = open_session(data, SPEC)
        try:
            assert second.read_only
            note = second.read_only_note or ""
            assert "open in another inspector" in note and f"process {os.getpid()}" in note
            assert socket.gethostname() in note
            with pytest.raises(SessionError, match="read-only"):
                second.journal.record("L00002", "exclude")
            with pytest.raises(SessionError, match="read-only"):
                second.journal.undo()
            assert set(second.journal.current()) == {"L00001"}  # it still reads everything
        finally:
            second.close()
    finally:
        first.close()
    third = open_session(data, SPEC)  # the first closed: the lock is free again
    with third.journal:
        assert not third.read_only
        third.journal.record("L00002", "exclude")
    third.close()


HOLDER = textwrap.dedent(
    """
    import sys, time
    from holdfast.data.spec import spec_from_text
    from holdfast.ui.session import open_session
    opened = open_session(sys.argv[1], spec_from_text('[data]\\nlabel = "grade"\\nid = "lot_id"\\n'))
    opened.journal.record("L00003", "exclude")
    print("ready", "ro" if opened.read_only else "rw", flush=True)
    time.sleep(60)
    """
)


def _start_holder(data: Path) -> subprocess.Popen[bytes]:
    proc = subprocess.Popen(
        [sys.executable, "-c", HOLDER, str(data)], stdout=subprocess.PIPE, stderr=subprocess.PIPE, env=_env()
    )
    assert proc.stdout is not None
    line = proc.stdout.readline()
    assert line == b"ready rw\n", (proc.stderr.read() if proc.stderr else b"").decode()
    return proc


def test_two_processes_second_read_only_and_a_killed_holders_lock_is_taken_over(data: Path) -> None:
    proc = _start_holder(data)
    try:
        other = open_session(data, SPEC)
        try:
            assert other.read_only and f"process {proc.pid}" in (other.read_only_note or "")
            assert other.journal.current()["L00003"].decision == "exclude"
        finally:
            other.close()
    finally:
        proc.send_signal(signal.SIGKILL)  # killed: it never releases the lock itself
        proc.wait()
        for stream in (proc.stdout, proc.stderr):
            if stream is not None:
                stream.close()
    assert read_holder(lock_path(data.with_name("packhouse.holdfast.db"))).pid == proc.pid  # stale file
    after = open_session(data, SPEC)
    try:
        assert not after.read_only, after.read_only_note
        assert read_holder(lock_path(after.path)).pid == os.getpid()  # taken over
        after.journal.record("L00004", "confirm")
    finally:
        after.close()


def test_undo_in_one_process_never_undoes_anothers_acknowledged_decision(tmp_path: Path) -> None:
    path = tmp_path / "s.holdfast.db"
    Journal.create(
        path, fingerprint="fp", data_path="d.parquet", spec_text="", label_column="g", id_column="i"
    ).close()
    with Journal.open(path) as mine:
        mine.record("c1", "confirm")
        other = (
            "import sys\nfrom holdfast.review.journal import Journal\n"
            "Journal.open(sys.argv[1]).record('c2', 'exclude')"
        )
        subprocess.run([sys.executable, "-c", other, str(path)], check=True, env=_env())
        with pytest.raises(SessionError, match="another open copy"):
            mine.undo()
        assert {k: d.decision for k, d in mine.current().items()} == {"c1": "confirm", "c2": "exclude"}


def test_lock_busy_names_the_holder(tmp_path: Path) -> None:
    session = tmp_path / "s.holdfast.db"
    with acquire(session) as held:
        assert held is not None and held.held
        info = json.loads(lock_path(session).read_text())
        assert info["pid"] == os.getpid() and info["host"] == socket.gethostname()
        with pytest.raises(LockBusy, match=rf"process {os.getpid()} on host"):
            acquire(session)
    again = acquire(session)  # released by the with block
    assert again is not None
    again.release()


# ------------------------------------------------------------------------------------- read-only places
def _session_with_decision(data: Path) -> Path:
    opened = open_session(data, SPEC)
    opened.journal.record("L00001", "relabel", "processing")
    opened.close()
    return opened.path


def test_session_beside_data_in_read_only_folder_opens_read_only_not_a_fresh_fallback(
    data: Path, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    beside = _session_with_decision(data)
    monkeypatch.setenv("XDG_DATA_HOME", str(tmp_path / "xdg"))
    _deny_write(monkeypatch, data.parent)
    opened = open_session(data, SPEC)
    try:
        assert opened.path == beside  # not a new session elsewhere
        assert opened.read_only and "read-only" in (opened.location_note or "")
        assert "read-only" in (opened.read_only_note or "")
        assert opened.journal.current()["L00001"].new_label == "processing"
        with pytest.raises(SessionError, match="read-only"):
            opened.journal.record("L00002", "confirm")
    finally:
        opened.close()
    assert not (tmp_path / "xdg").exists()


def test_healthy_session_in_read_only_folder_is_read_only_not_damaged(
    data: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    path = _session_with_decision(data)
    _deny_write(monkeypatch, data.parent)
    with Journal.open(path) as journal:
        assert journal.read_only and "read-only" in (journal.read_only_reason or "")
        assert journal.current()["L00001"].decision == "relabel"


@pytest.fixture
def read_only_folder(tmp_path: Path):
    """A folder holding a healthy session (and its data) that is really read-only for this process."""
    folder = tmp_path / "ro"
    folder.mkdir()
    src = tmp_path / "src"
    src.mkdir()
    data = src / "packhouse.parquet"
    pd.read_parquet(SAMPLE / "packhouse.parquet").head(200).to_parquet(data, index=False)
    _session_with_decision(data)
    if os.geteuid() != 0:
        for f in src.iterdir():
            if not f.name.endswith(".lock"):
                shutil.copy(f, folder / f.name)
        folder.chmod(0o555)
        yield folder
        folder.chmod(0o755)
        return
    if shutil.which("mount") is None:
        pytest.skip("root without mount: no read-only folder available")
    if subprocess.run(["mount", "-t", "tmpfs", "-o", "size=8m", "tmpfs", str(folder)]).returncode != 0:
        pytest.skip("root without permission to mount: no read-only folder available")
    try:
        for f in src.iterdir():
            if not f.name.endswith(".lock"):
                shutil.copy(f, folder / f.name)
        if subprocess.run(["mount", "-o", "remount,ro", str(folder)]).returncode != 0:
            pytest.skip("cannot remount read-only")
        yield folder
    finally:
        subprocess.run(["umount", "-l", str(folder)])


def test_really_read_only_folder(read_only_folder: Path, tmp_path: Path, monkeypatch) -> None:
    monkeypatch.setenv("XDG_DATA_HOME", str(tmp_path / "xdg"))
    data = read_only_folder / "packhouse.parquet"
    opened = open_session(data, SPEC)
    try:
        assert opened.path == read_only_folder / "packhouse.holdfast.db" and opened.read_only
        assert opened.journal.current()["L00001"].decision == "relabel"
    finally:
        opened.close()
    out = tmp_path / "decisions.csv"
    assert main(["export", str(opened.path), "--to", str(out)]) == 0  # export reads a read-only session
    assert "L00001" in out.read_text()


# ------------------------------------------------------------------------------------- temporary files
def test_temp_files_of_a_killed_creation_are_removed_and_names_are_unpredictable(tmp_path: Path) -> None:
    target = tmp_path / "packhouse.holdfast.db"
    dead = subprocess.Popen([sys.executable, "-c", "pass"])
    dead.wait()  # its pid is free now
    left = [
        tmp_path / f".{target.name}.{dead.pid}.tmp",  # the older naming
        tmp_path / f".{target.name}.{dead.pid}.tmp-wal",
        tmp_path / f".{target.name}.{dead.pid}.0123456789abcdef.tmp",
        tmp_path / f".{target.name}.{dead.pid}.0123456789abcdef.tmp-shm",
    ]
    alive = tmp_path / f".{target.name}.{os.getpid()}.fedcba9876543210.tmp"  # a creation still running
    other = tmp_path / f".other.holdfast.db.{dead.pid}.tmp"  # another session's file: not ours to touch
    for f in [*left, alive, other]:
        f.write_bytes(b"x")
    Journal.create(
        target, fingerprint="fp", data_path="d.parquet", spec_text="", label_column="g", id_column=None
    ).close()
    assert not any(f.exists() for f in left)
    assert alive.exists() and other.exists()
    for f in left[:2]:
        f.write_bytes(b"x")
    Journal.open(target).close()  # the next open cleans up too
    assert not any(f.exists() for f in left[:2])
    names = {temp_name(target).name for _ in range(50)}
    assert len(names) == 50 and all(n.startswith(f".{target.name}.{os.getpid()}.") for n in names)
    assert remove_stale_temp_files(target) == []


def test_create_builds_under_an_unpredictable_name(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    used: list[Path] = []

    def spy(target: Path) -> Path:
        used.append(temp_name(target))
        return used[-1]

    monkeypatch.setattr(journal_module, "temp_name", spy)
    for name in ("a.holdfast.db", "b.holdfast.db"):
        Journal.create(
            tmp_path / name, fingerprint="f", data_path="d", spec_text="", label_column="g", id_column=None
        ).close()
    assert len(used) == 2 and all(len(p.name.split(".")[-2]) == 16 for p in used)
    assert not any(p.exists() for p in used)


# ------------------------------------------------------------------------------------- position ids
def _position_session(data: Path) -> Path:
    spec = spec_from_text('[data]\nlabel = "grade"\n')  # no id column: rows are identified by position
    db = data.with_name("packhouse.holdfast.db")
    with Journal.create(
        db,
        fingerprint=fingerprint_file(data),
        data_path=data.absolute(),
        spec_text=spec.to_toml(),
        label_column="grade",
        id_column=None,
    ) as j:
        j.record("0", "exclude")
        j.record("5", "relabel", "processing")
    return db


def test_export_refuses_position_ids_after_the_data_changed(
    data: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    db = _position_session(data)
    frame = pd.read_parquet(data)
    frame.iloc[100:].to_parquet(data, index=False)  # the first 100 rows removed
    out = tmp_path / "cleaned.csv"
    assert main(["export", str(db), "--cleaned", str(out)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "identifies rows by position" in err[0] and str(data) in err[0]
    assert not out.exists() and not list(tmp_path.glob(".cleaned.csv*"))


def test_inspector_session_refuses_position_ids_after_the_data_changed(data: Path) -> None:
    _position_session(data)
    pd.read_parquet(data).iloc[100:].to_parquet(data, index=False)
    with pytest.raises(SessionError, match="identifies rows by position"):
        open_session(data, spec_from_text('[data]\nlabel = "grade"\n'))
    assert acquire(data.with_name("packhouse.holdfast.db")) is not None  # the refusal released the lock


# ------------------------------------------------------------------------------------- no cluster from a file
def test_export_never_takes_the_cluster_from_the_session(
    data: Path, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    spec = spec_from_text(
        '[data]\nlabel = "grade"\nid = "lot_id"\n[run]\nbackend = "dask"\nscheduler = "tcp://203.0.113.9:8786"\n'
    )
    db = tmp_path / "received.holdfast.db"
    Journal.create(
        db,
        fingerprint=fingerprint_file(data),
        data_path=data.absolute(),
        spec_text=spec.to_toml(),
        label_column="grade",
        id_column="lot_id",
    ).close()
    seen = []

    class Stop(Exception):
        pass

    def fake_scan(path, spec, **kwargs):  # type: ignore[no-untyped-def]
        seen.append(spec.run)
        raise Stop

    import holdfast.engine.scan as scan_module

    monkeypatch.setattr(scan_module, "run_scan", fake_scan)
    with pytest.raises(Stop):
        from holdfast.output.export import export_session

        export_session(db, decisions=tmp_path / "d.csv")
    assert seen and seen[0].backend == "joblib" and seen[0].scheduler is None
