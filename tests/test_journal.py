"""Decisions journal: record, notes, bulk actions, undo/redo, reopen, reconcile; default session paths."""

from __future__ import annotations

import os
import shutil
import sqlite3
import tempfile
from pathlib import Path

import pytest
from hypothesis import HealthCheck, settings
from hypothesis import strategies as st
from hypothesis.stateful import RuleBasedStateMachine, initialize, invariant, precondition, rule

from holdfast.errors import SessionError
from holdfast.review.events import DECISIONS
from holdfast.review.journal import Journal
from holdfast.review.sessions import default_session_path

SPEC = '[model]\nkind = "svm"\nC = 1.0\n# crates from the north shed: ä\n'


def make(path: Path, **over: object) -> Journal:
    args: dict[str, object] = {
        "fingerprint": "fp-1",
        "data_path": "packhouse.parquet",
        "spec_text": SPEC,
        "label_column": "fruit",
        "id_column": "crate_id",
    }
    args.update(over)
    return Journal.create(path, **args)  # type: ignore[arg-type]


@pytest.fixture
def journal(tmp_path: Path):
    with make(tmp_path / "s.holdfast.db") as j:
        yield j


def state(j: Journal, *, notes: bool = False) -> dict[str, tuple[str, str | None, str | None]]:
    return {r: (d.decision, d.new_label, d.note) for r, d in j.current(include_notes_only=notes).items()}


# ----------------------------------------------------------------------------- create / open
def test_meta_survives_reopen(tmp_path: Path) -> None:
    path = tmp_path / "s.holdfast.db"
    make(path, id_column=None).close()
    with Journal.open(path) as j:
        meta = j.meta
    assert meta["fingerprint"] == "fp-1"
    assert meta["spec"] == SPEC
    assert meta["label_column"] == "fruit"
    assert meta["id_column"] is None
    assert meta["data_path"] == "packhouse.parquet"
    assert meta["schema_version"] == "1"
    assert meta["created"].endswith("+00:00")


def test_create_never_overwrites(tmp_path: Path) -> None:
    path = tmp_path / "s.holdfast.db"
    with make(path) as j:
        j.record("c1", "confirm")
    with pytest.raises(SessionError, match="already exists") as info:
        make(path, fingerprint="other")
    assert str(path) in str(info.value)
    with Journal.open(path) as j:
        assert j.meta["fingerprint"] == "fp-1"
        assert state(j) == {"c1": ("confirm", None, None)}
    assert sorted(p.name for p in tmp_path.iterdir() if p.name.endswith(".tmp")) == []


def test_open_or_create_reuses_existing(tmp_path: Path) -> None:
    path = tmp_path / "s.holdfast.db"
    args = {
        "fingerprint": "fp-1",
        "data_path": "d.parquet",
        "spec_text": "",
        "label_column": "fruit",
        "id_column": None,
    }
    with Journal.open_or_create(path, **args) as j:  # type: ignore[arg-type]
        j.record("3", "exclude")
    with Journal.open_or_create(path, **{**args, "fingerprint": "fp-2"}) as j:  # type: ignore[arg-type]
        assert state(j) == {"3": ("exclude", None, None)}
        assert j.fingerprint_matches("fp-1")
        assert not j.fingerprint_matches("fp-2")


@pytest.mark.parametrize(
    "content",
    [b"", b"PAR1 this is not a database at all" * 200, None],
    ids=["empty", "garbage", "foreign-sqlite"],
)
def test_open_rejects_non_journals(tmp_path: Path, content: bytes | None) -> None:
    path = tmp_path / "notes.db"
    if content is None:
        con = sqlite3.connect(path)
        con.execute("CREATE TABLE meta (key TEXT, value TEXT)")
        con.commit()
        con.close()
    else:
        path.write_bytes(content)
    with pytest.raises(SessionError) as info:
        Journal.open(path)
    message = str(info.value)
    assert str(path) in message and "\n" not in message


def test_open_missing_file(tmp_path: Path) -> None:
    with pytest.raises(SessionError, match="no such session file"):
        Journal.open(tmp_path / "nope.holdfast.db")


def test_open_rejects_damaged_journal(tmp_path: Path) -> None:
    path = tmp_path / "s.holdfast.db"
    with make(path) as j:
        j.record_many([(f"c{i}", "defer", None, "x" * 300) for i in range(200)])
    con = sqlite3.connect(path)
    con.execute("PRAGMA wal_checkpoint(TRUNCATE)")
    con.close()
    data = bytearray(path.read_bytes())
    page = 4096
    assert len(data) > 4 * page
    data[2 * page : 4 * page] = b"\xff" * (2 * page)  # wipe two pages past the header
    path.write_bytes(bytes(data))
    with pytest.raises(SessionError) as info:
        Journal.open(path)
    assert str(path) in str(info.value)


# ----------------------------------------------------------------------------- recording
def test_last_event_wins(journal: Journal) -> None:
    journal.record("c1", "relabel", "pear")
    journal.record("c2", "defer")
    journal.record("c1", "confirm")
    assert state(journal) == {"c2": ("defer", None, None), "c1": ("confirm", None, None)}
    assert [e.decision for e in journal.events("c1")] == ["relabel", "confirm"]


def test_events_carry_time_action_and_kind(journal: Journal) -> None:
    e1 = journal.record("c1", "exclude")
    e2, e3 = journal.record_many([("c2", "confirm", None, None), ("c3", "relabel", "apple", None)])
    assert e1.kind == e2.kind == "do"
    assert e2.action == e3.action == e1.action + 1
    assert e1.seq < e2.seq < e3.seq
    assert e1.time.endswith("+00:00") and e1.time <= e2.time
    assert journal.events() == [e1, e2, e3]


@pytest.mark.parametrize(
    "change",
    [
        ("c1", "discard", None, None),
        ("c1", "relabel", None, None),
        ("c1", "relabel", 3, None),
        ("c1", "confirm", "pear", None),
        (7, "confirm", None, None),
        ("c1", "defer", None, 5),
    ],
)
def test_invalid_changes_write_nothing(journal: Journal, change: tuple) -> None:
    with pytest.raises(ValueError):
        journal.record_many([("c0", "confirm", None, None), change])
    assert journal.events() == []
    assert not journal.can_undo


def test_record_many_empty_is_no_action(journal: Journal) -> None:
    assert journal.record_many([]) == []
    assert not journal.can_undo


def test_notes_kept_replaced_removed(journal: Journal) -> None:
    journal.record("c1", "defer", note="ask the shed manager")
    journal.record("c1", "relabel", "pear")  # note None keeps the note
    assert state(journal)["c1"] == ("relabel", "pear", "ask the shed manager")
    journal.set_note("c1", "pear, per invoice 17")  # keeps the decision
    assert state(journal)["c1"] == ("relabel", "pear", "pear, per invoice 17")
    journal.record("c1", "confirm", note="")  # "" removes the note
    assert state(journal)["c1"] == ("confirm", None, None)


def test_note_without_decision(journal: Journal) -> None:
    journal.set_note("c9", "bruised?")
    assert state(journal) == {}
    assert state(journal, notes=True) == {"c9": ("clear", None, "bruised?")}
    assert journal.undo()[0].note is None
    assert state(journal, notes=True) == {}


# ----------------------------------------------------------------------------- undo / redo
def test_bulk_decision_is_one_undo_step(journal: Journal) -> None:
    journal.record("c1", "confirm")
    journal.record_many(
        [("c1", "exclude", None, None), ("c2", "exclude", None, None), ("c3", "defer", None, None)]
    )
    undone = journal.undo()
    assert {e.row_id for e in undone} == {"c1", "c2", "c3"}
    assert {e.action for e in undone} == {undone[0].action}
    assert {e.kind for e in undone} == {"undo"}
    assert state(journal) == {"c1": ("confirm", None, None)}
    journal.redo()
    assert state(journal) == {
        "c1": ("exclude", None, None),
        "c2": ("exclude", None, None),
        "c3": ("defer", None, None),
    }


def test_undo_redo_chain_and_new_action_clears_redo(journal: Journal) -> None:
    journal.record("c1", "relabel", "apple")
    journal.record("c1", "relabel", "quince")
    journal.record("c2", "exclude")
    assert journal.undo() and journal.undo()
    assert state(journal) == {"c1": ("relabel", "apple", None)}
    assert journal.can_redo
    journal.redo()
    assert state(journal) == {"c1": ("relabel", "quince", None)}
    journal.record("c3", "confirm")  # a new action: the remaining undone step (c2) is gone
    assert not journal.can_redo
    assert journal.redo() == []
    assert state(journal) == {"c1": ("relabel", "quince", None), "c3": ("confirm", None, None)}
    journal.undo()
    journal.undo()
    journal.undo()
    assert state(journal) == {}
    assert not journal.can_undo
    assert journal.undo() == []


def test_undo_is_append_only(journal: Journal) -> None:
    journal.record("c1", "exclude")
    before = journal.events()
    journal.undo()
    journal.redo()
    after = journal.events()
    assert after[: len(before)] == before
    assert [e.kind for e in after[len(before) :]] == ["undo", "redo"]


def test_undo_state_survives_reopen(tmp_path: Path) -> None:
    path = tmp_path / "s.holdfast.db"
    with make(path) as j:
        j.record("c1", "relabel", "pear")
        j.record("c2", "confirm")
        j.record("c3", "exclude")
        j.undo()
    with Journal.open(path) as j:
        assert j.can_undo and j.can_redo
        j.undo()
    with Journal.open(path) as j:
        assert state(j) == {"c1": ("relabel", "pear", None)}
        j.redo()
        j.redo()
    with Journal.open(path) as j:
        assert state(j) == {
            "c1": ("relabel", "pear", None),
            "c2": ("confirm", None, None),
            "c3": ("exclude", None, None),
        }
        assert not j.can_redo


def test_second_connection_sees_commits(tmp_path: Path) -> None:
    path = tmp_path / "s.holdfast.db"
    with make(path) as a, Journal.open(path) as b:
        a.record("c1", "defer")
        assert state(b) == {"c1": ("defer", None, None)}
        a.undo()  # each copy undoes its own actions
        assert state(b) == {}


def test_undo_never_undoes_another_openers_acknowledged_decision(tmp_path: Path) -> None:
    # the case of two inspectors on one session: A confirms, B excludes another row, A presses undo
    path = tmp_path / "s.holdfast.db"
    with make(path) as a, Journal.open(path) as b:
        a.record("c1", "confirm")
        b.record("c2", "exclude")
        with pytest.raises(SessionError, match=r"another open copy of this session"):
            a.undo()
        assert state(a) == {"c1": ("confirm", None, None), "c2": ("exclude", None, None)}
        with pytest.raises(SessionError, match=r"s\.holdfast\.db"):
            a.redo() or a.undo()  # redo has nothing to redo; undo still refuses B's action
        b.undo()  # B may undo its own exclusion; then A's own confirm is on top again
        a.undo()
        assert state(b) == {}


def test_actions_of_earlier_sessions_stay_undoable(tmp_path: Path) -> None:
    path = tmp_path / "s.holdfast.db"
    with make(path) as a:
        a.record("c1", "confirm")
    with Journal.open(path) as later:  # reopened after the first copy closed: its history is ours
        assert later.undo() and state(later) == {}


# ----------------------------------------------------------------------------- reconcile
def test_reconcile_reports_missing_rows_and_keeps_them(journal: Journal) -> None:
    journal.record("c1", "confirm")
    journal.record("gone-7", "relabel", "pear")
    journal.set_note("gone-8", "odd colour")
    matched, unmatched = journal.reconcile(["c0", "c1", "c2"])
    assert matched == ["c1"]
    assert unmatched == ["gone-7", "gone-8"]
    assert "gone-7" in journal.current()


# ----------------------------------------------------------------------------- model-based check
ROWS = ["c1", "c2", "c3", "10"]
NOTES = [None, "", "first look", "seen twice, ünïcode"]


@st.composite
def changes(draw: st.DrawFn) -> tuple[str, str, str | None, str | None]:
    decision = draw(st.sampled_from(DECISIONS))
    label = draw(st.sampled_from(["apple", "pear", "0"])) if decision == "relabel" else None
    return draw(st.sampled_from(ROWS)), decision, label, draw(st.sampled_from(NOTES))


State = tuple[str, "str | None", "str | None"]


class Model:
    """Plain in-memory undo/redo with snapshots: the textbook two-stack command history."""

    def __init__(self) -> None:
        self.state: dict[str, State] = {}
        self.undo_stack: list[tuple[dict, dict]] = []
        self.redo_stack: list[tuple[dict, dict]] = []

    def _put(self, snapshot: dict[str, State | None]) -> None:
        for row, s in snapshot.items():
            if s is None:
                self.state.pop(row, None)
            else:
                self.state[row] = s

    def do(self, new: dict[str, State]) -> None:
        before = {row: self.state.get(row) for row in new}
        self._put(new)
        self.undo_stack.append((before, dict(new)))
        self.redo_stack.clear()

    def record_many(self, batch: list[tuple[str, str, str | None, str | None]]) -> None:
        new: dict[str, State] = {}
        for row, decision, label, note in batch:
            old = new.get(row) or self.state.get(row)
            kept = old[2] if old else None
            new[row] = (decision, label, kept if note is None else (note or None))
        self.do(new)

    def set_note(self, row: str, note: str | None) -> None:
        old = self.state.get(row) or ("clear", None, None)
        self.do({row: (old[0], old[1], note or None)})

    def undo(self) -> bool:
        if not self.undo_stack:
            return False
        before, after = self.undo_stack.pop()
        self._put(before)
        self.redo_stack.append((before, after))
        return True

    def redo(self) -> bool:
        if not self.redo_stack:
            return False
        before, after = self.redo_stack.pop()
        self._put(after)
        self.undo_stack.append((before, after))
        return True


class JournalMachine(RuleBasedStateMachine):
    """Random do/undo/redo/reopen sequences give the same state as :class:`Model`."""

    @initialize()
    def start(self) -> None:
        self.folder = Path(tempfile.mkdtemp(prefix="holdfast-journal-"))
        self.path = self.folder / "s.holdfast.db"
        self.journal = make(self.path)
        self.model = Model()

    @rule(batch=st.lists(changes(), min_size=1, max_size=4))
    def record_many(self, batch: list) -> None:
        events = self.journal.record_many(batch)
        self.model.record_many(batch)
        assert len(events) == len(batch)

    @rule(change=changes())
    def record(self, change: tuple) -> None:
        self.journal.record(*change)
        self.model.record_many([change])

    @rule(row=st.sampled_from(ROWS), note=st.sampled_from(NOTES))
    def set_note(self, row: str, note: str | None) -> None:
        self.journal.set_note(row, note)
        self.model.set_note(row, note)

    @rule()
    def undo(self) -> None:
        assert bool(self.journal.undo()) == self.model.undo()

    @rule()
    def redo(self) -> None:
        assert bool(self.journal.redo()) == self.model.redo()

    @precondition(lambda self: hasattr(self, "journal"))
    @rule()
    def reopen(self) -> None:
        self.journal.close()
        self.journal = Journal.open(self.path)

    @invariant()
    def same_as_model(self) -> None:
        if not hasattr(self, "journal"):
            return
        expected = {r: s for r, s in self.model.state.items() if s[0] != "clear"}
        assert state(self.journal) == expected
        with_notes = {r: s for r, s in self.model.state.items() if s[0] != "clear" or s[2] is not None}
        assert state(self.journal, notes=True) == with_notes
        assert self.journal.can_undo == bool(self.model.undo_stack)
        assert self.journal.can_redo == bool(self.model.redo_stack)

    def teardown(self) -> None:
        if hasattr(self, "journal"):
            self.journal.close()
            shutil.rmtree(self.folder, ignore_errors=True)


JournalMachine.TestCase.settings = settings(
    max_examples=40,
    stateful_step_count=30,
    deadline=None,
    suppress_health_check=[HealthCheck.too_slow],
)
TestJournalMachine = JournalMachine.TestCase


# ----------------------------------------------------------------------------- session paths
def test_session_beside_the_data(tmp_path: Path) -> None:
    data = tmp_path / "packhouse.parquet"
    data.write_bytes(b"")
    path, message = default_session_path(data)
    assert path == tmp_path / "packhouse.holdfast.db"
    assert message is None


@pytest.fixture
def unwritable_data(tmp_path: Path):
    """A data file in a folder where no file can be created by the user running the tests."""
    if os.geteuid() != 0:
        folder = tmp_path / "readonly"
        folder.mkdir()
        data = folder / "packhouse.parquet"
        data.write_bytes(b"")
        folder.chmod(0o555)
        yield data
        folder.chmod(0o755)
        return
    proc_file = Path("/proc/version")  # root may write anywhere except pseudo file systems
    if not proc_file.is_file():
        pytest.skip("no folder is read-only for this user")
    yield proc_file


def test_session_falls_back_to_user_data_folder(
    tmp_path: Path, unwritable_data: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setenv("XDG_DATA_HOME", str(tmp_path / "xdg"))
    path, message = default_session_path(unwritable_data)
    assert path.parent == tmp_path / "xdg" / "holdfast"
    assert path.name.startswith(unwritable_data.stem + "-") and path.name.endswith(".holdfast.db")
    assert message is not None and str(unwritable_data.parent) in message and str(path) in message
    with make(path) as j:  # the fallback location is usable
        j.record("0", "confirm")
    assert path.is_file()


def test_session_fallback_without_xdg(
    tmp_path: Path, unwritable_data: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.delenv("XDG_DATA_HOME", raising=False)
    monkeypatch.setenv("HOME", str(tmp_path / "home"))
    path, _ = default_session_path(unwritable_data)
    assert path.parent == tmp_path / "home" / ".local" / "share" / "holdfast"
