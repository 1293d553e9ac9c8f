"""Resumable result cache: refits already done survive an interruption; a finished scan reopens at once.

Layout: ``<cache root>/<data fingerprint>-<spec fingerprint>/`` holding ``refits.sqlite`` (one row per
finished refit, committed as results arrive) and, once the scan finished, ``rows.parquet``,
``summary.json`` and ``flips.parquet``. The root is ``$HOLDFAST_CACHE_DIR``, else
``$XDG_CACHE_HOME/holdfast``, else ``~/.cache/holdfast``.

A cache that cannot be used (folder not writable, disk full, a file that is not a cache file any more) is
a :class:`holdfast.errors.UserError` naming the file and the way out (``--no-cache``, free space).
"""

from __future__ import annotations

import json
import os
import sqlite3
from pathlib import Path

import numpy as np

from holdfast import __version__
from holdfast.errors import UserError
from holdfast.learners.base import RefitOutcome

#: Bump when the cached findings change shape (new columns or summary keys), so old caches are not reused.
CACHE_FORMAT = 8


def cache_root() -> Path:
    """The folder holding all scan caches."""
    env = os.environ.get("HOLDFAST_CACHE_DIR")
    if env:
        return Path(env)
    xdg = os.environ.get("XDG_CACHE_HOME")
    return (Path(xdg) if xdg else Path.home() / ".cache") / "holdfast"


def cache_dir(data_fingerprint: str, spec_fingerprint: str, root: Path | None = None) -> Path:
    """The cache folder of one data set + spec."""
    return (root or cache_root()) / f"{data_fingerprint}-{spec_fingerprint}-v{__version__}-f{CACHE_FORMAT}"


class RefitStore:
    """Finished refits of one scan, in SQLite; keyed by a hash of the support set so a different fit
    (other solver, other library version) never reuses stale refits."""

    def __init__(self, path: Path, support_key: str) -> None:
        self.path = path
        try:
            path.parent.mkdir(parents=True, exist_ok=True)
            self.conn = sqlite3.connect(path)
            self._setup(support_key)
        except (OSError, sqlite3.Error) as exc:
            self.close()
            raise cache_error(path, exc) from exc

    def _setup(self, support_key: str) -> None:
        self.conn.execute("PRAGMA journal_mode=WAL")
        self.conn.execute("CREATE TABLE IF NOT EXISTS meta (key TEXT PRIMARY KEY, value TEXT)")
        columns = [r[1] for r in self.conn.execute("PRAGMA table_info(refits)")]
        if columns and "loo_margin" not in columns:  # written before refits carried the LOO margin
            with self.conn:
                self.conn.execute("DROP TABLE refits")
        self.conn.execute(
            "CREATE TABLE IF NOT EXISTS refits "
            "(row INTEGER PRIMARY KEY, loo INTEGER, max_change REAL, flipped TEXT, loo_margin REAL)"
        )
        old = self.conn.execute("SELECT value FROM meta WHERE key='support_key'").fetchone()
        if old is None or old[0] != support_key:
            with self.conn:
                self.conn.execute("DELETE FROM refits")
                self.conn.execute("INSERT OR REPLACE INTO meta VALUES ('support_key', ?)", (support_key,))
        self.conn.commit()

    def load(self) -> dict[int, RefitOutcome]:
        """All refits stored so far."""
        try:
            return self._load()
        except (sqlite3.Error, ValueError) as exc:
            raise cache_error(self.path, exc) from exc

    def _load(self) -> dict[int, RefitOutcome]:
        out: dict[int, RefitOutcome] = {}
        for row, loo, change, flipped, margin in self.conn.execute(
            "SELECT row, loo, max_change, flipped, loo_margin FROM refits"
        ):
            out[int(row)] = RefitOutcome(
                row=int(row),
                loo_code=int(loo),
                flipped=np.array(json.loads(flipped), dtype=np.int64),
                max_change=float("inf") if change is None else float(change),
                loo_margin=float("nan") if margin is None else float(margin),
            )
        return out

    def add(self, outcomes: list[RefitOutcome]) -> None:
        """Commit finished refits."""
        try:
            self._add(outcomes)
        except (OSError, sqlite3.Error) as exc:
            raise cache_error(self.path, exc) from exc

    def _add(self, outcomes: list[RefitOutcome]) -> None:
        with self.conn:
            self.conn.executemany(
                "INSERT OR REPLACE INTO refits VALUES (?, ?, ?, ?, ?)",
                [
                    (
                        o.row,
                        o.loo_code,
                        None if not np.isfinite(o.max_change) else o.max_change,
                        json.dumps(o.flipped.tolist()),
                        None if not np.isfinite(o.loo_margin) else o.loo_margin,
                    )
                    for o in outcomes
                ],
            )

    def close(self) -> None:
        """Close the connection."""
        conn = getattr(self, "conn", None)
        if conn is not None:
            conn.close()


def cache_error(path: Path, exc: BaseException) -> UserError:
    """One line for a scan cache that cannot be used: the file, the reason, the way out."""
    text = str(exc) or type(exc).__name__
    if isinstance(exc, OSError) and exc.strerror:
        text = exc.strerror
    low = text.lower()
    if "full" in low or "no space" in low:
        fix = "free disk space, or run with --no-cache"
    elif "not a database" in low or "malformed" in low or "corrupt" in low or isinstance(exc, ValueError):
        fix = f"delete the folder {path.parent} (it is rebuilt), or run with --no-cache"
    else:
        fix = "run with --no-cache, or point HOLDFAST_CACHE_DIR to a writable folder"
    return UserError(f"{path}: scan cache cannot be used ({text}); {fix}")
