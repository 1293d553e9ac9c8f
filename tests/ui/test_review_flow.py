"""The review flow with the pilot: focus after every screen and dialog, decisions on the highlighted row,
held-out rows outside the review, the queue, small terminals.

Decisions are read back from the journal (``Journal.current``), never from the screen alone.
"""

from __future__ import annotations

import time
from pathlib import Path

import numpy as np
import pytest
from textual.pilot import Pilot
from textual.widgets import Button, Checkbox, Input, RadioSet, Select

import holdfast.engine.scan
from holdfast.insight.histograms import histogram
from holdfast.ui.screens.export import ExportDialog
from holdfast.ui.screens.inspect import InspectScreen
from holdfast.ui.screens.query import QueryDialog
from holdfast.ui.screens.whatif import WhatIfScreen
from holdfast.ui.widgets.histogram import HistogramBars
from holdfast.ui.widgets.overview import OverviewPanel
from holdfast.ui.widgets.row_detail import RowDetailPanel
from holdfast.ui.widgets.row_table import RowTable

from .inspector_kit import (
    SIZE,
    DataSet,
    choose,
    inspect,
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
        for key in opener:
            await pilot.press(key)
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


# ----------------------------------------------------------------------------------------- small terminals


@pytest.mark.parametrize("size", [(80, 24), (100, 30)])
async def test_small_terminals_keep_keys_detail_and_dialog_hints_on_screen(
    ds: DataSet, size: tuple[int, int]
) -> None:
    app = make_app(ds)
    async with app.run_test(size=size) as pilot:
        screen = await scanned(pilot)
        text = screen_text(app)
        assert "rcxd decide · space next · f filter" in text  # our one-line key hints
        assert "Flags are evidence, not proof." in text
        assert all(len(line.rstrip()) <= size[0] for line in text.splitlines())
        table, detail = screen.table.region, screen.query_one(RowDetailPanel).region
        assert detail.y >= table.bottom and detail.height >= 5  # the detail goes under the table

        await pilot.press("enter")  # the whole-screen detail uses the whole screen
        await pilot.pause()
        full = screen.query_one(RowDetailPanel).region
        assert full.width == size[0] and full.height >= size[1] - 4
        await pilot.press("escape")

        await pilot.press("f")
        assert "enter chooses · escape cancels" in screen_text(app)
        await pilot.press("escape")

        await pilot.press("e")
        dialog = app.screen
        assert isinstance(dialog, ExportDialog)
        assert isinstance(app.focused, RadioSet)  # the file type first, not the path box
        path = dialog.query_one("#export-path", Input)
        assert path.value.endswith(".decisions.parquet")
        await pilot.press("down")
        assert dialog.kind == "cleaned" and path.value.endswith(".cleaned.parquet")
        assert dialog.query_one("#export", Button).region.bottom <= size[1]  # the buttons are on screen
        await pilot.press("escape")
        assert app.focused is screen.table


async def test_wide_terminal_keeps_the_detail_beside_the_table(ds: DataSet) -> None:
    app = make_app(ds)
    async with app.run_test(size=SIZE) as pilot:
        screen = await scanned(pilot)
        table, detail = screen.table.region, screen.query_one(RowDetailPanel).region
        assert detail.x >= table.right and detail.y == table.y


# ------------------------------------------------------------------------------------ rows during the scan


async def test_provisional_rows_come_within_seconds_and_take_decisions_during_a_long_scan(
    ds: DataSet, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    """Each refit is slowed to 0.5 s (about half a minute for the support rows of this data): the rows
    must show long before that, marked provisional, keep the cursor's row when re-ranked, take a
    decision, and stay when the scan is cancelled."""
    monkeypatch.setenv("HOLDFAST_CACHE_DIR", str(tmp_path / "fresh-cache"))
    real = holdfast.engine.scan.run_scan

    def slow(path, spec, *, progress=None, **kw):  # type: ignore[no-untyped-def]
        def crawl(done: int, total: int, eta: float | None) -> None:
            time.sleep(0.5)
            if progress is not None:
                progress(done, total, eta)

        return real(path, spec, progress=crawl, **kw)

    monkeypatch.setattr(holdfast.engine.scan, "run_scan", slow)
    app = make_app(ds)
    async with app.run_test(size=SIZE) as pilot:
        screen = inspect(app)
        start = time.monotonic()
        await until(pilot, lambda: screen.table.row_count > 0, timeout=20)
        assert time.monotonic() - start < 15
        assert screen._scan_state == "running" and screen.provisional
        assert "provisional ranking" in region_text(app, "#status")
        assert "LOO pred*" in screen_text(app)
        partial = screen.rows
        assert partial is not None and "loo_pending" in partial and partial["loo_pending"].any()

        await pilot.press("down", "down")
        row = screen.table.cursor_row
        rid = screen.book.ids[row]  # type: ignore[union-attr,index]
        await pilot.press("x")  # a decision during the scan goes to the journal at once
        assert screen.context.session.journal.current()[rid].decision == "exclude"

        # the next provisional findings re-rank the rows; the cursor stays on the same row
        await until(pilot, lambda: screen.rows is not partial, timeout=20)
        assert screen.table.cursor_row == row
        assert screen.table.value("decision", row) == "exclude"

        await pilot.press("escape")  # cancel: the rows stay
        await until(pilot, lambda: screen._scan_state == "cancelled", timeout=30)
        assert screen.table.row_count == 160 and screen.table.cursor_row == row
        assert screen.context.session.journal.current()[rid].decision == "exclude"


# ------------------------------------------------------------------------------------ margin of this row


def test_histogram_points_at_the_current_value() -> None:
    hist = histogram(np.linspace(-2.0, 2.0, 101), bins=20)
    width = 60
    bars = HistogramBars(hist, current=0.0)
    lines = [line.plain for line in bars.lines(width)]
    axis, pointer = lines[-2], lines[-1]
    assert pointer.strip().startswith("▲ this row +0.00")
    assert abs(pointer.index("▲") - axis.index("┴")) <= 1  # under the 0 marker
    left = [line.plain for line in HistogramBars(hist, current=-9.0).lines(width)][-1]
    right = [line.plain for line in HistogramBars(hist, current=9.0).lines(width)][-1]
    assert left.index("▲") < right.index("▲")  # beyond the bins: pointed at from the nearer end
    assert len(right.rstrip()) <= width and len(left.rstrip()) <= width
    assert len([line.plain for line in HistogramBars(hist).lines(width)]) == len(lines) - 1


async def test_overview_points_at_the_margin_of_the_row_under_the_cursor(ds: DataSet) -> None:
    app = make_app(ds)
    async with app.run_test(size=SIZE) as pilot:
        screen = await scanned(pilot)
        panel = screen.query_one(OverviewPanel)
        await until(pilot, lambda: panel.margin_hist is not None)
        await pilot.press("v")
        await pilot.pause(0.2)
        rows = screen.scan.findings.rows
        for _ in range(2):
            margin = rows["margin"].iat[screen.table.cursor_row]
            lines = screen_text(app).splitlines()
            axis = next(i for i, line in enumerate(lines) if "┴0" in line)
            assert "▲" in lines[axis + 1] and f"{margin:+.2f}" in lines[axis + 1], lines[axis + 1]
            await pilot.press("escape")
            await pilot.press("end")
            await pilot.pause(0.2)
            await pilot.press("v")
            await pilot.pause(0.2)


# ------------------------------------------------------------------------------------------ what-if words


async def test_what_if_says_loo_against_edited_labels_is_partly_self_fulfilling(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    ds = split_dataset(tmp_path, monkeypatch)
    held = ds.frame["holdout"].to_numpy()
    app = make_app(ds)
    async with app.run_test(size=SIZE) as pilot:
        screen = await scanned(pilot)
        await pilot.press("r")  # the top review row
        await pilot.press("f")
        await choose(pilot, "held_out")
        await pilot.press("r")  # and one held-out row
        held_id = screen.book.ids[screen.table.cursor_row]  # type: ignore[union-attr,index]
        assert held[screen.table.cursor_row]  # type: ignore[index]
        await pilot.press("w")
        await until(pilot, lambda: isinstance(app.screen, WhatIfScreen), timeout=120)
        await until(pilot, lambda: "honest check" in " ".join(screen_text(app).split()))  # painted
        text = " ".join(screen_text(app).split())
        assert "partly self-fulfilling" in text and "held-out error" in text and "honest check" in text
        changed = app.screen.query_one("#what-if-changed", RowTable)
        ids = [changed.value("id", p) for p in range(changed.row_count)]
        assert held_id in ids
        p = ids.index(held_id)
        for column in ("status_before", "status_after"):
            status = str(changed.value(column, p))
            assert status.startswith("held out, ") and "LOO" not in status and "support" not in status
