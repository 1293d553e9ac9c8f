"""The Markdown report: sections, bounds with sources, images, decisions, what-if, cautions, escaping.

The report is rendered with markdown-it-py (a CommonMark parser, with its GFM table extension; installed
with Textual) to check what a reader sees: data text shows literally, never as markup, and every table
row keeps its number of cells. PNG images are read back with matplotlib. Data: scikit-learn's bundled
breast-cancer set (Wolberg, Street & Mangasarian 1995, UCI), a subsample with odd ids, labels and notes.
"""

from __future__ import annotations

import html
import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from markdown_it import MarkdownIt
from matplotlib.image import imread
from sklearn.datasets import load_breast_cancer

import holdfast
from holdfast.data.spec import spec_from_text
from holdfast.engine.scan import run_scan
from holdfast.errors import UserError
from holdfast.output.report import CAUTIONS, md_escape, write_report
from holdfast.review.events import Decision
from holdfast.review.whatif import what_if

ODD_IDS = [
    "a|b",
    "`tick`",
    "<script>alert(1)</script>",
    "[bold red]x[/]",
    "# not a heading",
    "1. not a list",
    "*star* _under_",
    "back\\slash",
    "esc\x1b[31mred",
    "&amp; entity",
]
ODD_LABEL = "*malignant* | <i>m</i>"
ODD_NOTE = "see | `rm -rf` <b>now</b> [link](http://example.com)\nsecond line"


@pytest.fixture(scope="module")
def scan(tmp_path_factory):
    with pytest.MonkeyPatch.context() as mp:
        tmp = tmp_path_factory.mktemp("report")
        mp.setenv("HOLDFAST_CACHE_DIR", str(tmp / "cache"))
        X, y = load_breast_cancer(return_X_y=True)
        idx = np.sort(np.random.default_rng(4).choice(len(y), size=140, replace=False))
        frame = pd.DataFrame(X[idx][:, :10], columns=[f"f{i}" for i in range(10)])
        ids = [f"r{i}" for i in range(len(idx))]
        ids[: len(ODD_IDS)] = ODD_IDS
        frame.insert(0, "rid", ids)
        frame["dx"] = np.where(y[idx] == 1, "benign", ODD_LABEL)
        path = tmp / "odd.parquet"
        frame.to_parquet(path, index=False)
        spec = spec_from_text('[data]\nlabel = "dx"\nid = "rid"\n[learner]\nkernel = "rbf"\nC = 1.0\n')
        yield run_scan(path, spec)


def _decisions(scan) -> dict[str, Decision]:
    rows = scan.findings.rows
    out = {}
    for n, rid in enumerate(ODD_IDS):
        label = rows.loc[rows["id"] == rid, "label"].iloc[0]
        other = "benign" if label == ODD_LABEL else ODD_LABEL
        kind = ["relabel", "exclude", "confirm", "defer"][n % 4]
        out[rid] = Decision(
            rid, kind, other if kind == "relabel" else None, ODD_NOTE, "2026-01-01T00:00:00+00:00"
        )
    return out


def _render(text: str) -> str:
    return MarkdownIt("commonmark").enable("table").render(text)


def _tables(rendered: str) -> list[list[list[str]]]:
    """Cells (inner HTML) of every row of every table."""
    out = []
    for table in re.findall(r"<table>(.*?)</table>", rendered, flags=re.S):
        rows = []
        for tr in re.findall(r"<tr>(.*?)</tr>", table, flags=re.S):
            rows.append(re.findall(r"<t[hd][^>]*>(.*?)</t[hd]>", tr, flags=re.S))
        out.append(rows)
    return out


def test_report_sections_tables_and_literal_text(scan, tmp_path):
    decisions = _decisions(scan)
    path = write_report(scan, decisions, tmp_path / "review.md")
    text = path.read_text(encoding="utf-8")
    rendered = _render(text)
    # data text never becomes markup: no tags from the data, no code spans, no links, no emphasis
    for tag in ("<script", "<i>", "<b>", "<code>", "<em>", "<strong>", "<a ", "<h1>not", "<ol"):
        assert tag not in rendered, tag
    assert "\x1b" not in text
    # every table row keeps the header's number of cells (pipes in the data are escaped)
    tables = _tables(rendered)
    assert len(tables) >= 5
    for table in tables:
        assert len({len(r) for r in table}) == 1
    # each odd id is one cell showing exactly the id (control characters shown as \xNN)
    cells = {html.unescape(c) for t in tables for r in t for c in r}
    for rid in ODD_IDS:
        assert rid.replace("\x1b", "\\x1b") in cells, rid
    assert ODD_NOTE.replace("\n", " ") in cells
    for heading in (
        "Summary",
        "Bounds and estimates",
        "Why the bound is what it is",
        "Margins and scores",
        "Most suspicious rows (top 30)",
        "Decisions taken",
        "Cautions",
    ):
        assert f"<h2>{html.escape(heading)}</h2>" in rendered, heading
    assert "What-if" not in text  # not asked
    assert f"by holdfast {holdfast.__version__}." in text  # our own text, written as it is (no escapes)


def test_report_bounds_top_rows_and_decisions_match_the_scan(scan, tmp_path):
    decisions = _decisions(scan)
    text = write_report(scan, decisions, tmp_path / "r.md").read_text(encoding="utf-8")
    rendered = _render(text)
    cells = [[html.unescape(c) for c in r] for t in _tables(rendered) for r in t]
    summary = scan.findings.summary
    by_name = {r[0]: r for r in cells}
    bounds = summary["bounds"]
    assert bounds["loo_bound"]["misses_outside"] == 0  # an SVM: the LOO bound equals d/m, one row for both
    both = by_name[f"{bounds['support_fraction']['name']} = {bounds['loo_bound']['name']}"]
    assert both[1] == f"{bounds['loo_bound']['value']:.4f}"
    assert both[3] == bounds["loo_bound"]["source"]
    assert bounds["support_fraction"]["name"] not in by_name and bounds["loo_bound"]["name"] not in by_name
    for key, item in bounds.items():
        if key in ("support_fraction", "loo_bound"):
            continue
        row = by_name[item["name"]]
        assert row[1] == f"{item['value']:.4f}" and row[3] == item["source"]
    # top 30 in rank order, ids as in the findings
    rows = scan.findings.rows
    top = rows[~rows["held_out"]].sort_values("rank").head(30)
    ranked = [r for r in cells if r and r[0].isdigit() and len(r) == 10]
    assert [r[1] for r in ranked] == [str(i).replace("\x1b", "\\x1b") for i in top["id"]]
    assert [int(r[0]) for r in ranked] == list(range(1, 31))
    assert [r[8] for r in ranked] == [f.replace(",", ", ") for f in top["flag_names"]]
    # decisions: counts and one row per decision
    counts = pd.Series([d.decision for d in decisions.values()]).value_counts()
    assert ", ".join(f"{k}: {v}" for k, v in counts.items()) + f" (total {len(decisions)})." in text
    decided = [r for r in cells if len(r) == 6 and r[2] in ("relabel", "exclude", "confirm", "defer")]
    assert len(decided) == len(decisions)
    # the explanation's counts, as in the summary
    comp = summary["explanation"]["composition"]
    assert ["bounded and misclassified", str(comp["bounded_misclassified"])] == by_name[
        "bounded and misclassified"
    ][:2]
    assert by_name["total"][1] == str(summary["d"])
    for caution in CAUTIONS:
        assert f"- {caution}" in text


def test_report_images_exist_and_are_pngs(scan, tmp_path):
    path = write_report(scan, None, tmp_path / "my report.md")
    text = path.read_text(encoding="utf-8")
    links = re.findall(r"!\[[^\]]*\]\(([^)]+)\)", text)
    assert len(links) == 2
    from urllib.parse import unquote

    for link in links:
        image = path.parent / unquote(link)
        assert image.parent.name == "my report_files"
        assert image.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
        pixels = imread(image)
        assert pixels.shape[:2] == (360, 750)
        assert pixels[..., :3].std() > 0.01  # something is drawn
    assert "No decisions yet." in text


def test_report_never_overwrites_without_force(scan, tmp_path):
    target = tmp_path / "r.md"
    write_report(scan, None, target)
    first = target.read_bytes()
    with pytest.raises(UserError, match=re.escape(str(target))):
        write_report(scan, _decisions(scan), target)
    assert target.read_bytes() == first
    (target).unlink()
    with pytest.raises(UserError, match=r"margin\.png"):  # its images are not overwritten either
        write_report(scan, None, target)
    write_report(scan, _decisions(scan), target, force=True)
    assert target.read_bytes() != first
    leftovers = [p for p in Path(tmp_path).rglob("*") if p.name.endswith(".tmp")]
    assert leftovers == []


def test_report_with_whatif(scan, tmp_path):
    decisions = _decisions(scan)
    w = what_if(scan, decisions)
    text = write_report(scan, decisions, tmp_path / "w.md", whatif=w).read_text(encoding="utf-8")
    cells = [[html.unescape(c) for c in r] for t in _tables(_render(text)) for r in t]
    assert f"{w.relabelled} rows relabelled, {w.excluded} excluded" in text
    assert w.excluded == 3  # ODD_IDS[1], [5], [9]
    rows = {r[0]: r for r in cells if len(r) == 3}
    assert rows["LOO errors"][1:] == [str(w.before["loo_errors"]), str(w.after["loo_errors"])]
    assert rows["rows (training) m"][1:] == [str(w.before["m"]), str(w.before["m"] - 3)]


@pytest.mark.parametrize(
    ("raw", "shown"),
    [
        ("a|b", "a|b"),
        ("1. x", "1. x"),
        ("- y", "- y"),
        ("+ z", "+ z"),
        ("> quote", "&gt; quote"),
        ("<b>x</b>", "&lt;b&gt;x&lt;/b&gt;"),
        ("**x**", "**x**"),
        ("[a](b)", "[a](b)"),
        ("a\nb", "a b"),
        ("\u202eevil", "\\u202eevil"),
    ],
)
def test_md_escape_renders_literally(raw, shown):
    # CommonMark (markdown-it-py) renders the escaped text as one paragraph with the raw text in it
    assert _render(md_escape(raw)) == f"<p>{shown}</p>\n"


def test_plot_text_keeps_data_text_literal_in_images():
    # matplotlib treats text between unescaped dollars as mathtext and hides legend labels starting with
    # "_" (matplotlib documentation: "Writing mathematical expressions", Axes.legend)
    from matplotlib import cbook

    from holdfast.output.plots import plot_text

    assert cbook.is_math_text("$x^2$ grade")
    assert not cbook.is_math_text(plot_text("$x^2$ grade"))
    assert not plot_text("_hidden").startswith("_")
    assert plot_text("a\x1b[31m") == "a\\x1b[31m"
    assert len(plot_text("x" * 100)) == 40
