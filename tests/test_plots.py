"""The report's images, checked on the matplotlib artists (not pixels): outlines per label that add up to
the class counts (not stacked), a count axis on which one row in the negative margin tail is visible, the
cut-offs and the decided rows where the data put them, and the what-if before/after.

Data: scikit-learn's bundled breast-cancer set (Wolberg, Street & Mangasarian 1995, "Breast Cancer
Wisconsin (Diagnostic)", UCI), 160 rows with 8 labels flipped here and every 8th row held out.
"""

from __future__ import annotations

import re

import numpy as np
import pandas as pd
import pytest
from matplotlib.patches import Rectangle, StepPatch
from sklearn.datasets import load_breast_cancer

from holdfast.data.spec import spec_from_text
from holdfast.engine.scan import run_scan
from holdfast.output.plots import margin_figure, margin_range, png, score_figure, whatif_figure
from holdfast.output.report import write_report
from holdfast.review.events import Decision
from holdfast.review.whatif import what_if


@pytest.fixture(scope="module")
def scan(tmp_path_factory):
    X, y = load_breast_cancer(return_X_y=True)
    idx = np.arange(0, 569, 3)[:160]
    frame = pd.DataFrame(X[idx][:, :6], columns=[f"f{i}" for i in range(6)])
    frame.insert(0, "rid", [f"r{i:03d}" for i in range(len(idx))])
    labels = y[idx].copy()
    labels[np.arange(3, 160, 20)] ^= 1
    frame["dx"] = np.where(labels == 1, "benign", "malignant")
    frame["held"] = np.arange(len(idx)) % 8 == 7
    tmp = tmp_path_factory.mktemp("plots")
    path = tmp / "bc.parquet"
    frame.to_parquet(path, index=False)
    spec = spec_from_text(
        '[data]\nlabel = "dx"\nid = "rid"\nsplit = "held"\n[learner]\nkernel = "rbf"\nC = 1.0\n'
    )
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("HOLDFAST_CACHE_DIR", str(tmp / "cache"))
        return run_scan(path, spec)


@pytest.fixture(scope="module")
def decisions(scan):
    rows = scan.findings.rows
    top = rows[~rows["held_out"]].sort_values("rank").head(6)
    out = {}
    for n, r in enumerate(top.itertuples()):
        rid = str(r.id)
        if n < 3:
            new = "benign" if r.label == "malignant" else "malignant"
            out[rid] = Decision(rid, "relabel", new, None, "")
        elif n < 5:
            out[rid] = Decision(rid, "confirm", None, None, "")
        else:
            out[rid] = Decision(rid, "exclude", None, None, "")
    return out


def _by_gid(fig, prefix: str) -> dict[str, object]:
    found = {}
    for ax in fig.axes:
        for artist in [*ax.patches, *ax.collections, *ax.lines]:
            gid = artist.get_gid() or ""
            if gid.startswith(prefix):
                found[gid.removeprefix(prefix)] = (ax, artist)
    return found


def test_margin_outlines_are_per_label_and_the_tail_is_visible(scan, decisions):
    rows = scan.findings.rows
    tr = rows[~rows["held_out"]]
    fig = margin_figure(rows, scan.findings.classes, decisions)
    classes = _by_gid(fig, "class:")
    assert set(classes) == {"benign", "malignant"}
    for name, (ax, artist) in classes.items():
        assert isinstance(artist, StepPatch)
        data = artist.get_data()
        assert data.baseline == 0  # each outline starts at 0: not stacked on another class
        assert int(np.sum(data.values)) == int(
            (tr["label"] == name).sum()
        )  # every row, clipped into the ends
        assert ax.get_yscale() == "symlog"
    # a bin with one row reaches at least a sixth of the plot's height (on a linear axis: 1/max count)
    ax = classes["benign"][0]
    png(fig)  # lays the figure out and settles the limits
    to_axes = ax.transScale + ax.transLimits  # data -> axes fraction, through the symlog scale
    y0, y1 = to_axes.transform((0, 0))[1], to_axes.transform((0, 1))[1]
    assert y1 - y0 > 1 / 6
    # the wrong-side cut at 0, and its count
    cuts = _by_gid(fig, "cut:")
    assert list(cuts["wrong_side"][1].get_xdata()) == [0, 0]
    neg = int((tr["margin"] < 0).sum())
    assert any(f"({neg:,})" in t.get_text() for t in fig.legends[0].get_texts())


def test_decided_rows_are_marked_at_their_margins_and_scores(scan, decisions):
    rows = scan.findings.rows
    tr = rows[~rows["held_out"]].set_index("id")
    for figure, column in ((margin_figure, "margin"), (score_figure, "score")):
        args = (rows, scan.findings.classes, decisions) + ((30,) if column == "score" else ())
        fig = figure(*args)
        marks = _by_gid(fig, "decision:")
        assert set(marks) == {"relabel", "confirm", "exclude"}
        for kind, (_ax, artist) in marks.items():
            expected = sorted(float(tr.loc[r, column]) for r, d in decisions.items() if d.decision == kind)
            if column == "margin":
                expected = sorted(np.clip(expected, *margin_range(tr["margin"].to_numpy())))
            assert sorted(artist.get_offsets()[:, 0].tolist()) == pytest.approx(expected)


def test_score_plot_has_no_stacked_bars_and_marks_the_listed_cut(scan, decisions):
    rows = scan.findings.rows
    tr = rows[~rows["held_out"]]
    fig = score_figure(rows, scan.findings.classes, decisions, 30)
    classes = _by_gid(fig, "class:")
    ax = classes["benign"][0]
    assert not [p for p in ax.patches if isinstance(p, Rectangle)]  # no bars: outlines only
    for name, (_ax, artist) in classes.items():
        assert int(np.sum(artist.get_data().values)) == int((tr["label"] == name).sum())
    cut = _by_gid(fig, "cut:")["top"][1].get_xdata()[0]
    assert cut == pytest.approx(np.sort(tr["score"].to_numpy())[::-1][29])


def test_whatif_plot_shows_the_counts_before_and_after(scan, decisions):
    w = what_if(scan, decisions)
    fig = whatif_figure(w, scan.findings.rows)
    before = [p.get_width() for p in fig.axes[0].patches if p.get_gid() == "count:before"]
    after = [p.get_width() for p in fig.axes[0].patches if p.get_gid() == "count:after"]
    names = [t.get_text() for t in fig.axes[0].get_yticklabels()]
    assert names == ["support rows d", "training errors", "LOO errors", "held-out errors"]
    assert before == [
        w.before["d"],
        w.before["training_errors"],
        w.before["loo_errors"],
        w.before["held_out"]["errors"],
    ]
    assert after == [
        w.after["d"],
        w.after["training_errors"],
        w.after["loo_errors"],
        w.after["held_out"]["errors"],
    ]
    outlines = _by_gid(fig, "class:")
    assert set(outlines) == {"before", "after"}
    assert int(outlines["after"][1].get_data().values.sum()) == w.after["m"]


def test_report_links_the_whatif_image(scan, decisions, tmp_path):
    w = what_if(scan, decisions)
    path = write_report(scan, decisions, tmp_path / "r.md", whatif=w)
    text = path.read_text(encoding="utf-8")
    links = re.findall(r"!\[[^\]]*\]\(([^)]+)\)", text)
    assert [link.rsplit("/", 1)[1] for link in links] == ["margin.png", "score.png", "whatif.png"]
    for link in links:
        assert (path.parent / link).read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
