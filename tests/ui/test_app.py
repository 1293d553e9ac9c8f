"""The inspector app driven headlessly with the pilot: scan worker, sort, filter, decisions, journal,
export, reopening, literal data text and a failing scan.

Expected values come from outside the UI: row orders from pandas ``sort_values``, the journal read back
through ``holdfast.review.journal.Journal``, exported files read with pandas, the cleaned data set rebuilt
from
the original frame with pandas operations.
"""

from __future__ import annotations

import io
import re
import threading
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from rich.console import Console
from textual.widgets import Input, RadioButton, Static

import holdfast.engine.scan
from holdfast.review.decisions import read_decisions
from holdfast.review.journal import Journal
from holdfast.ui.screens.dialogs import ConfirmDialog, TextDialog
from holdfast.ui.screens.export import ExportDialog
from holdfast.ui.screens.help import HelpScreen
from holdfast.ui.widgets.row_detail import RowDetailPanel

from .inspector_kit import (
    ANSI_ID,
    MARKUP_ID,
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


def session_path(ds: DataSet) -> Path:
    return ds.data.with_name("packhouse.holdfast.db")


# ---------------------------------------------------------------------------------------------- opening


async def test_opens_at_once_scans_in_a_worker_and_fills_the_table(ds: DataSet) -> None:
    app = make_app(ds)
    async with app.run_test(size=SIZE) as pilot:
        screen = inspect(app)
        assert screen.table.row_count == 0  # the screen is up before the scan is done
        screen = await scanned(pilot)
        assert screen._scan_state == "done"
        rows = screen.scan.findings.rows
        assert screen.table.row_count == len(ds.frame) == len(rows)
        # Initial order: most suspicious first (pandas sort of the findings' score, NaN last).
        expected = rows["score"].sort_values(ascending=False, kind="stable", na_position="last").index
        assert screen.table.view_positions()[:20].tolist() == expected[:20].tolist()
        text = screen_text(app)
        summary = screen.scan.findings.summary
        assert f"support rows d {summary['d']}" in text
        assert "evidence, not proof" in text
        first_id = str(rows["id"].iloc[expected[0]])
        assert first_id in text
        assert "row 1 of 160" in text
        assert session_path(ds).is_file()


# ---------------------------------------------------------------------------------------------- view


async def test_sort_filter_move_and_jump(ds: DataSet) -> None:
    app = make_app(ds)
    async with app.run_test(size=SIZE) as pilot:
        screen = await scanned(pilot)
        table = screen.table
        rows = screen.scan.findings.rows

        await pilot.press("s")  # next column after score: flags, as text from A to Z
        assert (table.sort_key, table.sort_descending) == ("flag_names", False)
        expected = rows["flag_names"].astype(object).sort_values(kind="stable").index.tolist()
        assert table.view_positions().tolist() == expected
        await pilot.press("s")  # then flip count, largest first
        assert (table.sort_key, table.sort_descending) == ("flip_count", True)
        expected = rows["flip_count"].sort_values(ascending=False, kind="stable").index.tolist()
        assert table.view_positions().tolist() == expected
        await pilot.press("o")
        assert not table.sort_descending
        expected = rows["flip_count"].sort_values(ascending=True, kind="stable").index.tolist()
        assert table.view_positions().tolist() == expected
        assert "sort: flips ▲" in screen_text(app)

        await pilot.press("f")
        await choose(pilot, "loo_miss")
        misses = set(np.flatnonzero(rows["loo_miss"].to_numpy()).tolist())
        assert set(table.view_positions().tolist()) == misses and misses
        assert "filter: LOO misses" in screen_text(app)

        await pilot.press("f")  # without a split there is no held-out filter to offer
        assert "held_out_miss" not in [k for k, _ in app.screen.choices]
        await pilot.press("escape")

        await pilot.press("f")
        await choose(pilot, "label:processing")
        view = table.view_positions()
        assert (rows["label"].to_numpy()[view] == "processing").all()
        assert len(view) == int((ds.frame["grade"] == "processing").sum())

        await pilot.press("f")
        await choose(pilot, "support")
        assert set(table.view_positions().tolist()) == set(np.flatnonzero(rows["support"]).tolist())

        await pilot.press("f")
        await choose(pilot, "all")
        await pilot.press("home", "down", "down", "down")
        assert table.cursor_index == 3
        position = table.cursor_row
        await pilot.pause(0.2)  # the detail panel follows the cursor after a short delay
        assert app.query_one(RowDetailPanel).detail.position == position
        assert str(rows["id"].iloc[position]) in region_text(app, "#detail")

        await pilot.press("g")
        await pilot.press(*"crate-0042", "enter")
        assert table.cursor_row == 42

        await pilot.press("f")
        await choose(pilot, "label:premium")
        hidden = int(np.flatnonzero(ds.frame["grade"].to_numpy() == "processing")[0])
        await pilot.press("g")
        await pilot.press(*f"crate-{hidden:04d}", "enter")
        assert table.cursor_row == hidden  # the filter was lifted to show it
        assert screen.filter_key == "all"
        await pilot.press("g")
        await pilot.press(*"no-such-crate", "enter")
        assert table.cursor_row == hidden
        assert "No row with id no-such-crate" in screen_text(app)


# ---------------------------------------------------------------------------------------------- decisions


def current(ds: DataSet) -> dict:
    with Journal.open(session_path(ds)) as journal:
        return journal.current(include_notes_only=True)


async def test_whole_screen_overview_shows_the_full_sources(ds: DataSet) -> None:
    from holdfast.ui.widgets.overview import OverviewPanel

    app = make_app(ds)
    async with app.run_test(size=SIZE) as pilot:
        screen = await scanned(pilot)
        panel = screen.query_one(OverviewPanel)
        title = "The Nature of Statistical Learning Theory"  # the support-fraction bound's source
        assert not panel.full and title not in re.sub(r"\s+", " ", screen_text(app))
        await pilot.press("v")
        await until(pilot, lambda: title in re.sub(r"\s+", " ", screen_text(app)))
        assert screen.maximized is panel and panel.full
        await pilot.press("v")
        await pilot.pause()
        assert screen.maximized is None and not panel.full


async def test_held_out_errors_have_their_own_filter(tmp_path: Path, monkeypatch) -> None:  # type: ignore[no-untyped-def]
    """With a split, "LOO misses" counts training rows only; the final model's errors on held-out rows
    are a filter of their own (the two sets are disjoint and together make up the loo_miss column)."""
    monkeypatch.setenv("HOLDFAST_CACHE_DIR", str(tmp_path / "cache"))
    ds = write_dataset(tmp_path / "data")
    frame = ds.frame.assign(holdout=np.arange(len(ds.frame)) % 4 == 0)
    frame.to_parquet(ds.data, index=False)
    spec_text = ds.spec_path.read_text().replace('id = "crate"', 'id = "crate"\nsplit = "holdout"')
    ds.spec_path.write_text(spec_text)
    ds = DataSet(ds.data, ds.spec_path, frame)
    app = make_app(ds)
    async with app.run_test(size=SIZE) as pilot:
        screen = await scanned(pilot)
        rows = screen.scan.findings.rows
        held = frame["holdout"].to_numpy()
        miss = rows["loo_miss"].to_numpy(dtype=bool)
        assert (miss & held).any() and (miss & ~held).any()
        await pilot.press("f")
        await choose(pilot, "loo_miss")
        assert set(screen.table.view_positions().tolist()) == set(np.flatnonzero(miss & ~held).tolist())
        await pilot.press("f")
        await choose(pilot, "held_out_miss")
        assert set(screen.table.view_positions().tolist()) == set(np.flatnonzero(miss & held).tolist())
        assert "filter: held-out errors" in screen_text(app)


async def test_decisions_are_in_the_journal_before_the_table_shows_them(ds: DataSet) -> None:
    app = make_app(ds)
    async with app.run_test(size=SIZE) as pilot:
        screen = await scanned(pilot)
        table = screen.table
        ids = screen.book.ids
        labels = screen.scan.findings.rows["label"].astype(str).to_numpy()

        # The journal write happens first: make the table's redraw check the journal at that moment.
        seen: list[dict] = []
        update = table.update_values

        def checking(column, positions, values):  # type: ignore[no-untyped-def]
            seen.append({ids[p]: current(ds).get(ids[p]) for p in positions})
            return update(column, positions, values)

        table.update_values = checking  # type: ignore[method-assign]

        order = table.view_positions()
        await pilot.press("home", "r")
        p0 = int(order[0])
        other = "premium" if labels[p0] == "processing" else "processing"
        assert table.cursor_index == 0  # the cursor stays on the row decided on
        await pilot.press("down", "c", "down", "x", "down", "d")
        p1, p2, p3 = (int(p) for p in order[1:4])
        state = current(ds)
        assert (state[ids[p0]].decision, state[ids[p0]].new_label) == ("relabel", other)
        assert [state[ids[p].__str__()].decision for p in (p1, p2, p3)] == ["confirm", "exclude", "defer"]
        assert seen[0][ids[p0]].decision == "relabel"  # committed when the table was told
        assert table.value("decision", p0) == f"relabel → {other}"
        assert [table.value("decision", p) for p in (p1, p2, p3)] == ["confirm", "exclude", "defer"]
        assert f"relabel → {other}" in screen_text(app)

        await pilot.press("n")  # still on p3 (deferred): add a note
        assert isinstance(app.screen, TextDialog)
        await pilot.press(*"seal torn", "enter")
        assert current(ds)[ids[p3]].note == "seal torn"
        assert current(ds)[ids[p3]].decision == "defer"
        assert table.value("decision", p3) == "defer ✎"

        await pilot.press("u")  # undo the note
        assert current(ds)[ids[p3]].note is None
        await pilot.press("u")  # undo the defer
        assert ids[p3] not in current(ds)
        assert table.value("decision", p3) == ""
        await pilot.press("y")  # redo the defer
        assert current(ds)[ids[p3]].decision == "defer"
        assert table.value("decision", p3) == "defer"

        await pilot.press("home", "backspace")  # clear the relabel
        assert ids[p0] not in current(ds)
        assert table.value("decision", p0) == ""
        assert "decided 3 of 160" in screen_text(app)


async def test_relabel_with_more_classes_asks_which(ds: DataSet) -> None:
    frame = ds.frame.copy()
    frame.loc[frame.index % 3 == 0, "grade"] = "juice"
    frame.to_parquet(ds.data, index=False)
    app = make_app(ds)
    async with app.run_test(size=SIZE) as pilot:
        screen = await scanned(pilot)
        if screen._scan_state != "done":
            pytest.skip(f"multiclass scan not available: {screen_text(app).splitlines()[4:6]}")
        position = screen.table.cursor_row
        label = str(screen.scan.findings.rows["label"].iloc[position])
        await pilot.press("r")
        dialog = app.screen
        keys = [k for k, _ in dialog.choices]  # type: ignore[attr-defined]
        assert sorted(keys) == sorted({"premium", "processing", "juice"} - {label})
        await choose(pilot, keys[-1])
        state = current(ds)[screen.book.ids[position]]
        assert (state.decision, state.new_label) == ("relabel", keys[-1])


async def test_bulk_decision_asks_first_and_is_one_undo(ds: DataSet) -> None:
    app = make_app(ds)
    async with app.run_test(size=SIZE) as pilot:
        screen = await scanned(pilot)
        rows = screen.scan.findings.rows
        await pilot.press("f")
        await choose(pilot, "loo_miss")
        view = screen.table.view_positions()
        n = len(view)
        assert n > 0

        first = screen.book.ids[screen.table.cursor_row]
        await pilot.press("c")  # one row of the view already has a decision
        await pilot.press("b")
        await choose(pilot, "exclude")
        assert isinstance(app.screen, ConfirmDialog)
        assert f"Exclude {n} rows (every row in this view)?" in screen_text(app)
        assert "1 of them have another decision now; it will be replaced" in screen_text(app)
        await pilot.press("n")  # declined: nothing written
        assert {k: d.decision for k, d in current(ds).items()} == {first: "confirm"}

        await pilot.press("b")
        await choose(pilot, "exclude")
        await pilot.press("y")
        state = current(ds)
        expected_ids = {str(i) for i in rows["id"].to_numpy()[view]}
        assert set(state) == expected_ids
        assert {d.decision for d in state.values()} == {"exclude"}
        assert all(screen.table.value("decision", p) == "exclude" for p in view)

        await pilot.press("u")  # the bulk action is one undo: back to the single confirm
        assert {k: d.decision for k, d in current(ds).items()} == {first: "confirm"}
        await pilot.press("u")
        assert current(ds) == {}

        await pilot.press("f")
        await choose(pilot, "all")
        await pilot.press("b")
        await choose(pilot, "relabel:premium")
        processing = int((rows["label"] == "processing").sum())
        text = screen_text(app)
        assert f"Relabel {processing} rows to premium" in text
        assert f"{len(rows) - processing} rows already labelled premium" in text
        await pilot.press("y")
        assert len(current(ds)) == processing

        await pilot.press("f")
        await choose(pilot, "undecided")
        assert len(screen.table.view_positions()) == len(rows) - processing


# ---------------------------------------------------------------------------------------------- export


async def export_via_dialog(pilot, kind: str, path: Path) -> None:  # type: ignore[no-untyped-def]
    app = pilot.app
    await pilot.press("e")
    dialog = app.screen
    assert isinstance(dialog, ExportDialog)
    if kind != "decisions":
        await pilot.click(f"#kind-{kind}")
    path_input = dialog.query_one("#export-path", Input)
    assert path_input.value.startswith(str(pilot.app.context.data_path.with_suffix("")))
    path_input.value = str(path)
    await pilot.press("enter")
    await pilot.pause()


async def test_export_decisions_and_cleaned_data_from_the_ui(ds: DataSet, tmp_path: Path) -> None:
    app = make_app(ds)
    async with app.run_test(size=SIZE) as pilot:
        screen = await scanned(pilot)
        ids = screen.book.ids
        order = screen.table.view_positions()
        await pilot.press("home", "r", "down", "x", "down", "c")
        await pilot.press("n", *"checked twice", "enter")
        assert app.screen is screen
        relabelled, excluded, confirmed = (ids[int(p)] for p in order[:3])

        out = tmp_path / "out" / "decisions.csv"
        out.parent.mkdir()
        await export_via_dialog(pilot, "decisions", out)
        await app.workers.wait_for_complete()
        await until(pilot, out.exists)
        table = read_decisions(out)
        assert table.set_index("id")["decision"].to_dict() == {
            relabelled: "relabel",
            excluded: "exclude",
            confirmed: "confirm",
        }
        assert table.set_index("id").loc[confirmed, "note"] == "checked twice"
        await until(pilot, lambda: "Wrote 3 decisions" in str(screen.query_one("#message").render()))
        assert str(out) in str(screen.query_one("#message").render())

        cleaned_path = tmp_path / "out" / "clean.parquet"
        await export_via_dialog(pilot, "cleaned", cleaned_path)
        await app.workers.wait_for_complete()
        await until(pilot, cleaned_path.exists)
        cleaned = pd.read_parquet(cleaned_path)
        expected = ds.frame[ds.frame["crate"] != excluded].copy()
        new = table.set_index("id").loc[relabelled, "new_label"]
        expected.loc[expected["crate"] == relabelled, "grade"] = new
        pd.testing.assert_frame_equal(cleaned.reset_index(drop=True), expected.reset_index(drop=True))

        # Exporting over an existing file asks first; "no" keeps the old file.
        before = out.read_bytes()
        await pilot.press("home", "down", "down", "down", "d")
        await export_via_dialog(pilot, "decisions", out)
        assert isinstance(app.screen, ConfirmDialog)
        await pilot.press("n")
        await app.workers.wait_for_complete()
        assert out.read_bytes() == before
        await export_via_dialog(pilot, "decisions", out)
        await pilot.press("y")
        await app.workers.wait_for_complete()
        await until(pilot, lambda: len(read_decisions(out)) == 4)


async def test_report_export_is_disabled_with_a_reason_when_missing(ds: DataSet, monkeypatch) -> None:  # type: ignore[no-untyped-def]
    import holdfast.ui.screens.inspect_work as inspect_module

    monkeypatch.setattr(inspect_module, "_module_exists", lambda name: name != "holdfast.output.report")
    app = make_app(ds)
    async with app.run_test(size=SIZE) as pilot:
        await scanned(pilot)
        await pilot.press("e")
        button = app.screen.query_one("#kind-report", RadioButton)
        assert button.disabled
        assert "not available" in str(button.label)


# ---------------------------------------------------------------------------------------------- sessions


async def test_reopening_the_session_restores_the_decisions(ds: DataSet) -> None:
    app = make_app(ds)
    async with app.run_test(size=SIZE) as pilot:
        screen = await scanned(pilot)
        order = screen.table.view_positions()
        await pilot.press("home", "x", "down", "d", "n", *"ask the grader", "enter")
        decided = {screen.book.ids[int(p)]: screen.table.value("decision", int(p)) for p in order[:2]}
        await pilot.press("ctrl+q")
    app.context.session.close()  # the journal and the session lock

    again = make_app(ds)
    async with again.run_test(size=SIZE) as pilot:
        screen = await scanned(pilot)
        assert screen.scan.from_cache
        shown = {rid: screen.table.value("decision", screen.book.position[rid]) for rid in decided}
        assert shown == decided
        assert list(decided.values()) == ["exclude", "defer ✎"]
        assert "decided 2 of 160" in screen_text(again)
        await pilot.press("u")  # undo survives reopening: takes back the note
        assert current(ds)[list(decided)[1]].note is None


async def test_changed_data_warns_and_keeps_unknown_decisions(ds: DataSet) -> None:
    with Journal.create(
        session_path(ds),
        fingerprint="0" * 16,
        data_path=ds.data,
        spec_text=ds.spec.to_toml(),
        label_column="grade",
        id_column="crate",
    ) as journal:
        journal.record("crate-0001", "confirm")
        journal.record("crate-9999", "exclude", note="gone from the data")
    app = make_app(ds)
    async with app.run_test(size=SIZE) as pilot:
        screen = await scanned(pilot)
        text = screen_text(app)
        assert "data file changed since this session was made" in text
        assert "1 row(s) with decisions are not in this data" in text
        assert screen.book.unmatched == ["crate-9999"]
        assert screen.table.value("decision", screen.book.position["crate-0001"]) == "confirm"
    assert set(current(ds)) == {"crate-0001", "crate-9999"}


async def test_session_made_with_another_spec_warns(ds: DataSet) -> None:
    other = ds.spec_path.read_text().replace("C = 1.0", "C = 4.0")
    from holdfast.data.spec import spec_from_text

    with Journal.create(
        session_path(ds),
        fingerprint="x",
        data_path=ds.data,
        spec_text=spec_from_text(other).to_toml(),
        label_column="grade",
        id_column="crate",
    ):
        pass
    app = make_app(ds)
    async with app.run_test(size=SIZE) as pilot:
        await scanned(pilot)
        assert "made with another spec" in screen_text(app)


# ---------------------------------------------------------------------------------------------- safety


async def test_data_text_is_shown_literally(ds: DataSet) -> None:
    app = make_app(ds)
    async with app.run_test(size=SIZE) as pilot:
        screen = await scanned(pilot)
        for row_id, shown in ((MARKUP_ID, MARKUP_ID), (ANSI_ID, "\\x1b[31mred\\x1b[0m")):
            assert screen.table.jump_to_id(row_id)
            await pilot.press("c")
            await pilot.pause(0.2)
            text = screen_text(app)
            assert f"Saved: {shown} confirm" in text  # the status message
            assert shown in region_text(app, "#detail")  # the detail panel
            table_lines = [line for line in text.splitlines() if line.startswith(f" {shown} ")]
            assert table_lines, "the id is not on screen literally"
            assert "\x1b" not in text
        await pilot.press("g", *MARKUP_ID, "enter")
        assert screen.book.ids[screen.table.cursor_row] == MARKUP_ID


async def test_help_lists_the_same_keys_as_the_bindings(ds: DataSet) -> None:
    app = make_app(ds)
    async with app.run_test(size=SIZE) as pilot:
        screen = await scanned(pilot)
        await pilot.press("question_mark")
        assert isinstance(app.screen, HelpScreen)
        # painted: the help's own title and the caution (a loaded machine may need a few frames)
        wanted = ["keys and what the screen shows", "evidence, not proof"]
        await until(pilot, lambda: all(w in screen_text(app) for w in wanted), timeout=20.0)
        # the keys table holds every binding (read whole: the help scrolls, its end is below the fold)
        console = Console(width=200, record=True, file=io.StringIO())
        console.print(app.screen.query_one("#help-keys", Static).content)
        keys_text = console.export_text()
        for binding in type(screen).BINDINGS:
            assert binding.description in keys_text, binding  # type: ignore[union-attr]
        await pilot.press("escape")
        assert app.screen is screen


# ---------------------------------------------------------------------------------------------- failures


async def test_a_failed_scan_shows_the_error_and_the_app_stays(ds: DataSet) -> None:
    ds.spec_path.write_text('[data]\nlabel = "grade"\nid = "crate"\nfeatures = ["diameter_mm", "weight_g"]\n')
    app = make_app(ds)
    async with app.run_test(size=SIZE) as pilot:
        screen = await scanned(pilot)
        assert screen._scan_state == "failed"
        text = screen_text(app)
        assert "Scan failed" in text and "weight_g" in text
        assert app.is_running
        await pilot.press("c")  # decision keys do nothing without rows
        assert current(ds) == {}
        assert screen.check_action("rescan", ()) is True


async def test_cancel_keeps_finished_refits_and_resume_finishes(
    ds: DataSet, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setenv("HOLDFAST_CACHE_DIR", str(tmp_path / "fresh-cache"))
    gate, holding = threading.Event(), threading.Event()
    real = holdfast.engine.scan.run_scan
    calls = []

    def gated(path, spec, *, progress=None, should_cancel=None, **kw):  # type: ignore[no-untyped-def]
        def held(done: int, total: int, eta: float | None) -> None:
            progress(done, total, eta)
            if done > 0 and not calls:  # hold the first scan after its first stored refit
                holding.set()
                gate.wait(30)

        try:
            return real(path, spec, progress=held, should_cancel=should_cancel, **kw)
        finally:
            calls.append(1)

    monkeypatch.setattr(holdfast.engine.scan, "run_scan", gated)
    app = make_app(ds)
    async with app.run_test(size=SIZE) as pilot:
        screen = inspect(app)
        label = screen.query_one("#progress-label")
        await until(pilot, lambda: "Refitting without each support row" in str(label.content))
        assert "escape cancels" in str(label.content)
        await until(pilot, holding.is_set)  # a refit is stored: cancelling now keeps it
        await pilot.press("escape")
        gate.set()
        await scanned(pilot)
        assert screen._scan_state == "cancelled"
        assert "Finished refits are kept" in screen_text(app)
        await pilot.press("ctrl+r")
        await until(pilot, lambda: screen._scan_state == "done")
        assert screen.scan.findings.summary["resumed_refits"] >= 1
        assert screen.table.row_count == 160


# ------------------------------------------------------------------------------------------ what-if, report


async def test_what_if_shows_the_refit_with_the_decisions_applied(ds: DataSet) -> None:
    from holdfast.review.whatif import what_if
    from holdfast.ui.screens.whatif import WhatIfScreen

    app = make_app(ds)
    async with app.run_test(size=SIZE) as pilot:
        screen = await scanned(pilot)
        await pilot.press("f")
        await choose(pilot, "loo_miss")
        await pilot.press("b")
        await choose(pilot, "exclude")
        await pilot.press("y")
        await pilot.press("w")
        await until(pilot, lambda: isinstance(app.screen, WhatIfScreen))
        # the pushed screen composes and paints on later turns of the loop (more than one under load: an
        # empty screen was read here once)
        await until(pilot, lambda: "Rows whose status changes" in screen_text(app))
        shown = app.screen.result
        text = screen_text(app)
        # The same refit run directly on the journal's decisions gives the numbers on screen.
        direct = what_if(screen.scan, app.context.session.journal.current())
        assert shown.comparison == direct.comparison
        assert f"{direct.excluded:,} excluded" in text
        _, before, after = next(r for r in direct.comparison if r[0] == "LOO errors")
        line = next(line for line in text.splitlines() if line.strip().startswith("LOO errors"))
        assert f"{before:,}" in line and f"{after:,}" in line
        assert f"Rows whose status changes: {len(direct.changed):,}" in text
        await pilot.press("escape")
        assert app.screen is screen


async def test_report_export_writes_markdown(ds: DataSet, tmp_path: Path) -> None:
    app = make_app(ds)
    async with app.run_test(size=SIZE) as pilot:
        screen = await scanned(pilot)
        await pilot.press("g", *"crate-0042", "enter", "x")
        assert current(ds)["crate-0042"].decision == "exclude"
        report = tmp_path / "report.md"
        await export_via_dialog(pilot, "report", report)
        await until(pilot, lambda: "Wrote the report" in str(screen.query_one("#message").content), 180)
        text = report.read_text()
        assert "evidence" in text.lower()
        assert "crate-0042" in text  # the decision made in the UI is in the report


async def test_command_palette_offers_the_same_actions(ds: DataSet) -> None:
    app = make_app(ds)
    async with app.run_test(size=SIZE) as pilot:
        screen = await scanned(pilot)
        first = screen.book.ids[screen.table.cursor_row]
        await pilot.press("ctrl+p")
        await pilot.press(*"exclude")
        await pilot.pause(0.5)
        assert "Exclude  (x)" in screen_text(app)
        await pilot.press("enter")
        await until(pilot, lambda: first in current(ds))
        assert current(ds)[first].decision == "exclude"
