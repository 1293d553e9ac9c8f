"""Which rows the inspector shows and in what order: queries that combine filters, presets, the sort cycle.

A :class:`Query` is a set of conditions a row must all meet (which rows: review or held-out; flagged,
support, LOO miss; no decision yet; a class; a decision; a score at or above a cut). :class:`RowFilters`
turns a query into a boolean row mask from the findings columns and the decisions (plain numpy, no
drawing) and names the presets the filter key offers. Held-out rows are not review rows: the default
query leaves them out, and they have a preset of their own.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, replace

import numpy as np
import pandas as pd

from holdfast.ui.session import USER_DECISIONS, DecisionBook

#: Row kinds a query can ask for: key -> title.
KINDS: dict[str, str] = {
    "any": "",
    "flagged": "flagged",
    "support": "support rows",
    "loo_miss": "LOO misses",
    "held_out_miss": "held-out errors",
}
#: Which rows: key -> title.
SCOPES: dict[str, str] = {"review": "review rows", "held_out": "held-out rows", "all": "all rows"}
#: Sort direction a column starts with when chosen (True: largest first).
SORT_DESCENDING: dict[str, bool] = {"score": True, "flip_count": True, "alpha": True, "support": True}


def next_sort(keys: Sequence[str], current: str | None) -> tuple[str, bool]:
    """The column after ``current`` in ``keys`` (the first when unsorted) and the direction it starts in."""
    keys = list(keys)
    nxt = keys[(keys.index(current) + 1) % len(keys)] if current in keys else keys[0]
    return nxt, SORT_DESCENDING.get(nxt, False)


@dataclass(frozen=True)
class Query:
    """Conditions a row must all meet to be shown (``None``/``False``/``"any"``: no condition)."""

    scope: str = "review"
    kind: str = "any"
    undecided: bool = False
    label: str | None = None
    decision: str | None = None
    min_score: float | None = None

    def title(self) -> str:
        """Words for the status line, e.g. ``flagged · no decision yet · label juice · score ≥ 0.5``."""
        parts = [KINDS[self.kind]] if self.kind != "any" else []
        if self.undecided:
            parts.append("no decision yet")
        if self.label is not None:
            parts.append(f"label {self.label}")
        if self.decision is not None:
            parts.append(f"decision {self.decision}")
        if self.min_score is not None:
            parts.append(f"score ≥ {self.min_score:g}")
        if not parts or (self.scope == "held_out" and self.kind != "held_out_miss"):
            parts.insert(0, SCOPES[self.scope])
        return " · ".join(parts)


class RowFilters:
    """Row masks for queries, from the rows of a scan and the decisions.

    Masks from the findings columns are computed once and kept; masks from decisions are read from the
    book each time (decisions change). ``review`` marks the review rows (every row but the held-out
    ones).
    """

    def __init__(self, rows: pd.DataFrame, book: DecisionBook, classes: Sequence[str]) -> None:
        self.rows = rows
        self.book = book
        self.classes = [str(c) for c in classes]
        self.labels = rows["label"].astype(str).to_numpy(dtype=object)
        self.held_out = rows["held_out"].to_numpy(dtype=bool)
        self.review = ~self.held_out
        self.has_held_out = bool(self.held_out.any())
        self.score = rows["score"].to_numpy(dtype=float, na_value=np.nan)
        self._masks: dict[str, np.ndarray] = {}

    # ------------------------------------------------------------------ queries
    @property
    def default(self) -> Query:
        """What the inspector shows first: the review rows (every row when nothing is held out)."""
        return Query(scope="review" if self.has_held_out else "all")

    def presets(self) -> dict[str, Query]:
        """The filter key's list: key -> query, the work queue first."""
        base = self.default
        out = {
            "queue": replace(base, scope="review", kind="flagged", undecided=True),
            "all": Query(scope="all"),
        }
        if self.has_held_out:
            out = {
                "queue": out["queue"],
                "review": base,
                "held_out": Query(scope="held_out"),
                "all": out["all"],
            }
        for kind in ("support", "loo_miss", "held_out_miss", "flagged"):
            if kind != "held_out_miss" or self.has_held_out:
                out[kind] = replace(
                    base, kind=kind, scope="held_out" if kind == "held_out_miss" else base.scope
                )
        out["undecided"] = replace(base, undecided=True)
        for c in self.classes:
            out[f"label:{c}"] = replace(base, label=c)
        for d in USER_DECISIONS:
            out[f"decision:{d}"] = replace(base, decision=d)
        return out

    def key_of(self, query: Query) -> str:
        """The preset key of ``query``, ``"custom"`` when it is no preset."""
        return next((k for k, q in self.presets().items() if q == query), "custom")

    def title(self, query: Query) -> str:
        """How the status line and dialogs name ``query``."""
        if query == self.presets()["queue"]:
            return "review queue (flagged, no decision yet)"
        text = query.title()
        if self.has_held_out and query.scope == "all" and text != SCOPES["all"]:
            text += " (held-out rows too)"
        return text

    # ------------------------------------------------------------------ masks
    def _static(self, key: str) -> np.ndarray:
        """Masks that depend on the findings only (computed once)."""
        if key not in self._masks:
            rows = self.rows
            if key == "support":
                mask = rows["support"].to_numpy(dtype=bool)
            elif key in ("loo_miss", "held_out_miss"):
                # loo_miss on a held-out row is the final model's error there, not a LOO miss
                held = self.held_out
                mask = rows["loo_miss"].to_numpy(dtype=bool) & (held if key == "held_out_miss" else ~held)
            elif key == "flagged":
                mask = rows["flag_names"].fillna("").to_numpy(dtype=object) != ""
            else:
                mask = self.labels == key.removeprefix("label:")
            self._masks[key] = np.asarray(mask, dtype=bool)
        return self._masks[key]

    def mask(self, query: Query) -> np.ndarray | None:
        """Boolean row mask of ``query`` (None: every row)."""
        parts: list[np.ndarray] = []
        if query.scope == "review" and self.has_held_out:
            parts.append(self.review)
        elif query.scope == "held_out":
            parts.append(self.held_out)
        if query.kind != "any":
            parts.append(self._static(query.kind))
        if query.undecided:
            parts.append(self.book.mask(""))
        if query.label is not None:
            parts.append(self._static(f"label:{query.label}"))
        if query.decision is not None:
            parts.append(self.book.mask(query.decision))
        if query.min_score is not None:
            with np.errstate(invalid="ignore"):
                parts.append(self.score >= query.min_score)
        if not parts:
            return None
        mask = parts[0].copy()
        for part in parts[1:]:
            mask &= part
        return mask

    def count(self, query: Query) -> int:
        """Rows ``query`` shows."""
        mask = self.mask(query)
        return len(self.rows) if mask is None else int(mask.sum())

    def choices(self) -> list[tuple[str, str]]:
        """``(key, "title (count)")`` for every preset, and the entry that opens the combining dialog."""
        out = [(k, f"{self.title(q)} ({self.count(q):,})") for k, q in self.presets().items()]
        out.append(("custom", "combine filters… (flagged, no decision, class, score cut, …)"))
        return out

    def review_positions(self, positions: np.ndarray) -> np.ndarray:
        """The review rows among ``positions`` (held-out rows left out)."""
        return positions[self.review[positions]]
