"""The decisions journal: one SQLite file per session, append-only events, undo as new events.

The stored events and the table layout are in :mod:`holdfast.review.events`.

Undo and redo
-------------
Replaying actions in order with two stacks gives the undo state from the events alone (so it survives
closing and reopening): a ``do`` action is pushed on the undo stack and empties the redo stack; an ``undo``
action pops the undo stack and is pushed on the redo stack; a ``redo`` action pops the redo stack and is
pushed on the undo stack. Undo writes, for every row of the action on top of the undo stack, the state that
row had just before that action; redo writes, for every row of the undo on top of the redo stack, the state
it had just before that undo. Both are one new action in one transaction.

Notes
-----
``record(..., note=None)`` keeps the row's current note; pass a string to replace it and ``""`` to remove
it. :meth:`Journal.set_note` changes only the note (an undoable action too). A row with a note but no
decision has decision ``"clear"``; :meth:`Journal.current` leaves such rows out unless asked.

Durability
----------
WAL mode with ``synchronous=FULL``: every public write runs in ``BEGIN IMMEDIATE ... COMMIT`` and returns
only after the commit, which SQLite syncs to disk before returning (SQLite documentation, "Write-Ahead
Logging" and "PRAGMA synchronous"). Several processes may open the same journal; writers take turns.

Several openers
---------------
Undo and redo never reverse an action another open copy of the journal made while this one was open
(another process, or another :class:`Journal` object): that is a :class:`SessionError` naming the file.
Actions made before this copy was opened (earlier sessions) stay undoable. The inspector goes further and
holds the session lock (:mod:`holdfast.review.lock`), so a second inspector opens the session read-only.

Read-only
---------
``Journal.open(path, read_only=True)``, or a file or folder this process cannot write, opens the journal
read-only (``read_only_reason`` says why): every reading method works, every write is a
:class:`SessionError`. A healthy journal in a read-only folder is opened, never reported as damaged.
"""

from __future__ import annotations

import os
import sqlite3
import threading
import urllib.parse
from collections.abc import Callable, Iterable, Iterator, Sequence
from contextlib import contextmanager
from pathlib import Path

from holdfast import __version__
from holdfast.errors import SessionError
from holdfast.review.events import (
    APPLICATION_ID,
    EVENT_COLUMNS,
    FORMAT,
    SCHEMA,
    SCHEMA_VERSION,
    Change,
    Decision,
    Event,
    check_change,
    utc_now,
)
from holdfast.review.sessionfiles import can_write, fsync_dir, remove_stale_temp_files, temp_name


class Journal:
    """The decisions journal of one session (see the module docstring for layout and semantics).

    Use :meth:`create`, :meth:`open` or :meth:`open_or_create`, not the constructor. A journal is a
    context manager; it may be used from several threads (calls are serialised by a lock).
    """

    def __init__(self, path: Path, conn: sqlite3.Connection, read_only_reason: str | None = None) -> None:
        self.path = path
        self._conn = conn
        self._lock = threading.RLock()
        self._stack_cache: tuple[int, list[int], list[int]] | None = None
        #: why the journal is read-only (None: it is writable)
        self.read_only_reason = read_only_reason
        #: actions written through this object, and the last event seq when it was opened
        self._mine: set[int] = set()
        self._pending: int | None = None  # the action being written, counted as ours once committed
        self._held: list[Callable[[], None]] = []
        self._opened_at = int(conn.execute("SELECT COALESCE(MAX(seq), 0) FROM events").fetchone()[0])

    @property
    def read_only(self) -> bool:
        """True when this journal was opened read-only (see ``read_only_reason``)."""
        return self.read_only_reason is not None

    # ------------------------------------------------------------------ opening
    @classmethod
    def create(
        cls,
        path: str | Path,
        *,
        fingerprint: str,
        data_path: str | Path,
        spec_text: str,
        label_column: str,
        id_column: str | None,
    ) -> Journal:
        """Create a new journal at ``path`` and open it.

        The file is built under a temporary name and moved into place, so a crash never leaves a
        half-made journal. An existing ``path`` is a :class:`SessionError` (nothing is overwritten).
        """
        target = Path(path)
        meta = {
            "format": FORMAT,
            "schema_version": str(SCHEMA_VERSION),
            "holdfast_version": __version__,
            "created": utc_now(),
            "fingerprint": fingerprint,
            "data_path": str(data_path),
            "spec": spec_text,
            "label_column": label_column,
            "id_column": id_column or "",
        }
        if target.exists():
            raise SessionError(f"{target}: session file already exists")
        tmp = temp_name(target)
        try:
            target.parent.mkdir(parents=True, exist_ok=True)
            remove_stale_temp_files(target)
            conn = sqlite3.connect(tmp, isolation_level=None)
            try:
                conn.execute("PRAGMA journal_mode=WAL")
                conn.execute("PRAGMA synchronous=FULL")
                conn.execute(f"PRAGMA application_id={APPLICATION_ID}")
                conn.execute(f"PRAGMA user_version={SCHEMA_VERSION}")
                conn.execute("BEGIN IMMEDIATE")
                for statement in SCHEMA.split(";"):
                    if statement.strip():
                        conn.execute(statement)
                conn.executemany("INSERT INTO meta (key, value) VALUES (?, ?)", meta.items())
                conn.execute("COMMIT")
            finally:
                conn.close()
            try:
                os.link(tmp, target)  # fails if target appeared meanwhile: never overwrite
            except FileExistsError:
                raise SessionError(f"{target}: session file already exists") from None
            except OSError:
                if target.exists():
                    raise SessionError(f"{target}: session file already exists") from None
                os.replace(tmp, target)
            fsync_dir(target.parent)
        except (OSError, sqlite3.Error) as exc:
            raise SessionError(f"{target}: cannot create session file ({exc})") from exc
        finally:
            for leftover in (tmp, Path(f"{tmp}-wal"), Path(f"{tmp}-shm")):
                leftover.unlink(missing_ok=True)
        return cls.open(target)

    @classmethod
    def open(cls, path: str | Path, *, read_only: bool = False) -> Journal:
        """Open an existing journal; :class:`SessionError` naming the file if it is missing or not one.

        ``read_only=True``, or a file or folder this process cannot write, opens it read-only.
        """
        target = Path(path)
        if not target.is_file():
            raise SessionError(f"{target}: no such session file")
        reason: str | None = "opened read-only" if read_only else None
        if reason is None and not can_write(target):
            reason = "the session file or its folder is read-only"
        if reason is None:
            remove_stale_temp_files(target)
        try:
            conn = cls._connect(target, reason is not None)
        except sqlite3.OperationalError as exc:
            if reason is not None or "readonly" not in str(exc).replace("-", "").replace(" ", ""):
                raise SessionError(f"{target}: cannot open session file ({exc})") from exc
            reason = "the session file or its folder is read-only"
            conn = cls._connect(target, True)
        return cls(target, conn, reason)

    @staticmethod
    def _connect(target: Path, read_only: bool) -> sqlite3.Connection:
        """Connect and check that ``target`` is a healthy holdfast journal (SessionError otherwise)."""
        conn: sqlite3.Connection | None = None
        try:
            if read_only:
                # mode=ro needs SQLite's -shm file beside a WAL journal, or the right to create it; in a
                # folder nobody can write, nobody writes the journal either: read it as immutable
                folder_ok = os.access(target.parent, os.W_OK)
                wal = Path(f"{target}-wal").exists()
                flag = "mode=ro" if folder_ok or wal else "immutable=1"
                uri = f"file:{urllib.parse.quote(str(target.absolute()))}?{flag}"
                conn = sqlite3.connect(uri, uri=True, isolation_level=None, check_same_thread=False)
            else:
                conn = sqlite3.connect(target, isolation_level=None, check_same_thread=False, timeout=10.0)
            app_id = conn.execute("PRAGMA application_id").fetchone()[0]
            if app_id != APPLICATION_ID:
                raise SessionError(f"{target}: not a holdfast session file")
            version = conn.execute("PRAGMA user_version").fetchone()[0]
            if version > SCHEMA_VERSION:
                raise SessionError(
                    f"{target}: session file format {version} is newer than this holdfast "
                    f"({__version__}) understands ({SCHEMA_VERSION})"
                )
            if not read_only:
                conn.execute("PRAGMA journal_mode=WAL")
                conn.execute("PRAGMA synchronous=FULL")
            fmt = conn.execute("SELECT value FROM meta WHERE key = 'format'").fetchone()
            if fmt is None or fmt[0] != FORMAT:
                raise SessionError(f"{target}: not a holdfast session file")
            conn.execute("SELECT seq FROM events ORDER BY seq DESC LIMIT 1").fetchall()
            check = conn.execute("PRAGMA quick_check").fetchone()[0]
            if check != "ok":
                raise SessionError(f"{target}: session file is damaged ({check})")
        except sqlite3.OperationalError:
            if conn is not None:
                conn.close()
            raise
        except sqlite3.DatabaseError as exc:
            if conn is not None:
                conn.close()
            raise SessionError(f"{target}: not a holdfast session file or damaged ({exc})") from exc
        except SessionError:
            if conn is not None:
                conn.close()
            raise
        return conn

    @classmethod
    def open_or_create(
        cls,
        path: str | Path,
        *,
        fingerprint: str,
        data_path: str | Path,
        spec_text: str,
        label_column: str,
        id_column: str | None,
    ) -> Journal:
        """Open ``path`` if it exists, else create it with the given metadata.

        An existing journal is opened as it is: compare :meth:`fingerprint_matches` before trusting it.
        """
        if Path(path).exists():
            return cls.open(path)
        try:
            return cls.create(
                path,
                fingerprint=fingerprint,
                data_path=data_path,
                spec_text=spec_text,
                label_column=label_column,
                id_column=id_column,
            )
        except SessionError:
            if Path(path).exists():  # another process created it first
                return cls.open(path)
            raise

    def close(self) -> None:
        """Close the connection (every write is already committed) and release what :meth:`hold` holds."""
        with self._lock:
            self._conn.close()
            held, self._held = self._held, []
        for release in held:
            release()

    def hold(self, release: Callable[[], None]) -> None:
        """Call ``release`` when the journal is closed (the session lock lives as long as the journal)."""
        self._held.append(release)

    def __enter__(self) -> Journal:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    # ------------------------------------------------------------------ reading
    @property
    def meta(self) -> dict[str, str | None]:
        """Session metadata; ``id_column`` is None when rows are identified by position."""
        with self._lock:
            out: dict[str, str | None] = dict(self._conn.execute("SELECT key, value FROM meta").fetchall())
        out["id_column"] = out.get("id_column") or None
        return out

    def fingerprint_matches(self, fingerprint: str) -> bool:
        """True when ``fingerprint`` equals the data fingerprint the session was created for."""
        return self.meta.get("fingerprint") == fingerprint

    def events(self, row_id: str | None = None) -> list[Event]:
        """All events in order, or only those of ``row_id`` (a row's history)."""
        sql = f"SELECT {EVENT_COLUMNS} FROM events"
        args: tuple[str, ...] = ()
        if row_id is not None:
            sql += " WHERE row_id = ?"
            args = (row_id,)
        with self._lock:
            return [Event(*r) for r in self._conn.execute(sql + " ORDER BY seq", args)]

    def current(self, *, include_notes_only: bool = False) -> dict[str, Decision]:
        """Current state per row: the last event of each row, rows without a decision left out.

        With ``include_notes_only=True`` rows that carry a note but no decision are included too
        (decision ``"clear"``). The dict is ordered by the time of each row's last change.
        """
        sql = (
            "SELECT row_id, decision, new_label, note, time FROM events "
            "WHERE seq IN (SELECT MAX(seq) FROM events GROUP BY row_id) ORDER BY seq"
        )
        with self._lock:
            rows = self._conn.execute(sql).fetchall()
        out: dict[str, Decision] = {}
        for row in rows:
            d = Decision(*row)
            if d.decision != "clear" or (include_notes_only and d.note is not None):
                out[d.row_id] = d
        return out

    def state(self, row_id: str) -> Decision | None:
        """Current state of one row (decision may be ``"clear"``), or None if it was never touched."""
        with self._lock:
            row = self._conn.execute(
                "SELECT row_id, decision, new_label, note, time FROM events WHERE row_id = ? "
                "ORDER BY seq DESC LIMIT 1",
                (row_id,),
            ).fetchone()
        return None if row is None else Decision(*row)

    def reconcile(self, ids: Iterable[str]) -> tuple[list[str], list[str]]:
        """Split the rows that carry a decision or note into (in ``ids``, not in ``ids``).

        Decisions for rows no longer in the data are reported here, never dropped from the journal.
        """
        present = set(ids)
        matched: list[str] = []
        unmatched: list[str] = []
        for row_id in self.current(include_notes_only=True):
            (matched if row_id in present else unmatched).append(row_id)
        return matched, unmatched

    @property
    def can_undo(self) -> bool:
        """True when there is a user action left to undo."""
        with self._lock:
            return bool(self._stacks(self._conn)[0])

    @property
    def can_redo(self) -> bool:
        """True when there is an undone action to redo (a new action empties the redo chain)."""
        with self._lock:
            return bool(self._stacks(self._conn)[1])

    # ------------------------------------------------------------------ writing
    def record(
        self, row_id: str, decision: str, new_label: str | None = None, note: str | None = None
    ) -> Event:
        """Record one decision as one action; returns after COMMIT.

        ``new_label`` is required for ``"relabel"`` and refused otherwise. ``note=None`` keeps the row's
        note, ``""`` removes it. Invalid arguments raise ValueError (programmer errors).
        """
        return self.record_many([(row_id, decision, new_label, note)])[0]

    def record_many(self, changes: Sequence[Change]) -> list[Event]:
        """Record several decisions as one action in one transaction; returns after COMMIT.

        Each change is ``(row_id, decision, new_label, note)`` with the meaning of :meth:`record`. An empty
        list writes nothing and returns ``[]``.
        """
        changes = [tuple(c) for c in changes]  # type: ignore[misc]
        for c in changes:
            if len(c) != 4:
                raise ValueError(f"a change is (row_id, decision, new_label, note), got {c!r}")
            check_change(*c)
        if not changes:
            return []
        with self._write() as conn:
            action = self._next_action(conn)
            time = utc_now()
            out = []
            for row_id, decision, new_label, note in changes:
                if note is None:
                    note = self._note_of(conn, row_id)
                out.append(self._insert(conn, row_id, decision, new_label, note or None, time, action, "do"))
            return out

    def set_note(self, row_id: str, note: str | None) -> Event:
        """Replace a row's note (None or ``""`` removes it), keeping its decision; one undoable action."""
        check_change(row_id, "clear", None, note)
        with self._write() as conn:
            action = self._next_action(conn)
            now = self._state_of(conn, row_id)
            decision, new_label = (now[0], now[1]) if now else ("clear", None)
            return self._insert(conn, row_id, decision, new_label, note or None, utc_now(), action, "do")

    def undo(self) -> list[Event]:
        """Undo the last action not yet undone; returns the new events (``[]`` if nothing to undo)."""
        return self._restore("undo")

    def redo(self) -> list[Event]:
        """Redo the last undone action; returns the new events (``[]`` if nothing to redo)."""
        return self._restore("redo")

    # ------------------------------------------------------------------ internals
    @contextmanager
    def _write(self) -> Iterator[sqlite3.Connection]:
        if self.read_only_reason is not None:
            raise SessionError(
                f"{self.path}: session is read-only ({self.read_only_reason}); nothing was recorded"
            )
        with self._lock:
            conn = self._conn
            self._pending = None
            conn.execute("BEGIN IMMEDIATE")
            try:
                yield conn
            except BaseException:
                conn.execute("ROLLBACK")
                raise
            conn.execute("COMMIT")
            if self._pending is not None:  # only a committed action counts as this copy's own
                self._mine.add(self._pending)

    def _next_action(self, conn: sqlite3.Connection) -> int:
        action = int(conn.execute("SELECT COALESCE(MAX(action), 0) + 1 FROM events").fetchone()[0])
        self._pending = action
        return action

    @staticmethod
    def _state_of(conn: sqlite3.Connection, row_id: str) -> tuple[str, str | None, str | None] | None:
        return conn.execute(
            "SELECT decision, new_label, note FROM events WHERE row_id = ? ORDER BY seq DESC LIMIT 1",
            (row_id,),
        ).fetchone()

    @classmethod
    def _note_of(cls, conn: sqlite3.Connection, row_id: str) -> str | None:
        now = cls._state_of(conn, row_id)
        return None if now is None else now[2]

    @staticmethod
    def _insert(
        conn: sqlite3.Connection,
        row_id: str,
        decision: str,
        new_label: str | None,
        note: str | None,
        time: str,
        action: int,
        kind: str,
    ) -> Event:
        cur = conn.execute(
            "INSERT INTO events (row_id, decision, new_label, note, time, action, kind) "
            "VALUES (?, ?, ?, ?, ?, ?, ?)",
            (row_id, decision, new_label, note, time, action, kind),
        )
        return Event(int(cur.lastrowid or 0), row_id, decision, new_label, note, time, action, kind)

    def _stacks(self, conn: sqlite3.Connection) -> tuple[list[int], list[int]]:
        """Replay the actions' kinds into (undo stack, redo stack) of action ids.

        Cached by the last event's seq, so polling ``can_undo`` costs one indexed query.
        """
        last = int(conn.execute("SELECT COALESCE(MAX(seq), 0) FROM events").fetchone()[0])
        if self._stack_cache is not None and self._stack_cache[0] == last:
            return list(self._stack_cache[1]), list(self._stack_cache[2])
        undo: list[int] = []
        redo: list[int] = []
        for action, kind in conn.execute(
            "SELECT action, MIN(kind) FROM events GROUP BY action ORDER BY action"
        ):
            if kind == "do":
                undo.append(action)
                redo.clear()
            elif kind == "undo" and undo:
                undo.pop()
                redo.append(action)
            elif kind == "redo" and redo:
                redo.pop()
                undo.append(action)
        self._stack_cache = (last, list(undo), list(redo))
        return undo, redo

    def _restore(self, kind: str) -> list[Event]:
        with self._write() as conn:
            undo, redo = self._stacks(conn)
            stack = undo if kind == "undo" else redo
            if not stack:
                return []
            target = stack[-1]
            first = int(conn.execute("SELECT MIN(seq) FROM events WHERE action = ?", (target,)).fetchone()[0])
            if target not in self._mine and first > self._opened_at:
                raise SessionError(
                    f"{self.path}: the last action was made by another open copy of this session; "
                    f"nothing was {kind}ne here"
                )
            # For every row of the target action: its last state before the action's first event.
            before = conn.execute(
                """
                WITH touched AS (SELECT DISTINCT row_id FROM events WHERE action = :a),
                     first AS (SELECT MIN(seq) AS s FROM events WHERE action = :a),
                     prior AS (
                         SELECT e.row_id, e.decision, e.new_label, e.note,
                                ROW_NUMBER() OVER (PARTITION BY e.row_id ORDER BY e.seq DESC) AS rn
                         FROM events e
                         WHERE e.seq < (SELECT s FROM first)
                           AND e.row_id IN (SELECT row_id FROM touched))
                SELECT t.row_id, p.decision, p.new_label, p.note
                FROM touched t LEFT JOIN prior p ON p.row_id = t.row_id AND p.rn = 1
                ORDER BY (SELECT MIN(seq) FROM events WHERE action = :a AND row_id = t.row_id)
                """,
                {"a": target},
            ).fetchall()
            action = self._next_action(conn)
            time = utc_now()
            return [
                self._insert(conn, row_id, decision or "clear", new_label, note, time, action, kind)
                for row_id, decision, new_label, note in before
            ]
