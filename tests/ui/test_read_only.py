"""The inspector on a session it may not write: a second inspector on the same session, and a session in a
read-only folder. The notice is on screen and every decision key is refused (nothing reaches the journal).
"""

from __future__ import annotations

import os
from pathlib import Path

import pytest

from holdfast.review.journal import Journal
from holdfast.ui.session import open_session

from .inspector_kit import SIZE, DataSet, make_app, scanned, screen_text


def _decisions(path: Path) -> dict:
    with Journal.open(path, read_only=True) as journal:
        return {k: (d.decision, d.note) for k, d in journal.current(include_notes_only=True).items()}


async def test_second_inspector_is_read_only_and_refuses_decision_keys(ds: DataSet) -> None:
    first = open_session(ds.data, ds.spec)  # the first inspector's session, lock held
    try:
        first.journal.record("crate-0001", "confirm")
        before = _decisions(first.path)
        app = make_app(ds)
        async with app.run_test(size=SIZE) as pilot:
            screen = await scanned(pilot)
            assert "open in another inspector" in screen_text(app)
            assert f"process {os.getpid()}" in screen_text(app)
            for key in ("c", "x", "d", "u", "y"):
                await pilot.press(key)
                await pilot.pause()
                assert "not saved" in screen_text(app).lower(), key
            assert screen.book.decided == 1
        assert _decisions(first.path) == before
    finally:
        first.close()


async def test_session_in_read_only_folder_opens_with_a_notice(
    ds: DataSet, monkeypatch: pytest.MonkeyPatch
) -> None:
    opened = open_session(ds.data, ds.spec)
    opened.journal.record("crate-0002", "exclude")
    opened.close()
    real = os.access
    folder = ds.data.parent.absolute()

    def access(path, mode, *args, **kwargs):  # type: ignore[no-untyped-def]
        p = Path(path).absolute()
        if mode & os.W_OK and (p == folder or p.parent == folder):
            return False  # as on a read-only mount (root ignores permission bits)
        return real(path, mode, *args, **kwargs)

    monkeypatch.setattr(os, "access", access)
    app = make_app(ds)
    async with app.run_test(size=SIZE) as pilot:
        screen = await scanned(pilot)
        assert "read-only" in screen_text(app)
        await pilot.press("c")
        await pilot.pause()
        assert "Not saved" in screen_text(app)
        assert screen.book.decided == 1
    assert _decisions(opened.path) == {"crate-0002": ("exclude", None)}
