"""RowModel without a terminal: sort, filter, cursor by row, ids, new values under a kept view."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from holdfast.ui.widgets.row_model import RowModel

from .conftest import findings_frame


def pandas_order(frame: pd.DataFrame, key: str, descending: bool) -> np.ndarray:
    """Reference order from pandas: stable, NaN last."""
    ordered = frame.sort_values(key, ascending=not descending, kind="stable", na_position="last")
    return ordered.index.to_numpy()


def test_sort_matches_pandas_and_keeps_the_cursor_row() -> None:
    frame = findings_frame(300, seed=2)
    model = RowModel(frame)
    assert model.move_cursor(model.index_of(77))  # type: ignore[arg-type]
    assert model.sort_by("score", descending=True) is False  # same row under the cursor
    np.testing.assert_array_equal(model.view, pandas_order(frame, "score", True))
    assert model.cursor_row == 77
    assert model.sort_by("score") is False  # same key: toggles to ascending
    assert model.sort_descending is False
    np.testing.assert_array_equal(model.view, pandas_order(frame, "score", False))
    with pytest.raises(KeyError, match="nope"):
        model.sort_by("nope")


def test_filter_moves_the_cursor_only_when_its_row_is_hidden() -> None:
    frame = findings_frame(200, seed=4)
    model = RowModel(frame)
    model.move_cursor(10)
    keep = np.zeros(200, dtype=bool)
    keep[[3, 10, 50]] = True
    assert model.set_filter(keep) is False
    assert model.view.tolist() == [3, 10, 50] and model.cursor_row == 10
    hide10 = keep.copy()
    hide10[10] = False
    assert model.set_filter(hide10) is True
    assert model.cursor_row in (3, 50)
    assert model.set_filter(np.zeros(200, dtype=bool)) is True
    assert model.cursor_row is None and model.move_cursor(0) is False
    with pytest.raises(ValueError, match="200 entries"):
        model.set_filter(np.ones(199, dtype=bool))


def test_new_values_with_a_kept_view_resort_and_keep_the_row() -> None:
    frame = findings_frame(120, seed=5)
    model = RowModel(frame)
    model.sort_by("score", descending=True)
    mask = frame["support"].to_numpy()
    model.set_filter(mask)
    row = int(model.view[3])
    model.move_cursor(3)
    changed = frame.copy()
    changed["score"] = -changed["score"]  # ranking turns over
    assert model.set_data(changed, keep_view=True) is False
    assert model.cursor_row == row
    assert (model.sort_key, model.sort_descending) == ("score", True)
    expected = [p for p in pandas_order(changed, "score", True) if mask[p]]
    assert model.view.tolist() == expected
    # without keep_view everything starts over
    assert model.set_data(changed) is True
    assert model.sort_key is None and model.cursor_index == 0 and len(model.view) == 120


def test_ids_next_wanted_row_and_text_updates() -> None:
    frame = findings_frame(50)
    model = RowModel(frame)
    model.sort_by("rank", descending=True)  # view: 49, 48, ..., 0
    assert model.index_of_id("crate-000049") == 0
    assert model.index_of_id("crate-999999") is None
    wanted = np.zeros(50, dtype=bool)
    wanted[[40, 5]] = True
    model.move_cursor(0)
    assert model.next_index(wanted) == 9  # row 40 is the 10th shown
    model.move_cursor(9)
    assert model.next_index(wanted) == 44  # row 5
    model.move_cursor(44)
    assert model.next_index(wanted) == 9  # wraps to the top
    assert model.next_index(np.zeros(50, dtype=bool)) is None
    model.update_values("score", [0, 1], np.array(["n/a", "n/a"], dtype=object))
    assert model.kinds["score"] == "text" and model.value("score", 1) == "n/a"


def test_next_by_follows_the_score_order_under_any_sort() -> None:
    frame = findings_frame(40, seed=9)
    frame["score"] = np.linspace(1.0, 0.0, 40)[np.random.default_rng(1).permutation(40)]
    model = RowModel(frame)
    model.sort_by("id")  # the view is not in score order
    by_score = frame["score"].sort_values(ascending=False, kind="stable").index.to_numpy()
    wanted = np.zeros(40, dtype=bool)
    wanted[by_score[[2, 5, 9]]] = True
    model.move_cursor(model.index_of(int(by_score[0])))  # type: ignore[arg-type]
    seen = []
    for _ in range(4):
        index = model.next_by("score", True, wanted)
        assert index is not None
        model.move_cursor(index)
        seen.append(model.cursor_row)
    assert seen == [by_score[2], by_score[5], by_score[9], by_score[2]]  # wraps to the highest
    hidden = np.ones(40, dtype=bool)
    hidden[by_score[[2, 5, 9]]] = False
    model.set_filter(hidden)
    assert model.next_by("score", True, wanted) is None  # wanted rows that are not shown do not count
