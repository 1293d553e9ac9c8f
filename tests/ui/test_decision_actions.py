"""The decision actions and row filters without a terminal: a real journal on disk, rows as arrays.

Every outcome is checked against a fresh read of the journal (``Journal.current``), so a message that
says "Saved" while the journal holds something else fails.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from holdfast.review.journal import Journal
from holdfast.ui.decisions import BulkPlan, DecisionActions
from holdfast.ui.navigation import Query, RowFilters, next_sort
from holdfast.ui.session import DecisionBook

IDS = ["crate-a", "crate-b", "crate-c", "crate-d", "crate-e"]
LABELS = np.array(["premium", "premium", "processing", "juice", "premium"], dtype=object)
CLASSES = ["juice", "premium", "processing"]


@pytest.fixture
def journal(tmp_path: Path):  # type: ignore[no-untyped-def]
    j = Journal.create(
        tmp_path / "s.db",
        fingerprint="f",
        data_path="d.parquet",
        spec_text="",
        label_column="g",
        id_column="i",
    )
    yield j
    j.close()


def rows_frame() -> pd.DataFrame:
    return pd.DataFrame(
        {
            "id": IDS,
            "label": LABELS,
            "support": [True, False, True, False, True],
            "loo_miss": [True, False, False, True, True],
            "held_out": [False, False, False, True, True],
            "flag_names": ["loo_miss", "", None, "", "bounded"],
            "score": [0.9, 0.2, np.nan, 0.4, 0.7],
        }
    )


def test_decide_note_undo_redo_say_what_the_journal_holds(journal: Journal) -> None:
    actions = DecisionActions(DecisionBook(journal, IDS), LABELS, CLASSES)
    out = actions.decide([1], "exclude")
    assert out.saved and out.changed.tolist() == [1] and out.message == "Saved: crate-b exclude"
    assert journal.current()["crate-b"].decision == "exclude"
    assert actions.relabel_targets(2) == ["juice", "premium"]
    out = actions.decide([2], "relabel", "juice")
    assert "relabel → juice" in out.message and journal.current()["crate-c"].new_label == "juice"
    out = actions.set_note(1, "  soft skin  ")
    assert out.message == "Saved note for crate-b" and journal.current()["crate-b"].note == "soft skin"
    out = actions.undo()  # the note goes
    assert out.move_to == 1 and "Undone: 1 row(s)" in out.message
    assert not journal.current(include_notes_only=True)["crate-b"].note
    out = actions.undo()
    out = actions.undo()
    assert "crate-b" not in journal.current() and "crate-c" not in journal.current()
    assert actions.undo().message == "Nothing to undo."
    out = actions.redo()
    assert out.move_to == 1 and journal.current()["crate-b"].decision == "exclude"


def test_a_failed_write_is_an_error_outcome_not_an_exception(journal: Journal) -> None:
    actions = DecisionActions(DecisionBook(journal, IDS), LABELS, CLASSES)
    journal.close()
    out = actions.decide([0], "confirm")
    assert out.error and not out.saved and out.message.startswith("Not saved:")
    assert len(out.changed) == 0


def test_bulk_plan_skips_rows_with_the_new_label_and_counts_replaced_decisions(journal: Journal) -> None:
    actions = DecisionActions(DecisionBook(journal, IDS), LABELS, CLASSES)
    actions.decide([0], "defer")
    plan = actions.bulk_plan(np.array([0, 1, 2]), "relabel:premium")
    assert isinstance(plan, BulkPlan)
    assert plan.targets.tolist() == [2] and plan.new_label == "premium"
    assert "2 rows already labelled premium" in plan.question
    plan = actions.bulk_plan(np.array([0, 1, 2]), "confirm")
    assert isinstance(plan, BulkPlan) and plan.targets.tolist() == [0, 1, 2]
    assert "1 of them have another decision now" in plan.question
    assert actions.bulk_plan(np.array([0, 1]), "relabel:premium") == (
        "Every row in this view is already labelled premium."
    )
    keys = [k for k, _ in actions.bulk_choices()]
    assert keys == [
        "confirm",
        "exclude",
        "defer",
        "relabel:juice",
        "relabel:premium",
        "relabel:processing",
        "clear",
    ]


def test_row_filters_combine_conditions_and_keep_held_out_rows_apart(journal: Journal) -> None:
    book = DecisionBook(journal, IDS)
    filters = RowFilters(rows_frame(), book, CLASSES)
    presets = filters.presets()
    assert filters.has_held_out and filters.default == Query(scope="review")
    assert filters.mask(Query(scope="all")) is None
    assert filters.mask(filters.default).tolist() == [True, True, True, False, False]
    assert filters.mask(presets["held_out"]).tolist() == [False, False, False, True, True]
    assert filters.mask(presets["support"]).tolist() == [True, False, True, False, False]
    # loo_miss on a held-out row is the final model's error there: its own preset, not a LOO miss
    assert filters.mask(presets["loo_miss"]).tolist() == [True, False, False, False, False]
    assert filters.mask(presets["held_out_miss"]).tolist() == [False, False, False, True, True]
    assert filters.mask(presets["label:premium"]).tolist() == [True, True, False, False, False]
    assert filters.mask(presets["queue"]).tolist() == [True, False, False, False, False]
    book.record([0], "confirm")
    assert filters.mask(presets["queue"]).tolist() == [False] * 5  # decided rows leave the queue
    book.record([3], "exclude")
    assert filters.mask(presets["decision:exclude"]).tolist() == [False] * 5  # held out: not in review
    assert filters.mask(Query(scope="all", decision="exclude")).tolist() == [False, False, False, True, False]
    # score cut and class combine with the rest; NaN scores never pass a cut
    combined = Query(scope="all", label="premium", min_score=0.5)
    assert filters.mask(combined).tolist() == [True, False, False, False, True]
    assert filters.count(combined) == 2
    assert filters.key_of(combined) == "custom" and filters.key_of(presets["queue"]) == "queue"
    assert filters.title(presets["held_out_miss"]) == "held-out errors"
    assert filters.title(Query(scope="all", kind="flagged")) == "flagged (held-out rows too)"
    assert combined.title() == "label premium · score ≥ 0.5"
    assert filters.review_positions(np.array([4, 3, 2, 0])).tolist() == [2, 0]
    choices = dict(filters.choices())
    assert choices["held_out"] == "held-out rows (2)" and "custom" in choices
    assert next_sort(["id", "score", "margin"], "id") == ("score", True)
    assert next_sort(["id", "score", "margin"], "margin") == ("id", False)
    assert next_sort(["id", "score"], None) == ("id", False)


def test_bulk_plan_leaves_held_out_rows_out(journal: Journal) -> None:
    book = DecisionBook(journal, IDS)
    review = rows_frame()["held_out"].to_numpy() == False  # noqa: E712
    actions = DecisionActions(book, LABELS, CLASSES)
    plan = actions.bulk_plan(np.arange(5), "exclude", review)
    assert isinstance(plan, BulkPlan) and plan.targets.tolist() == [0, 1, 2]
    assert "2 held-out rows in this view are left out" in plan.question
    assert actions.bulk_plan(np.array([3, 4]), "exclude", review) == (
        "Every row in this view is held out: bulk decisions reach review rows only."
    )
