"""Row detail, overview and histogram widgets on a real scan, read back from the screen.

The scan runs on a generated packhouse table (two sensor readings, a packing line, a grade) with a
few planted wrong grades and one planted outlier, so the panel has support rows, flips, dissenting
neighbours and an unusual value to show. Histogram bars are checked against counts worked out by hand.
"""

from __future__ import annotations

import math
import re

import numpy as np
import pandas as pd
import pytest
from rich.color import Color
from textual.app import App, ComposeResult
from textual.containers import Horizontal

from holdfast.data.spec import spec_from_text
from holdfast.engine.scan import Scan, run_scan
from holdfast.insight.detail import DetailContext, RowDetail
from holdfast.insight.histograms import Histogram, histogram
from holdfast.ui.widgets.histogram import BLOCKS, HistogramBars, HistogramView
from holdfast.ui.widgets.overview import OverviewPanel
from holdfast.ui.widgets.row_detail import UNUSUAL_MARK, RowDetailPanel

from .conftest import screen_lines

MARKUP_ID = "[bold red]x[/]"
ANSI_LINE = "\x1b[31mL3"
JUICE = "[red]juice[/]"  # a label that looks like markup
OUTLIER = 7  # row whose firmness is planted far outside its grade
SIZE = (150, 70)
PANEL_WIDTH = 50


def packhouse(n: int = 160, seed: int = 5) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    diameter = rng.normal(70.0, 6.0, n)
    firmness = rng.normal(60.0, 8.0, n)
    good = (diameter - 70.0) / 6.0 + (firmness - 60.0) / 8.0 + 0.4 * rng.normal(size=n) > 0
    grade = np.where(good, "premium", JUICE).astype(object)
    for r in (3, 11, 29, 41):  # planted slips
        grade[r] = "premium" if grade[r] == JUICE else JUICE
    firmness[OUTLIER] = 140.0
    ids = np.array([f"c{i:04d}" for i in range(n)], dtype=object)
    ids[5] = MARKUP_ID
    line = np.array(["L1", "L2", ANSI_LINE], dtype=object)[np.arange(n) % 3]
    return pd.DataFrame(
        {"crate": ids, "diameter": diameter, "firmness": firmness, "line": line, "grade": grade}
    )


@pytest.fixture(scope="module")
def scan(tmp_path_factory) -> Scan:
    tmp = tmp_path_factory.mktemp("widgets")
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("HOLDFAST_CACHE_DIR", str(tmp / "cache"))
        path = tmp / "packhouse.parquet"
        packhouse().to_parquet(path)
        spec = spec_from_text('[data]\nlabel = "grade"\nid = "crate"\n[learner]\nC = 1.0\n[insight]\nk = 6\n')
        return run_scan(path, spec)


@pytest.fixture(scope="module")
def ctx(scan) -> DetailContext:
    return DetailContext.from_scan(scan)


class Host(App):
    """A row-detail panel beside an overview; the styles are the test's, so colours can be checked."""

    CSS = f"""
    RowDetailPanel {{ width: {PANEL_WIDTH}; }}
    OverviewPanel {{ width: 1fr; height: 1fr; }}
    RowDetailPanel > .row-detail--unusual {{ color: #ff0000; }}
    RowDetailPanel > .row-detail--dissent {{ color: #00ff00; }}
    """

    def compose(self) -> ComposeResult:
        with Horizontal():
            yield OverviewPanel()
            yield RowDetailPanel()


def panel_lines(app: App, width: int = PANEL_WIDTH) -> list[str]:
    """The screen lines of the right-hand panel only."""
    return [line[-width:] for line in screen_lines(app)]


def line_with(lines: list[str], *parts: str) -> str:
    for line in lines:
        if all(p in line for p in parts):
            return line
    raise AssertionError(f"no line holds {parts!r}:\n" + "\n".join(lines))


def _flip_row(scan: Scan) -> int:
    rows = scan.findings.rows
    return int(np.flatnonzero(rows["flip_count"].to_numpy() > 0)[0])


async def show(app: App, pilot, detail: RowDetail | None, **kw) -> list[str]:
    app.query_one(RowDetailPanel).show(detail, **kw)
    await pilot.pause()
    return panel_lines(app)


async def test_held_out_row_says_predicted_not_loo(scan, ctx):
    """A held-out row was never trained on: the header shows the model's prediction, not a LOO one."""
    from dataclasses import replace

    d = replace(ctx.row_detail(_flip_row(scan)), held_out=True)
    app = Host()
    async with app.run_test(size=SIZE) as pilot:
        lines = await show(app, pilot, d)
        header = line_with(lines, d.id, "label", d.label)
        assert "→ predicted" in header and "LOO" not in header
        line_with(lines, "held-out row: never trained on")


async def test_detail_shows_header_features_neighbours_and_flips(scan, ctx):
    position = _flip_row(scan)
    d = ctx.row_detail(position)
    app = Host()
    async with app.run_test(size=SIZE) as pilot:
        lines = await show(app, pilot, d, decision="relabel → premium")
        text = "\n".join(lines)
        line_with(lines, d.id, "label", d.label)
        line_with(lines, "margin", f"{d.margin:+.3f}", "LOO margin", f"{d.loo_margin:+.3f}")
        line_with(lines, "logit", f"{d.linear_logit:+.2f}")
        line_with(lines, "score", f"{d.score:.3f}", "rank", f"{d.rank:,}")
        line_with(lines, "decision", "relabel → premium")
        for name, _reason in d.flags:
            assert name in text
        for r in d.features.itertuples():
            if r.kind == "numeric":
                line_with(lines, r.feature, f"{r.z:+.2f}", f"{r.class_mean:.4g}")
            else:
                line_with(lines, f"{r.share:.0%} share")
        for r in d.neighbours.itertuples():
            line = line_with(lines, r.id, f"{r.distance:.3f}")
            assert r.label in line
            assert line.lstrip().startswith("≠") == (not r.same_label)
        # the flipped rows sit at the bottom: scroll there
        panel = app.query_one(RowDetailPanel)
        panel.scroll_end(animate=False)
        await pilot.pause()
        lines = panel_lines(app)
        assert "Rows that flip without it" in "\n".join(lines)
        for r in d.flipped.head(5).itertuples():
            line = line_with(lines, r.id, "→")
            assert line.split()[1] == r.label
            assert f"{r.prediction} → {r.prediction_without}" in line


async def test_unusual_value_is_marked_and_coloured(scan, ctx):
    d = ctx.row_detail(OUTLIER)
    z = d.features.set_index("feature").at["firmness", "z"]
    assert abs(z) >= 3  # the planted outlier
    app = Host()
    async with app.run_test(size=SIZE) as pilot:
        lines = await show(app, pilot, d)
        line = line_with(lines, "firmness", f"{z:+.2f}")
        assert line.rstrip().endswith(UNUSUAL_MARK)
        assert "unusual for the label" in "\n".join(lines)
        diameter_z = d.features.set_index("feature").at["diameter", "z"]
        assert abs(diameter_z) < 3
        assert not line_with(lines, "diameter", f"{diameter_z:+.2f}").rstrip().endswith(UNUSUAL_MARK)
        # the mark carries the unusual style set by the host's CSS
        marks = [
            seg
            for strip in app.screen._compositor.render_strips()
            for seg in strip
            if seg.text.strip() == UNUSUAL_MARK
        ]
        assert marks and all(seg.style.color == Color.parse("#ff0000") for seg in marks)


async def test_data_text_is_literal(scan, ctx):
    """Markup in ids and labels and an ANSI escape in a value are shown as the characters they are."""
    app = Host()
    async with app.run_test(size=SIZE) as pilot:
        lines = await show(app, pilot, ctx.row_detail(5))
        line_with(lines, MARKUP_ID)  # literally, brackets and all
        ansi_row = int(np.flatnonzero(scan.prepared.frame["line"].to_numpy() == ANSI_LINE)[0])
        lines = await show(app, pilot, ctx.row_detail(ansi_row))
        line_with(lines, "line", "\\x1b[31mL3")
        juice_row = int(np.flatnonzero(scan.prepared.frame["grade"].to_numpy() == JUICE)[0])
        lines = await show(app, pilot, ctx.row_detail(juice_row))
        line_with(lines, "label", JUICE)
        for strip in app.screen._compositor.render_strips():
            for seg in strip:
                assert "\x1b" not in seg.text


async def test_empty_detail_and_narrow_width(scan, ctx):
    app = Host()
    async with app.run_test(size=(80, 24)) as pilot:
        app.query_one(RowDetailPanel).styles.width = 40
        lines = await show(app, pilot, None)
        line_with([line[-40:] for line in lines], "No row selected.")
        lines = await show(app, pilot, ctx.row_detail(_flip_row(scan)))
        narrow = [line[-40:] for line in screen_lines(app)]
        d = ctx.row_detail(_flip_row(scan))
        line_with(narrow, d.features["feature"].iloc[0])
        assert app.query_one(RowDetailPanel).max_scroll_y > 0  # longer than the screen: it scrolls


async def test_overview_shows_counts_bounds_sources_and_histogram(scan):
    summary = dict(scan.findings.summary)
    summary["explanation"] = {
        "composition": {"d": summary["d"], "bounded_misclassified": 1, "bounded_correct": 2, "free": 3},
        "hints": [{"kind": "x", "text": "look at [b]these[/b] rows first"}, "a plain hint"],
    }
    rows = scan.findings.rows
    hist = histogram(rows["margin"], bins=16, by=rows["label"], groups=scan.findings.classes)
    app = Host()
    async with app.run_test(size=(220, 70)) as pilot:
        panel = app.query_one(OverviewPanel)
        panel.show(summary, hist)
        await pilot.pause()
        lines = [line[: 220 - PANEL_WIDTH] for line in screen_lines(app)]
        text = "\n".join(lines)
        line_with(lines, "support rows d", f"{summary['d']:,}")
        line_with(lines, "bounded", f"{summary['bounded']:,}", "free", f"{summary['free']:,}")
        line_with(lines, "training errors", f"{summary['training_errors']:,}")
        line_with(lines, "LOO errors (exact)", f"{summary['loo_errors']:,}")
        squashed = re.sub(r"\s+", " ", text)
        for item in summary["bounds"].values():  # compact: the value and the source's "Author Year"
            line_with(lines, item["name"], f"{item['value']:.4f}")
            assert item["source"].split(",")[0] in squashed
        assert "The Nature of Statistical Learning Theory" not in squashed
        panel.set_full(True)  # the whole-screen view (v) adds each full source
        await pilot.pause()
        full = re.sub(r"\s+", " ", "\n".join(line[: 220 - PANEL_WIDTH] for line in screen_lines(app)))
        for item in summary["bounds"].values():  # wrapped within its column: look for every word
            assert all(word in full for word in item["source"].split()), item["source"]
        panel.set_full(False)
        await pilot.pause()
        for label, n in summary["class_counts"].items():
            line_with(lines, label, f"{n:,}", f"{n / summary['m']:.0%}")
        for label in scan.findings.classes:  # a class-balance row and a histogram row per class
            total = f"{int(hist.counts[label].sum()):,}"
            drawn = [ln for ln in lines if label in ln and total in ln and any(b in ln for b in BLOCKS)]
            assert len(drawn) >= 2
        assert "look at [b]these[/b] rows first" in squashed and "a plain hint" in squashed
        line_with(lines, f"d {summary['d']}", "1 bounded and misclassified", "3 free")
        line_with(lines, "learner", "svm", "C=1")


async def test_overview_lists_a_few_features_and_keeps_the_learner_in_view(scan):
    """64 features (as in the digits data): the compact view names 8 and counts the rest, so the learner's
    settings stay on screen; the whole-screen view (v) names them all."""
    summary = dict(scan.findings.summary)
    names = [f"pixel_{i // 8}_{i % 8}" for i in range(64)]
    summary["data"] = {**dict(summary.get("data") or {}), "features": names}
    app = Host()
    async with app.run_test(size=(150, 30)) as pilot:
        panel = app.query_one(OverviewPanel)
        panel.show(summary, None)
        await pilot.pause()
        lines = [line[: 150 - PANEL_WIDTH] for line in screen_lines(app)]
        line_with(lines, "features", "64", "pixel_0_0")
        line_with(lines, "and 56 more (v: all)")
        line_with(lines, "learner", "svm", "C=1")
        assert not any("pixel_7_7" in ln for ln in lines)
        panel.set_full(True)
        await pilot.pause()
        full = re.sub(r"\s+", " ", "\n".join(line[: 150 - PANEL_WIDTH] for line in screen_lines(app)))
        assert "pixel_7_7" in full and "more (v: all)" not in full


def test_histogram_bars_follow_the_counts():
    """Bars worked out by hand: the tallest column is a full block, others ceil(8 * count / max)."""
    hist = Histogram(
        edges=np.array([-2.0, -1.0, 0.0, 1.0, 2.0]),
        counts={"a": np.array([0, 8, 4, 1]), "b": np.array([2, 0, 0, 0])},
        total=15,
        missing={"a": 1, "b": 0},
    )
    bars = HistogramBars(hist, marker=0.0)
    width = 1 + 1 + 8 + 1 + 2  # label, space, 2 cells per bin, space, total
    lines = [t.plain for t in bars.lines(width)]
    assert lines[0] == "a " + "  ██▄▄▁▁" + " 13"
    assert lines[1] == "b " + "▂▂      " + "  2"
    axis = lines[2][2:]
    assert axis.startswith("-2") and axis.endswith("2") and axis[4] == "┴"
    assert "1 value(s) missing" in lines[3]
    # fewer cells than bins: neighbouring bins are summed, [0+8, 4+1, 0+0, 0+0] -> full block, ceil(8*5/8)
    fine = Histogram(edges=np.linspace(-2, 2, 9), counts={"a": np.array([0, 8, 4, 1, 0, 0, 0, 0])}, total=13)
    narrow = [t.plain for t in HistogramBars(fine).lines(1 + 1 + 4 + 1 + 2)]
    assert narrow[0] == "a " + BLOCKS[-1] + BLOCKS[math.ceil(8 * 5 / 8) - 1] + "  " + " 13"


async def test_histogram_view_draws_and_clears():
    class One(App):
        def compose(self) -> ComposeResult:
            yield HistogramView()

    values = np.array([-1.5, -0.5, 0.3, 0.4, 0.5, 1.9, np.nan])
    hist = histogram(values, bins=4, by=["p", "p", "q", "q", "q", "q", "q"])
    app = One()
    async with app.run_test(size=(30, 6)) as pilot:
        view = app.query_one(HistogramView)
        view.show(hist)
        await pilot.pause()
        lines = screen_lines(app)
        assert lines[0].startswith("p ") and lines[0].rstrip().endswith("2")
        assert lines[1].startswith("q ") and lines[1].rstrip().endswith("4")
        assert BLOCKS[-1] in lines[1]  # q holds the tallest column (3 values in one bin)
        assert "1 value(s) missing" in "\n".join(lines)
        view.show(None)
        await pilot.pause()
        assert all(not line.strip() for line in screen_lines(app))
