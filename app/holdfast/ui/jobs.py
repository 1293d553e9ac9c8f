"""The inspector's background jobs: scan, row-detail precomputation, what-if refit, export.

Each job is a plain function that calls the engine and reports by ``post`` (a message of
:mod:`holdfast.ui.messages`); the screen runs it in a thread worker and its message handlers own the UI
state. ``should_cancel`` is checked by the engine between refits; by default it reads the current
Textual worker's cancel flag. A job never raises: errors become a message with one line for the user.
"""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path
from typing import Any

import pandas as pd
from textual.message import Message
from textual.worker import get_current_worker

from holdfast.data.spec import Spec
from holdfast.errors import Cancelled
from holdfast.ui.messages import (
    DetailReady,
    ExportFailed,
    ExportFinished,
    ScanCancelled,
    ScanFailed,
    ScanFinished,
    ScanPartial,
    ScanProgress,
    Throttle,
    WhatIfFailed,
    WhatIfFinished,
    WhatIfProgress,
    error_line,
)
from holdfast.ui.screens.export import ExportRequest

Post = Callable[[Message], Any]
ShouldCancel = Callable[[], bool]


def _worker_cancelled() -> ShouldCancel:
    worker = get_current_worker()
    return lambda: worker.is_cancelled


def scan_job(
    data_path: Path,
    spec: Spec,
    frame: pd.DataFrame | None,
    generation: int,
    post: Post,
    should_cancel: ShouldCancel | None = None,
) -> None:
    """Run the scan; post progress (about ten a second) and provisional findings (about one a second),
    then finished, failed or cancelled."""
    from holdfast.engine.scan import run_scan

    cancelled = should_cancel or _worker_cancelled()
    throttle = Throttle()

    def progress(done: int, total: int, eta: float | None) -> None:
        if throttle.ready(done, total):
            post(ScanProgress(done, total, eta, generation))

    def partial(findings: Any) -> None:  # on the scan's thread: only post (the engine throttles to ~1/s)
        post(ScanPartial(findings, generation))

    try:
        scan = run_scan(
            data_path, spec, progress=progress, should_cancel=cancelled, frame=frame, on_partial=partial
        )
    except Cancelled:
        post(ScanCancelled(generation))
        return
    except Exception as exc:  # shown in the UI; the app stays
        post(ScanFailed(error_line(exc), generation))
        return
    post(ScanCancelled(generation) if cancelled() else ScanFinished(scan, generation))


def margin_histogram(scan: Any) -> Any:
    """Margins of the training rows by label (the overview draws it)."""
    from holdfast.insight.histograms import histogram

    rows = scan.findings.rows
    train = ~rows["held_out"].to_numpy(dtype=bool)
    classes = [str(c) for c in scan.findings.classes]
    labels = pd.Categorical(rows["label"].astype(str)[train], categories=classes)
    return histogram(rows["margin"].to_numpy()[train], bins=24, by=labels, groups=classes)


def detail_job(scan: Any, generation: int, post: Post) -> None:
    """Precompute the row detail and the margin histogram off the UI thread."""
    from holdfast.insight.detail import DetailContext

    try:
        hist = margin_histogram(scan)
    except Exception:  # the overview is drawn without it
        hist = None
    try:
        context = DetailContext.from_scan(scan)
    except Exception as exc:  # shown in the UI; the table works without the detail
        post(DetailReady(None, error_line(exc), generation, hist))
        return
    post(DetailReady(context, "", generation, hist))


def what_if_job(scan: Any, journal: Any, post: Post, should_cancel: ShouldCancel | None = None) -> None:
    """Refit with the journal's decisions applied; post progress, then the result or why not."""
    from holdfast.review.whatif import what_if

    cancelled = should_cancel or _worker_cancelled()
    throttle = Throttle()

    def progress(done: int, total: int, eta: float | None) -> None:
        if throttle.ready(done, total):
            post(WhatIfProgress(done, total, eta))

    try:
        result = what_if(scan, journal.current(), progress=progress, should_cancel=cancelled)
    except Cancelled:
        post(WhatIfFailed("What-if cancelled.", cancelled=True))
        return
    except Exception as exc:  # shown in the UI
        post(WhatIfFailed(f"What-if failed: {error_line(exc)}"))
        return
    post(WhatIfFailed("What-if cancelled.", cancelled=True) if cancelled() else WhatIfFinished(result))


def write_export(scan: Any, journal: Any, request: ExportRequest, force: bool) -> str:
    """Write what ``request`` asks for (atomically, by the engine); returns one line saying what it wrote."""
    from holdfast.output import tables

    path = request.path
    if request.kind == "decisions":
        tables.export_decisions(journal, scan.findings.rows, path, force=force)
        count = len(journal.current(include_notes_only=True))
        return f"Wrote {count:,} decisions to {path}"
    if request.kind == "cleaned":
        prepared = scan.prepared
        result = tables.export_cleaned(
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
    from holdfast.output.report import write_report

    written = write_report(scan, journal, path, force=force)
    return f"Wrote the report to {written}"


def export_job(scan: Any, journal: Any, request: ExportRequest, force: bool, post: Post) -> None:
    """Write an export; post finished or failed (nothing is written on failure)."""
    try:
        text = write_export(scan, journal, request, force)
    except Exception as exc:  # shown in the UI
        post(ExportFailed(f"Export failed: {error_line(exc)}"))
        return
    post(ExportFinished([request.path], text))
