"""Where a session (decisions journal) lives by default."""

from __future__ import annotations

import hashlib
import os
import tempfile
from pathlib import Path

from holdfast.errors import SessionError
from holdfast.textsafe import clip

#: Suffix of session files: ``packhouse.parquet`` -> ``packhouse.holdfast.db``.
SESSION_SUFFIX = ".holdfast.db"


def user_data_dir() -> Path:
    """``$XDG_DATA_HOME/holdfast`` or ``~/.local/share/holdfast`` (XDG Base Directory Specification)."""
    base = os.environ.get("XDG_DATA_HOME") or ""
    root = Path(base) if Path(base).is_absolute() else Path.home() / ".local" / "share"
    return root / "holdfast"


def _folder_writable(folder: Path) -> bool:
    """True when a file can really be created in ``folder`` (also catches read-only mounts)."""
    if not os.access(folder, os.W_OK | os.X_OK):
        return False
    try:
        with tempfile.TemporaryFile(dir=folder):
            return True
    except OSError:
        return False


def default_session_path(data_path: str | Path) -> tuple[Path, str | None]:
    """Default journal path for a data file, and a one-line message when it is not beside the data.

    The journal goes beside the data (``DATA.holdfast.db``, the data file's suffix dropped). When that
    folder is not writable it goes to :func:`user_data_dir`, named after the data file plus the first
    8 hex digits of the SHA-256 of its absolute path, so same-named files in different folders do not
    share a session. SQLite's WAL mode needs to create files beside the journal, hence the folder test.
    A session that already exists beside the data in a folder that is no longer writable is kept: it is
    opened read-only, never replaced by a fresh session elsewhere that lacks its decisions.

    Returns
    -------
    (path, message)
        ``message`` is None when the journal sits beside the data, else it says where and why.
    """
    data = Path(data_path).expanduser().absolute()
    stem = data.stem if data.suffix else data.name
    beside = data.with_name(stem + SESSION_SUFFIX)
    if _folder_writable(data.parent):
        return beside, None
    if beside.is_file():  # kept where it is, read-only: never replaced by a fresh session elsewhere
        return beside, (
            f"{data.parent}: folder is not writable; session {beside} opens read-only (copy the data and "
            f"the session to a writable folder to record decisions)"
        )
    digest = hashlib.sha256(str(data).encode()).hexdigest()[:8]
    fallback = user_data_dir() / f"{stem}-{digest}{SESSION_SUFFIX}"
    message = f"{data.parent}: folder is not writable; session kept in {fallback}"
    return fallback, message


def refuse_moved_positions(
    meta: dict[str, str | None], fingerprint: str, data: Path, session: Path, has_decisions: bool
) -> None:
    """Stop when a session that identifies rows by position meets a changed data file.

    Without an id column a row's id is its position; once rows are added, removed or reordered the
    positions name other rows, so applying the decisions would change the wrong rows. Raises
    :class:`SessionError` (one line) when the data's fingerprint differs from the session's, the session
    names no id column and it holds any decision or note.
    """
    if meta.get("id_column") or meta.get("fingerprint") == fingerprint or not has_decisions:
        return
    raise SessionError(
        f"{clip(str(data))}: the data changed since session {clip(str(session))} was made, and that session "
        f"identifies rows by position (no id column), so its decisions would land on other rows; restore "
        f"the data file, or start a new session (--session NEW.db), best with an id column (data.id)"
    )
