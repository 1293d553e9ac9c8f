"""The review flow with the pilot: focus after every screen and dialog, decisions on the highlighted row,
held-out rows outside the review, the queue, small terminals.

Decisions are read back from the journal (``Journal.current``), never from the screen alone.
"""

from __future__ import annotations

import pytest
from textual.pilot import Pilot

from holdfast.ui.screens.inspect import InspectScreen

from .inspector_kit import SIZE, DataSet, make_app, scanned


def decided_ids(screen: InspectScreen) -> dict[str, str]:
    """Row id -> decision, as the journal holds them now."""
    return {rid: d.decision for rid, d in screen.context.session.journal.current().items()}


async def decide_down(pilot: Pilot, screen: InspectScreen, keys: str) -> list[str]:
    """Press ``down`` then each decision key; return the ids highlighted when each key was pressed."""
    highlighted = []
    for key in keys:
        await pilot.press("down")
        highlighted.append(screen.book.ids[screen.table.cursor_row])  # type: ignore[union-attr,index]
        await pilot.press(key)
    return highlighted


# ---------------------------------------------------------------------------------------------- focus


@pytest.mark.parametrize("opener", [("v", "escape"), ("v", "v"), ("enter", "escape"), ("enter", "enter")])
async def test_after_a_whole_screen_view_decisions_land_on_the_highlighted_rows(
    ds: DataSet, opener: tuple[str, str]
) -> None:
    app = make_app(ds)
    async with app.run_test(size=SIZE) as pilot:
        screen = await scanned(pilot)
        await pilot.press(*opener)
        await pilot.pause()
        assert screen.maximized is None
        assert app.focused is screen.table
        ids = await decide_down(pilot, screen, "cxd")
        assert len(set(ids)) == 3  # down moved the cursor each time
        assert decided_ids(screen) == dict(zip(ids, ["confirm", "exclude", "defer"], strict=True))


@pytest.mark.parametrize(
    "keys",
    [
        ("f", "escape"),
        ("g", "escape"),
        ("n", "escape"),
        ("question_mark", "escape"),
        ("e", "escape"),
        ("b", "escape"),
        ("ctrl+p", "escape"),
        ("i", "i"),
    ],
)
async def test_focus_returns_to_the_table_after_every_dialog(ds: DataSet, keys: tuple[str, ...]) -> None:
    app = make_app(ds)
    async with app.run_test(size=SIZE) as pilot:
        screen = await scanned(pilot)
        await pilot.press("tab")  # focus elsewhere first (the detail panel): closing must still come back
        for key in keys:
            await pilot.press(key)
            await pilot.pause()
        assert app.screen is screen
        assert app.focused is screen.table
        before = screen.table.cursor_row
        await pilot.press("down")
        assert screen.table.cursor_row != before
