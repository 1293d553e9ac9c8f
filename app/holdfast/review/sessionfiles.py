"""The files around a session journal: temporary files of its creation, writability, directory sync.

A journal is built under a temporary name beside its final place and linked into place when complete
(:meth:`holdfast.review.journal.Journal.create`). The temporary name is ``.NAME.PID.RANDOM.tmp``: the
random part (``secrets.token_hex``) makes it unpredictable, so nobody can prepare a file or link under it
in a shared folder; the process id tells a later opener whether the creator still runs. A creator killed
half-way leaves the file and SQLite's ``-wal``/``-shm`` beside it; :func:`remove_stale_temp_files` removes
those of processes that no longer run (and those of the older ``.NAME.PID.tmp`` naming).
"""

from __future__ import annotations

import os
import re
import secrets
from pathlib import Path


def temp_name(target: Path) -> Path:
    """A fresh, unpredictable temporary path beside ``target`` for building it."""
    return target.with_name(f".{target.name}.{os.getpid()}.{secrets.token_hex(8)}.tmp")


def pid_alive(pid: int) -> bool:
    """True when a process with this id exists on this machine (signal 0 asks without sending)."""
    if pid <= 0:
        return False
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except OSError:
        return True  # exists (another user's process)
    return True


def remove_stale_temp_files(target: Path) -> list[Path]:
    """Remove temporary files left beside ``target`` by creators that no longer run; return them.

    Only files named after ``target`` are considered (``.NAME.PID[.RANDOM].tmp`` and its ``-wal``,
    ``-shm`` and ``-journal`` companions). Errors (read-only folder, a file that vanished) are ignored.
    """
    pattern = re.compile(
        r"^\." + re.escape(target.name) + r"\.(\d+)(?:\.[0-9a-f]+)?\.tmp(?:-wal|-shm|-journal)?$"
    )
    removed: list[Path] = []
    try:
        entries = list(os.scandir(target.parent))
    except OSError:
        return removed
    for entry in entries:
        match = pattern.match(entry.name)
        if match is None or pid_alive(int(match.group(1))):
            continue
        try:
            os.unlink(entry.path)
            removed.append(Path(entry.path))
        except OSError:
            pass
    return removed


def can_write(path: Path) -> bool:
    """True when ``path`` (an existing file) and its folder can both be written by this process.

    SQLite in WAL mode writes the file and creates ``-wal``/``-shm`` files beside it, so both matter.
    Uses :func:`os.access` (for root, which ignores permission bits, a read-only mount still shows).
    """
    folder = path.parent if str(path.parent) else Path(".")
    return os.access(path, os.W_OK) and os.access(folder, os.W_OK | os.X_OK)


def fsync_dir(folder: Path) -> None:
    """Make a rename in ``folder`` durable (POSIX); a no-op where directories cannot be opened."""
    try:
        fd = os.open(folder, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)
