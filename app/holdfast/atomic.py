"""Atomic file writes: write to a temporary file in the same folder, fsync, then rename into place.

A write that fails in the environment (disk full, read-only folder, no permission) is a
:class:`holdfast.errors.UserError` naming the file and the fix, and leaves no temporary file behind.
"""

from __future__ import annotations

import errno
import os
import tempfile
from collections.abc import Callable
from pathlib import Path

import pandas as pd

from holdfast.errors import UserError


def atomic_write(path: str | Path, writer: Callable[[Path], None], *, force: bool = True) -> Path:
    """Call ``writer(tmp_path)`` then rename the temp file onto ``path``.

    With ``force=False`` an existing ``path`` is a user error (nothing is overwritten).
    """
    target = Path(path)
    if target.exists() and not force:
        raise UserError(f"{target}: already exists; use --force to overwrite")
    tmp: Path | None = None
    try:
        target.parent.mkdir(parents=True, exist_ok=True)
        fd, tmp_name = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".tmp", dir=target.parent)
        os.close(fd)
        tmp = Path(tmp_name)
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp, 0o666 & ~umask)  # mkstemp makes 0600: give the file the user's usual permissions
        writer(tmp)
        with open(tmp, "rb+") as fh:
            os.fsync(fh.fileno())
        os.replace(tmp, target)
    except OSError as exc:
        raise environment_error(target, exc) from exc
    finally:
        if tmp is not None and tmp.exists():
            tmp.unlink()
    return target


def environment_error(path: Path, exc: OSError) -> UserError:
    """One line for a file that cannot be written: the path, the reason and what to do."""
    reason = exc.strerror or str(exc) or type(exc).__name__
    if exc.errno in (errno.ENOSPC, getattr(errno, "EDQUOT", errno.ENOSPC)):
        fix = "free disk space or write to another disk"
    elif exc.errno in (errno.EROFS, errno.EACCES, errno.EPERM):
        fix = "the folder is read-only for you; choose a writable folder"
    else:
        fix = "check the folder and try again"
    return UserError(f"{path}: cannot write ({reason}); {fix}")


def atomic_write_bytes(path: str | Path, data: bytes, *, force: bool = True) -> Path:
    """Write ``data`` to ``path`` atomically."""
    return atomic_write(path, lambda p: p.write_bytes(data), force=force)


def atomic_write_parquet(frame: pd.DataFrame, path: str | Path, *, force: bool = True) -> Path:
    """Write ``frame`` as Parquet (no index) to ``path`` atomically."""
    return atomic_write(path, lambda p: frame.to_parquet(p, index=False), force=force)


def atomic_write_csv(frame: pd.DataFrame, path: str | Path, *, force: bool = True) -> Path:
    """Write ``frame`` as CSV (no index) to ``path`` atomically."""
    return atomic_write(path, lambda p: frame.to_csv(p, index=False), force=force)
