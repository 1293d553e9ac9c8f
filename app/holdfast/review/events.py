"""The journal's stored events and table layout: what one change of one row's state records.

Layout
------
``meta`` (key TEXT PRIMARY KEY, value TEXT): ``format``, ``schema_version``, ``holdfast_version``,
``created``, ``fingerprint``, ``data_path``, ``spec`` (TOML text), ``label_column``, ``id_column``
(empty text when rows are identified by position).

``events`` (seq, row_id, decision, new_label, note, time, action, kind): one row per change of one row's
state. Each event carries the row's *whole* state after it (decision, new label, note), so the current state
of a row is simply its last event; ``"clear"`` means "no decision". ``action`` groups the events of one user
action (a bulk decision is one action); ``kind`` is ``"do"`` for a user action, ``"undo"`` or ``"redo"`` for
the events written by :meth:`Journal.undo` and :meth:`Journal.redo`. Nothing is ever updated or deleted.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import UTC, datetime
from typing import Any

#: Decisions a user can make (DESIGN.md vocabulary) plus ``"clear"``: no decision.
DECISIONS: tuple[str, ...] = ("relabel", "confirm", "exclude", "defer", "clear")
#: Kinds of action that wrote an event.
KINDS: tuple[str, ...] = ("do", "undo", "redo")
#: Version of the table layout written by this module.
SCHEMA_VERSION = 1
#: Value of ``meta.format`` and of ``PRAGMA application_id`` that mark a holdfast journal.
FORMAT = "holdfast-journal"
APPLICATION_ID = 0x486F6C64  # "Hold"


SCHEMA = f"""
CREATE TABLE meta (
    key TEXT PRIMARY KEY,
    value TEXT NOT NULL
);
CREATE TABLE events (
    seq INTEGER PRIMARY KEY AUTOINCREMENT,
    row_id TEXT NOT NULL,
    decision TEXT NOT NULL CHECK (decision IN ({", ".join(repr(d) for d in DECISIONS)})),
    new_label TEXT,
    note TEXT,
    time TEXT NOT NULL,
    action INTEGER NOT NULL,
    kind TEXT NOT NULL CHECK (kind IN ({", ".join(repr(k) for k in KINDS)})),
    CHECK ((decision = 'relabel') = (new_label IS NOT NULL))
);
CREATE INDEX events_row ON events (row_id, seq);
CREATE INDEX events_action ON events (action);
"""

EVENT_COLUMNS = "seq, row_id, decision, new_label, note, time, action, kind"


@dataclass(frozen=True)
class Event:
    """One stored change of one row's state (the whole state after the change)."""

    seq: int
    row_id: str
    decision: str
    new_label: str | None
    note: str | None
    time: str
    action: int
    kind: str


@dataclass(frozen=True)
class Decision:
    """The current state of one row: its decision (``"clear"`` = none), new label, note and time."""

    row_id: str
    decision: str
    new_label: str | None
    note: str | None
    time: str


#: One requested change: (row_id, decision, new_label, note); note None keeps the row's note.
Change = tuple[str, str, str | None, str | None]


def utc_now() -> str:
    return datetime.now(UTC).isoformat(timespec="microseconds")


def check_change(row_id: Any, decision: Any, new_label: Any, note: Any) -> None:
    if not isinstance(row_id, str):
        raise ValueError(f"row id must be text, got {type(row_id).__name__}: {row_id!r}")
    if decision not in DECISIONS:
        raise ValueError(f"unknown decision {decision!r}; expected one of {', '.join(DECISIONS)}")
    if decision == "relabel":
        if not isinstance(new_label, str):
            raise ValueError(f"relabel of row {row_id!r} needs the new label as text, got {new_label!r}")
    elif new_label is not None:
        raise ValueError(f"decision {decision!r} for row {row_id!r} takes no new label, got {new_label!r}")
    if note is not None and not isinstance(note, str):
        raise ValueError(f"note for row {row_id!r} must be text or None, got {type(note).__name__}")
