"""The inspect screen: overview, row table, row detail, status, and every decision key.

The screen composes the widgets and routes: keys go to :class:`holdfast.ui.decisions.DecisionActions`
(the journal), :class:`holdfast.ui.navigation.RowFilters` (which rows) and the row table (order, cursor);
long work runs as :mod:`holdfast.ui.jobs` in thread workers that post :mod:`holdfast.ui.messages`, and
the handlers here own the UI state. Keys are declared in :mod:`holdfast.ui.screens.inspect_keys`.
"""

from __future__ import annotations

import contextlib
from dataclasses import dataclass, replace
from functools import partial
from pathlib import Path
from typing import Any, ClassVar

import numpy as np
import pandas as pd
from rich.text import Text
from textual import on
from textual.app import ComposeResult
from textual.binding import BindingType
from textual.containers import Container, Horizontal
from textual.dom import DOMNode
from textual.screen import Screen
from textual.widgets import Footer, ProgressBar, Static

from holdfast.data.spec import Spec
from holdfast.ui import jobs
from holdfast.ui.decisions import CAUTION, CAUTION_SHORT, DecisionActions, Outcome
from holdfast.ui.evidence import row_score_parts
from holdfast.ui.messages import (
    error_line,
)
from holdfast.ui.navigation import Query, RowFilters
from holdfast.ui.screens.dialogs import ChoiceDialog, ConfirmDialog, TextDialog
from holdfast.ui.screens.inspect_keys import NEEDS_ROWS, InspectTable, screen_bindings
from holdfast.ui.screens.inspect_view import ViewActions
from holdfast.ui.screens.inspect_work import BackgroundWork
from holdfast.ui.session import DecisionBook, OpenedSession
from holdfast.ui.textsafe import literal, safe_text
from holdfast.ui.widgets.columns import ColumnSpec, format_float, format_text
from holdfast.ui.widgets.overview import OverviewPanel
from holdfast.ui.widgets.row_detail import RowDetailPanel
from holdfast.ui.widgets.row_table import RowTable

#: Columns of the row table, left to right (what an analyst reads first on the left).
TABLE_COLUMNS: tuple[ColumnSpec, ...] = (
    ColumnSpec("id", "id", None, "left"),
    ColumnSpec("label", "label", None, "left"),
    ColumnSpec("loo_prediction", "LOO pred", None, "left"),
    ColumnSpec("decision", "decision", 20, "left"),
    ColumnSpec("score", "score", 8, "right", lambda v: format_float(v, ".3f")),
    ColumnSpec("flag_names", "flags", 38, "left", lambda v: format_text(v).replace(",", " ")),
    ColumnSpec("flip_count", "flips", 5, "right"),
    ColumnSpec("margin", "margin", 7, "right", lambda v: format_float(v, "+.2f")),
    ColumnSpec("alpha", "alpha", 6, "right", lambda v: format_float(v, ".3g")),
    ColumnSpec("support", "supp", 4, "center"),
    ColumnSpec("prediction", "pred", None, "left"),
)
#: The same columns while the scan runs: the LOO columns and the score are provisional (marked *), and a
#: row whose refit has not arrived shows "…" as its LOO prediction.
PROVISIONAL_COLUMNS: tuple[ColumnSpec, ...] = tuple(
    replace(spec, title=spec.title + "*", formatter=lambda v: "…" if v is None or v is pd.NA else str(v))
    if spec.key == "loo_prediction"
    else replace(spec, title=spec.title + "*")
    if spec.key in ("score", "flip_count")
    else spec
    for spec in TABLE_COLUMNS
)
DETAIL_DELAY = 0.06  # seconds: the detail panel follows the cursor at most this often


@dataclass
class InspectContext:
    """What the screen works on: the data file, the spec, the open session, optionally a finished scan."""

    data_path: Path
    spec: Spec
    session: OpenedSession
    scan: Any = None
    #: the data already read by the launcher; used by the first scan only (a rescan reads the file again)
    frame: pd.DataFrame | None = None


class InspectScreen(BackgroundWork, ViewActions, Screen[None]):
    """Browse the rows of a scan, decide on them, export. See the help screen (?) for the keys."""

    HORIZONTAL_BREAKPOINTS: ClassVar[list[tuple[int, str]] | None] = [(0, "-narrow"), (130, "-wide")]
    VERTICAL_BREAKPOINTS: ClassVar[list[tuple[int, str]] | None] = [(0, "-short"), (40, "-tall")]
    BINDINGS: ClassVar[list[BindingType]] = screen_bindings()

    def __init__(self, context: InspectContext) -> None:
        super().__init__(id="inspect")
        self.context = context
        self.scan: Any = None
        self.book: DecisionBook | None = None
        self.actions: DecisionActions | None = None
        self.filters: RowFilters | None = None
        self.rows: pd.DataFrame | None = None
        self.view_query: Query = Query(scope="all")
        #: the rows come from provisional findings (the LOO refits are still running)
        self.provisional = False
        #: after a decision on one row, move on to the next undecided row by score (key a turns it on/off)
        self.auto_advance = False
        self._busy: str | None = None  # "scan" or "what-if" while a worker runs
        self._scan_state = "idle"  # idle, running, done, failed, cancelled
        self._generation = 0  # number of the current scan; older scans' messages are ignored
        self._detail_timer: Any = None
        self._detail_context: Any = None
        self._notices: list[str] = list(context.session.warnings)

    # ------------------------------------------------------------------ layout
    def compose(self) -> ComposeResult:
        yield Static(self._title_text(), id="title")
        yield OverviewPanel(id="overview")
        with Horizontal(id="progress-row"):
            yield Static(id="progress-label")
            yield ProgressBar(id="progress", show_eta=False)
        yield Static(id="notices")
        with Container(id="body"):
            yield InspectTable(id="rows", empty_text="Scanning… the rows appear when the scan has finished.")
            yield RowDetailPanel(id="detail")
        with Horizontal(id="status-row"):
            yield Static(id="status")
            yield Static(id="message")
        yield Static(CAUTION, id="caution", classes="caution")
        yield Static(CAUTION_SHORT, id="caution-short", classes="caution")
        yield Static(id="keys")
        yield Footer(show_command_palette=False)

    @property
    def table(self) -> InspectTable:
        return self.query_one("#rows", InspectTable)

    def command_nodes(self) -> list[DOMNode]:
        """The nodes whose keys the help screen and the command palette list."""
        return [self.table, self, self.app]

    def on_mount(self) -> None:
        self.query_one(OverviewPanel).show(None)
        self.query_one(RowDetailPanel).show(None)
        self._show_notices()
        self.table.focus()
        if self.context.scan is not None:
            self._scan_ready(self.context.scan)
        else:
            self.start_scan()

    def _title_text(self) -> Text:
        ctx = self.context
        learner = ctx.spec.learner
        params = " ".join(f"{k}={learner[k]}" for k in ("kernel", "C", "gamma") if k in learner)
        family = learner.get("family", "")
        text = f"holdfast · {ctx.data_path.name} · {family} {params} · session {ctx.session.path}"
        return literal(text)

    def _show_rows(self, findings: Any, *, provisional: bool) -> None:
        """Fill the table with the rows of ``findings``; later calls (same rows, new values) re-rank them
        and keep the filter and the cursor's row. The journal is lined up with the rows once."""
        rows = findings.rows
        first = self.book is None or self.rows is None or len(self.rows) != len(rows)
        self.rows = rows
        classes = [str(c) for c in findings.classes]
        if first:
            book = DecisionBook(self.context.session.journal, rows["id"].astype(str).to_numpy(dtype=object))
            self.book = book
            if book.unmatched:
                self._notices.append(
                    f"{len(book.unmatched):,} row(s) with decisions are not in this data (e.g. id "
                    f"{safe_text(book.unmatched[0])}); they stay in the session and in exported decisions"
                )
                self._show_notices()
        assert self.book is not None
        self.filters = RowFilters(rows, self.book, classes)
        self.actions = DecisionActions(self.book, self.filters.labels, classes)
        frame = pd.DataFrame({spec.key: rows[spec.key] for spec in TABLE_COLUMNS if spec.key != "decision"})
        frame["decision"] = self.book.text
        table = self.table
        columns = list(PROVISIONAL_COLUMNS if provisional else TABLE_COLUMNS)
        if first:
            table.set_data(frame, columns)
            table.sort_by("score", descending=True)
            self.view_query = self.filters.default
            table.set_filter(self.filters.mask(self.view_query))
            table.move_cursor(0)
        else:
            table.set_data(frame, columns, keep_view=True)
            table.set_filter(self.filters.mask(self.view_query))
        self.provisional = provisional
        with contextlib.suppress(Exception):  # a provisional summary it cannot draw: it waits for the next
            self.query_one(OverviewPanel).show(findings.summary)  # the margin histogram follows
        self._update_detail_now()
        self._update_status()
        self.refresh_bindings()
        if first:
            table.focus()

    def _scan_ready(self, scan: Any) -> None:
        """Show a finished scan: its rows (re-ranked in place when provisional rows were shown)."""
        self.scan = scan
        self._scan_state = "done"
        self._hide_progress()
        self._show_rows(scan.findings, provisional=False)
        self._detail_context = None
        self._run(partial(jobs.detail_job, scan, self._generation, self.post_message), "detail", "row detail")
        self._set_message(
            "Loaded the finished scan from the cache."
            if getattr(scan, "from_cache", False)
            else "Scan finished."
        )

    # ------------------------------------------------------------------ progress, notices, status
    def _set_progress(self, label: str, done: int | None, total: int | None) -> None:
        self.query_one("#progress-row").display = True
        self.query_one("#progress-label", Static).update(label)
        self.query_one("#progress", ProgressBar).update(total=total, progress=done or 0)

    def _hide_progress(self) -> None:
        self.query_one("#progress-row").display = False

    def _show_notices(self, extra: str | None = None, *, error: bool = False) -> None:
        lines = [f"⚠ {safe_text(n)}" for n in self._notices]
        if extra:
            lines.append(safe_text(extra))
        box = self.query_one("#notices", Static)
        box.set_class(error, "-error")
        box.update(Text("\n".join(lines)))
        box.display = bool(lines)

    def _set_message(self, text: str, *, error: bool = False) -> None:
        box = self.query_one("#message", Static)
        box.set_class(error, "-error")
        box.update(literal(text))

    @property
    def filter_key(self) -> str:
        """The preset key of the filter in force (``custom`` for a combined one)."""
        return self.filters.key_of(self.view_query) if self.filters is not None else "all"

    def _update_keys(self) -> None:
        """The one-line key hints of a narrow terminal (the footer's keys, in short)."""
        if self.book is None:
            text = "esc stop scan · ? help · ^q quit" if self._busy else "? help · ^r scan again · ^q quit"
        else:
            text = "rcxd decide · space next · f filter · e export · w what-if · ? help · ^p more"
        self.query_one("#keys", Static).update(text)

    def _update_status(self) -> None:
        self._update_keys()
        if self.book is None or self.filters is None:
            self.query_one("#status", Static).update("")
            return
        table, filters = self.table, self.filters
        view = table.view_positions() if table.row_count else np.zeros(0, dtype=np.intp)
        parts = [f"row {table.cursor_index + 1:,} of {len(view):,}" if len(view) else "no rows"]
        if self.provisional:
            parts.insert(0, "provisional ranking (* LOO refits still arriving)")
        if self.auto_advance:
            parts.append("auto-advance")
        if self.view_query != filters.default:
            parts.append(f"filter: {filters.title(self.view_query)}")
        if table.sort_key:
            title = next((s.title for s in TABLE_COLUMNS if s.key == table.sort_key), table.sort_key)
            parts.append(f"sort: {title} {'▼' if table.sort_descending else '▲'}")
        queue = filters.review_positions(view)
        if len(queue) != int(filters.review.sum()):
            done = int(np.count_nonzero(self.book.kind[queue] != ""))
            parts.append(f"this view: {done:,} of {len(queue):,} decided")
        review = filters.review
        counts = self.book.counts()
        decided = ", ".join(f"{k} {v:,}" for k, v in counts.items() if v)
        reviewed = int(np.count_nonzero(self.book.kind[review] != ""))
        what = "review rows" if filters.has_held_out else ""
        parts.append(f"decided {reviewed:,} of {int(review.sum()):,}{' ' + what if what else ''}")
        if decided:
            parts[-1] += f" ({decided})"
        self.query_one("#status", Static).update(literal(" · ".join(parts)))

    # ------------------------------------------------------------------ table events, detail panel
    @on(RowTable.CursorMoved)
    def _cursor_moved(self, event: RowTable.CursorMoved) -> None:
        self._update_status()
        self._schedule_detail()

    def _schedule_detail(self) -> None:
        """Redraw the row detail shortly (at most every DETAIL_DELAY), keeping keys light."""
        if self._detail_timer is None:
            self._detail_timer = self.set_timer(DETAIL_DELAY, self._update_detail_now)

    @on(RowTable.SortChanged)
    def _sort_changed(self, event: RowTable.SortChanged) -> None:
        self._update_status()

    @on(RowTable.RowChosen)
    def _row_chosen(self, event: RowTable.RowChosen) -> None:
        self._toggle_maximized(self.query_one(RowDetailPanel))

    def _update_detail_now(self) -> None:
        self._detail_timer = None
        panel = self.query_one(RowDetailPanel)
        position = self.table.cursor_row
        if self.rows is not None and position is not None:
            margin = self.rows["margin"].iat[position]
            self.query_one(OverviewPanel).set_current(margin, str(self.rows["label"].iat[position]))
        if not panel.display:
            return
        if self._detail_context is None or self.book is None or position is None:
            waiting = self.book is not None and self.scan is None
            panel.show(None, empty="The row detail follows when the scan has finished." if waiting else None)
            return
        try:
            detail = self._detail_context.row_detail(position)
        except Exception as exc:  # one row that cannot be explained must not stop the app
            panel.show(None)
            self._set_message(f"Row detail failed: {error_line(exc)}", error=True)
            return
        text, note = self.book.text[position], self.book.note(position)
        parts, pending = row_score_parts(self.rows, position)
        panel.show(
            detail, decision=(f"{text} {note}" if note else text) or None, parts=parts, provisional=pending
        )

    # ------------------------------------------------------------------ actions: availability
    def check_action(self, action: str, parameters: tuple[object, ...]) -> bool | None:
        if action in ("export", "what_if"):
            return self.scan is not None  # they need the finished scan
        if action in NEEDS_ROWS:
            return self.book is not None  # hidden until there are rows to act on
        if action == "cancel":
            return self._busy is not None
        if action == "restore":
            return self.maximized is not None
        if action == "rescan":
            return self._scan_state in ("failed", "cancelled")
        return True

    def _cursor_position(self) -> int | None:
        position = self.table.cursor_row
        if position is None:
            self._set_message("No row under the cursor.")
        return position

    # ------------------------------------------------------------------ actions: decisions
    def action_confirm(self) -> None:
        self._decide_cursor("confirm")

    def action_exclude(self) -> None:
        self._decide_cursor("exclude")

    def action_defer(self) -> None:
        self._decide_cursor("defer")

    def action_clear(self) -> None:
        self._decide_cursor("clear")

    def _decide_cursor(self, decision: str) -> None:
        position = self._cursor_position()
        if position is not None:
            self._decide([position], decision, None)

    def action_relabel(self) -> None:
        position = self._cursor_position()
        if position is None or self.actions is None:
            return
        others = self.actions.relabel_targets(position)
        if len(others) == 1:
            self._decide([position], "relabel", others[0])
            return
        rid, current = self.actions.row_id(position), self.actions.labels[position]
        title = Text(f"Relabel row {safe_text(rid)} (label {safe_text(current)}) to:")

        def chosen(label: str | None) -> None:
            if label is not None:
                self._decide([position], "relabel", label)

        self.app.push_screen(ChoiceDialog(title, [(c, c) for c in others], id="relabel-dialog"), chosen)

    def _decide(self, positions: list[int] | np.ndarray, decision: str, new_label: str | None) -> bool:
        """Commit a decision for ``positions`` to the journal, then show it. False when it was not saved.

        The cursor stays on its row, so that a note (n) or an undo (u) right after goes to the same row.
        """
        assert self.actions is not None
        saved = self._show_outcome(self.actions.decide(positions, decision, new_label))
        if saved and self.auto_advance and len(positions) == 1 and decision != "clear":
            self.action_next()
        return saved

    def _show_outcome(self, outcome: Outcome) -> bool:
        """Redraw the rows an action changed and say what happened; False when nothing was saved."""
        assert self.book is not None
        self._set_message(outcome.message, error=outcome.error)
        if outcome.error:
            self.app.bell()
            return False
        positions = outcome.changed
        if len(positions):
            self.table.update_values("decision", positions, self.book.text[positions])
            cursor = self.table.cursor_row
            if cursor is not None and bool(np.any(positions == cursor)):
                self._schedule_detail()
        if outcome.move_to is not None:
            self.table.move_to_position(outcome.move_to)  # the detail follows via CursorMoved
        self._update_status()
        self.refresh_bindings()
        return True

    def action_note(self) -> None:
        position = self._cursor_position()
        if position is None or self.actions is None:
            return
        actions = self.actions
        title = Text(f"Note for row {safe_text(actions.row_id(position))} (empty removes the note)")

        def done(text: str | None) -> None:
            if text is not None:
                self._show_outcome(actions.set_note(position, text))

        self.app.push_screen(TextDialog(title, value=actions.book.note(position), id="note-dialog"), done)

    def action_undo(self) -> None:
        assert self.actions is not None
        self._show_outcome(self.actions.undo())

    def action_redo(self) -> None:
        assert self.actions is not None
        self._show_outcome(self.actions.redo())

    def action_bulk(self) -> None:
        assert self.actions is not None
        actions = self.actions
        assert self.filters is not None
        filters = self.filters
        positions = self.table.view_positions()
        review = filters.review_positions(positions)
        if len(positions) == 0:
            self._set_message("No rows in this view.")
            return
        if len(review) == 0:
            self._set_message("Every row in this view is held out: bulk decisions reach review rows only.")
            return
        held = (
            f"; {len(positions) - len(review):,} held-out rows are left out"
            if len(review) < len(positions)
            else ""
        )
        what = filters.title(self.view_query)
        title = f"One decision for all {len(review):,} review rows in this view ({what}{held}):"

        def chosen(key: str | None) -> None:
            if key is None:
                return
            plan = actions.bulk_plan(positions, key, filters.review)
            if isinstance(plan, str):
                self._set_message(plan)
                return

            def confirmed(yes: bool | None) -> None:
                if yes and self._decide(plan.targets, plan.decision, plan.new_label):
                    self._apply_query(self.view_query)

            self.app.push_screen(
                ConfirmDialog(plan.question, yes="Apply", no="Cancel", id="bulk-confirm"), confirmed
            )

        self.app.push_screen(ChoiceDialog(title, actions.bulk_choices(), id="bulk-dialog"), chosen)
