"""The inspect screen: overview, row table, row detail, status, and every decision key.

The scan runs in a thread worker that posts :mod:`holdfast.ui.messages`; the handlers here own the UI
state. Each decision goes through :class:`holdfast.ui.session.DecisionBook`, which commits it to the
journal before this screen redraws the row.
"""

from __future__ import annotations

import importlib.util
import sqlite3
from dataclasses import dataclass
from pathlib import Path
from typing import Any, ClassVar

import numpy as np
import pandas as pd
from rich.text import Text
from textual import on, work
from textual.app import ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import Container, Horizontal
from textual.dom import DOMNode
from textual.screen import Screen
from textual.widgets import Footer, ProgressBar, Static
from textual.worker import Worker, get_current_worker

from holdfast.data.spec import Spec
from holdfast.errors import Cancelled, UserError
from holdfast.ui.commands import key_entries
from holdfast.ui.messages import (
    DetailReady,
    ExportFailed,
    ExportFinished,
    ScanCancelled,
    ScanFailed,
    ScanFinished,
    ScanProgress,
    Throttle,
    WhatIfFailed,
    WhatIfFinished,
    WhatIfProgress,
    error_line,
)
from holdfast.ui.screens.dialogs import ChoiceDialog, ConfirmDialog, TextDialog
from holdfast.ui.screens.export import ExportDialog, ExportRequest
from holdfast.ui.session import USER_DECISIONS, DecisionBook, OpenedSession, decision_text
from holdfast.ui.textsafe import literal, safe_text
from holdfast.ui.widgets.overview import OverviewPanel
from holdfast.ui.widgets.row_detail import RowDetailPanel
from holdfast.ui.widgets.row_table import ColumnSpec, RowTable, format_float, format_text

CAUTION = (
    "Flags are evidence, not proof of a wrong label. In regulated data (medical, credit, safety) "
    "label changes follow the domain's own review."
)

#: Columns of the row table, left to right (what an analyst reads first on the left).
TABLE_COLUMNS: tuple[ColumnSpec, ...] = (
    ColumnSpec("id", "id", None, "left"),
    ColumnSpec("label", "label", None, "left"),
    ColumnSpec("loo_prediction", "LOO pred", None, "left"),
    ColumnSpec("decision", "decision", 20, "left"),
    ColumnSpec("score", "score", 7, "right", lambda v: format_float(v, ".3f")),
    ColumnSpec("flags", "flags", 38, "left", lambda v: format_text(v).replace(",", " ")),
    ColumnSpec("flip_count", "flips", 5, "right"),
    ColumnSpec("margin", "margin", 7, "right", lambda v: format_float(v, "+.2f")),
    ColumnSpec("alpha", "alpha", 6, "right", lambda v: format_float(v, ".3g")),
    ColumnSpec("support", "supp", 4, "center"),
    ColumnSpec("prediction", "pred", None, "left"),
)
#: Sort direction a column starts with when chosen (True: largest first).
SORT_DESCENDING: dict[str, bool] = {"score": True, "flip_count": True, "alpha": True, "support": True}
#: Filters that need no argument: key -> title.
FILTERS: dict[str, str] = {
    "all": "all rows",
    "support": "support rows",
    "loo_miss": "LOO misses",
    "held_out_miss": "held-out errors",
    "flagged": "flagged rows",
    "undecided": "rows without a decision",
}
#: Actions that need a finished scan.
NEEDS_ROWS = frozenset(
    {
        "relabel",
        "confirm",
        "exclude",
        "defer",
        "note",
        "clear",
        "undo",
        "redo",
        "bulk",
        "filter",
        "sort",
        "reverse",
        "goto",
        "export",
        "what_if",
    }
)
DETAIL_DELAY = 0.06  # seconds: the detail panel follows the cursor at most this often


def _module_exists(name: str) -> bool:
    try:
        return importlib.util.find_spec(name) is not None
    except ModuleNotFoundError:
        return False


def _fmt_seconds(seconds: float | None) -> str:
    if seconds is None:
        return ""
    s = max(0, round(seconds))
    return f"{s // 60} min {s % 60:02d} s" if s >= 60 else f"{s} s"


@dataclass
class InspectContext:
    """What the screen works on: the data file, the spec, the open session, optionally a finished scan."""

    data_path: Path
    spec: Spec
    session: OpenedSession
    scan: Any = None
    #: the data already read by the launcher; used by the first scan only (a rescan reads the file again)
    frame: pd.DataFrame | None = None


class InspectTable(RowTable):
    """The row table with its movement keys kept out of the footer (the help screen lists them)."""

    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("up", "cursor_up", "Up", id="row_table.cursor_up", show=False),
        Binding("down", "cursor_down", "Down", id="row_table.cursor_down", show=False),
        Binding("pageup", "cursor_page_up", "Page up", id="row_table.page_up", show=False),
        Binding("pagedown", "cursor_page_down", "Page down", id="row_table.page_down", show=False),
        Binding("home", "cursor_first", "First row", id="row_table.first", show=False),
        Binding("end", "cursor_last", "Last row", id="row_table.last", show=False),
        Binding(
            "enter",
            "choose_row",
            "Enlarge detail",
            id="row_table.choose",
            show=False,
            tooltip="Show the row detail full screen (escape returns)",
        ),
    ]


def bulk_question(decision: str, new_label: str, count: int, skipped: int, replaced: int) -> str:
    """The confirmation asked before one decision is applied to many rows."""
    verb = {
        "relabel": f"Relabel {count:,} rows to {new_label}",
        "clear": f"Clear the decision of {count:,} rows",
    }.get(decision, f"{decision.capitalize()} {count:,} rows")
    lines = [f"{verb} (every row in this view)?"]
    if skipped:
        lines.append(f"{skipped:,} rows already labelled {new_label} are left as they are.")
    if replaced and decision != "clear":
        lines.append(f"{replaced:,} of them have another decision now; it will be replaced.")
    lines.append("One undo (u) takes the whole change back.")
    return "\n".join(lines)


class InspectScreen(Screen[None]):
    """Browse the rows of a scan, decide on them, export. See the help screen (?) for the keys."""

    HORIZONTAL_BREAKPOINTS: ClassVar[list[tuple[int, str]] | None] = [(0, "-narrow"), (130, "-wide")]
    VERTICAL_BREAKPOINTS: ClassVar[list[tuple[int, str]] | None] = [(0, "-short"), (40, "-tall")]

    BINDINGS: ClassVar[list[BindingType]] = [
        Binding(
            "question_mark",
            "help",
            "Help",
            id="holdfast.help",
            key_display="?",
            tooltip="All keys, what the columns and flags mean",
        ),
        Binding(
            "r",
            "relabel",
            "Relabel",
            id="holdfast.relabel",
            tooltip="Give the row another label (the other class; with more classes, pick one)",
        ),
        Binding("c", "confirm", "Confirm", id="holdfast.confirm", tooltip="The label is right"),
        Binding(
            "x",
            "exclude",
            "Exclude",
            id="holdfast.exclude",
            tooltip="Leave the row out of the cleaned data set",
        ),
        Binding("d", "defer", "Defer", id="holdfast.defer", tooltip="Decide later"),
        Binding("n", "note", "Note", id="holdfast.note", tooltip="Add or change the row's note"),
        Binding(
            "backspace,delete",
            "clear",
            "Clear",
            id="holdfast.clear",
            show=False,
            tooltip="Remove the row's decision (its note stays)",
        ),
        Binding(
            "u",
            "undo",
            "Undo",
            id="holdfast.undo",
            group=Binding.Group("Undo/redo"),
            tooltip="Undo the last decision (also across sessions)",
        ),
        Binding(
            "y",
            "redo",
            "Redo",
            id="holdfast.redo",
            group=Binding.Group("Undo/redo"),
            tooltip="Redo what undo took back",
        ),
        Binding(
            "b",
            "bulk",
            "Bulk",
            id="holdfast.bulk",
            tooltip="One decision for every row in the current view, after a confirmation",
        ),
        Binding(
            "f",
            "filter",
            "Filter",
            id="holdfast.filter",
            tooltip="Show only support rows, LOO misses, flagged or undecided rows, a class, a decision",
        ),
        Binding(
            "s",
            "sort",
            "Sort",
            id="holdfast.sort",
            group=Binding.Group("Sort"),
            tooltip="Sort by the next column (or click a column title)",
        ),
        Binding(
            "o",
            "reverse",
            "Reverse",
            id="holdfast.reverse",
            group=Binding.Group("Sort"),
            tooltip="Reverse the sort order",
        ),
        Binding(
            "g", "goto", "Go to id", id="holdfast.goto", show=False, tooltip="Jump to the row with a given id"
        ),
        Binding(
            "i",
            "toggle_detail",
            "Detail",
            id="holdfast.toggle_detail",
            show=False,
            tooltip="Hide or show the row detail (hidden: the table uses the whole width)",
        ),
        Binding(
            "v",
            "overview",
            "Overview",
            id="holdfast.overview",
            tooltip="Show the whole overview (bounds with sources, classes, margins); escape returns",
        ),
        Binding(
            "e",
            "export",
            "Export",
            id="holdfast.review.decisions",
            tooltip="Write the decisions, the cleaned data set or a report",
        ),
        Binding(
            "w",
            "what_if",
            "What-if",
            id="holdfast.what_if",
            tooltip="Refit with the decisions applied and compare the bounds and LOO errors",
        ),
        Binding(
            "escape",
            "cancel",
            "Cancel",
            id="holdfast.cancel",
            tooltip="Stop the running scan or what-if refit (finished refits are kept)",
        ),
        Binding(
            "ctrl+r",
            "rescan",
            "Resume scan",
            id="holdfast.rescan",
            tooltip="Start the scan again; it resumes from the refits already finished",
        ),
    ]

    def __init__(self, context: InspectContext) -> None:
        super().__init__(id="inspect")
        self.context = context
        self.scan: Any = None
        self.book: DecisionBook | None = None
        self.rows: pd.DataFrame | None = None
        self.label_classes: list[str] = []
        self.labels: np.ndarray = np.empty(0, dtype=object)
        self.filter_key = "all"
        self._masks: dict[str, np.ndarray] = {}
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
        yield Footer()

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

    # ------------------------------------------------------------------ scan worker
    def start_scan(self) -> None:
        """Start (or restart) the scan in a thread worker; the table fills in when it finishes."""
        self._generation += 1
        self._scan_state = "running"
        self._busy = "scan"
        self._set_progress("Reading the data and fitting the model…", None, None)
        self._set_message("")
        self.query_one("#notices", Static).remove_class("-error")
        self._show_notices()
        self.refresh_bindings()
        self._scan_worker(self._generation)

    @work(thread=True, exclusive=True, exit_on_error=False, group="scan", name="scan", description="scan")
    def _scan_worker(self, generation: int) -> None:
        from holdfast.engine.scan import run_scan

        worker = get_current_worker()
        throttle = Throttle()

        def progress(done: int, total: int, eta: float | None) -> None:
            if throttle.ready(done, total):
                self.post_message(ScanProgress(done, total, eta, generation))

        frame, self.context.frame = self.context.frame, None
        try:
            scan = run_scan(
                self.context.data_path,
                self.context.spec,
                progress=progress,
                should_cancel=lambda: worker.is_cancelled,
                frame=frame,
            )
        except Cancelled:
            self.post_message(ScanCancelled(generation))
            return
        except Exception as exc:  # shown in the UI; the app stays
            self.post_message(ScanFailed(error_line(exc), generation))
            return
        if worker.is_cancelled:
            self.post_message(ScanCancelled(generation))
        else:
            self.post_message(ScanFinished(scan, generation))

    def on_scan_progress(self, message: ScanProgress) -> None:
        if self._scan_state != "running" or message.generation != self._generation:
            return
        eta = _fmt_seconds(message.eta)
        label = f"Refitting without each support row: {message.done:,} of {message.total:,}"
        if eta and message.done < message.total:
            label += f" · about {eta} left"
        self._set_progress(label + " · escape cancels", message.done, message.total)

    def on_scan_finished(self, message: ScanFinished) -> None:
        if message.generation != self._generation:
            return
        self._busy = None
        self._scan_ready(message.scan)

    def on_scan_failed(self, message: ScanFailed) -> None:
        if message.generation != self._generation:
            return
        self._busy = None
        self._scan_state = "failed"
        self._hide_progress()
        self.table.empty_text = "No rows: the scan did not finish."
        self.table.refresh()
        self._show_notices(
            f"Scan failed: {message.text}. Fix the data or spec, then ctrl+r scans again.", error=True
        )
        self.refresh_bindings()

    def on_scan_cancelled(self, message: ScanCancelled) -> None:
        if message.generation != self._generation:
            return
        self._busy = None
        self._scan_state = "cancelled"
        self._hide_progress()
        self.table.empty_text = "No rows: the scan was cancelled."
        self.table.refresh()
        self._show_notices("Scan cancelled. Finished refits are kept; ctrl+r resumes the scan from them.")
        self.refresh_bindings()

    def _scan_ready(self, scan: Any) -> None:
        """Show a finished scan: fill the table, line the journal up with the rows."""
        self.scan = scan
        self._scan_state = "done"
        self._hide_progress()
        rows = scan.findings.rows
        self.rows = rows
        self.label_classes = [str(c) for c in scan.findings.classes]
        self.labels = rows["label"].astype(str).to_numpy(dtype=object)
        book = DecisionBook(self.context.session.journal, rows["id"].astype(str).to_numpy(dtype=object))
        self.book = book
        self._masks = {}
        frame = pd.DataFrame({spec.key: rows[spec.key] for spec in TABLE_COLUMNS if spec.key != "decision"})
        frame["decision"] = book.text
        table = self.table
        table.set_data(frame, list(TABLE_COLUMNS))
        table.sort_by("score", descending=True)
        table.move_cursor(0)
        self.query_one(OverviewPanel).show(scan.findings.summary)  # the margin histogram follows
        self._detail_context = None
        self._detail_worker(scan, self._generation)
        if book.unmatched:
            self._notices.append(
                f"{len(book.unmatched):,} row(s) with decisions are not in this data (e.g. id "
                f"{safe_text(book.unmatched[0])}); they stay in the session and in exported decisions"
            )
        self._show_notices()
        self._set_message(
            "Loaded the finished scan from the cache."
            if getattr(scan, "from_cache", False)
            else "Scan finished."
        )
        self._update_detail_now()
        self._update_status()
        self.refresh_bindings()
        table.focus()

    # ------------------------------------------------------------------ progress, notices, status
    def _set_progress(self, label: str, done: int | None, total: int | None) -> None:
        self.query_one("#progress-row").display = True
        self.query_one("#progress-label", Static).update(label)
        bar = self.query_one("#progress", ProgressBar)
        bar.update(total=total, progress=done or 0)

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

    def _update_status(self) -> None:
        if self.book is None or self.rows is None:
            self.query_one("#status", Static).update("")
            return
        table = self.table
        view = len(table.view_positions()) if table.row_count else 0
        total = table.row_count
        cursor = f"row {table.cursor_index + 1:,} of {view:,}" if view else "no rows"
        parts = [cursor]
        if self.filter_key != "all":
            parts.append(f"filter: {self._filter_title(self.filter_key)} ({total:,} rows in all)")
        if table.sort_key:
            title = next((s.title for s in TABLE_COLUMNS if s.key == table.sort_key), table.sort_key)
            parts.append(f"sort: {title} {'▼' if table.sort_descending else '▲'}")
        counts = self.book.counts()
        decided = ", ".join(f"{k} {v:,}" for k, v in counts.items() if v)
        parts.append(f"decided {self.book.decided:,} of {total:,}" + (f" ({decided})" if decided else ""))
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
        panel = self.query_one(RowDetailPanel)
        if self.maximized is panel:
            self.minimize()
        else:
            self.maximize(panel, container=False)

    @staticmethod
    def _margin_histogram(scan: Any) -> Any:
        """Margins of the training rows by label (the overview draws it)."""
        from holdfast.insight.histograms import histogram

        rows = scan.findings.rows
        train = ~rows["held_out"].to_numpy(dtype=bool)
        classes = [str(c) for c in scan.findings.classes]
        labels = pd.Categorical(rows["label"].astype(str)[train], categories=classes)
        return histogram(rows["margin"].to_numpy()[train], bins=24, by=labels, groups=classes)

    @work(
        thread=True,
        exclusive=True,
        exit_on_error=False,
        group="detail",
        name="detail",
        description="row detail",
    )
    def _detail_worker(self, scan: Any, generation: int) -> None:
        """Precompute the row detail and the margin histogram off the UI thread."""
        from holdfast.insight.detail import DetailContext

        try:
            hist = self._margin_histogram(scan)
        except Exception:  # the overview is drawn without it
            hist = None
        try:
            context = DetailContext.from_scan(scan)
        except Exception as exc:  # shown in the UI; the table works without the detail
            self.post_message(DetailReady(None, error_line(exc), generation, hist))
            return
        self.post_message(DetailReady(context, "", generation, hist))

    def on_detail_ready(self, message: DetailReady) -> None:
        if message.generation != self._generation or self.scan is None:
            return
        if message.margin_hist is not None:
            self.query_one(OverviewPanel).show(self.scan.findings.summary, message.margin_hist)
        if message.context is None:
            self._set_message(f"Row detail not available: {message.text}", error=True)
            return
        self._detail_context = message.context
        self._update_detail_now()

    def _update_detail_now(self) -> None:
        self._detail_timer = None
        panel = self.query_one(RowDetailPanel)
        position = self.table.cursor_row
        if not panel.display:
            return
        if self._detail_context is None or self.book is None or position is None:
            panel.show(None)
            return
        try:
            detail = self._detail_context.row_detail(position)
        except Exception as exc:  # one row that cannot be explained must not stop the app
            panel.show(None)
            self._set_message(f"Row detail failed: {error_line(exc)}", error=True)
            return
        text, note = self.book.text[position], self.book.note(position)
        panel.show(detail, decision=(f"{text} {note}" if note else text) or None)

    # ------------------------------------------------------------------ actions: availability
    def check_action(self, action: str, parameters: tuple[object, ...]) -> bool | None:
        if action in NEEDS_ROWS:
            return self.book is not None  # hidden until there are rows to act on
        if action == "cancel":
            return self._busy is not None
        if action == "rescan":
            return self._scan_state in ("failed", "cancelled")
        return True

    def _cursor_position(self) -> int | None:
        position = self.table.cursor_row
        if position is None:
            self._set_message("No row under the cursor.")
        return position

    def _row_id(self, position: int) -> str:
        assert self.book is not None
        return self.book.ids[position]

    # ------------------------------------------------------------------ actions: decisions
    def action_confirm(self) -> None:
        self._decide_cursor("confirm")

    def action_exclude(self) -> None:
        self._decide_cursor("exclude")

    def action_defer(self) -> None:
        self._decide_cursor("defer")

    def action_clear(self) -> None:
        self._decide_cursor("clear")

    def action_relabel(self) -> None:
        position = self._cursor_position()
        if position is None:
            return
        current = self.labels[position]
        others = [c for c in self.label_classes if c != current]
        if len(others) == 1:
            self._decide([position], "relabel", others[0])
            return
        title = Text(f"Relabel row {safe_text(self._row_id(position))} (label {safe_text(current)}) to:")

        def chosen(label: str | None) -> None:
            if label is not None:
                self._decide([position], "relabel", label)

        self.app.push_screen(ChoiceDialog(title, [(c, c) for c in others], id="relabel-dialog"), chosen)

    def _decide_cursor(self, decision: str) -> None:
        position = self._cursor_position()
        if position is not None:
            self._decide([position], decision, None)

    def _decide(self, positions: list[int] | np.ndarray, decision: str, new_label: str | None) -> bool:
        """Commit a decision for ``positions`` to the journal, then show it. False when it was not saved.

        The cursor stays on its row, so that a note (n) or an undo (u) right after goes to the same row.
        """
        assert self.book is not None
        try:
            changed = self.book.record(positions, decision, new_label)
        except (UserError, sqlite3.Error, OSError) as exc:
            self._set_message(f"Not saved: {error_line(exc)}", error=True)
            self.app.bell()
            return False
        self._show_changed(changed)
        if len(positions) == 1:
            p = int(positions[0])
            what = decision_text(self.book.state(p)) or "decision cleared"
            self._set_message(f"Saved: {self._row_id(p)} {what}")
        else:
            self._set_message(f"Saved: {decision} for {len(changed):,} rows")
        return True

    def _show_changed(self, positions: np.ndarray) -> None:
        assert self.book is not None
        if len(positions):
            self.table.update_values("decision", positions, self.book.text[positions])
            cursor = self.table.cursor_row
            if cursor is not None and bool(np.any(positions == cursor)):
                self._schedule_detail()
        self._update_status()
        self.refresh_bindings()

    def action_note(self) -> None:
        position = self._cursor_position()
        if position is None:
            return
        assert self.book is not None
        title = Text(f"Note for row {safe_text(self._row_id(position))} (empty removes the note)")

        def done(text: str | None) -> None:
            if text is None or self.book is None:
                return
            try:
                changed = self.book.set_note(position, text.strip())
            except (UserError, sqlite3.Error, OSError) as exc:
                self._set_message(f"Note not saved: {error_line(exc)}", error=True)
                return
            self._show_changed(changed)
            self._set_message(
                f"Saved note for {self._row_id(position)}"
                if text.strip()
                else f"Removed the note of {self._row_id(position)}"
            )

        self.app.push_screen(TextDialog(title, value=self.book.note(position), id="note-dialog"), done)

    def action_undo(self) -> None:
        self._undo_redo("undo")

    def action_redo(self) -> None:
        self._undo_redo("redo")

    def _undo_redo(self, which: str) -> None:
        assert self.book is not None
        try:
            changed, count = self.book.undo() if which == "undo" else self.book.redo()
        except (UserError, sqlite3.Error, OSError) as exc:
            self._set_message(f"{which.capitalize()} not saved: {error_line(exc)}", error=True)
            return
        if count == 0:
            self._set_message(f"Nothing to {which}.")
            return
        self._show_changed(changed)
        if len(changed):
            self.table.move_to_position(int(changed[0]))  # the detail follows via CursorMoved
        done = "Undone" if which == "undo" else "Redone"
        self._set_message(
            f"{done}: {count:,} row(s)"
            + ("" if len(changed) == count else f" ({count - len(changed):,} not in this data)")
        )

    def action_bulk(self) -> None:
        assert self.book is not None
        positions = self.table.view_positions()
        n = len(positions)
        if n == 0:
            self._set_message("No rows in this view.")
            return
        choices: list[tuple[str, str]] = [(d, d) for d in ("confirm", "exclude", "defer")]
        choices += [(f"relabel:{c}", f"relabel → {c}") for c in self.label_classes]
        choices.append(("clear", "clear the decision"))
        title = f"One decision for all {n:,} rows in this view ({self._filter_title(self.filter_key)}):"

        def chosen(key: str | None) -> None:
            if key is None:
                return
            decision, _, new_label = key.partition(":")
            targets = positions
            skipped = 0
            if decision == "relabel":
                keep = self.labels[positions] != new_label
                skipped = int(n - keep.sum())
                targets = positions[keep]
            if len(targets) == 0:
                self._set_message(f"Every row in this view is already labelled {new_label}.")
                return
            assert self.book is not None
            kinds = self.book.kind[targets]
            replaced = int(np.count_nonzero((kinds != "") & (kinds != decision)))
            question = bulk_question(decision, new_label, len(targets), skipped, replaced)

            def confirmed(yes: bool | None) -> None:
                if yes and self._decide(targets, decision, new_label or None):
                    self._apply_filter(self.filter_key)

            self.app.push_screen(
                ConfirmDialog(question, yes="Apply", no="Cancel", id="bulk-confirm"), confirmed
            )

        self.app.push_screen(ChoiceDialog(title, choices, id="bulk-dialog"), chosen)

    # ------------------------------------------------------------------ actions: view
    def _filter_title(self, key: str) -> str:
        if key in FILTERS:
            return FILTERS[key]
        kind, _, value = key.partition(":")
        return f"label {value}" if kind == "label" else f"decision {value}"

    def _mask(self, key: str) -> np.ndarray | None:
        """Boolean row mask of a filter, from the findings columns and the decisions (None: all rows)."""
        assert self.rows is not None and self.book is not None
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
                mask = rows["flags"].fillna("").to_numpy(dtype=object) != ""
            else:
                mask = self.labels == value
            self._masks[key] = np.asarray(mask, dtype=bool)
        return self._masks[key]

    def _apply_filter(self, key: str) -> None:
        self.filter_key = key
        self.table.set_filter(self._mask(key))
        self._update_status()
        self._schedule_detail()

    def action_filter(self) -> None:
        assert self.book is not None
        choices: list[tuple[str, str]] = []
        held_out = bool(self.rows is not None and self.rows["held_out"].any())
        for key in FILTERS:
            if key == "held_out_miss" and not held_out:
                continue
            mask = self._mask(key)
            count = self.table.row_count if mask is None else int(mask.sum())
            choices.append((key, f"{FILTERS[key]} ({count:,})"))
        for c in self.label_classes:
            choices.append((f"label:{c}", f"label {c} ({int(self._mask(f'label:{c}').sum()):,})"))  # type: ignore[union-attr]
        for d in USER_DECISIONS:
            choices.append((f"decision:{d}", f"decision {d} ({int(self.book.mask(d).sum()):,})"))

        def chosen(key: str | None) -> None:
            if key is not None:
                self._apply_filter(key)

        self.app.push_screen(
            ChoiceDialog("Show:", choices, highlighted=self.filter_key, id="filter-dialog"), chosen
        )

    def action_sort(self) -> None:
        keys = [s.key for s in TABLE_COLUMNS]
        current = self.table.sort_key
        nxt = keys[(keys.index(current) + 1) % len(keys)] if current in keys else keys[0]
        self.table.sort_by(nxt, descending=SORT_DESCENDING.get(nxt, False))

    def action_reverse(self) -> None:
        key = self.table.sort_key
        if key is None:
            self._set_message("Rows are in file order; press s to sort first.")
            return
        self.table.sort_by(key, descending=not self.table.sort_descending)

    def action_goto(self) -> None:
        def chosen(text: str | None) -> None:
            if not text or self.book is None:
                return
            row_id = text.strip()
            if self.table.jump_to_id(row_id):
                return
            if row_id in self.book.position:
                self._apply_filter("all")
                self.table.jump_to_id(row_id)
                self._set_message(f"Showing all rows: {row_id} was hidden by the filter.")
            else:
                self._set_message(f"No row with id {row_id}.", error=True)

        self.app.push_screen(
            TextDialog("Go to the row with id:", hint="enter jumps · escape cancels", id="goto-dialog"),
            chosen,
        )

    def action_toggle_detail(self) -> None:
        panel = self.query_one(RowDetailPanel)
        if self.maximized is panel:
            self.minimize()
        panel.display = not panel.display
        if panel.display:
            self._update_detail_now()

    def action_overview(self) -> None:
        panel = self.query_one(OverviewPanel)
        if self.maximized is panel:
            self.minimize()
        else:
            self.maximize(panel, container=False)

    def watch_maximized(self, maximized: Any) -> None:
        """The whole-screen overview shows each bound's full source; the compact one a short citation."""
        self.query_one(OverviewPanel).set_full(maximized is self.query_one(OverviewPanel))

    def action_help(self) -> None:
        from holdfast.ui.screens.help import HelpScreen

        entries = key_entries(self.app, self.command_nodes())
        self.app.push_screen(
            HelpScreen(entries, caution=CAUTION, session_path=str(self.context.session.path))
        )

    # ------------------------------------------------------------------ actions: workers
    def action_cancel(self) -> None:
        if self._busy == "scan":
            self.workers.cancel_group(self, "scan")
            self._set_progress("Cancelling after the current refit…", None, None)
        elif self._busy == "what-if":
            self.workers.cancel_group(self, "what-if")
            self._set_progress("Cancelling the what-if refit…", None, None)

    def action_rescan(self) -> None:
        self.start_scan()

    # ------------------------------------------------------------------ export
    def _report_reason(self) -> str | None:
        if not _module_exists("holdfast.output.report"):
            return "not available in this version yet"
        return None

    def action_export(self) -> None:
        reason = self._report_reason()
        unavailable = {"report": reason} if reason else {}

        def chosen(request: ExportRequest | None) -> None:
            if request is None:
                return
            if request.path.exists():

                def confirmed(yes: bool | None) -> None:
                    if yes:
                        self._export_worker(request, True)

                self.app.push_screen(
                    ConfirmDialog(
                        f"{safe_text(request.path)} already exists. Replace it?",
                        yes="Replace",
                        no="Keep it",
                        id="overwrite-confirm",
                    ),
                    confirmed,
                )
            else:
                self._export_worker(request, False)

        self.app.push_screen(ExportDialog(self.context.data_path, unavailable=unavailable), chosen)

    @work(
        thread=True, exclusive=True, exit_on_error=False, group="export", name="export", description="export"
    )
    def _export_worker(self, request: ExportRequest, force: bool) -> None:
        try:
            text = self._export(request, force)
        except Exception as exc:  # shown in the UI
            self.post_message(ExportFailed(f"Export failed: {error_line(exc)}"))
            return
        self.post_message(ExportFinished([request.path], text))

    def _export(self, request: ExportRequest, force: bool) -> str:
        from holdfast.output import tables as export

        journal = self.context.session.journal
        scan = self.scan
        path = request.path
        if request.kind == "decisions":
            export.export_decisions(journal, scan.findings.rows, path, force=force)
            count = len(journal.current(include_notes_only=True))
            return f"Wrote {count:,} decisions to {path}"
        if request.kind == "cleaned":
            prepared = scan.prepared
            result = export.export_cleaned(
                journal,
                prepared.frame,
                path,
                id_column=prepared.id_column,
                label_column=prepared.label_column,
                force=force,
            )
            return (
                f"Wrote {result.rows:,} rows to {path} ({result.relabelled:,} relabelled, "
                f"{result.excluded:,} excluded)"
            )
        from holdfast.output.report import write_report  # type: ignore[import-not-found]

        written = write_report(scan, journal, path, force=force)
        return f"Wrote the report to {written}"

    def on_export_finished(self, message: ExportFinished) -> None:
        self._set_message(message.text)
        self.notify(safe_text(message.text) + "\n" + CAUTION, title="Exported", markup=False, timeout=8)

    def on_export_failed(self, message: ExportFailed) -> None:
        self._set_message(message.text, error=True)
        self.notify(safe_text(message.text), severity="error", markup=False, timeout=10)

    # ------------------------------------------------------------------ what-if
    def action_what_if(self) -> None:
        if not _module_exists("holdfast.review.whatif"):
            self._set_message("What-if is not available in this version yet.")
            return
        if self._busy is not None:
            self._set_message("Wait for the running refit to finish (or cancel it with escape).")
            return
        self._busy = "what-if"
        self._set_progress("What-if: refitting with the decisions applied…", None, None)
        self.refresh_bindings()
        self._what_if_worker()

    @work(
        thread=True,
        exclusive=True,
        exit_on_error=False,
        group="what-if",
        name="what-if",
        description="what-if",
    )
    def _what_if_worker(self) -> None:
        from holdfast.review.whatif import what_if  # type: ignore[import-not-found]

        worker = get_current_worker()
        throttle = Throttle()

        def progress(done: int, total: int, eta: float | None) -> None:
            if throttle.ready(done, total):
                self.post_message(WhatIfProgress(done, total, eta))

        try:
            result = what_if(
                self.scan,
                self.context.session.journal.current(),
                progress=progress,
                should_cancel=lambda: worker.is_cancelled,
            )
        except Cancelled:
            self.post_message(WhatIfFailed("What-if cancelled.", cancelled=True))
            return
        except Exception as exc:  # shown in the UI
            self.post_message(WhatIfFailed(f"What-if failed: {error_line(exc)}"))
            return
        if worker.is_cancelled:
            self.post_message(WhatIfFailed("What-if cancelled.", cancelled=True))
        else:
            self.post_message(WhatIfFinished(result))

    def on_what_if_progress(self, message: WhatIfProgress) -> None:
        if self._busy != "what-if":
            return
        eta = _fmt_seconds(message.eta)
        label = f"What-if refits: {message.done:,} of {message.total:,}"
        if eta and message.done < message.total:
            label += f" · about {eta} left"
        self._set_progress(label + " · escape cancels", message.done, message.total)

    def on_what_if_finished(self, message: WhatIfFinished) -> None:
        from holdfast.ui.screens.whatif import WhatIfScreen

        self._busy = None
        self._hide_progress()
        self.refresh_bindings()
        self._set_message("What-if finished.")
        self.app.push_screen(WhatIfScreen(message.result))

    def on_what_if_failed(self, message: WhatIfFailed) -> None:
        self._busy = None
        self._hide_progress()
        self.refresh_bindings()
        self._set_message(message.text, error=not message.cancelled)

    def on_worker_state_changed(self, event: Worker.StateChanged) -> None:
        """A worker that ended by an error the wrappers did not catch still leaves the app running."""
        if event.state.name == "ERROR" and event.worker.group in ("scan", "what-if"):
            self._busy = None
            self._hide_progress()
            self._set_message(f"{event.worker.name} stopped: {error_line(event.worker.error)}", error=True)
            self.refresh_bindings()
