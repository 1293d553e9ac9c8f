"""The what-if screen: the bounds and LOO errors before and after the decisions, and the rows that change.

It shows a ``holdfast.review.whatif.WhatIf`` result: ``comparison`` rows ``(name, before, after)``,
``changed`` (id, row, label_before, label_after, status_before, status_after), and the counts of
excluded and relabelled rows.
"""

from __future__ import annotations

import math
from typing import Any, ClassVar

import numpy as np
import pandas as pd
from rich.table import Table
from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import VerticalScroll
from textual.screen import Screen
from textual.widgets import Footer, Static

from holdfast.review.whatif import WHATIF_CAUTION
from holdfast.ui.textsafe import safe_text
from holdfast.ui.widgets.columns import ColumnSpec
from holdfast.ui.widgets.row_table import RowTable, movement_bindings

CHANGED_COLUMNS: tuple[ColumnSpec, ...] = (
    ColumnSpec("id", "id", None, "left"),
    ColumnSpec("label_before", "label before", None, "left"),
    ColumnSpec("label_after", "label after", None, "left"),
    ColumnSpec("decision", "decision", None, "left"),
    ColumnSpec("status_before", "before", None, "left"),
    ColumnSpec("status_after", "after", None, "left"),
)


def _fmt(value: Any) -> str:
    """A number as the comparison shows it: counts as integers, rates with four decimals."""
    if value is None:
        return ""
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, int):
        return f"{value:,}"
    if isinstance(value, float):
        if math.isnan(value):
            return ""
        return f"{value:,.0f}" if value.is_integer() and abs(value) >= 1 else f"{value:.4f}"
    return safe_text(value)


def _change(before: Any, after: Any) -> str:
    try:
        b, a = float(before), float(after)
    except (TypeError, ValueError):
        return ""
    if math.isnan(a) or math.isnan(b):
        return ""
    diff = a - b
    if diff == 0:
        return "="
    return f"{diff:+,.0f}" if float(diff).is_integer() and abs(diff) >= 1 else f"{diff:+.4f}"


def held_out_status(changed: pd.DataFrame) -> pd.DataFrame:
    """The changed rows with a held-out row's status in its own words: it is never trained on, so it is
    not a support row and has no LOO prediction; what changes there is the final model's prediction."""
    if changed.empty or "held_out" not in changed:
        return changed
    held = changed["held_out"].fillna(False).to_numpy(dtype=bool)
    if not held.any():
        return changed
    out = changed.copy()
    for side in ("before", "after"):
        miss, pred = out.get(f"loo_miss_{side}"), out.get(f"prediction_{side}")
        if miss is None or pred is None:
            continue
        text = np.array(out[f"status_{side}"].astype(object).to_numpy(), dtype=object)
        for i in np.flatnonzero(held):
            if text[i] == "excluded" or pd.isna(miss.iat[i]):
                continue
            verdict = "error" if bool(miss.iat[i]) else "correct"
            text[i] = f"held out, {verdict}, predicted {pred.iat[i]}"
        out[f"status_{side}"] = text
    return out


def comparison_table(rows: list[tuple[str, Any, Any]]) -> Table:
    """A table of ``(name, before, after)`` with the change."""
    table = Table(expand=False, show_edge=False, pad_edge=False)
    table.add_column("", no_wrap=True)
    table.add_column("before", justify="right", no_wrap=True)
    table.add_column("after", justify="right", no_wrap=True)
    table.add_column("change", justify="right", no_wrap=True)
    for name, before, after in rows:
        table.add_row(
            Text(safe_text(name)), Text(_fmt(before)), Text(_fmt(after)), Text(_change(before, after))
        )
    return table


class ChangedRowsTable(RowTable):
    """The changed rows, with the movement keys kept out of the footer (enter does nothing here)."""

    BINDINGS: ClassVar[list[BindingType]] = movement_bindings("whatif", show=False, choose="")


class WhatIfScreen(Screen[None]):
    """Before/after comparison of a what-if refit. Escape or q goes back to the rows."""

    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("escape,q", "close", "Back to the rows", id="whatif.close"),
    ]

    def __init__(self, result: Any) -> None:
        super().__init__(id="what-if")
        self.result = result

    def compose(self) -> ComposeResult:
        r = self.result
        excluded = int(getattr(r, "excluded", 0) or 0)
        relabelled = int(getattr(r, "relabelled", 0) or 0)
        changed = getattr(r, "changed", None)
        changed = (
            changed
            if isinstance(changed, pd.DataFrame)
            else pd.DataFrame(columns=[c.key for c in CHANGED_COLUMNS])
        )
        with VerticalScroll(id="what-if-body"):
            yield Static(
                Text(
                    f"What-if: the model refitted with your decisions applied "
                    f"({relabelled:,} relabelled, {excluded:,} excluded)"
                ),
                classes="help-title",
            )
            caution = getattr(r, "caution", "") or WHATIF_CAUTION
            yield Static(Text(safe_text(caution)), id="what-if-caution", classes="caution")
            yield Static(comparison_table(list(getattr(r, "comparison", []) or [])), id="what-if-comparison")
            notes = [safe_text(n) for n in getattr(r, "notes", []) or []]
            unmatched = list(getattr(r, "unmatched", []) or [])
            if unmatched:
                notes.append(
                    f"{len(unmatched):,} decision(s) name ids that are not in the data; they were ignored"
                )
            if notes:
                yield Static(Text("\n".join(notes)), id="what-if-notes", classes="caution")
            yield Static(Text(f"Rows whose status changes: {len(changed):,}"), classes="help-heading")
            changed = held_out_status(changed)
            columns = [c for c in CHANGED_COLUMNS if c.key in changed.columns]
            yield ChangedRowsTable(
                changed.reset_index(drop=True),
                columns,
                id="what-if-changed",
                empty_text="No row changes status.",
            )
            yield Static(
                "Nothing here is saved or exported: it is a preview. escape goes back.", classes="dialog-hint"
            )
        yield Footer(show_command_palette=False)

    def on_mount(self) -> None:
        self.query_one("#what-if-changed", RowTable).focus()

    def action_close(self) -> None:
        self.dismiss(None)
