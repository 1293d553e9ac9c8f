"""RowTable: sort, filter, cursor, ids, live updates, literal text and styling, driven by the pilot.

Sort orders are checked against pandas (``DataFrame.sort_values(kind="stable", na_position="last")``),
an implementation outside this project.
"""

from __future__ import annotations

import sys
import unicodedata
from typing import Any

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from rich.color import Color
from textual.app import App, ComposeResult

from holdfast.ui.textsafe import literal, safe_text
from holdfast.ui.widgets.columns import ColumnSpec, default_columns
from holdfast.ui.widgets.row_model import sort_order
from holdfast.ui.widgets.row_table import RowTable

from .conftest import findings_frame, screen_lines

NARROW = ["rank", "id", "label", "score", "flag_names", ColumnSpec("decision", width=16), "support"]
SIZE = (100, 20)


class Host(App):
    """A tiny app holding one RowTable and recording its messages."""

    CSS = """
    RowTable > .row-table--flagged { color: #ff0000; }
    RowTable > .row-table--true { color: #00aa00; }
    RowTable > .row-table--cursor { background: #0000ff; color: #ffffff; }
    RowTable:focus > .row-table--cursor { background: #00ff00; color: #000000; }
    """

    def __init__(self, frame: pd.DataFrame, columns: list[Any] | None = None) -> None:
        super().__init__()
        self.frame = frame
        self.column_specs = columns if columns is not None else NARROW
        self.moved: list[int | None] = []
        self.chosen: list[int] = []
        self.sorted: list[tuple[str | None, bool]] = []

    def compose(self) -> ComposeResult:
        yield RowTable(self.frame, self.column_specs)

    def on_row_table_cursor_moved(self, message: RowTable.CursorMoved) -> None:
        self.moved.append(message.position)

    def on_row_table_row_chosen(self, message: RowTable.RowChosen) -> None:
        self.chosen.append(message.position)

    def on_row_table_sort_changed(self, message: RowTable.SortChanged) -> None:
        self.sorted.append((message.key, message.descending))


def data_rows(table: RowTable) -> int:
    """Rows that fit below the header."""
    return table.scrollable_content_region.height - 1


def line_with(app: App, text: str) -> int:
    """Screen line number holding ``text`` (fails the test if none)."""
    for y, line in enumerate(screen_lines(app)):
        if text in line:
            return y
    raise AssertionError(f"{text!r} is not on screen")


def pandas_order(frame: pd.DataFrame, key: str, descending: bool) -> np.ndarray:
    """Reference order from pandas: stable, NaN last."""
    ordered = frame.sort_values(key, ascending=not descending, kind="stable", na_position="last")
    return ordered.index.to_numpy()


# ---------------------------------------------------------------------------------------------- big data


async def test_100k_rows_first_render_formats_only_visible_rows() -> None:
    frame = findings_frame(100_000)
    calls: list[Any] = []

    def counting(value: Any) -> str:
        calls.append(value)
        return str(value)

    columns = [ColumnSpec("rank", width=7), ColumnSpec("id", width=14, formatter=counting), "score"]
    app = Host(frame, columns)
    async with app.run_test(size=SIZE) as pilot:
        await pilot.pause()
        table = app.query_one(RowTable)
        lines = screen_lines(app)
        assert "rank" in lines[0] and "id" in lines[0]
        assert "crate-000000" in lines[1]
        first_paint_calls = len(calls)
        assert 0 < first_paint_calls <= 3 * SIZE[1]
        await pilot.press("end")
        assert "crate-099999" in screen_lines(app)[data_rows(table)]
        assert table.cursor_row == 99_999
        assert len(calls) - first_paint_calls <= 3 * SIZE[1]


# ---------------------------------------------------------------------------------------------- sorting


@settings(max_examples=60, deadline=None)
@given(
    st.lists(st.one_of(st.none(), st.integers(-3, 3).map(float), st.floats(allow_nan=True)), max_size=40),
    st.booleans(),
)
def test_sort_order_matches_pandas_for_floats(values: list[float | None], descending: bool) -> None:
    array = np.array([np.nan if v is None else v for v in values], dtype=float)
    expected = pd.Series(array).sort_values(ascending=not descending, kind="stable", na_position="last")
    assert sort_order(array, descending).tolist() == expected.index.tolist()


@settings(max_examples=60, deadline=None)
@given(
    st.lists(st.one_of(st.none(), st.sampled_from(["b", "a", "c", "B", "ä", "z" * 300])), max_size=40),
    st.booleans(),
)
def test_sort_order_matches_pandas_for_text(values: list[str | None], descending: bool) -> None:
    array = np.array(values, dtype=object)
    expected = pd.Series(array, dtype=object).sort_values(
        ascending=not descending, kind="stable", na_position="last"
    )
    assert sort_order(array, descending).tolist() == expected.index.tolist()


async def test_sort_toggles_and_matches_pandas_and_keeps_cursor_row() -> None:
    frame = findings_frame(500, seed=1)
    app = Host(frame)
    async with app.run_test(size=SIZE) as pilot:
        table = app.query_one(RowTable)
        table.move_to_position(123)
        table.sort_by("score")
        await pilot.pause()
        np.testing.assert_array_equal(table.view_positions(), pandas_order(frame, "score", False))
        assert "score ▲" in screen_lines(app)[0]
        assert table.cursor_row == 123
        assert "crate-000123" in screen_lines(app)[table.cursor_index - table.scroll_offset.y + 1]

        table.sort_by("score")  # same key again: toggles to descending
        await pilot.pause()
        np.testing.assert_array_equal(table.view_positions(), pandas_order(frame, "score", True))
        assert "score ▼" in screen_lines(app)[0]
        assert table.cursor_row == 123

        table.sort_by("label", descending=True)
        np.testing.assert_array_equal(table.view_positions(), pandas_order(frame, "label", True))
        table.sort_by(None)
        np.testing.assert_array_equal(table.view_positions(), np.arange(500))
        await pilot.pause()
        assert app.sorted == [("score", False), ("score", True), ("label", True), (None, False)]


async def test_header_click_sorts_by_that_column() -> None:
    app = Host(findings_frame(200))
    async with app.run_test(size=SIZE) as pilot:
        x = screen_lines(app)[0].index("score")
        await pilot.click(RowTable, offset=(x, 0))
        await pilot.pause()
        table = app.query_one(RowTable)
        assert (table.sort_key, table.sort_descending) == ("score", False)


# ---------------------------------------------------------------------------------------------- filter


async def test_filter_keeps_sort_order_and_moves_cursor_off_hidden_rows() -> None:
    frame = findings_frame(400, seed=2)
    app = Host(frame)
    async with app.run_test(size=SIZE) as pilot:
        table = app.query_one(RowTable)
        table.sort_by("score", descending=True)
        mask = frame["support"].to_numpy()
        hidden = int(np.flatnonzero(~mask)[0])
        table.move_to_position(hidden)
        table.set_filter(mask)
        await pilot.pause()
        expected = [p for p in pandas_order(frame, "score", True) if mask[p]]
        assert table.view_positions().tolist() == expected
        assert table.cursor_row in expected
        assert app.moved[-1] == table.cursor_row != hidden
        assert table.move_to_position(hidden) is False

        table.set_filter(np.zeros(400, dtype=bool))
        await pilot.pause()
        assert table.cursor_row is None
        assert app.moved[-1] is None
        assert "No rows to show." in screen_lines(app)[1]

        table.set_filter(None)
        assert len(table.view_positions()) == 400
        with pytest.raises(ValueError):
            table.set_filter(np.ones(399, dtype=bool))
        with pytest.raises(ValueError):
            table.set_filter(np.ones(400, dtype=int))


# ---------------------------------------------------------------------------------------------- cursor


async def test_keys_move_cursor_and_keep_it_on_screen() -> None:
    app = Host(findings_frame(1000))
    async with app.run_test(size=SIZE) as pilot:
        table = app.query_one(RowTable)
        await pilot.press("down", "down", "down")
        assert table.cursor_row == 3
        assert app.moved[-3:] == [1, 2, 3]
        page = data_rows(table)
        await pilot.press("pagedown")
        assert table.cursor_row == 3 + page
        assert line_with(app, f"crate-{3 + page:06d}") >= 1
        await pilot.press("pageup")
        assert table.cursor_row == 3
        await pilot.press("end")
        assert table.cursor_row == 999
        assert line_with(app, "crate-000999") == page
        await pilot.press("home")
        assert table.cursor_row == 0
        assert line_with(app, "crate-000000") == 1
        count = len(app.moved)
        await pilot.press("up")
        assert table.cursor_row == 0
        assert len(app.moved) == count  # no move, no message
        await pilot.press("enter")
        assert app.chosen == [0]


async def test_binding_ids_let_the_app_remap_keys() -> None:
    app = Host(findings_frame(50))
    async with app.run_test(size=SIZE) as pilot:
        app.set_keymap({"row_table.cursor_down": "j"})
        await pilot.press("j", "j")
        assert app.query_one(RowTable).cursor_row == 2


async def test_click_selects_row_and_double_click_chooses_it() -> None:
    app = Host(findings_frame(300))
    async with app.run_test(size=SIZE) as pilot:
        table = app.query_one(RowTable)
        await pilot.press("pagedown")
        top = table.scroll_offset.y
        await pilot.click(RowTable, offset=(3, 4))
        assert table.cursor_index == top + 3
        assert app.moved[-1] == table.cursor_row
        await pilot.click(RowTable, offset=(3, 6), times=2)
        assert table.cursor_index == top + 5
        assert app.chosen == [table.cursor_row]


async def test_jump_to_id() -> None:
    frame = findings_frame(2000)
    app = Host(frame)
    async with app.run_test(size=SIZE) as pilot:
        table = app.query_one(RowTable)
        assert table.jump_to_id("crate-001500") is True
        await pilot.pause()
        assert table.cursor_row == 1500
        assert line_with(app, "crate-001500") >= 1
        assert table.jump_to_id("crate-999999") is False
        assert table.cursor_row == 1500
        mask = np.ones(2000, dtype=bool)
        mask[700] = False
        table.set_filter(mask)
        assert table.jump_to_id("crate-000700") is False
        assert table.cursor_row == 1500


async def test_jump_to_repeated_and_numeric_ids() -> None:
    frame = findings_frame(100)
    frame.loc[[10, 60], "id"] = "crate-dup"
    app = Host(frame)
    async with app.run_test(size=SIZE):
        table = app.query_one(RowTable)
        assert table.jump_to_id("crate-dup") is True
        assert table.cursor_row == 10  # first in display order
        table.sort_by("rank", descending=True)
        assert table.jump_to_id("crate-dup") is True
        assert table.cursor_row == 60
        mask = np.ones(100, dtype=bool)
        mask[60] = False
        table.set_filter(mask)
        assert table.jump_to_id("crate-dup") is True
        assert table.cursor_row == 10
        table.set_data(frame.assign(id=np.arange(100) * 7), ["id", "label"])
        assert table.jump_to_id(21) is True
        assert table.cursor_row == 3
        assert table.jump_to_id("22") is False


# ---------------------------------------------------------------------------------------------- updates


async def test_update_values_redraws_only_the_changed_line() -> None:
    frame = findings_frame(5000)
    app = Host(frame)
    async with app.run_test(size=SIZE) as pilot:
        table = app.query_one(RowTable)
        await pilot.press("down", "down")
        await pilot.pause()
        rendered: list[int] = []
        original = table.render_line

        def spy(y: int) -> Any:
            rendered.append(y)
            return original(y)

        table.render_line = spy  # type: ignore[method-assign]
        table.update_values("decision", [2], ["relabel:juice"])
        await pilot.pause()
        assert "relabel:juice" in screen_lines(app)[3]
        assert rendered == [3]

        rendered.clear()
        table.update_values("decision", np.array([4000]), "exclude")
        await pilot.pause()
        assert rendered == []  # off screen: nothing redrawn
        assert frame.loc[4000, "decision"] == ""  # the caller's frame is not changed
        assert table.value("decision", 4000) == "exclude"
        table.jump_to_id("crate-004000")
        await pilot.pause()
        assert "exclude" in screen_lines(app)[line_with(app, "crate-004000")]


async def test_update_values_into_an_all_missing_float_column_shows_text() -> None:
    frame = findings_frame(20).assign(decision=np.nan)
    app = Host(frame)
    async with app.run_test(size=SIZE) as pilot:
        table = app.query_one(RowTable)
        table.update_values("decision", [0, 1], ["confirm", "defer"])
        await pilot.pause()
        assert "confirm" in screen_lines(app)[1] and "defer" in screen_lines(app)[2]
        table.sort_by("decision")
        assert table.view_positions()[:2].tolist() == [0, 1]  # NaN (no decision) last


async def test_header_scrolls_sideways_with_the_rows() -> None:
    frame = findings_frame(50)
    app = Host(frame, default_columns(frame))  # wider than the 100-cell terminal
    async with app.run_test(size=SIZE) as pilot:
        table = app.query_one(RowTable)
        before = screen_lines(app)
        await pilot.press("right", "right", "right")
        dx = table.scroll_offset.x
        assert dx > 0
        after = screen_lines(app)
        for y in (0, 1, 2):  # header and rows move together
            assert after[y][:60] == before[y][dx : dx + 60]


# ---------------------------------------------------------------------------------------------- literal text


async def test_data_text_is_shown_literally() -> None:
    frame = findings_frame(10)
    frame.loc[1, "id"] = "[bold red]x[/]"
    frame.loc[2, "id"] = "a\x1b[31mred\x07"
    frame.loc[3, "label"] = "two\nlines\r\t"
    columns = [ColumnSpec("id", width=20), ColumnSpec("label", width=20), "score"]
    app = Host(frame, columns)
    async with app.run_test(size=SIZE) as pilot:
        await pilot.pause()
        lines = screen_lines(app)
        assert "[bold red]x[/]" in lines[2]
        assert "a\\x1b[31mred\\x07" in lines[3]
        assert "two\\nlines\\r\\t" in lines[4]
        text = "".join(lines)
        assert "\x1b" not in text and "\x07" not in text and "\n" not in text and "\r" not in text
        bold = [
            seg
            for seg in app.screen._compositor.render_strips()[2]
            if "x" in seg.text and seg.style is not None and seg.style.bold
        ]
        assert bold == []


def test_safe_text_escapes_every_control_character() -> None:
    # Reference: the Unicode Character Database (general category Cc = the C0 and C1 control sets of
    # ECMA-48 plus DEL), as shipped in Python's unicodedata module.
    controls = [chr(cp) for cp in range(sys.maxunicode + 1) if unicodedata.category(chr(cp)) == "Cc"]
    assert len(controls) == 65
    escaped = safe_text("".join(controls))
    assert not any(unicodedata.category(ch) == "Cc" for ch in escaped)
    assert safe_text("\x1b[31m") == "\\x1b[31m"
    assert safe_text("a\tb\nc\rd") == "a\\tb\\nc\\rd"
    assert safe_text("\x9b2J") == "\\x9b2J"
    assert safe_text("abc\u202edef") == "abc\\u202edef"  # right-to-left override (Unicode UAX #9)


def test_safe_text_keeps_printable_text_and_markup_as_is() -> None:
    for text in ["[bold red]x[/]", "Äpfel Klasse Ⅰ", "梨 crate", "🍎", "a b"]:
        assert safe_text(text) == text
    assert safe_text(None) == ""
    assert safe_text(3.5) == "3.5"
    assert literal("[b]x[/b]").plain == "[b]x[/b]"
    assert literal("x\x1by").plain == "x\\x1by"


# ---------------------------------------------------------------------------------------------- styling


def style_of(app: App, text: str) -> Any:
    """Rich style of the screen segment holding ``text``."""
    for strip in app.screen._compositor.render_strips():
        for seg in strip:
            if text in seg.text:
                return seg.style
    raise AssertionError(f"{text!r} is not on screen")


async def test_component_classes_style_cursor_flagged_and_booleans() -> None:
    frame = findings_frame(30)
    frame["flag_names"] = ""
    frame.loc[5, "flag_names"] = "loo_miss"
    frame["support"] = False
    frame.loc[6, "support"] = True
    frame["id"] = [f"crate-{i:06d}" for i in range(30)]
    columns = ["id", "flag_names", ColumnSpec("support", width=9)]
    app = Host(frame, columns)
    async with app.run_test(size=SIZE) as pilot:
        await pilot.pause()
        assert style_of(app, "crate-000005").color == Color.parse("#ff0000")
        assert style_of(app, "crate-000004").color != Color.parse("#ff0000")
        assert style_of(app, "crate-000000").bgcolor == Color.parse("#00ff00")  # focused cursor
        yes_line = screen_lines(app)[7]
        assert "yes" in yes_line
        yes_style = next(seg.style for seg in app.screen._compositor.render_strips()[7] if "yes" in seg.text)
        assert yes_style.color == Color.parse("#00aa00")
        app.set_focus(None)
        await pilot.pause()
        assert style_of(app, "crate-000000").bgcolor == Color.parse("#0000ff")  # blurred cursor


# ------------------------------------------------------------------------------------------- edge cases


async def test_empty_frame_and_unknown_column() -> None:
    frame = findings_frame(0)
    app = Host(frame, default_columns(frame))
    async with app.run_test(size=SIZE) as pilot:
        await pilot.pause()
        table = app.query_one(RowTable)
        assert table.cursor_row is None
        assert "No rows to show." in screen_lines(app)[1]
        await pilot.press("down", "end", "enter")
        assert app.chosen == []
        with pytest.raises(KeyError, match="nope"):
            table.set_data(findings_frame(3), ["id", "nope"])
