"""Which rows the inspector shows and in what order: the filters, their masks and titles, the sort cycle.

:class:`RowFilters` turns a filter key into a boolean row mask from the findings columns and the
decisions (plain numpy, no drawing); the screen hands the mask to the row table. Filter keys are
``all``, ``support``, ``loo_miss``, ``held_out_miss``, ``flagged``, ``undecided``, ``label:CLASS`` and
``decision:DECISION``.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd

from holdfast.ui.session import USER_DECISIONS, DecisionBook

#: Filters that need no argument: key -> title.
FILTERS: dict[str, str] = {
    "all": "all rows",
    "support": "support rows",
    "loo_miss": "LOO misses",
    "held_out_miss": "held-out errors",
    "flagged": "flagged rows",
    "undecided": "rows without a decision",
}
#: Sort direction a column starts with when chosen (True: largest first).
SORT_DESCENDING: dict[str, bool] = {"score": True, "flip_count": True, "alpha": True, "support": True}


def next_sort(keys: Sequence[str], current: str | None) -> tuple[str, bool]:
    """The column after ``current`` in ``keys`` (the first when unsorted) and the direction it starts in."""
    keys = list(keys)
    nxt = keys[(keys.index(current) + 1) % len(keys)] if current in keys else keys[0]
    return nxt, SORT_DESCENDING.get(nxt, False)


class RowFilters:
    """Row masks for the filter keys, from the rows of a scan and the decisions.

    Masks from the findings columns are computed once and kept; masks from decisions are read from the
    book each time (decisions change).
    """

    def __init__(self, rows: pd.DataFrame, book: DecisionBook, classes: Sequence[str]) -> None:
        self.rows = rows
        self.book = book
        self.classes = [str(c) for c in classes]
        self.labels = rows["label"].astype(str).to_numpy(dtype=object)
        self._masks: dict[str, np.ndarray] = {}

    @staticmethod
    def title(key: str) -> str:
        """How the status line names the filter ``key``."""
        if key in FILTERS:
            return FILTERS[key]
        kind, _, value = key.partition(":")
        return f"label {value}" if kind == "label" else f"decision {value}"

    def mask(self, key: str) -> np.ndarray | None:
        """Boolean row mask of a filter (None: all rows)."""
        if key == "all":
            return None
        if key == "undecided":
            return self.book.mask("")
        kind, _, value = key.partition(":")
        if kind == "decision":
            return self.book.mask(value)
        if key not in self._masks:
            rows = self.rows
            if key == "support":
                mask = rows["support"].to_numpy(dtype=bool)
            elif key in ("loo_miss", "held_out_miss"):
                # loo_miss on a held-out row is the final model's error there, not a LOO miss
                held = rows["held_out"].to_numpy(dtype=bool)
                mask = rows["loo_miss"].to_numpy(dtype=bool) & (held if key == "held_out_miss" else ~held)
            elif key == "flagged":
                mask = rows["flag_names"].fillna("").to_numpy(dtype=object) != ""
            else:
                mask = self.labels == value
            self._masks[key] = np.asarray(mask, dtype=bool)
        return self._masks[key]

    def count(self, key: str) -> int:
        """Rows the filter ``key`` shows."""
        mask = self.mask(key)
        return len(self.rows) if mask is None else int(mask.sum())

    def choices(self) -> list[tuple[str, str]]:
        """``(key, "title (count)")`` for every filter that applies to this scan, for a choice dialog."""
        held_out = bool(self.rows["held_out"].any())
        keys = [k for k in FILTERS if k != "held_out_miss" or held_out]
        keys += [f"label:{c}" for c in self.classes]
        keys += [f"decision:{d}" for d in USER_DECISIONS]
        return [(k, f"{self.title(k)} ({self.count(k):,})") for k in keys]
