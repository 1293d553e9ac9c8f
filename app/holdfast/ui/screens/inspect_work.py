"""The inspect screen's background work: scan, row-detail precomputation, what-if refit and export.

:class:`BackgroundWork` is a part of :class:`holdfast.ui.screens.inspect.InspectScreen` (a mixin): it starts
the jobs of :mod:`holdfast.ui.jobs` in thread workers and handles the messages they post (progress, done,
failed, cancelled). Everything it draws goes through the screen's own helpers (progress bar, notices,
status message); it changes when the work changes, not when the layout or the keys do.
"""

from __future__ import annotations

import importlib.util
from functools import partial
from typing import Any

from textual.worker import Worker

from holdfast.ui import jobs
from holdfast.ui import messages as msg
from holdfast.ui.decisions import CAUTION
from holdfast.ui.messages import error_line
from holdfast.ui.screens.dialogs import ConfirmDialog
from holdfast.ui.screens.export import ExportDialog, ExportRequest
from holdfast.ui.textsafe import safe_text
from holdfast.ui.widgets.overview import OverviewPanel


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


def _progress_label(what: str, done: int, total: int, eta: float | None) -> str:
    label = f"{what}: {done:,} of {total:,}"
    left = _fmt_seconds(eta)
    if left and done < total:
        label += f" · about {left} left"
    return label + " · escape cancels"


class BackgroundWork:
    """Start the inspector's jobs and handle what they post; mixed into the inspect screen.

    The screen provides ``context``, ``scan``, ``table``, ``_busy``, ``_scan_state``, ``_generation``,
    ``_detail_context`` and the helpers ``_set_progress``, ``_hide_progress``, ``_show_notices``,
    ``_set_message``, ``_scan_ready`` and ``_update_detail_now``.
    """

    context: Any
    scan: Any
    _busy: str | None
    _scan_state: str
    _generation: int
    _detail_context: Any

    def _run(self, job: Any, group: str, description: str) -> None:
        """Run ``job`` in a thread worker of ``group`` (a new one cancels the old; errors never quit)."""
        self.run_worker(
            job,
            thread=True,
            exclusive=True,
            exit_on_error=False,
            group=group,
            name=group,
            description=description,
        )

    # ------------------------------------------------------------------ scan
    def start_scan(self) -> None:
        """Start (or restart) the scan in a thread worker; the table fills in when it finishes."""
        self._generation += 1
        self._scan_state = "running"
        self._busy = "scan"
        self._set_progress("Reading the data and fitting the model…", None, None)
        self._set_message("")
        self._show_notices()
        self._update_status()
        self.refresh_bindings()
        ctx = self.context
        frame, ctx.frame = ctx.frame, None
        self._run(
            partial(jobs.scan_job, ctx.data_path, ctx.spec, frame, self._generation, self.post_message),
            "scan",
            "scan",
        )

    def on_scan_progress(self, message: msg.ScanProgress) -> None:
        if self._scan_state != "running" or message.generation != self._generation:
            return
        label = _progress_label(
            "Refitting without each support row", message.done, message.total, message.eta
        )
        self._set_progress(label, message.done, message.total)

    def on_scan_partial(self, message: msg.ScanPartial) -> None:
        """Provisional rows: shown at once, re-ranked as refits arrive, the cursor kept on its row."""
        if self._scan_state == "running" and message.generation == self._generation:
            self._show_rows(message.findings, provisional=True)

    def on_scan_finished(self, message: msg.ScanFinished) -> None:
        if message.generation != self._generation:
            return
        self._busy = None
        self._scan_ready(message.scan)

    def on_scan_failed(self, message: msg.ScanFailed) -> None:
        if message.generation == self._generation:
            self._scan_stopped(
                "failed",
                "No rows: the scan did not finish.",
                f"Scan failed: {message.text}. Fix the data or spec, then ctrl+r scans again.",
                error=True,
            )

    def on_scan_cancelled(self, message: msg.ScanCancelled) -> None:
        if message.generation == self._generation:
            self._scan_stopped(
                "cancelled",
                "No rows: the scan was cancelled.",
                "Scan cancelled. Finished refits are kept; ctrl+r resumes the scan from them.",
            )

    def _scan_stopped(self, state: str, empty: str, notice: str, *, error: bool = False) -> None:
        self._busy = None
        self._scan_state = state
        self._hide_progress()
        self.table.empty_text = empty
        self.table.refresh()
        self._show_notices(notice, error=error)
        self._update_status()
        self.refresh_bindings()

    def on_detail_ready(self, message: msg.DetailReady) -> None:
        if message.generation != self._generation or self.scan is None:
            return
        if message.margin_hist is not None:
            self.query_one(OverviewPanel).show(self.scan.findings.summary, message.margin_hist)
        if message.context is None:
            self._set_message(f"Row detail not available: {message.text}", error=True)
            return
        self._detail_context = message.context
        self._update_detail_now()

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
    def action_export(self) -> None:
        unavailable = (
            {}
            if _module_exists("holdfast.output.report")
            else {"report": "not available in this version yet"}
        )

        def chosen(request: ExportRequest | None) -> None:
            if request is None:
                return
            if not request.path.exists():
                self._export(request, False)
                return

            def confirmed(yes: bool | None) -> None:
                if yes:
                    self._export(request, True)

            question = f"{safe_text(request.path)} already exists. Replace it?"
            self.app.push_screen(
                ConfirmDialog(question, yes="Replace", no="Keep it", id="overwrite-confirm"), confirmed
            )

        self.app.push_screen(ExportDialog(self.context.data_path, unavailable=unavailable), chosen)

    def _export(self, request: ExportRequest, force: bool) -> None:
        journal = self.context.session.journal
        self._run(
            partial(jobs.export_job, self.scan, journal, request, force, self.post_message),
            "export",
            "export",
        )

    def on_export_finished(self, message: msg.ExportFinished) -> None:
        self._set_message(message.text)
        self.notify(safe_text(message.text) + "\n" + CAUTION, title="Exported", markup=False, timeout=8)

    def on_export_failed(self, message: msg.ExportFailed) -> None:
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
        journal = self.context.session.journal
        self._run(partial(jobs.what_if_job, self.scan, journal, self.post_message), "what-if", "what-if")

    def on_what_if_progress(self, message: msg.WhatIfProgress) -> None:
        if self._busy == "what-if":
            label = _progress_label("What-if refits", message.done, message.total, message.eta)
            self._set_progress(label, message.done, message.total)

    def on_what_if_finished(self, message: msg.WhatIfFinished) -> None:
        from holdfast.ui.screens.whatif import WhatIfScreen

        self._end_what_if("What-if finished.")
        self.app.push_screen(WhatIfScreen(message.result))

    def on_what_if_failed(self, message: msg.WhatIfFailed) -> None:
        self._end_what_if(message.text, error=not message.cancelled)

    def _end_what_if(self, text: str, *, error: bool = False) -> None:
        self._busy = None
        self._hide_progress()
        self.refresh_bindings()
        self._set_message(text, error=error)

    def on_worker_state_changed(self, event: Worker.StateChanged) -> None:
        """A worker that ended by an error the jobs did not catch still leaves the app running."""
        if event.state.name == "ERROR" and event.worker.group in ("scan", "what-if"):
            self._busy = None
            self._hide_progress()
            self._set_message(f"{event.worker.name} stopped: {error_line(event.worker.error)}", error=True)
            self.refresh_bindings()
