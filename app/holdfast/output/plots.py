"""The report's images: margin and suspicion-score histograms by label, and the what-if before/after.

Drawn with matplotlib's object API on the Agg canvas (no pyplot, no display). Design choices:

* one outline per label on shared bins, never stacked bars: on a log axis stacked bars make the upper
  class look far smaller than it is, since each bar's top segment is read against a log scale;
* counts on a symmetric-log axis (linear below 1 row, logarithmic above: matplotlib's ``symlog``), so a
  bin with 2 rows in the negative margin tail is as visible as a bin with 2,000 near the margin;
* the cut-offs of the evidence drawn as vertical lines (margin 0: the wrong-side flag; margin 1: the
  edge of the margin) and the decided rows marked above the histogram, one row of marks per decision;
* artists carry a ``gid`` (``class:<label>``, ``decision:<kind>``, ``cut:<name>``, ``count:<name>``) so
  tests can check what is drawn without reading pixels.
"""

from __future__ import annotations

import io
import re
from collections.abc import Mapping
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from holdfast.insight.explain import LABEL_FLAGS
from holdfast.insight.histograms import histogram
from holdfast.review.events import Decision

if TYPE_CHECKING:
    from matplotlib.axes import Axes
    from matplotlib.figure import Figure

    from holdfast.review.whatif import WhatIf

#: image size in inches at ``DPI`` (750 x 360 pixels)
SIZE = (7.5, 3.6)
DPI = 100
#: colours that stay apart for common colour-vision deficiencies (Okabe & Ito 2008, "Color universal
#: design"), one per label in class order
CLASS_COLOURS = ("#0072B2", "#E69F00", "#009E73", "#CC79A7", "#56B4E9", "#D55E00", "#F0E442", "#000000")
#: decision -> (marker colour, marker)
DECISION_STYLE: dict[str, tuple[str, str]] = {
    "relabel": ("#D55E00", "v"),
    "exclude": ("#000000", "x"),
    "confirm": ("#009E73", "|"),
    "defer": ("#999999", "|"),
}
#: margins beyond this are drawn in the last bin on either side (the histogram's range)
MARGIN_RANGE = (-4.0, 6.0)
BINS = 40

# C0/C1 control characters, DEL, and Unicode bidirectional overrides/isolates
_CONTROL = re.compile("[\x00-\x1f\x7f-\x9f\u200e\u200f\u202a-\u202e\u2066-\u2069]")


def plot_text(value: Any, limit: int = 40) -> str:
    """Data text for a matplotlib label, shown literally: ``$`` escaped (no mathtext), a leading ``_``
    guarded (matplotlib hides legend labels that start with it), control characters made visible, long
    text shortened."""
    text = _CONTROL.sub(lambda m: f"\\x{ord(m.group(0)):02x}", str(value)).replace("$", r"\$")
    if text.startswith("_"):
        text = " " + text
    return text if len(text) <= limit else text[: limit - 1] + "\u2026"


def png(fig: Figure) -> bytes:
    """The figure as PNG bytes."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    FigureCanvasAgg(fig)
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=DPI)
    return buf.getvalue()


def _new(size: tuple[float, float] = SIZE, cols: int = 1) -> tuple[Figure, list[Axes]]:
    from matplotlib.figure import Figure

    fig = Figure(figsize=size, layout="constrained")
    axes = [fig.add_subplot(1, cols, i + 1) for i in range(cols)]
    return fig, axes


def _outlines(
    ax: Axes, values: np.ndarray, labels: np.ndarray, order: list[str], edges_range: Any
) -> np.ndarray:
    """One step outline per label on shared bins; returns the edges."""
    v = np.asarray(values, dtype=float)
    if edges_range is not None:
        v = np.clip(v, edges_range[0], edges_range[1])  # overflow in the end bins
    h = histogram(v, bins=BINS, by=labels, groups=order, range=edges_range)
    for i, name in enumerate(order):
        ax.stairs(
            h.counts[name],
            h.edges,
            color=CLASS_COLOURS[i % len(CLASS_COLOURS)],
            linewidth=1.6,
            label=f"{plot_text(name)} ({int(h.counts[name].sum()):,})",
            gid=f"class:{name}",
        )
    ax.set_yscale("symlog", linthresh=1.0)
    ax.set_ylim(bottom=0)
    ax.set_ylabel("rows (log scale above 1)")
    return h.edges


def _with_strip(decisions: Mapping[str, Decision]) -> tuple[Figure, Axes, Axes | None]:
    """A figure with the histogram axes and, when there are decisions, a thin strip above it for them."""
    from matplotlib.figure import Figure

    fig = Figure(figsize=SIZE, layout="constrained")
    kinds = [k for k in DECISION_STYLE if any(d.decision == k for d in decisions.values())]
    if not kinds:
        return fig, fig.add_subplot(1, 1, 1), None
    grid = fig.add_gridspec(2, 1, height_ratios=(0.6 + 0.35 * len(kinds), 5.0))
    ax = fig.add_subplot(grid[1])
    strip = fig.add_subplot(grid[0], sharex=ax)
    return fig, ax, strip


def _mark_decisions(
    strip: Axes | None, rows: pd.DataFrame, column: str, decisions: Mapping[str, Decision], clip: Any = None
) -> None:
    """The decided rows' values as marks in the strip above the histogram, one line per decision kind."""
    if strip is None:
        return
    ids = rows["id"].astype(str).to_numpy()
    values = rows[column].to_numpy(dtype=float)
    lookup = {rid: n for n, rid in enumerate(ids)}
    kinds = [k for k in DECISION_STYLE if any(d.decision == k for d in decisions.values())]
    for j, kind in enumerate(kinds):
        pos = [lookup[r] for r, d in decisions.items() if d.decision == kind and r in lookup]
        x = values[pos] if pos else np.empty(0)
        x = x[np.isfinite(x)]
        if clip is not None:
            x = np.clip(x, clip[0], clip[1])
        colour, marker = DECISION_STYLE[kind]
        strip.scatter(
            x,
            np.full(len(x), j),
            marker=marker,
            s=30,
            color=colour,
            linewidths=1.3,
            alpha=0.8,
            label=f"{kind} ({len(x)})",
            gid=f"decision:{kind}",
            zorder=3,
        )
    strip.set_yticks(
        range(len(kinds)), [f"{k} ({sum(d.decision == k for d in decisions.values())})" for k in kinds]
    )
    strip.set_ylim(len(kinds) - 0.5, -0.5)
    strip.tick_params(axis="y", labelsize=7, length=0)
    strip.tick_params(axis="x", labelbottom=False, length=0)
    for side in ("top", "right", "left"):
        strip.spines[side].set_visible(False)
    strip.grid(axis="x", color="0.92", linewidth=0.6)
    strip.set_title("decided rows", fontsize=7, loc="left", color="0.3", pad=2)


def _counts_axis(ax: Axes) -> None:
    """Plain row counts on the symmetric-log axis (0, 1, 10, 100, ...)."""
    from matplotlib.ticker import FixedLocator, FuncFormatter

    top = max(1.0, ax.get_ylim()[1])
    ticks = [0.0] + [10.0**e for e in range(int(np.ceil(np.log10(top))) + 1)]
    ax.yaxis.set_major_locator(FixedLocator(ticks))
    ax.yaxis.set_minor_locator(FixedLocator([]))
    ax.yaxis.set_major_formatter(FuncFormatter(lambda v, _pos: f"{int(v):,}"))


def _finish(fig: Figure, ax: Axes, strip: Axes | None, title: str, xlabel: str) -> None:
    _counts_axis(ax)
    fig.suptitle(title, fontsize=10, x=0.01, ha="left")
    ax.set_xlabel(xlabel, fontsize=9)
    ax.tick_params(labelsize=8)
    handles, labels = ax.get_legend_handles_labels()
    fig.legend(handles, labels, fontsize=7, frameon=False, loc="outside right upper")


def margin_range(margin: np.ndarray) -> tuple[float, float]:
    """The margin plot's x range: the data's, cut at ``MARGIN_RANGE`` (the rest goes in the end bins),
    always showing 0 and 1 with a little room."""
    m = margin[np.isfinite(margin)]
    if not len(m):
        return MARGIN_RANGE
    lo = max(MARGIN_RANGE[0], min(float(m.min()), -0.5))
    hi = min(MARGIN_RANGE[1], max(float(m.max()), 1.5))
    pad = 0.02 * (hi - lo)
    return lo - pad, hi + pad


def margin_figure(rows: pd.DataFrame, classes: list[str], decisions: Mapping[str, Decision]) -> Figure:
    """Training rows' margins y f(x) by label, the wrong-side and margin cuts, the decided rows."""
    tr = rows[~rows["held_out"].to_numpy(dtype=bool)]
    labels = tr["label"].astype(object).map(str).to_numpy()
    margin = tr["margin"].to_numpy(dtype=float)
    span = margin_range(margin)
    fig, ax, strip = _with_strip(decisions)
    _outlines(ax, margin, labels, [str(c) for c in classes], span)
    neg = int((margin < 0).sum())
    ax.axvspan(span[0], 0.0, color="#D55E00", alpha=0.07, linewidth=0, gid="count:wrong_side")
    ax.axvline(
        0.0,
        color="#D55E00",
        linestyle="--",
        linewidth=1.0,
        label=f"0: wrong side below ({neg:,})",
        gid="cut:wrong_side",
    )
    two = len(classes) == 2
    if two:
        ax.axvline(
            1.0, color="0.4", linestyle=":", linewidth=1.0, label="1: edge of the margin", gid="cut:margin"
        )
    ax.set_xlim(*span)
    _mark_decisions(strip, tr, "margin", decisions, span)
    finite = margin[np.isfinite(margin)]
    clipped = bool(len(finite)) and (finite.min() < span[0] or finite.max() > span[1])
    xlabel = (
        "margin y f(x): negative = the model disagrees with the label"
        if two
        else "margin: own class's score minus the best other's (negative = the model disagrees)"
    )
    if clipped:
        xlabel += f"; beyond {span[0]:.1f} and {span[1]:.1f} in the end bins"
    _finish(fig, ax, strip, "Margin of the training rows by label (outlines, not stacked)", xlabel)
    return fig


def score_figure(
    rows: pd.DataFrame, classes: list[str], decisions: Mapping[str, Decision], top: int
) -> Figure:
    """Training rows' suspicion scores by label, the rows with label evidence, the report's top-N cut and
    the decided rows."""
    tr = rows[~rows["held_out"].to_numpy(dtype=bool)]
    labels = tr["label"].astype(object).map(str).to_numpy()
    score = tr["score"].to_numpy(dtype=float)
    fig, ax, strip = _with_strip(decisions)
    edges = _outlines(ax, score, labels, [str(c) for c in classes], None)
    flagged = np.zeros(len(tr), dtype=bool)
    for name in LABEL_FLAGS:
        col = f"flag_{name}"
        if col in tr:
            flagged |= tr[col].to_numpy(dtype=bool)
    h = histogram(score[flagged], bins=len(edges) - 1, range=(float(edges[0]), float(edges[-1])))
    ax.stairs(
        h.counts["all"],
        edges,
        color="0.2",
        linestyle="--",
        linewidth=1.0,
        label=f"with label evidence ({int(flagged.sum()):,})",
        gid="count:label_evidence",
    )
    ranked = np.sort(score[np.isfinite(score)])[::-1]
    if top and len(ranked) > top:
        cut = float(ranked[top - 1])
        ax.axvline(
            cut,
            color="#D55E00",
            linestyle="--",
            linewidth=1.0,
            label=f"top {top} listed: {cut:.2f} and up",
            gid="cut:top",
        )
    _mark_decisions(strip, tr, "score", decisions)
    _finish(
        fig,
        ax,
        strip,
        "Suspicion score of the training rows by label (outlines, not stacked)",
        "suspicion score (higher: look first)",
    )
    return fig


def whatif_figure(w: WhatIf, before_rows: pd.DataFrame) -> Figure:
    """Before/after the decisions: the counts side by side, and the margins of the training rows
    (``before_rows``: the scan's per-row frame)."""
    fig, (left, right) = _new((9.0, 3.6), cols=2)
    names = [("support rows d", "d"), ("training errors", "training_errors"), ("LOO errors", "loo_errors")]
    before = [w.before.get(k) for _, k in names]
    after = [w.after.get(k) for _, k in names]
    if w.before.get("held_out") and w.after.get("held_out"):
        names.append(("held-out errors", "held_out"))
        before.append(w.before["held_out"]["errors"])
        after.append(w.after["held_out"]["errors"])
    y = np.arange(len(names))
    b = np.array([float(v or 0) for v in before])
    a = np.array([float(v or 0) for v in after])
    left.barh(y - 0.2, b, height=0.38, color="0.65", label="before", gid="count:before")
    left.barh(y + 0.2, a, height=0.38, color="#0072B2", label="after", gid="count:after")
    for yi, (bv, av) in enumerate(zip(b, a, strict=True)):
        left.text(bv, yi - 0.2, f" {int(bv):,}", va="center", fontsize=7)
        left.text(av, yi + 0.2, f" {int(av):,}", va="center", fontsize=7)
    left.set_yticks(y, [n for n, _ in names], fontsize=8)
    left.invert_yaxis()
    left.set_xlim(right=max(1.0, float(max(b.max(), a.max()))) * 1.18)
    left.tick_params(labelsize=8)
    left.legend(fontsize=7, frameon=False, loc="lower right")
    left.set_title("Counts before and after the decisions", fontsize=9)
    left.set_xlabel(
        "rows\nLOO errors after are partly self-fulfilling; held-out errors are the honest check",
        fontsize=7,
        color="0.3",
    )
    _margins_before_after(right, before_rows, w)
    return fig


def _margins_before_after(ax: Axes, before_rows: pd.DataFrame, w: WhatIf) -> None:
    series = [("before", before_rows, "0.55", "--")]
    if w.findings is not None:
        series.append(("after", w.findings.rows, "#0072B2", "-"))
    for name, rows, colour, style in series:
        tr = rows[~rows["held_out"].to_numpy(dtype=bool)]
        m = np.clip(tr["margin"].to_numpy(dtype=float), *MARGIN_RANGE)
        h = histogram(m, bins=BINS, range=MARGIN_RANGE)
        neg = int((tr["margin"].to_numpy(dtype=float) < 0).sum())
        ax.stairs(
            h.counts["all"],
            h.edges,
            color=colour,
            linestyle=style,
            linewidth=1.5,
            label=f"{name}: {neg:,} below 0",
            gid=f"class:{name}",
        )
    ax.set_yscale("symlog", linthresh=1.0)
    ax.set_ylim(bottom=0)
    ax.axvline(0.0, color="#D55E00", linestyle="--", linewidth=1.0, gid="cut:wrong_side")
    _counts_axis(ax)
    ax.set_title("Margins of the training rows", fontsize=9)
    lo, hi = MARGIN_RANGE
    ax.set_xlabel(
        f"margin y f(x) against the labels in force; beyond {lo:g} and {hi:g} in the end bins", fontsize=7
    )
    ax.set_ylabel("rows (log scale above 1)", fontsize=8)
    ax.tick_params(labelsize=8)
    ax.legend(fontsize=7, frameon=False, loc="upper left")
