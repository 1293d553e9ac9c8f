"""Where a session (decisions journal) lives by default."""

from __future__ import annotations

import hashlib
import os
import tempfile
from pathlib import Path

#: Suffix of session files: ``packhouse.parquet`` -> ``packhouse.holdfast.db``.
SESSION_SUFFIX = ".holdfast.db"


def user_data_dir() -> Path:
    """``$XDG_DATA_HOME/holdfast`` or ``~/.local/share/holdfast`` (XDG Base Directory Specification)."""
    base = os.environ.get("XDG_DATA_HOME") or ""
    root = Path(base) if Path(base).is_absolute() else Path.home() / ".local" / "share"
    return root / "holdfast"


def _folder_writable(folder: Path) -> bool:
    """True when a file can really be created in ``folder`` (also catches read-only mounts)."""
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
    digest = hashlib.sha256(str(data).encode()).hexdigest()[:8]
    fallback = user_data_dir() / f"{stem}-{digest}{SESSION_SUFFIX}"
    message = f"{data.parent}: folder is not writable; session kept in {fallback}"
    return fallback, message
