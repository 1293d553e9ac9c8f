"""The inspector's glue without a screen: opening sessions, lining decisions up with rows, launch, the
progress throttle and the key list shared by the footer, the help screen and the command palette.

The data fingerprint is checked against ``hashlib.sha256`` of the file's bytes; the decision book's
incremental updates are checked against a fresh read of the journal after every step.
"""

from __future__ import annotations

import hashlib
import random
from pathlib import Path

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from holdfast.data.spec import spec_from_text
from holdfast.errors import DataError, SessionError, UserError
from holdfast.review.events import Decision
from holdfast.review.journal import Journal
from holdfast.ui.messages import Throttle, error_line
from holdfast.ui.session import DecisionBook, decision_text, open_session

from .inspector_kit import write_dataset

SPEC = spec_from_text('[data]\nlabel = "grade"\nid = "crate"\n')


# ---------------------------------------------------------------------------------------------- open_session


def test_open_session_creates_the_journal_beside_the_data(tmp_path: Path) -> None:
    ds = write_dataset(tmp_path)
    opened = open_session(ds.data, SPEC)
    try:
        assert opened.path == tmp_path / "packhouse.holdfast.db" and opened.created
        assert opened.location_note is None and opened.warnings == []
        meta = opened.journal.meta
        assert meta["fingerprint"] == hashlib.sha256(ds.data.read_bytes()).hexdigest()[:16]
        assert meta["label_column"] == "grade" and meta["id_column"] == "crate"
        assert spec_from_text(meta["spec"] or "").fingerprint() == SPEC.fingerprint()
    finally:
        opened.close()  # the journal and the session lock
    again = open_session(ds.data, SPEC)
    again.journal.close()
    assert not again.created and again.warnings == []


def test_open_session_warns_on_changed_data_and_other_spec_but_keeps_decisions(tmp_path: Path) -> None:
    ds = write_dataset(tmp_path)
    with open_session(ds.data, SPEC).journal as journal:
        journal.record("crate-0001", "exclude")
    ds.frame.iloc[:-1].to_parquet(ds.data, index=False)  # the data changes: one row fewer
    other = spec_from_text('[data]\nlabel = "grade"\nid = "crate"\n\n[learner]\nC = 5.0\n')
    opened = open_session(ds.data, other)
    with opened.journal:
        assert opened.data_changed and opened.spec_changed
        assert any("data file changed" in w and "by id" in w for w in opened.warnings)
        assert any("another spec" in w for w in opened.warnings)
        assert opened.journal.current()["crate-0001"].decision == "exclude"


def test_open_session_without_id_column_says_rows_match_by_position(tmp_path: Path) -> None:
    ds = write_dataset(tmp_path)
    spec = spec_from_text('[data]\nlabel = "grade"\n')
    open_session(ds.data, spec).journal.close()
    ds.frame.iloc[1:].to_parquet(ds.data, index=False)
    opened = open_session(ds.data, spec)
    opened.journal.close()
    assert any("by row position" in w for w in opened.warnings)


def test_open_session_errors_name_the_file(tmp_path: Path) -> None:
    with pytest.raises(DataError, match=r"missing\.parquet"):
        open_session(tmp_path / "missing.parquet", SPEC)
    ds = write_dataset(tmp_path)
    bogus = tmp_path / "notes.db"
    bogus.write_text("not a database")
    with pytest.raises(SessionError, match=r"notes\.db"):
        open_session(ds.data, SPEC, bogus)


def test_launch_says_where_the_session_went_before_the_ui_starts(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture
) -> None:
    """When the data folder is read-only (simulated: the tests may run as root, who can write anywhere),
    the message of ``default_session_path`` is on stderr before the UI starts."""
    from holdfast.ui import launch as launch_module
    from holdfast.ui import session as session_module
    from holdfast.ui.app import HoldfastApp

    ds = write_dataset(tmp_path / "data")
    fallback = tmp_path / "xdg" / "holdfast" / "packhouse-0123abcd.holdfast.db"
    note = f"{ds.data.parent}: folder is not writable; session kept in {fallback}"
    monkeypatch.setattr(session_module, "default_session_path", lambda data: (fallback, note))
    seen: list[str] = []

    def run(self: HoldfastApp) -> int:
        seen.append(capsys.readouterr().err)  # what was on stderr when the UI would start
        return 0

    monkeypatch.setattr(HoldfastApp, "run", run)
    assert launch_module.launch(ds.data, SPEC, None) == 0
    assert fallback.is_file()  # the journal really is there
    assert note in seen[0]
    assert str(fallback) in capsys.readouterr().err  # and where it is, once more, on the way out


def test_launch_refuses_a_missing_data_file(tmp_path: Path) -> None:
    from holdfast.ui.launch import launch

    with pytest.raises(UserError, match=r"nothing\.parquet"):
        launch(tmp_path / "nothing.parquet", SPEC, None)


# ---------------------------------------------------------------------------------------------- DecisionBook


def make_journal(path: Path) -> Journal:
    return Journal.create(
        path, fingerprint="f", data_path="d.parquet", spec_text="", label_column="grade", id_column="crate"
    )


def test_decision_text() -> None:
    assert decision_text(None) == ""
    assert decision_text(Decision("a", "relabel", "juice", None, "t")) == "relabel → juice"
    assert decision_text(Decision("a", "defer", None, "why", "t")) == "defer ✎"
    assert decision_text(Decision("a", "clear", None, "why", "t")) == "✎"
    assert decision_text(Decision("a", "clear", None, None, "t")) == ""


def test_book_lines_up_journal_with_rows_and_reports_unknown_ids(tmp_path: Path) -> None:
    with make_journal(tmp_path / "s.db") as journal:
        journal.record("b", "confirm")
        journal.record("gone", "exclude")
        journal.set_note("c", "look again")
        book = DecisionBook(journal, ["a", "b", "c"])
        assert book.kind.tolist() == ["", "confirm", ""]
        assert book.text.tolist() == ["", "confirm", "✎"]
        assert book.unmatched == ["gone"]
        assert book.decided == 1 and book.counts()["confirm"] == 1
        changed = book.record([0, 2], "relabel", "juice")
        assert sorted(changed.tolist()) == [0, 2]
        assert journal.current()["c"].note == "look again"  # a decision keeps the note
        assert book.text.tolist() == ["relabel → juice", "confirm", "relabel → juice ✎"]
        positions, count = book.undo()
        assert count == 2 and sorted(positions.tolist()) == [0, 2]
        assert book.text.tolist() == ["", "confirm", "✎"]
        assert book.mask("").tolist() == [True, False, True]


OPS = st.lists(
    st.tuples(
        st.sampled_from(["record", "note", "undo", "redo"]),
        st.lists(st.integers(0, 5), min_size=1, max_size=3),
        st.sampled_from(["relabel", "confirm", "exclude", "defer", "clear"]),
        st.sampled_from(["", "a note"]),
    ),
    max_size=25,
)


@settings(max_examples=40, deadline=None)
@given(OPS)
def test_book_stays_equal_to_a_fresh_read_of_the_journal(tmp_path_factory, ops) -> None:  # type: ignore[no-untyped-def]
    """Incremental updates after each action equal what a new DecisionBook reads from the journal."""
    ids = ["r0", "r1", "r2", "r3", "r4"]  # position 5 of the journal below is an id not in the data
    path = tmp_path_factory.mktemp("book") / f"s{random.getrandbits(32)}.db"
    with make_journal(path) as journal:
        book = DecisionBook(journal, ids)
        for op, positions, decision, note in ops:
            in_data = [p for p in positions if p < len(ids)]
            if op == "record" and in_data:
                book.record(in_data, decision, "juice" if decision == "relabel" else None)
            elif op == "note" and in_data:
                book.set_note(in_data[0], note)
            elif op == "record":
                journal.record("elsewhere", decision, "juice" if decision == "relabel" else None)
                book.reload()
            elif op == "undo":
                book.undo()
            elif op == "redo":
                book.redo()
            fresh = DecisionBook(journal, ids)
            assert book.kind.tolist() == fresh.kind.tolist()
            assert book.text.tolist() == fresh.text.tolist()
            assert sorted(book.unmatched) == sorted(fresh.unmatched)
            assert (
                book.counts()
                == fresh.counts()
                == {k: int((fresh.kind == k).sum()) for k in ("relabel", "confirm", "exclude", "defer")}
            )


# ----------------------------------------------------------------------------------------- throttle, errors


def test_throttle_lets_ten_a_second_through_and_always_the_last() -> None:
    now = [0]
    throttle = Throttle(100, clock=lambda: now[0])  # whole milliseconds: no rounding at the edges
    passed = []
    for i in range(25):  # one update every 20 ms
        now[0] = i * 20
        if throttle.ready(i, 24):
            passed.append(i)
    assert passed == [0, 5, 10, 15, 20, 24]


def test_error_line_is_one_line() -> None:
    assert error_line(DataError("data.parquet: no column 'x'")) == "data.parquet: no column 'x'"
    assert error_line(ValueError("bad\nsecond line")) == "ValueError: bad"
    assert error_line(RuntimeError()) == "RuntimeError"
