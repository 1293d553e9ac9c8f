"""One writer per session: a lock held while a session is open for decisions.

The lock is an advisory ``flock`` on ``SESSION.lock`` beside the journal (POSIX ``flock(2)``; the kernel
drops it when the holding process ends, however it ends, so a lock left by a killed process is free again
and is simply taken over). While held, the file says who holds it: one JSON line with ``pid``, ``host`` and
``started`` (ISO-8601 UTC), so that a second opener can be told who has the session open. Where ``fcntl``
does not exist the lock falls back to creating the file exclusively, and a file naming a process of this
host that no longer runs is treated as stale and taken over.

A lock file that cannot be created (read-only folder) is reported as ``None`` by :func:`acquire`: the
caller opens the session read-only anyway, because SQLite could not write there either.
"""

from __future__ import annotations

import json
import os
import socket
from dataclasses import dataclass
from pathlib import Path

from holdfast.review.events import utc_now
from holdfast.review.sessionfiles import pid_alive

try:  # POSIX
    import fcntl
except ImportError:  # pragma: no cover - Windows
    fcntl = None  # type: ignore[assignment]

#: Suffix added to the session file's name for its lock file.
LOCK_SUFFIX = ".lock"


@dataclass(frozen=True)
class Holder:
    """Who holds a session lock (as written in the lock file; fields may be empty when unreadable)."""

    pid: int
    host: str
    started: str

    def describe(self) -> str:
        """``process 123 on host packbench since 2026-...`` (one line)."""
        where = f" on host {self.host}" if self.host else ""
        since = f" since {self.started}" if self.started else ""
        return f"process {self.pid or '?'}{where}{since}"


class SessionLock:
    """A held session lock; :meth:`release` (or leaving the ``with`` block) gives it back."""

    def __init__(self, path: Path, fd: int) -> None:
        self.path = path
        self._fd: int | None = fd

    @property
    def held(self) -> bool:
        return self._fd is not None

    def release(self) -> None:
        """Give the lock back (idempotent)."""
        fd, self._fd = self._fd, None
        if fd is None:
            return
        try:
            if fcntl is not None:
                os.ftruncate(fd, 0)  # no holder named once released
                fcntl.flock(fd, fcntl.LOCK_UN)
            else:  # pragma: no cover - Windows
                self.path.unlink(missing_ok=True)
        except OSError:
            pass
        finally:
            os.close(fd)

    def __del__(self) -> None:  # a dropped lock object gives the lock back, as the kernel would at exit
        self.release()

    def __enter__(self) -> SessionLock:
        return self

    def __exit__(self, *exc: object) -> None:
        self.release()


class LockBusy(Exception):
    """The session is open for decisions elsewhere; ``holder`` says where."""

    def __init__(self, path: Path, holder: Holder) -> None:
        super().__init__(f"{path}: held by {holder.describe()}")
        self.path = path
        self.holder = holder


def lock_path(session: str | Path) -> Path:
    """``SESSION.lock`` beside the session file."""
    p = Path(session)
    return p.with_name(p.name + LOCK_SUFFIX)


def _me() -> bytes:
    me = {"pid": os.getpid(), "host": socket.gethostname(), "started": utc_now()}
    return (json.dumps(me) + "\n").encode()


def read_holder(path: Path) -> Holder:
    """The holder written in a lock file (zeros and empty text when it cannot be read)."""
    try:
        info = json.loads(path.read_text(encoding="utf-8") or "{}")
        return Holder(int(info.get("pid") or 0), str(info.get("host") or ""), str(info.get("started") or ""))
    except (OSError, ValueError, TypeError, AttributeError):
        return Holder(0, "", "")


def acquire(session: str | Path) -> SessionLock | None:
    """Take the lock of ``session``; :class:`LockBusy` when another opener holds it.

    Returns None when no lock file can be made beside the session (read-only folder).
    """
    path = lock_path(session)
    if fcntl is None:  # pragma: no cover - Windows
        return _acquire_exclusive(path)
    try:
        fd = os.open(path, os.O_RDWR | os.O_CREAT, 0o644)
    except OSError:
        return None
    try:
        fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
    except BlockingIOError:
        os.close(fd)
        raise LockBusy(path, read_holder(path)) from None
    except OSError:  # a file system without flock: behave as if unlocked, never block the user
        pass
    os.ftruncate(fd, 0)
    os.pwrite(fd, _me(), 0)
    return SessionLock(path, fd)


def _acquire_exclusive(path: Path) -> SessionLock | None:  # pragma: no cover - used without fcntl only
    for _ in range(2):
        try:
            fd = os.open(path, os.O_RDWR | os.O_CREAT | os.O_EXCL, 0o644)
        except FileExistsError:
            holder = read_holder(path)
            if holder.host == socket.gethostname() and not pid_alive(holder.pid):
                path.unlink(missing_ok=True)  # stale: its process is gone
                continue
            raise LockBusy(path, holder) from None
        except OSError:
            return None
        os.write(fd, _me())
        return SessionLock(path, fd)
    raise LockBusy(path, read_holder(path))
