"""UI-side glue between the decisions journal and the rows of a scan (no Textual here).

:func:`open_session` opens or creates the journal for a data set + spec and says what does not match
(data changed since the session was made, session made for another spec, journal kept away from the data).
:class:`DecisionBook` lines the journal's current state up with the rows of a finished scan: for each row
position its decision and the text the table shows, and it writes every change to the journal *before* it
returns the positions to redraw, so the table never shows a decision that is not committed.
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from holdfast.data.load import fingerprint_file
from holdfast.data.spec import Spec, spec_from_text
from holdfast.errors import DataError, SpecError
from holdfast.review.events import Decision, Event
from holdfast.review.journal import Journal
from holdfast.review.lock import LockBusy, SessionLock, acquire
from holdfast.review.sessions import default_session_path, refuse_moved_positions

#: Marker appended to the decision text of a row that carries a note.
NOTE_MARK = " ✎"
#: Decisions a user makes (the journal's ``clear`` means none).
USER_DECISIONS: tuple[str, ...] = ("relabel", "confirm", "exclude", "defer")


@dataclass
class OpenedSession:
    """An open journal and what the user should be told about it.

    Attributes
    ----------
    journal, path
        The open journal and its file.
    created
        True when the file was made just now.
    location_note
        Set when the journal could not go beside the data (read-only folder): says where it is.
    warnings
        One line each: data changed since the session was made, session made for another spec.
    data_fingerprint
        Fingerprint of the data file as it is now.
    """

    journal: Journal
    path: Path
    created: bool
    location_note: str | None = None
    warnings: list[str] = field(default_factory=list)
    data_fingerprint: str = ""
    data_changed: bool = False
    spec_changed: bool = False
    #: set when decisions cannot be recorded (open elsewhere, read-only folder): says why, one line
    read_only_note: str | None = None
    lock: SessionLock | None = None

    @property
    def read_only(self) -> bool:
        """True when the session is open read-only (``read_only_note`` says why)."""
        return self.journal.read_only

    def close(self) -> None:
        """Close the journal and give the session lock back."""
        self.journal.close()
        if self.lock is not None:
            self.lock.release()


def open_session(data_path: str | Path, spec: Spec, session: str | Path | None = None) -> OpenedSession:
    """Open (or create) the session journal for ``data_path`` scanned with ``spec``.

    ``session=None`` uses :func:`holdfast.review.sessions.default_session_path` (beside the data, or the
    user's data folder when that one is read-only). An existing journal is checked against the data
    fingerprint and the spec fingerprint; a difference is a warning, never an error, and no decision is
    touched -- except for a session without an id column whose data changed: its positions would name
    other rows, so that is a SessionError.

    The session lock (:mod:`holdfast.review.lock`) is held while the session is open; when another opener
    holds it, or the session's folder is read-only, the journal opens read-only and ``read_only_note``
    says why. Close with :meth:`OpenedSession.close`.

    Raises
    ------
    DataError
        ``data_path`` is missing or not a file.
    SessionError
        The session file cannot be opened or created, or is not a holdfast journal.
    """
    data = Path(data_path)
    if not data.is_file():
        raise DataError(f"{data}: data file not found" if not data.exists() else f"{data}: is not a file")
    location_note = None
    if session is None:
        path, location_note = default_session_path(data)
    else:
        path = Path(session).expanduser()
    fingerprint = fingerprint_file(data)
    existed = path.exists()
    busy: LockBusy | None = None
    lock: SessionLock | None = None
    if existed or path.parent.is_dir():
        try:
            lock = acquire(path)
        except LockBusy as exc:
            busy = exc
    journal = (
        Journal.open(path, read_only=busy is not None)
        if existed
        else Journal.open_or_create(
            path,
            fingerprint=fingerprint,
            data_path=data.absolute(),
            spec_text=spec.to_toml(),
            label_column=spec.data.label,
            id_column=spec.data.id,
        )
    )
    if lock is None and busy is None and not journal.read_only:
        try:  # the folder was made just now
            lock = acquire(path)
        except LockBusy as exc:
            journal.close()
            journal, busy = Journal.open(path, read_only=True), exc
    if lock is not None:
        journal.hold(lock.release)  # closing the journal ends the session: the lock goes with it
    opened = OpenedSession(
        journal=journal,
        path=path,
        created=not existed,
        location_note=location_note,
        data_fingerprint=fingerprint,
        lock=lock,
    )
    if busy is not None:
        journal.read_only_reason = f"open in another inspector, {busy.holder.describe()}"
        opened.read_only_note = (
            f"session {path} is open in another inspector ({busy.holder.describe()}): read-only here, "
            f"decisions cannot be recorded; close the other one to decide"
        )
    elif journal.read_only:
        opened.read_only_note = (
            f"session {path} is read-only ({journal.read_only_reason}): decisions cannot be recorded"
        )
    if opened.read_only_note:  # first of the notices the inspector shows; every decision key is refused
        opened.warnings.append(opened.read_only_note)
    if existed:
        try:
            refuse_moved_positions(
                journal.meta, fingerprint, data, path, bool(journal.current(include_notes_only=True))
            )
            check_session(opened, spec)
        except BaseException:
            opened.close()
            raise
    return opened


def check_session(opened: OpenedSession, spec: Spec) -> None:
    """Fill ``opened.warnings`` with what differs between the journal and the data + spec of this run."""
    meta = opened.journal.meta
    if meta.get("fingerprint") != opened.data_fingerprint:
        opened.data_changed = True
        how = "by id" if spec.data.id else "by row position (the spec names no id column, so check them)"
        opened.warnings.append(
            f"the data file changed since this session was made; its decisions are matched to rows {how}"
        )
    stored = meta.get("spec") or ""
    try:
        same = spec_from_text(stored, str(opened.path)).fingerprint() == spec.fingerprint()
    except SpecError:
        same = False
    if not same:
        opened.spec_changed = True
        opened.warnings.append(
            "this session was made with another spec; the scan uses the spec given now "
            "and the session's decisions are kept as they are"
        )


def decision_text(decision: Decision | None) -> str:
    """What the table's decision column shows for a row state (``""`` for no decision and no note)."""
    if decision is None:
        return ""
    if decision.decision == "relabel":
        text = f"relabel → {decision.new_label}"
    elif decision.decision == "clear":
        text = ""
    else:
        text = decision.decision
    if decision.note:
        text = (text + NOTE_MARK) if text else NOTE_MARK.strip()
    return text


class DecisionBook:
    """The journal's current state lined up with the rows of a scan.

    Parameters
    ----------
    journal
        The open session journal.
    ids
        Row ids (text) in input order: position ``p`` is row ``ids[p]``.

    Attributes
    ----------
    kind
        Per position: ``""`` (no decision) or one of relabel, confirm, exclude, defer.
    text
        Per position: what the table shows (:func:`decision_text`).
    unmatched
        Ids that carry a decision or note in the journal but are not rows of this data set; they stay in
        the journal and in exported decisions.
    """

    def __init__(self, journal: Journal, ids: Sequence[str]) -> None:
        self.journal = journal
        self.ids = [i if isinstance(i, str) else str(i) for i in ids]
        self.position = dict(zip(self.ids, range(len(self.ids)), strict=True))
        n = len(self.ids)
        self.kind = np.full(n, "", dtype=object)
        self.text = np.full(n, "", dtype=object)
        self.states: dict[int, Decision] = {}
        self.unmatched: list[str] = []
        self._counts: dict[str, int] = dict.fromkeys(USER_DECISIONS, 0)
        self.reload()

    def reload(self) -> None:
        """Read the whole current state from the journal."""
        self.kind[:] = ""
        self.text[:] = ""
        self.states = {}
        self.unmatched = []
        self._counts = dict.fromkeys(USER_DECISIONS, 0)
        for rid, d in self.journal.current(include_notes_only=True).items():
            p = self.position.get(rid)
            if p is None:
                self.unmatched.append(rid)
            else:
                self._set(p, d)

    def _set(self, p: int, d: Decision | None) -> None:
        old = self.kind[p]
        if old:
            self._counts[old] -= 1
        if d is None or (d.decision == "clear" and not d.note):
            self.states.pop(p, None)
            self.kind[p] = ""
            self.text[p] = ""
            return
        self.states[p] = d
        new = "" if d.decision == "clear" else d.decision
        self.kind[p] = new
        if new:
            self._counts[new] += 1
        self.text[p] = decision_text(d)

    def _apply(self, events: Iterable[Event]) -> np.ndarray:
        changed: list[int] = []
        for e in events:
            p = self.position.get(e.row_id)
            d = Decision(e.row_id, e.decision, e.new_label, e.note, e.time)
            if p is None:
                live = e.decision != "clear" or bool(e.note)
                if live and e.row_id not in self.unmatched:
                    self.unmatched.append(e.row_id)
                elif not live and e.row_id in self.unmatched:
                    self.unmatched.remove(e.row_id)
                continue
            self._set(p, d)
            changed.append(p)
        return np.asarray(changed, dtype=np.intp)

    # ------------------------------------------------------------------ queries
    def state(self, position: int) -> Decision | None:
        """Current state of the row at ``position`` (None: never decided, no note)."""
        return self.states.get(position)

    def note(self, position: int) -> str:
        """The row's note, ``""`` when it has none."""
        d = self.states.get(position)
        return (d.note or "") if d else ""

    @property
    def decided(self) -> int:
        """How many rows of the data carry a decision."""
        return sum(self._counts.values())

    def counts(self) -> dict[str, int]:
        """Rows per decision (relabel, confirm, exclude, defer), zeros included (kept up to date)."""
        return dict(self._counts)

    def mask(self, decision: str) -> np.ndarray:
        """Boolean mask of the rows whose decision is ``decision`` (``""``: rows without a decision)."""
        return np.asarray(self.kind == decision, dtype=bool)

    # ------------------------------------------------------------------ changes (committed first)
    def record(
        self, positions: Sequence[int] | np.ndarray, decision: str, new_label: str | None = None
    ) -> np.ndarray:
        """Record ``decision`` for the rows at ``positions`` as one action; returns the positions changed.

        The journal commits before this returns; notes are kept. ``decision="clear"`` removes decisions.
        """
        changes = [(self.ids[int(p)], decision, new_label, None) for p in positions]
        return self._apply(self.journal.record_many(changes))

    def set_note(self, position: int, note: str) -> np.ndarray:
        """Replace the note of one row (``""`` removes it); committed before it returns."""
        return self._apply([self.journal.set_note(self.ids[position], note)])

    def undo(self) -> tuple[np.ndarray, int]:
        """Undo the last action (committed); returns (positions changed, rows changed in the journal).

        Zero rows changed means there was nothing to undo.
        """
        events = self.journal.undo()
        return self._apply(events), len(events)

    def redo(self) -> tuple[np.ndarray, int]:
        """Redo the last undone action (committed); returns (positions changed, rows changed)."""
        events = self.journal.redo()
        return self._apply(events), len(events)
