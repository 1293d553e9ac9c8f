"""``holdfast export SESSION``: decisions, the cleaned data set and the report from a session file.

The session (decisions journal) records the data path, the data fingerprint and the spec. The data is read
again and scanned with that spec (normally straight from the scan cache) to get the scores, flags and
bounds the exports need. Decisions are matched to rows by id; a decision whose id is no longer in the data
is reported on stderr and kept in the decisions export, never dropped. A session without an id column
(rows identified by position) refuses a changed data file: positions would name other rows.

The stored spec's ``[run]`` table is not trusted: a session file may come from someone else, and its
``run.backend``/``run.scheduler`` could send the data to any dask scheduler. Export always refits on this
machine (forked workers or threads, the stored ``run.jobs``); a cluster is used only when this run's own
command line or spec asks for one.
"""

from __future__ import annotations

import sys
from collections.abc import Callable
from dataclasses import replace
from pathlib import Path

from holdfast.data.load import fingerprint_file, read_table
from holdfast.data.spec import RunSpec, spec_from_text
from holdfast.engine.loo import Progress
from holdfast.errors import DataError, SessionError, UserError
from holdfast.output.tables import export_cleaned, export_decisions
from holdfast.review.decisions import FORMATS
from holdfast.review.journal import Journal
from holdfast.review.sessions import refuse_moved_positions
from holdfast.textsafe import safe_text

#: How many unmatched ids a warning lists before it says "and N more".
LIST_IDS = 20


def _stderr_warning(message: str) -> None:
    print(f"holdfast: warning: {safe_text(message)}", file=sys.stderr)  # may name ids: data text


def _check_output(path: Path, *, force: bool, table: bool) -> None:
    """Refuse an unknown table suffix, a folder, or an existing file without ``force`` (one line each)."""
    if table and path.suffix.lower() not in FORMATS:
        raise UserError(f"{path}: unknown file type '{path.suffix}'; use .parquet or .csv")
    if path.is_dir():
        raise UserError(f"{path}: is a folder, expected a file")
    if path.exists() and not force:
        raise UserError(f"{path}: already exists; use --force to overwrite")


def _check_outputs(outputs: dict[str, Path | None], force: bool) -> None:
    chosen = [p for p in outputs.values() if p is not None]
    if len({p.resolve() for p in chosen}) != len(chosen):
        raise UserError(f"{chosen[0]}: the same file is given for two exports")
    for key, path in outputs.items():
        if path is not None:
            _check_output(path, force=force, table=key != "report")
    report = outputs["report"]
    if report is not None and not force:
        for image in _report_images(report):
            _check_output(image, force=False, table=False)


def _report_images(path: Path) -> list[Path]:
    folder = path.with_name(f"{path.stem}_files")
    return [folder / "margin.png", folder / "score.png", folder / "whatif.png"]


def _data_path(stored: str, session: Path) -> Path:
    """The data file named in the session; a relative path is tried from here, then beside the session."""
    path = Path(stored)
    if path.is_file() or path.is_absolute():
        return path
    beside = session.parent / path
    return beside if beside.is_file() else path


def export_session(
    session_path: str | Path,
    *,
    decisions: str | Path | None = None,
    cleaned: str | Path | None = None,
    report: str | Path | None = None,
    force: bool = False,
    progress: Progress | None = None,
    warn: Callable[[str], None] | None = None,
) -> list[Path]:
    """Write the requested exports of one session; returns the paths written, in the order asked.

    Parameters
    ----------
    session_path : path
        The session's decisions journal.
    decisions, cleaned, report : path, optional
        Decisions table (.parquet/.csv), cleaned data set (.parquet/.csv: original columns, relabels
        applied, excluded rows removed) and Markdown report (images in ``<stem>_files/``). At least one.
    force : bool
        Overwrite existing files.
    progress : callable, optional
        ``progress(done, total, eta)`` for the scan (and the what-if refit of the report) when the scan is
        not cached.
    warn : callable, optional
        Receives one-line warnings (changed data, unmatched decisions); default: stderr.

    Raises
    ------
    UserError
        Nothing asked, an existing output without ``force``, a missing or foreign session file, a missing
        data file: one line naming the file.
    """
    from holdfast.engine.scan import run_scan
    from holdfast.output.report import write_report

    warn = warn or _stderr_warning
    session = Path(session_path)
    outputs = {
        "decisions": Path(decisions) if decisions else None,
        "cleaned": Path(cleaned) if cleaned else None,
        "report": Path(report) if report else None,
    }
    if not any(outputs.values()):
        raise UserError(f"{session}: nothing to export; give --to FILE, --cleaned FILE and/or --report FILE")
    with Journal.open(session, read_only=True) as journal:  # a missing or foreign session: reported first
        _check_outputs(outputs, force)
        meta = journal.meta
        spec_text = meta.get("spec") or ""
        stored = meta.get("data_path") or ""
        if not spec_text or not stored:
            raise SessionError(f"{session}: session file lacks its data path or spec")
        spec = spec_from_text(spec_text, source=f"{session} (stored spec)")
        # never a cluster named by a received file: refits run here (see the module docstring)
        spec = replace(spec, run=RunSpec(jobs=spec.run.jobs, cache=spec.run.cache))
        data_path = _data_path(stored, session)
        if not data_path.is_file():
            raise DataError(
                f"{data_path}: data file named in session {session} not found (moved or deleted?)"
            )
        if outputs["cleaned"] is not None and outputs["cleaned"].resolve() == data_path.resolve():
            raise UserError(
                f"{outputs['cleaned']}: is the session's data file; write the cleaned set elsewhere"
            )
        frame = read_table(data_path)
        fingerprint = fingerprint_file(data_path)
        refuse_moved_positions(
            meta, fingerprint, data_path, session, bool(journal.current(include_notes_only=True))
        )
        if fingerprint != meta.get("fingerprint"):
            warn(
                f"{data_path}: the data changed since session {session} was created; decisions are matched "
                f"to rows by id"
            )
        scan = run_scan(data_path, spec, progress=progress, frame=frame)
        matched, unmatched = journal.reconcile(scan.findings.rows["id"].astype(str).tolist())
        if unmatched:
            shown = ", ".join(unmatched[:LIST_IDS]) + (
                f" and {len(unmatched) - LIST_IDS} more" if len(unmatched) > LIST_IDS else ""
            )
            warn(
                f"{len(unmatched)} decision(s) in {session} name ids not in {data_path}: {shown} "
                f"(kept in the decisions export, not applied to the cleaned set)"
            )
        label_column = meta.get("label_column") or spec.data.label
        id_column = meta.get("id_column") or spec.data.id
        written: list[Path] = []
        if outputs["decisions"] is not None:
            written.append(export_decisions(journal, scan.findings.rows, outputs["decisions"], force=force))
        if outputs["cleaned"] is not None:
            result = export_cleaned(
                journal,
                frame,
                outputs["cleaned"],
                id_column=id_column,
                label_column=label_column,
                force=force,
            )
            written.append(result.path)
        if outputs["report"] is not None:
            current = journal.current()
            whatif = None
            present = set(matched)
            if any(d.decision in ("relabel", "exclude") and rid in present for rid, d in current.items()):
                from holdfast.review.whatif import what_if

                try:
                    whatif = what_if(scan, current, progress=progress)
                except UserError as exc:  # e.g. the decisions leave one class only: report without it
                    warn(f"what-if refit skipped in the report: {exc}")
            written.append(write_report(scan, current, outputs["report"], force=force, whatif=whatif))
    return written
