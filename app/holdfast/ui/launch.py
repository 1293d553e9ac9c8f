"""Start the inspector: open the session, say where it is, run the app, close the session."""

from __future__ import annotations

import sys
from pathlib import Path

from holdfast.data.spec import Spec
from holdfast.ui.session import open_session


def launch(data_path: Path, spec: Spec, session: Path | None = None) -> int:
    """Open (or create) the session journal for ``data_path`` + ``spec`` and run the inspector.

    The journal defaults to ``DATA.holdfast.db`` beside the data (:func:`holdfast.review.sessions.
    default_session_path`); when it has to go elsewhere, where it went is printed on stderr before the UI
    starts. Warnings about a journal made for other data or another spec are shown inside the UI.
    Returns the exit code (0). Raises UserError subclasses for a missing data file or a bad session file.
    """
    from holdfast.data.load import read_table
    from holdfast.data.prepare import prepare
    from holdfast.ui.app import HoldfastApp
    from holdfast.ui.quitting import leave_now_if_busy

    # A wrong file, column or spec value is a one-line error on the command line (exit 2), not a screen.
    frame = read_table(data_path)
    prepare(frame, spec, source=str(data_path))
    opened = open_session(data_path, spec, session)
    if opened.location_note:
        print(f"holdfast: {opened.location_note}", file=sys.stderr)
    if opened.read_only_note and opened.read_only_note != opened.location_note:
        print(f"holdfast: {opened.read_only_note}", file=sys.stderr)
    try:
        app = HoldfastApp(Path(data_path), spec, opened, frame=frame)
        code = app.run()
    finally:
        journal = opened.journal
        decided = len(journal.current())
        opened.close()
    print(f"holdfast: session {opened.path} ({decided:,} row(s) with a decision)", file=sys.stderr)
    return leave_now_if_busy(int(code or 0), app.work_executor)  # never wait, blank, for a refit
