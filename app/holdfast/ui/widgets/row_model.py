"""RowModel: the rows behind the row table, as column arrays and a view (no drawing, no Textual).

The model keeps every column as a numpy array and a *view*: an int array of row positions in display
order (filter mask applied to the sort order). It keeps the cursor as an index into the view and holds
it on the same row when the order or the filter changes. Everything costs at most one vectorised pass
over the rows, so a key press does not grow with the number of rows beyond that.

A *position* is a data row's index in the frame given to :meth:`RowModel.set_data`; an *index* is a
place in the view (0 = top row shown).
"""

from __future__ import annotations

from collections import OrderedDict
from collections.abc import Sequence
from typing import Any

import numpy as np
import pandas as pd

from holdfast.ui.widgets.columns import Kind

_TEXT_KEY_MAX = 256  # longest text sorted as a numpy string array
_ORDER_CACHE = 8  # sort orders kept, so that toggling direction or going back is instant


def _as_array(series: pd.Series) -> tuple[np.ndarray, Kind]:
    """Copy one frame column into a numpy array the widget owns, with its display kind."""
    dtype = series.dtype
    if pd.api.types.is_bool_dtype(dtype):
        if isinstance(dtype, np.dtype):
            return series.to_numpy(dtype=bool, copy=True), "bool"
        return series.to_numpy(dtype=object, na_value=None), "bool"
    if pd.api.types.is_integer_dtype(dtype):
        if isinstance(dtype, np.dtype):
            return series.to_numpy(copy=True), "int"
        return series.to_numpy(dtype="float64", na_value=np.nan), "int"
    if pd.api.types.is_float_dtype(dtype):
        return series.to_numpy(dtype="float64", na_value=np.nan, copy=True), "float"
    if isinstance(dtype, np.dtype) and dtype.kind in "mM":
        return series.to_numpy(copy=True), "time"
    return series.to_numpy(dtype=object, copy=True), "text"


def _sort_key(values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Return ``(missing, key)``: a missing-value mask and an array ordered like the values.

    Booleans, numbers and times are their own key. Text and other objects become dense ranks:
    ``pandas.factorize`` finds the distinct values by hashing, only those are sorted, and the ranks
    are small ints, which numpy sorts fast.
    """
    kind = values.dtype.kind
    if kind == "b":
        return np.zeros(values.shape, dtype=bool), values.astype(np.int8)
    if kind in "iu":
        return np.zeros(values.shape, dtype=bool), values
    if kind == "f":
        missing = np.isnan(values)
        return missing, np.where(missing, 0.0, values)
    if kind in "mM":
        missing = np.isnat(values)
        return missing, values.view(np.int64)
    codes, uniques = pd.factorize(values, use_na_sentinel=True)  # hashing: no sort yet
    missing = codes < 0
    if len(uniques) == 0:
        return missing, np.zeros(values.shape, dtype=np.int8)
    rank = np.empty(len(uniques), dtype=np.int32 if len(uniques) >= 2**15 else np.int16)
    rank[_text_order(np.asarray(uniques, dtype=object))] = np.arange(len(uniques))
    return missing, rank[codes]


def _text_order(uniques: np.ndarray) -> np.ndarray:
    """Order of distinct values: text by code point (as Python compares ``str``), others by ``<``.

    Short text is compared as a numpy string array (fast; numpy ignores trailing NUL characters).
    """
    if pd.api.types.infer_dtype(uniques, skipna=False) == "string":
        width = max(map(len, uniques), default=0)
        if width <= _TEXT_KEY_MAX:
            return np.argsort(uniques.astype(f"U{max(1, width)}"), kind="stable")
    try:
        return np.argsort(uniques, kind="stable")
    except TypeError:  # mixed types that do not compare: order by their text
        return np.argsort(uniques.astype(str), kind="stable")


def _ordered_positions(missing: np.ndarray, key: np.ndarray, descending: bool) -> np.ndarray:
    """Stable order of ``key`` (ties by row position in both directions), missing rows last."""
    n = len(key)
    if descending:
        # Sort the reversed key, then reverse the result: ties keep ascending row position.
        order = (n - 1 - np.argsort(key[::-1], kind="stable"))[::-1]
    else:
        order = np.argsort(key, kind="stable")
    if missing.any():
        at_end = missing[order]
        order = np.concatenate([order[~at_end], order[at_end]])
    return np.ascontiguousarray(order, dtype=np.intp)


def sort_order(values: np.ndarray, descending: bool = False) -> np.ndarray:
    """Row positions that put ``values`` in order: stable, ties by position, missing values last.

    The same order as ``pandas.Series.sort_values(kind="stable", na_position="last")`` gives.
    """
    missing, key = _sort_key(values)
    return _ordered_positions(missing, key, descending)


class _Orders:
    """A small least-recently-used store of sort orders keyed by (column, descending)."""

    def __init__(self, size: int) -> None:
        self.size = size
        self._items: OrderedDict[tuple[str, bool], np.ndarray] = OrderedDict()

    def get(self, key: tuple[str, bool]) -> np.ndarray | None:
        order = self._items.get(key)
        if order is not None:
            self._items.move_to_end(key)
        return order

    def put(self, key: tuple[str, bool], order: np.ndarray) -> None:
        self._items[key] = order
        self._items.move_to_end(key)
        while len(self._items) > self.size:
            self._items.popitem(last=False)

    def drop_column(self, column: str) -> None:
        self._items.pop((column, False), None)
        self._items.pop((column, True), None)

    def clear(self) -> None:
        self._items.clear()


class RowModel:
    """Column arrays, a sort order, a filter and a cursor; what the row table shows, in which order.

    Parameters
    ----------
    frame
        Optional initial data; see :meth:`set_data`.
    """

    def __init__(self, frame: pd.DataFrame | None = None) -> None:
        self.n = 0
        self.arrays: dict[str, np.ndarray] = {}
        self.kinds: dict[str, Kind] = {}
        self._order: np.ndarray | None = None
        self._mask: np.ndarray | None = None
        self.view = np.zeros(0, dtype=np.intp)
        self._where = np.zeros(0, dtype=np.intp)
        self._cursor = 0
        self._sort_key: str | None = None
        self._sort_descending = False
        self._sort_keys: dict[str, tuple[np.ndarray, np.ndarray]] = {}
        self._orders = _Orders(_ORDER_CACHE)
        self._id_text: np.ndarray | None = None
        if frame is not None:
            self.set_data(frame)

    # ------------------------------------------------------------------ data

    def set_data(self, frame: pd.DataFrame, *, keep_view: bool = False) -> bool:
        """Take the rows of ``frame`` (copied column by column).

        ``keep_view=False`` resets sort, filter and cursor. ``keep_view=True`` (same rows, new values,
        e.g. a ranking that is still being refined) keeps the sort column and direction, re-sorts by
        the new values, keeps the filter when it still fits, and keeps the cursor on the same row.
        Returns True when the row under the cursor changed.
        """
        old_row = self.cursor_row
        sort = (self._sort_key, self._sort_descending)
        mask = self._mask if keep_view and self._mask is not None and len(frame) == self.n else None
        self.n = len(frame)
        self.arrays = {}
        self.kinds = {}
        for key in frame.columns:
            self.arrays[str(key)], self.kinds[str(key)] = _as_array(frame[key])
        self._order = None
        self._mask = mask
        self._sort_key = None
        self._sort_descending = False
        self._sort_keys = {}
        self._orders.clear()
        self._id_text = None
        if keep_view and sort[0] is not None and sort[0] in self.arrays:
            self._order = self._sorted(sort[0], sort[1])
            self._sort_key, self._sort_descending = sort
        if not keep_view:
            self._cursor = 0
            old_row = None
        base = self._order if self._order is not None else np.arange(self.n, dtype=np.intp)
        view = base if self._mask is None else base[self._mask[base]]
        if old_row is not None and old_row >= self.n:
            old_row = None
        return self._set_view(view, old_row) or not keep_view

    def value(self, column: str, position: int) -> Any:
        """The current value of ``column`` at data row ``position``."""
        return self.arrays[column][position]

    def as_text_column(self, column: str) -> np.ndarray:
        """Turn ``column`` into an object array of kind ``"text"`` (so any value can be stored in it)."""
        array = self.arrays[column] = self.arrays[column].astype(object)
        self.kinds[column] = "text"
        return array

    def update_values(self, column: str, positions: Sequence[int] | np.ndarray, values: Any) -> np.ndarray:
        """Set ``column`` at data rows ``positions`` to ``values``; returns the positions set.

        The view order is not changed, even when sorted or filtered by this column: call
        :meth:`sort_by` or :meth:`set_filter` again to re-order. A column whose dtype cannot hold
        ``values`` (say text into an all-NaN float column) becomes a text column.
        """
        pos = np.asarray(positions, dtype=np.intp).reshape(-1)
        if pos.size == 0:
            return pos
        array = self.arrays[column]
        if array.dtype != object and not np.can_cast(np.asarray(values).dtype, array.dtype, "same_kind"):
            array = self.as_text_column(column)
        array[pos] = values
        self._sort_keys.pop(column, None)
        self._orders.drop_column(column)
        if column == "id":
            self._id_text = None
        return pos

    # ------------------------------------------------------------------ view: sort and filter

    @property
    def sort_key(self) -> str | None:
        """Column the view is sorted by, ``None`` for input order."""
        return self._sort_key

    @property
    def sort_descending(self) -> bool:
        """Whether the current sort is descending."""
        return self._sort_descending

    def _sorted(self, key: str, descending: bool) -> np.ndarray:
        order = self._orders.get((key, descending))
        if order is None:
            if key not in self._sort_keys:
                self._sort_keys[key] = _sort_key(self.arrays[key])
            order = _ordered_positions(*self._sort_keys[key], descending)
            self._orders.put((key, descending), order)
        return order

    def sort_by(self, key: str | None, descending: bool | None = None) -> bool:
        """Order the view by column ``key`` (``None``: input order); True when the cursor's row changed.

        ``descending=None`` sorts ascending, or toggles the direction when ``key`` is already the sort
        column. The sort is stable with the row position as tie-breaker in both directions, and
        missing values (NaN, None, NaT) come last in both directions. The cursor stays on its row.

        Raises
        ------
        KeyError
            ``key`` is not a column.
        """
        if key is None:
            self._order = None
            self._sort_key = None
            self._sort_descending = False
        else:
            if key not in self.arrays:
                raise KeyError(f"RowTable: cannot sort by {key!r}: no such column")
            if descending is None:
                descending = not self._sort_descending if key == self._sort_key else False
            self._order = self._sorted(key, bool(descending))
            self._sort_key = key
            self._sort_descending = bool(descending)
        return self._rebuild_view()

    def set_filter(self, mask: np.ndarray | None) -> bool:
        """Keep only data rows where ``mask`` is true (``None``: all rows); keeps the sort order.

        Returns True when the row under the cursor changed.

        Raises
        ------
        ValueError
            ``mask`` is not a boolean array with one entry per data row.
        """
        if mask is not None:
            mask = np.asarray(mask)
            if mask.dtype != bool or mask.shape != (self.n,):
                raise ValueError(f"RowTable: filter mask must be boolean with {self.n} entries")
        self._mask = mask
        return self._rebuild_view()

    @property
    def filter_mask(self) -> np.ndarray | None:
        """The filter in force (``None``: all rows)."""
        return self._mask

    def view_positions(self) -> np.ndarray:
        """Data row positions of the current view, in display order (a copy)."""
        return self.view.copy()

    def _rebuild_view(self) -> bool:
        base = self._order if self._order is not None else np.arange(self.n, dtype=np.intp)
        view = base if self._mask is None else base[self._mask[base]]
        return self._set_view(view, self.cursor_row)

    def _set_view(self, view: np.ndarray, keep_row: int | None) -> bool:
        """Install ``view`` with the cursor on ``keep_row`` when it is shown; True when the row changed."""
        self.view = view
        where = np.full(self.n, -1, dtype=np.intp)
        where[view] = np.arange(len(view), dtype=np.intp)
        self._where = where
        if keep_row is not None and where[keep_row] >= 0:
            self._cursor = int(where[keep_row])
        else:
            self._cursor = min(self._cursor, max(0, len(view) - 1))
        return self.cursor_row != keep_row

    # ------------------------------------------------------------------ cursor

    @property
    def cursor_index(self) -> int:
        """Index of the cursor in the view (0 = top row)."""
        return self._cursor

    @property
    def cursor_row(self) -> int | None:
        """Data row position under the cursor, ``None`` when the view is empty."""
        if len(self.view) == 0:
            return None
        return int(self.view[self._cursor])

    def move_cursor(self, index: int) -> bool:
        """Put the cursor on view index ``index`` (clamped to the view); True when it moved."""
        if len(self.view) == 0:
            return False
        index = min(max(0, int(index)), len(self.view) - 1)
        if index == self._cursor:
            return False
        self._cursor = index
        return True

    def index_of(self, position: int) -> int | None:
        """View index of data row ``position``, ``None`` when it is not in the view."""
        if not 0 <= position < self.n or self._where[position] < 0:
            return None
        return int(self._where[position])

    def index_of_id(self, row_id: Any) -> int | None:
        """View index of the row whose ``id`` column equals ``str(row_id)`` (``None``: not in the view).

        With a repeated id, the first such row in display order. Costs one vectorised comparison
        (a few ms at 100k rows).
        """
        ids = self.arrays.get("id")
        if ids is None:
            return None
        if ids.dtype.kind != "O":  # ids that are not text: compare their text form
            if self._id_text is None:
                self._id_text = ids.astype(str)
            ids = self._id_text
        hits = np.flatnonzero(ids == str(row_id))
        shown = self._where[hits]
        shown = shown[shown >= 0]
        return int(shown.min()) if shown.size else None

    def next_index(self, wanted: np.ndarray, *, after: int | None = None) -> int | None:
        """First view index after ``after`` (default: the cursor) whose row has ``wanted[position]``.

        Wraps around to the top; ``None`` when no row of the view is wanted.
        """
        if len(self.view) == 0:
            return None
        start = self._cursor if after is None else after
        hits = np.flatnonzero(np.asarray(wanted, dtype=bool)[self.view])
        if hits.size == 0:
            return None
        later = hits[hits > start]
        return int(later[0] if later.size else hits[0])

    def next_by(self, column: str, descending: bool, wanted: np.ndarray) -> int | None:
        """View index of the next shown row with ``wanted[position]`` in the order of ``column``.

        "Next" follows the order of ``column`` (``descending``: largest first) from the cursor's row, not
        the view's order, so it works under any sort; it wraps around to the start of that order.
        ``None`` when no shown row is wanted (the cursor's own row counts only when it is the last one).
        """
        if len(self.view) == 0:
            return None
        order = self._sorted(column, descending)
        ok = np.asarray(wanted, dtype=bool)[order] & (self._where[order] >= 0)
        hits = np.flatnonzero(ok)
        if hits.size == 0:
            return None
        current = self.cursor_row
        rank = int(np.flatnonzero(order == current)[0]) if current is not None else -1
        later = hits[hits > rank]
        return int(self._where[order[later[0] if later.size else hits[0]]])
