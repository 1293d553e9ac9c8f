"""RowTable: a table over column arrays that draws only the rows on screen (Textual's Line API).

The rows, their order, the filter and the cursor live in a :class:`~holdfast.ui.widgets.row_model.RowModel`
(plain numpy, tested on its own); this widget draws the few rows that are visible with the column specs of
:mod:`holdfast.ui.widgets.columns`, turns keys and clicks into model calls and posts what changed. The cost
of a key press does not grow with the number of rows. The widget computes nothing about the rows.

Line 0 of the widget is the header (column titles and the sort indicator); it stays in place while the
rows scroll. Data row ``i`` of the view is content line ``i + 1``.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any, ClassVar

import numpy as np
import pandas as pd
from rich.segment import Segment
from rich.style import Style
from textual import events
from textual.binding import Binding, BindingType
from textual.cache import LRUCache
from textual.geometry import Size
from textual.message import Message
from textual.scroll_view import ScrollView
from textual.strip import Strip

from holdfast.ui.textsafe import safe_text
from holdfast.ui.widgets.columns import DEFAULT_FORMATTERS, ColumnSpec, ShownColumn, fit_cells, resolve_column
from holdfast.ui.widgets.row_model import RowModel

_SORT_MARK = {False: " ▲", True: " ▼"}


#: The movement keys: (key, action, description, id suffix, footer group).
_MOVES = (
    ("up", "cursor_up", "Up", "cursor_up", "Move"),
    ("down", "cursor_down", "Down", "cursor_down", "Move"),
    ("pageup", "cursor_page_up", "Page up", "page_up", "Page"),
    ("pagedown", "cursor_page_down", "Page down", "page_down", "Page"),
    ("home", "cursor_first", "First row", "first", "First/last"),
    ("end", "cursor_last", "Last row", "last", "First/last"),
)


def movement_bindings(
    prefix: str, *, show: bool = True, choose: str = "Open row", choose_help: str = ""
) -> list[BindingType]:
    """The table's movement keys and enter, with ids ``PREFIX.cursor_up`` and so on.

    ``show=False`` keeps them out of the footer (a screen that lists them in its help instead);
    ``choose``/``choose_help`` describe what enter does there.
    """
    groups = {"Move": Binding.Group("Move", compact=True), "Page": Binding.Group("Page")}
    groups["First/last"] = Binding.Group("First/last")
    keys: list[BindingType] = [
        Binding(key, action, text, id=f"{prefix}.{name}", show=show, group=groups[group] if show else None)
        for key, action, text, name, group in _MOVES
    ]
    keys.append(Binding("enter", "choose_row", choose, id=f"{prefix}.choose", show=show, tooltip=choose_help))
    return keys


class RowTable(ScrollView, can_focus=True):
    """A read-only table over column arrays, fast at 100,000 rows and more.

    Parameters
    ----------
    frame, columns
        Optional initial data; see ``set_data``.
    flag_column
        Rows whose value here is a non-empty string get the ``row-table--flagged`` style.
    decision_column
        Non-empty cells of this column get the ``row-table--decided`` style.
    empty_text
        Shown on the first line when no row is in the view.
    """

    BINDINGS: ClassVar[list[BindingType]] = movement_bindings("row_table")

    COMPONENT_CLASSES: ClassVar[set[str]] = {
        "row-table--header",
        "row-table--cursor",
        "row-table--flagged",
        "row-table--true",
        "row-table--false",
        "row-table--decided",
        "row-table--empty",
    }
    """
    | Class | Styles |
    | :- | :- |
    | `row-table--header` | the header line (titles, sort indicator) |
    | `row-table--cursor` | the row under the cursor |
    | `row-table--flagged` | rows with a non-empty flag column |
    | `row-table--true` / `row-table--false` | boolean cells |
    | `row-table--decided` | non-empty cells of the decision column |
    | `row-table--empty` | the line shown when no row is in the view |
    """

    DEFAULT_CSS = """
    RowTable {
        background: $surface;
        color: $foreground;
        height: 1fr;
        & > .row-table--header {
            background: $panel;
            color: $foreground;
            text-style: bold;
        }
        & > .row-table--cursor {
            background: $block-cursor-blurred-background;
            color: $block-cursor-blurred-foreground;
            text-style: $block-cursor-blurred-text-style;
        }
        &:focus > .row-table--cursor {
            background: $block-cursor-background;
            color: $block-cursor-foreground;
            text-style: $block-cursor-text-style;
        }
        & > .row-table--flagged { color: $warning; }
        & > .row-table--true { color: $success; }
        & > .row-table--false { color: $text-muted; }
        & > .row-table--decided { color: $accent; text-style: bold; }
        & > .row-table--empty { color: $text-muted; text-style: italic; }
    }
    """

    class _Changed(Message):
        """Base of the table's messages: ``control`` is the table that sent it."""

        def __init__(self, row_table: RowTable) -> None:
            super().__init__()
            self.row_table = row_table

        @property
        def control(self) -> RowTable:
            return self.row_table

    class CursorMoved(_Changed):
        """The data row under the cursor changed (``position`` is ``None`` when the view is empty)."""

        def __init__(self, row_table: RowTable, position: int | None) -> None:
            super().__init__(row_table)
            self.position = position

    class RowChosen(_Changed):
        """Enter (or a double click) on the row at data position ``position``."""

        def __init__(self, row_table: RowTable, position: int) -> None:
            super().__init__(row_table)
            self.position = position

    class SortChanged(_Changed):
        """The sort order changed (``key`` is ``None`` for input order)."""

        def __init__(self, row_table: RowTable, key: str | None, descending: bool) -> None:
            super().__init__(row_table)
            self.key = key
            self.descending = descending

    def __init__(
        self,
        frame: pd.DataFrame | None = None,
        columns: Sequence[ColumnSpec | str] | None = None,
        *,
        flag_column: str = "flag_names",
        decision_column: str = "decision",
        empty_text: str = "No rows to show.",
        name: str | None = None,
        id: str | None = None,
        classes: str | None = None,
        disabled: bool = False,
    ) -> None:
        super().__init__(name=name, id=id, classes=classes, disabled=disabled)
        self.flag_column = flag_column
        self.decision_column = decision_column
        self.empty_text = empty_text
        self.model = RowModel()
        self._columns: list[ShownColumn] = []
        self._total_width = 0
        self._strips: LRUCache[tuple[int, bool], Strip] = LRUCache(2048)
        self._header: Strip | None = None
        self._styles: dict[str, Style] = {}
        if frame is not None:
            self.set_data(frame, columns)

    # ------------------------------------------------------------------ data

    def set_data(
        self,
        frame: pd.DataFrame,
        columns: Sequence[ColumnSpec | str] | None = None,
        *,
        keep_view: bool = False,
    ) -> None:
        """Show ``frame`` (copied column by column) with ``columns``.

        Parameters
        ----------
        frame
            One row per data row; row position ``p`` is ``frame.iloc[p]``.
        columns
            Column specs (a plain string is a spec with defaults); ``None`` shows every column.
        keep_view
            False resets sort, filter and cursor. True (the same rows with new values) re-sorts by the
            sort column, keeps the filter and keeps the cursor on its row (see ``RowModel.set_data``).

        Raises
        ------
        KeyError
            A spec names a column that ``frame`` does not have.
        """
        if columns is None:
            columns = list(frame.columns)
        specs = [ColumnSpec(c) if isinstance(c, str) else c for c in columns]
        missing = [s.key for s in specs if s.key not in frame.columns]
        if missing:
            raise KeyError(f"RowTable: column {missing[0]!r} is not in the data")
        old = self.model.cursor_row
        moved = self.model.set_data(frame, keep_view=keep_view)
        self._columns = [
            resolve_column(spec, self.model.arrays[spec.key], self.model.kinds[spec.key]) for spec in specs
        ]
        self._total_width = sum(col.width + 1 for col in self._columns)
        self._clear_render_cache()
        self._view_changed(moved or self.model.cursor_row != old or not keep_view)

    @property
    def row_count(self) -> int:
        """Number of data rows given to ``set_data``."""
        return self.model.n

    @property
    def columns(self) -> list[str]:
        """Keys of the displayed columns, left to right."""
        return [col.key for col in self._columns]

    def value(self, column: str, position: int) -> Any:
        """The widget's current value of ``column`` at data row ``position``."""
        return self.model.value(column, position)

    def update_values(self, column: str, positions: Sequence[int] | np.ndarray, values: Any) -> None:
        """Set ``column`` at data rows ``positions`` to ``values`` and redraw only those rows if visible.

        The view order is not changed, even when sorted or filtered by this column: call ``sort_by`` or
        ``set_filter`` again to re-order. Meant for the decision column. A column whose dtype cannot
        hold ``values`` (say text into an all-NaN float column) becomes a text column.
        """
        kind = self.model.kinds.get(column)
        pos = self.model.update_values(column, positions, values)
        if self.model.kinds.get(column) != kind:
            for col in self._columns:
                if col.key == column and not col.custom_formatter:
                    col.formatter = DEFAULT_FORMATTERS[self.model.kinds[column]]
        top = self._first_visible
        rows = self._page_rows
        for p in pos.tolist():
            self._strips.discard((p, False))
            self._strips.discard((p, True))
            index = self.model.index_of(p)
            if index is not None and top <= index < top + rows:
                self.refresh_line(index + 1)

    # ------------------------------------------------------------------ view: sort and filter

    @property
    def sort_key(self) -> str | None:
        """Column the view is sorted by, ``None`` for input order."""
        return self.model.sort_key

    @property
    def sort_descending(self) -> bool:
        """Whether the current sort is descending."""
        return self.model.sort_descending

    def sort_by(self, key: str | None, descending: bool | None = None) -> None:
        """Order the view by column ``key`` (``None``: input order); see ``RowModel.sort_by``.

        The cursor stays on its row.
        """
        moved = self.model.sort_by(key, descending)
        self._header = None
        self._view_changed(moved)
        self.post_message(self.SortChanged(self, self.model.sort_key, self.model.sort_descending))

    def set_filter(self, mask: np.ndarray | None) -> None:
        """Show only data rows where ``mask`` is true (``None``: all rows); keeps the sort order.

        Raises
        ------
        ValueError
            ``mask`` is not a boolean array with one entry per data row.
        """
        self._view_changed(self.model.set_filter(mask))

    def view_positions(self) -> np.ndarray:
        """Data row positions of the current view, in display order (a copy)."""
        return self.model.view_positions()

    def _view_changed(self, moved: bool) -> None:
        self.virtual_size = Size(self._total_width, len(self.model.view) + 1)
        self._strips.clear()
        self.refresh()
        self._scroll_to_cursor()
        if moved:
            self.post_message(self.CursorMoved(self, self.cursor_row))

    # ------------------------------------------------------------------ cursor

    @property
    def cursor_index(self) -> int:
        """Index of the cursor in the view (0 = top row)."""
        return self.model.cursor_index

    @property
    def cursor_row(self) -> int | None:
        """Data row position under the cursor, ``None`` when the view is empty."""
        return self.model.cursor_row

    def move_cursor(self, index: int, *, scroll: bool = True) -> None:
        """Put the cursor on view index ``index`` (clamped to the view) and post ``CursorMoved``."""
        old = self.model.cursor_index
        if not self.model.move_cursor(index):
            if scroll:
                self._scroll_to_cursor()
            return
        self.refresh_line(old + 1)
        self.refresh_line(self.model.cursor_index + 1)
        if scroll:
            self._scroll_to_cursor()
        self.post_message(self.CursorMoved(self, self.cursor_row))

    def move_to_position(self, position: int) -> bool:
        """Put the cursor on data row ``position``; ``False`` if that row is not in the view."""
        index = self.model.index_of(position)
        if index is None:
            return False
        self.move_cursor(index)
        return True

    def jump_to_id(self, row_id: Any) -> bool:
        """Put the cursor on the row whose ``id`` column equals ``str(row_id)``.

        With a repeated id, the first such row in display order. Returns ``False`` (cursor unchanged)
        when no row in the view has that id.
        """
        index = self.model.index_of_id(row_id)
        if index is None:
            return False
        self.move_cursor(index)
        return True

    @property
    def _page_rows(self) -> int:
        """Number of data rows that fit on screen below the header."""
        return max(1, self.scrollable_content_region.height - 1)

    @property
    def _first_visible(self) -> int:
        return self.scroll_offset.y

    def _scroll_to_cursor(self) -> None:
        if not self.is_mounted or len(self.model.view) == 0:
            return
        rows = self._page_rows
        top = self._first_visible
        cursor = self.model.cursor_index
        if cursor < top:
            self.scroll_to(y=cursor, animate=False, force=True)
        elif cursor >= top + rows:
            self.scroll_to(y=cursor - rows + 1, animate=False, force=True)

    def action_cursor_up(self) -> None:
        self.move_cursor(self.cursor_index - 1)

    def action_cursor_down(self) -> None:
        self.move_cursor(self.cursor_index + 1)

    def action_cursor_page_up(self) -> None:
        rows = self._page_rows
        self.scroll_to(y=self._first_visible - rows, animate=False, force=True)
        self.move_cursor(self.cursor_index - rows)

    def action_cursor_page_down(self) -> None:
        rows = self._page_rows
        self.scroll_to(y=self._first_visible + rows, animate=False, force=True)
        self.move_cursor(self.cursor_index + rows)

    def action_cursor_first(self) -> None:
        self.move_cursor(0)

    def action_cursor_last(self) -> None:
        self.move_cursor(len(self.model.view) - 1)

    def action_choose_row(self) -> None:
        position = self.cursor_row
        if position is not None:
            self.post_message(self.RowChosen(self, position))

    # ------------------------------------------------------------------ mouse

    def on_click(self, event: events.Click) -> None:
        offset = event.get_content_offset(self)
        if offset is None:
            return
        event.stop()
        if offset.y == 0:
            x = offset.x + self.scroll_offset.x
            for col in self._columns:
                if x < col.width + 1:
                    self.sort_by(col.key)
                    return
                x -= col.width + 1
            return
        index = self._first_visible + offset.y - 1
        if index < len(self.model.view):
            self.move_cursor(index, scroll=False)
            if event.chain >= 2:
                self.action_choose_row()

    # ------------------------------------------------------------------ rendering

    def notify_style_update(self) -> None:
        super().notify_style_update()
        self._clear_render_cache()

    def _clear_render_cache(self) -> None:
        self._strips.clear()
        self._header = None
        self._styles = {}

    def _style(self, name: str) -> Style:
        style = self._styles.get(name)
        if style is None:
            if name == "base":
                style = self.rich_style
            elif name in ("row-table--header", "row-table--cursor"):
                style = self.get_component_rich_style(name)
            else:
                style = self.get_component_rich_style(name, partial=True)
            self._styles[name] = style
        return style

    def render_line(self, y: int) -> Strip:
        scroll_x, scroll_y = self.scroll_offset
        width = self.size.width
        base = self._style("base")
        if y == 0:
            strip = self._header_strip()
            return strip.crop_extend(scroll_x, scroll_x + width, self._style("row-table--header"))
        index = scroll_y + y - 1
        view = self.model.view
        if index >= len(view):
            if index == 0:
                text = fit_cells(safe_text(self.empty_text), max(1, width), "left")
                return Strip([Segment(text, base + self._style("row-table--empty"))], len(text))
            return Strip.blank(width, base)
        position = int(view[index])
        is_cursor = index == self.model.cursor_index
        strip = self._strips.get((position, is_cursor))
        if strip is None:
            strip = self._row_strip(position, is_cursor)
            self._strips[(position, is_cursor)] = strip
        extend = base + self._style("row-table--cursor") if is_cursor else base
        return strip.crop_extend(scroll_x, scroll_x + width, extend)

    def _header_strip(self) -> Strip:
        if self._header is None:
            style = self._style("row-table--header")
            segments = []
            for col in self._columns:
                if col.key == self.model.sort_key:
                    mark = _SORT_MARK[self.model.sort_descending]
                    room = col.width - len(mark)
                    text = (
                        fit_cells(col.title, room, col.alignment) + mark if room >= 1 else mark[-col.width :]
                    )
                else:
                    text = fit_cells(col.title, col.width, col.alignment)
                segments.append(Segment(" " + text, style))
            self._header = Strip(segments, self._total_width)
        return self._header

    def _row_strip(self, position: int, is_cursor: bool) -> Strip:
        arrays, kinds = self.model.arrays, self.model.kinds
        row_style = self._style("base")
        flags = arrays.get(self.flag_column)
        if flags is not None:
            flag = flags[position]
            if isinstance(flag, str) and flag:
                row_style = row_style + self._style("row-table--flagged")
        cursor = self._style("row-table--cursor") if is_cursor else None
        segments = []
        for col in self._columns:
            value = arrays[col.key][position]
            text = fit_cells(safe_text(col.formatter(value)), col.width, col.alignment)
            style = row_style
            if kinds[col.key] == "bool" and value is not None and value is not pd.NA:
                style = style + self._style("row-table--true" if value else "row-table--false")
            elif col.key == self.decision_column and isinstance(value, str) and value:
                style = style + self._style("row-table--decided")
            if cursor is not None:
                style = style + cursor
            segments.append(Segment(" " + text, style))
        return Strip(segments, self._total_width)
