"""The review flow with the pilot: focus after every screen and dialog, decisions on the highlighted row,
held-out rows outside the review, the queue, small terminals.

Decisions are read back from the journal (``Journal.current``), never from the screen alone.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from textual.pilot import Pilot
from textual.widgets import Checkbox, Input, Select

from holdfast.ui.screens.inspect import InspectScreen
from holdfast.ui.screens.query import QueryDialog
from holdfast.ui.widgets.row_detail import RowDetailPanel

from .inspector_kit import (
    SIZE,
    DataSet,
    choose,
    make_app,
    region_text,
    scanned,
    screen_text,
    until,
    write_dataset,
)


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


# ---------------------------------------------------------------------------------------------- held-out rows


def split_dataset(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> DataSet:
    """The packhouse data with every fourth crate held out (a split column in the spec)."""
    monkeypatch.setenv("HOLDFAST_CACHE_DIR", str(tmp_path / "cache"))
    ds = write_dataset(tmp_path / "data")
    frame = ds.frame.assign(holdout=np.arange(len(ds.frame)) % 4 == 0)
    frame.to_parquet(ds.data, index=False)
    spec_text = ds.spec_path.read_text().replace('id = "crate"', 'id = "crate"\nsplit = "holdout"')
    ds.spec_path.write_text(spec_text)
    return DataSet(ds.data, ds.spec_path, frame)


async def test_held_out_rows_stay_out_of_the_review_and_bulk_decisions(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    ds = split_dataset(tmp_path, monkeypatch)
    held = ds.frame["holdout"].to_numpy()
    app = make_app(ds)
    async with app.run_test(size=SIZE) as pilot:
        screen = await scanned(pilot)
        table = screen.table
        assert not held[table.view_positions()].any()  # the review rows come first
        assert len(table.view_positions()) == int((~held).sum())
        assert f"decided 0 of {int((~held).sum())} review rows" in screen_text(app)

        await pilot.press("f")
        await choose(pilot, "held_out")
        assert set(table.view_positions().tolist()) == set(np.flatnonzero(held).tolist())
        assert "filter: held-out rows" in screen_text(app)

        await pilot.press("f")
        await choose(pilot, "all")
        await pilot.press("b")
        await choose(pilot, "defer")
        assert f"{int(held.sum())} held-out rows in this view are left out" in screen_text(app)
        await pilot.press("y")
        state = screen.context.session.journal.current()
        ids = ds.frame["crate"].to_numpy()
        assert set(state) == set(ids[~held].tolist())  # no held-out row got the bulk decision
        assert f"decided {int((~held).sum())} of {int((~held).sum())} review rows" in screen_text(app)

        await pilot.press("f")
        await choose(pilot, "held_out")
        await pilot.press("b")
        assert isinstance(app.screen, InspectScreen)  # no dialog: no review row in the view
        assert "bulk decisions reach review rows only" in screen_text(app)


# ---------------------------------------------------------------------------------------------- the queue


async def test_queue_next_by_score_auto_advance_and_progress(ds: DataSet) -> None:
    app = make_app(ds)
    async with app.run_test(size=SIZE) as pilot:
        screen = await scanned(pilot)
        table, rows = screen.table, screen.scan.findings.rows
        flagged = rows["flag_names"].fillna("").to_numpy(dtype=object) != ""
        await pilot.press("f")
        await choose(pilot, "queue")
        assert set(table.view_positions().tolist()) == set(np.flatnonzero(flagged).tolist())
        queue = len(table.view_positions())
        assert f"this view: 0 of {queue} decided" in screen_text(app)

        by_score = rows["score"].to_numpy()
        await pilot.press("o")  # view in rising score; "next" still goes by score, highest first
        await pilot.press("end")  # the highest score
        top = table.cursor_row
        await pilot.press("c")
        await pilot.press("space")
        second = table.cursor_row
        assert second != top and by_score[second] <= by_score[top]
        undecided = [p for p in np.flatnonzero(flagged) if p != top]
        assert by_score[second] == max(by_score[undecided])
        assert f"this view: 1 of {queue} decided" in screen_text(app), region_text(app, "#status-row")

        await pilot.press("a")  # auto-advance on: a decision moves on to the next undecided by score
        assert "auto-advance" in region_text(app, "#status")
        await pilot.press("x")
        third = table.cursor_row
        assert third not in (top, second)
        assert by_score[third] == max(by_score[[p for p in undecided if p != second]])
        state = screen.context.session.journal.current()
        assert {screen.book.ids[top]: "confirm", screen.book.ids[second]: "exclude"} == {
            k: d.decision for k, d in state.items()
        }


async def test_combined_filter_dialog_matches_the_same_conditions_in_pandas(ds: DataSet) -> None:
    app = make_app(ds)
    async with app.run_test(size=SIZE) as pilot:
        screen = await scanned(pilot)
        rows = screen.scan.findings.rows
        await pilot.press("c")  # the top row gets a decision: "no decision yet" must drop it
        decided = screen.table.cursor_row
        await pilot.press("f")
        await choose(pilot, "custom")
        dialog = app.screen
        assert isinstance(dialog, QueryDialog)
        dialog.query_one("#query-undecided", Checkbox).value = True
        dialog.query_one("#query-label", Select).value = "premium"
        dialog.query_one("#query-score", Input).value = "0.2"
        await pilot.pause()
        expected = (rows["label"] == "premium") & (rows["score"] >= 0.2)
        expected[decided] = False
        assert f"{int(expected.sum())} rows match" in screen_text(app)
        await pilot.press("enter")
        await pilot.pause()
        assert app.screen is screen and app.focused is screen.table
        assert set(screen.table.view_positions().tolist()) == set(np.flatnonzero(expected).tolist())
        assert "filter: no decision yet · label premium · score ≥ 0.2" in screen_text(app)


# ------------------------------------------------------------------------------------------ why this score


async def test_detail_shows_the_score_parts_and_features_by_abs_z(ds: DataSet) -> None:
    app = make_app(ds)
    async with app.run_test(size=SIZE) as pilot:
        screen = await scanned(pilot)
        await until(pilot, lambda: screen._detail_context is not None)
        await pilot.press("down")
        await pilot.pause(0.2)
        panel = screen.query_one(RowDetailPanel)
        position = screen.table.cursor_row
        row = screen.scan.findings.rows.iloc[position]
        lines = panel.lines
        at = next(i for i, line in enumerate(lines) if line.startswith("Why this score"))
        assert f"{row['score']:.3f} =" in lines[at]
        parts = {line.split()[0]: line for line in lines[at + 1 : at + 6]}
        assert "LOO" in parts and "neighbour" in parts and "logistic" in parts
        adds = [float(parts[k].split()[-1]) for k in ("LOO", "neighbour", "logistic")]
        assert abs(sum(adds) - row["score"]) < 2e-3  # the parts shown add up to the score shown
        assert f"{-max(-2, min(2, row['loo_margin'])):+.3f}" == parts["LOO"].split()[-1]
        z = panel.detail.features["z"].abs().to_numpy()
        names = panel.detail.features["feature"].to_numpy()[np.argsort(-z, kind="stable")]
        start = next(i for i, line in enumerate(lines) if line.startswith("Features"))
        shown = [next(i for i in range(start, len(lines)) if lines[i].startswith(f"{n} ")) for n in names]
        assert shown == sorted(shown)  # largest |z| first


# ---------------------------------------------------------------------------------------------- our look


async def test_own_theme_and_a_palette_of_our_actions_only(ds: DataSet) -> None:
    app = make_app(ds)
    async with app.run_test(size=SIZE) as pilot:
        await scanned(pilot)
        assert app.theme == "holdfast-dark" and "holdfast-light" in app.available_themes
        await pilot.press("ctrl+t")
        assert app.theme == "holdfast-light"
        framework = (
            "Save screenshot",
            "Change theme",
            "Maximize",
            "as soon as possible",
            "keys and help panel",
        )
        for query, ours in (("filter", "Filter  (f)"), ("what", "What-if  (w)"), ("go to", "Go to id  (g)")):
            await pilot.press("ctrl+p")
            await pilot.press(*query)
            await pilot.pause(0.5)
            text = screen_text(app)
            assert ours in text
            assert not any(word in text for word in framework)
            await pilot.press("escape")
        await pilot.press("ctrl+p")
        for query in ("screenshot", "theme", "maximize", "quit the application"):
            await pilot.press(*query)
            await pilot.pause(0.5)
            assert not any(word in screen_text(app) for word in framework), query
            for _ in query:
                await pilot.press("backspace")
