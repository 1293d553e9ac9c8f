"""HistogramView: one row of block-character bars per group, drawn from a Histogram's counts.

The drawing only scales: bins are widened (or neighbouring bins summed) to fit the width, and bar
heights are the counts relative to the largest column over all groups, so groups compare honestly. A
non-zero count always shows at least the lowest block, so a few rows never vanish.
"""

from __future__ import annotations

import math
from typing import ClassVar

import numpy as np
from rich.cells import cell_len
from rich.console import Console, ConsoleOptions, RenderResult
from rich.style import Style
from rich.text import Text
from textual.widgets import Static

from holdfast.insight.histograms import Histogram
from holdfast.ui.textsafe import safe_text

BLOCKS = "▁▂▃▄▅▆▇█"
_LABEL_MAX = 16
_BAR_MIN = 4


def _edge_text(value: float) -> str:
    return f"{value:.3g}"


def column_counts(counts: np.ndarray, columns: int) -> np.ndarray:
    """Counts per screen column: each bin repeated when there is room, neighbouring bins summed when not."""
    bins = len(counts)
    if columns >= bins:
        return np.repeat(counts, columns // bins)
    starts = (np.arange(columns) * bins) // columns
    return np.add.reduceat(counts, starts)


class HistogramBars:
    """Rich renderable drawing a :class:`~holdfast.insight.histograms.Histogram` at the given width.

    Parameters
    ----------
    hist
        The counts to draw.
    bar_style, label_style, axis_style
        Styles for the bars, the group names and the axis line.
    marker
        A value to mark on the axis (e.g. 0 for margins) when it lies inside the bins; ``None`` for none.
    current, current_text
        A value to point at under the axis (the row under the cursor) and the words beside the arrow;
        a value beyond the bins is pointed at from the nearer end.
    """

    def __init__(
        self,
        hist: Histogram,
        *,
        bar_style: Style | str = "",
        label_style: Style | str = "",
        axis_style: Style | str = "",
        marker: float | None = 0.0,
        current: float | None = None,
        current_text: str = "this row",
        current_style: Style | str = "",
    ) -> None:
        self.hist = hist
        self.current = current
        self.current_text = current_text
        self.current_style = current_style
        self.bar_style = bar_style
        self.label_style = label_style
        self.axis_style = axis_style
        self.marker = marker

    def lines(self, width: int) -> list[Text]:
        """The lines of the drawing at ``width`` cells."""
        h = self.hist
        names = [safe_text(g) for g in h.groups]
        label_w = min(_LABEL_MAX, max((cell_len(n) for n in names), default=0))
        totals = [int(h.counts[g].sum()) for g in h.groups]
        count_w = max((len(f"{t:,}") for t in totals), default=1)
        bar_w = max(_BAR_MIN, width - label_w - count_w - 2)
        per_group = [column_counts(np.asarray(h.counts[g]), bar_w) for g in h.groups]
        drawn = len(per_group[0]) if per_group else bar_w
        top = max((int(c.max()) for c in per_group if len(c)), default=0)
        out: list[Text] = []
        for name, cols, total in zip(names, per_group, totals, strict=True):
            line = Text(no_wrap=True, overflow="ellipsis")
            label = Text(name, style=self.label_style)
            label.truncate(label_w, overflow="ellipsis", pad=True)
            line.append_text(label)
            line.append(" ")
            line.append(self._bars(cols, top), style=self.bar_style)
            line.append(" " * (drawn - len(cols)) + " ")
            line.append(f"{total:,}".rjust(count_w), style=self.label_style)
            out.append(line)
        out.append(self._axis(label_w, drawn))
        if self.current is not None and not math.isnan(self.current) and drawn > 0:
            out.append(self._pointer(label_w, drawn, width))
        if h.missing_total:
            out.append(Text(f"{h.missing_total:,} value(s) missing, not drawn", style=self.axis_style))
        return out

    @staticmethod
    def _bars(cols: np.ndarray, top: int) -> str:
        if top <= 0:
            return " " * len(cols)
        chars = []
        for c in cols.tolist():
            if c <= 0:
                chars.append(" ")
            else:
                chars.append(BLOCKS[min(len(BLOCKS), max(1, math.ceil(len(BLOCKS) * c / top))) - 1])
        return "".join(chars)

    def _axis(self, label_w: int, drawn: int) -> Text:
        """Edge values under the ends of the bars and the marker (e.g. ``┴0``) where it falls; a label
        that would overlap another is left out, the marker first."""
        lo, hi = float(self.hist.edges[0]), float(self.hist.edges[-1])
        axis = [" "] * drawn
        taken: list[tuple[int, int]] = []

        def put(text: str, at: int) -> None:
            end = at + len(text)
            if at < 0 or end > drawn or any(at <= b and a <= end for a, b in taken):
                return  # off the line, or touching a label already placed
            axis[at:end] = list(text)
            taken.append((at, end))

        if self.marker is not None and lo < self.marker < hi and drawn > 0:
            put("┴" + _edge_text(self.marker), min(drawn - 1, int((self.marker - lo) / (hi - lo) * drawn)))
        put(_edge_text(lo), 0)
        right = _edge_text(hi)
        put(right, drawn - len(right))
        return Text(" " * (label_w + 1) + "".join(axis), style=self.axis_style, no_wrap=True)

    def _pointer(self, label_w: int, drawn: int, width: int) -> Text:
        """``▲ this row`` under the bin of ``current`` (the words go left of the arrow near the right end)."""
        lo, hi = float(self.hist.edges[0]), float(self.hist.edges[-1])
        value = float(self.current)  # type: ignore[arg-type]
        at = 0 if value <= lo else drawn - 1 if value >= hi else int((value - lo) / (hi - lo) * drawn)
        line = max(1, width - label_w - 1)  # the cells the pointer line can use
        at = min(max(at, 0), min(drawn, line) - 1)
        for words in (f"{self.current_text} {value:+.2f}", f"{value:+.2f}"):
            if at + 2 + len(words) <= line:
                text, start = f"▲ {words}", at
                break
            if len(words) + 2 <= at + 1:
                text, start = f"{words} ▲", at - len(words) - 1
                break
        else:
            text, start = "▲", at
        return Text(" " * (label_w + 1 + start) + text, style=self.current_style, no_wrap=True)

    def __rich_console__(self, console: Console, options: ConsoleOptions) -> RenderResult:
        yield from self.lines(options.max_width)


class HistogramView(Static):
    """Draws a histogram by group; call :meth:`show` with a new one. Computes nothing but the scaling."""

    COMPONENT_CLASSES: ClassVar[set[str]] = {"histogram--bar", "histogram--label", "histogram--axis"}
    """
    | Class | Styles |
    | :- | :- |
    | `histogram--bar` | the block-character bars |
    | `histogram--label` | group names and totals |
    | `histogram--axis` | the axis line (edges and the marker) and the missing-values note |
    """

    DEFAULT_CSS = """
    HistogramView {
        height: auto;
        & > .histogram--bar { color: $accent; }
        & > .histogram--axis { color: $text-muted; }
    }
    """

    def __init__(
        self,
        *,
        marker: float | None = 0.0,
        name: str | None = None,
        id: str | None = None,
        classes: str | None = None,
    ) -> None:
        super().__init__("", name=name, id=id, classes=classes, markup=False)
        self.marker = marker
        self.hist: Histogram | None = None

    def show(self, hist: Histogram | None) -> None:
        """Draw ``hist`` (``None`` clears the view)."""
        self.hist = hist
        if hist is None or not hist.groups:
            self.update(Text(""))
            return
        self.update(self.bars(hist))

    def bars(self, hist: Histogram) -> HistogramBars:
        """The renderable for ``hist`` in this widget's styles."""
        return HistogramBars(
            hist,
            bar_style=self.get_component_rich_style("histogram--bar"),
            label_style=self.get_component_rich_style("histogram--label"),
            axis_style=self.get_component_rich_style("histogram--axis"),
            marker=self.marker,
        )
