"""OverviewPanel: what the scan found, at a glance.

Data set and learner, the support rows, training and exact LOO errors, every bound with its name and
published source, the class balance, the margin histogram by class and, when the summary carries one,
the explanation of the support set with its hints. The panel lays its blocks side by side when it is
wide and stacks them when it is narrow; it computes nothing beyond formatting.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from pathlib import PurePath
from typing import Any, ClassVar

import pandas as pd
from rich.console import Console, ConsoleOptions, Group, RenderableType, RenderResult
from rich.padding import Padding
from rich.style import Style
from rich.table import Table
from rich.text import Text
from textual.app import ComposeResult
from textual.containers import VerticalScroll
from textual.widgets import Static

from holdfast.insight.histograms import Histogram
from holdfast.output.terminal import ties_line
from holdfast.ui.textsafe import safe_text
from holdfast.ui.widgets.histogram import HistogramBars
from holdfast.ui.widgets.text_layout import fmt_number

#: bounds in the order an analyst reads them; others follow in the summary's order
BOUND_ORDER = ("loo_error", "support_fraction", "loo_bound", "xi_alpha", "span", "compression", "test_set")
#: width of one block when blocks stand side by side
BLOCK_WIDTH = 36
SHARE_BAR = 10


def cell(value: str, style: Style | str = "") -> Text:
    """A literal table cell (our own text or text already passed through ``safe_text``)."""
    return Text(value, style=style, no_wrap=True, overflow="ellipsis")


def _count(value: Any) -> str:
    try:
        return f"{int(value):,}"
    except (TypeError, ValueError):
        return "–"


def _param(value: Any) -> str:
    if isinstance(value, bool):
        return str(value).lower()
    if isinstance(value, float):
        return fmt_number(value, ".4g")
    if isinstance(value, Mapping):
        return "{" + ", ".join(f"{safe_text(k)}: {_param(v)}" for k, v in value.items()) + "}"
    return safe_text(value)


#: Feature names listed in the compact view; the whole-screen view (v) lists them all. With dozens of
#: features the list would push the learner's settings out of the panel.
FEATURE_NAMES_SHOWN = 8


class Columns:
    """Blocks side by side when there is room for ``block_width`` cells each, else stacked."""

    def __init__(self, blocks: Sequence[Sequence[RenderableType]], block_width: int = BLOCK_WIDTH) -> None:
        self.blocks = [list(b) for b in blocks if b]
        self.block_width = block_width

    def __rich_console__(self, console: Console, options: ConsoleOptions) -> RenderResult:
        n = len(self.blocks)
        if n == 0:
            return
        across = max(1, min(n, options.max_width // (self.block_width + 2)))
        if across == 1:
            for i, block in enumerate(self.blocks):
                if i:
                    yield Text("")
                yield from block
            return
        table = Table.grid(padding=(0, 2), expand=True)
        for _ in range(across):
            table.add_column(ratio=1, vertical="top")
        for start in range(0, n, across):
            row = [Group(*b) for b in self.blocks[start : start + across]]
            table.add_row(*row, *([""] * (across - len(row))))
        yield table


class OverviewPanel(VerticalScroll):
    """Scrollable overview of a scan; call :meth:`show` with the summary dict and the margin histogram."""

    #: ``v`` fills the screen with it (scroll containers do not allow that by default)
    ALLOW_MAXIMIZE = True

    COMPONENT_CLASSES: ClassVar[set[str]] = {
        "overview--heading",
        "overview--muted",
        "overview--value",
        "overview--warning",
        "overview--bar",
    }
    """
    | Class | Styles |
    | :- | :- |
    | `overview--heading` | block headings |
    | `overview--muted` | titles, sources, notes |
    | `overview--value` | the key numbers |
    | `overview--warning` | LOO errors and the explanation's hints |
    | `overview--bar` | class-balance bars and the margin histogram |
    """

    DEFAULT_CSS = """
    OverviewPanel {
        height: auto;
        overflow-x: hidden;
        & > .overview--heading { text-style: bold; }
        & > .overview--muted { color: $text-muted; }
        & > .overview--value { text-style: bold; }
        & > .overview--warning { color: $warning; }
        & > .overview--bar { color: $accent; }
        & > Static { width: 1fr; }
    }
    """

    def __init__(self, *, name: str | None = None, id: str | None = None, classes: str | None = None) -> None:
        super().__init__(name=name, id=id, classes=classes)
        self.summary: dict[str, Any] | None = None
        self.margin_hist: Histogram | None = None
        #: (margin, label) of the row under the cursor, pointed at under the margin histogram
        self.current: tuple[float, str] | None = None
        #: full published sources under each bound (the whole-screen view); short citations otherwise
        self.full = False

    def compose(self) -> ComposeResult:
        yield Static("", classes="overview-body", markup=False)

    def _s(self, name: str) -> Style:
        return self.get_component_rich_style(f"overview--{name}")

    def set_full(self, full: bool) -> None:
        """Switch between short citations (compact) and full sources (whole-screen view)."""
        if full != self.full:
            self.full = full
            self.show(self.summary, self.margin_hist)

    def set_current(self, margin: float | None, label: str = "") -> None:
        """Point at ``margin`` (the row under the cursor) under the margin histogram; redrawn only when
        the panel is on screen and the histogram is there."""
        bad = margin is None or pd.isna(margin)
        current = None if bad else (float(margin), label)  # type: ignore[arg-type]
        if current == self.current:
            return
        self.current = current
        if self.margin_hist is not None and self.display and self.region.height > 0:
            self.show(self.summary, self.margin_hist)

    def show(self, summary: dict[str, Any] | None, margin_hist: Histogram | None = None) -> None:
        """Draw ``summary`` (the findings summary dict) and ``margin_hist`` (margins by class)."""
        self.summary = summary
        self.margin_hist = margin_hist
        body = self.query_one(".overview-body", Static)
        if not summary:
            body.update(Text("No scan yet.", style=self._s("muted")))
            return
        blocks = [self._data_block(summary), self._support_block(summary), self._bounds_block(summary)]
        blocks.append(self._classes_block(summary, margin_hist))
        parts: list[RenderableType] = [Columns(blocks)]
        if summary.get("provisional"):
            done, total = int(summary.get("loo_done", 0)), int(summary.get("loo_total", 0))
            note = (
                f"Provisional: the LOO figures cover the {done:,} of {total:,} refits done so far; "
                "rows still waiting count by their full-fit margin."
            )
            parts.insert(0, Text(note, style=self._s("warning")))
        explanation = summary.get("explanation")
        if explanation:
            svm = (summary.get("family") or {}).get("name", "svm") == "svm"
            parts += [Text(""), *self._explanation_block(explanation, composition=svm)]
        body.update(Group(*parts))

    # -- blocks ---------------------------------------------------------------------------------------

    def _heading(self, text: str) -> Text:
        return Text(text, style=self._s("heading"))

    def _pair(self, title: str, value: str, note: str = "", style: Style | str = "") -> Text:
        line = Text()
        line.append(f"{title} ", style=self._s("muted"))
        line.append(value, style=style or self._s("value"))
        if note:
            line.append(f"  {note}", style=self._s("muted"))
        return line

    def _data_block(self, s: Mapping[str, Any]) -> list[RenderableType]:
        data = s.get("data", {}) or {}
        spec_data = (s.get("spec", {}) or {}).get("data", {}) or {}
        out: list[RenderableType] = [self._heading("Data and learner")]
        path = data.get("path")
        if path:
            out.append(self._pair("data", safe_text(PurePath(str(path)).name)))
        held = (s.get("held_out") or {}).get("n")
        note = f"{_count(held)} held out" if held else ""
        out.append(self._pair("rows", _count(data.get("rows_total", s.get("m"))), note))
        if spec_data.get("label"):
            out.append(self._pair("label", safe_text(spec_data["label"])))
        features = [safe_text(f) for f in data.get("features", []) or []]
        if features:
            line = self._pair("features", f"{len(features):,}")
            shown = features if self.full else features[:FEATURE_NAMES_SHOWN]
            more = len(features) - len(shown)
            line.append(
                "  " + ", ".join(shown) + (f" and {more:,} more (v: all)" if more else ""),
                style=self._s("muted"),
            )
            out.append(line)
        params = dict(s.get("learner", {}) or {})
        if params:
            family = params.pop("family", None)
            line = Text()
            line.append("learner ", style=self._s("muted"))
            line.append(safe_text(family or "?"), style=self._s("value"))
            for key, value in params.items():
                if value is None or isinstance(value, list | tuple):
                    continue
                line.append(f"  {safe_text(key)}=", style=self._s("muted"))
                line.append(_param(value))
            out.append(line)
        return out

    def _support_block(self, s: Mapping[str, Any]) -> list[RenderableType]:
        m, d = s.get("m"), s.get("d")
        out: list[RenderableType] = [self._heading("Support rows and errors")]
        out.append(self._pair("m", _count(m), "training rows"))
        share = f"{int(d) / int(m):.1%} of m" if m and d is not None else ""
        family = s.get("family") or {}
        out.append(self._pair("support rows d", _count(d), share))
        if family.get("name", "svm") != "svm":  # what "support rows" means for this family
            meaning = f"{family.get('support_name', '')}: {family.get('support_meaning', '')}"
            out.append(Text(safe_text(meaning), style=self._s("muted")))
        if "bounded" in family.get("columns", ("bounded",)):
            out.append(self._pair("bounded", _count(s.get("bounded")), f"free {_count(s.get('free'))}"))
        if "essential" in s:
            out.append(self._pair("essential", _count(s.get("essential"))))
        out.append(self._pair("training errors", _count(s.get("training_errors"))))
        kind = "exact" if s.get("loo_exact", True) else "approximate"
        if not s.get("loo_exact", True) and "loo_exact_rows" in s:
            kind += f", {_count(s['loo_exact_rows'])} exact"
        out.append(self._pair(f"LOO errors ({kind})", _count(s.get("loo_errors")), style=self._s("warning")))
        ties = ties_line(family.get("ties"))
        if ties:  # signs of decision values next to 0 (learner.ties = "optimum")
            out.append(Text(f"near-zero signs: {ties}", style=self._s("muted")))
        held = s.get("held_out")
        if held:
            rate = held.get("error_rate")
            note = f"{rate:.1%}" if isinstance(rate, int | float) else ""
            errors = f"{_count(held.get('errors'))} of {_count(held.get('n'))}"
            out.append(self._pair("held-out errors", errors, note))
        flags = s.get("flags") or {}
        if flags:
            raised = [(k, v) for k, v in flags.items() if v]
            line = Text("flags ", style=self._s("muted"))
            line.append(", ".join(f"{safe_text(k)} {int(v):,}" for k, v in raised) if raised else "none")
            out.append(line)
        return out

    def _bounds_block(self, s: Mapping[str, Any]) -> list[RenderableType]:
        bounds = s.get("bounds") or {}
        out: list[RenderableType] = [self._heading("Bounds and estimates")]
        keys = [k for k in BOUND_ORDER if k in bounds] + [k for k in bounds if k not in BOUND_ORDER]
        for key in keys:
            item = bounds[key]
            if not isinstance(item, Mapping):
                continue
            value = item.get("value")
            note = safe_text(item.get("note", "")) if item.get("note") else ""
            source = safe_text(item.get("source", "") or "")
            if not self.full:  # compact: value and "Author Year"; note and whole source are one key (v) away
                note, source = "", source.split(",")[0]
            shown = fmt_number(float("nan") if value is None else value, ".4f")  # None: does not apply
            out.append(self._pair(safe_text(item.get("name", key)), shown, note))
            if source:
                out.append(Padding(Text(source, style=self._s("muted")), (0, 0, 0, 2)))
        if len(out) == 1:
            out.append(Text("none", style=self._s("muted")))
        return out

    def _classes_block(self, s: Mapping[str, Any], hist: Histogram | None) -> list[RenderableType]:
        counts = s.get("class_counts") or {}
        out: list[RenderableType] = [self._heading("Classes")]
        total = sum(int(v) for v in counts.values()) or 1
        table = Table.grid(padding=(0, 1))
        table.add_column(no_wrap=True, overflow="ellipsis", max_width=16)
        table.add_column(justify="right", no_wrap=True)
        table.add_column(justify="right", no_wrap=True)
        table.add_column(no_wrap=True)
        for label, n in counts.items():
            share = int(n) / total
            bar = "█" * max(1 if n else 0, round(share * SHARE_BAR))
            table.add_row(
                cell(safe_text(label)),
                cell(_count(n)),
                cell(f"{share:.0%}", self._s("muted")),
                cell(bar, self._s("bar")),
            )
        out.append(table)
        if hist is not None and hist.groups:
            heading = self._heading("Margin by class")
            heading.append("  below 0: the model disagrees with the label", style=self._s("muted"))
            margin, label = self.current if self.current is not None else (None, "")
            bars = HistogramBars(
                hist,
                bar_style=self._s("bar"),
                axis_style=self._s("muted"),
                marker=0.0,
                current=margin,
                current_text=f"this row ({safe_text(label)})" if label else "this row",
            )
            out += [Text(""), heading, bars]
        return out

    def _explanation_block(self, e: Any, composition: bool = True) -> list[RenderableType]:
        out: list[RenderableType] = [self._heading("Why the support set is this size")]
        if not isinstance(e, Mapping):
            return [*out, Text(safe_text(e))]
        comp = e.get("composition") or {}
        if comp and composition:  # bounded / free: the SVM's composition of d
            line = Text()
            line.append(f"d {_count(comp.get('d', e.get('d')))} = ", style=self._s("muted"))
            line.append(f"{_count(comp.get('bounded_misclassified'))} bounded and misclassified + ")
            line.append(f"{_count(comp.get('bounded_correct'))} bounded but correct + ")
            line.append(f"{_count(comp.get('free'))} free")
            out.append(line)
        flagged = e.get("flagged") or {}
        if "support_rows_flagged" in flagged:
            share = flagged.get("share_of_d")
            note = f" ({share:.0%} of d)" if isinstance(share, int | float) else ""
            n_flagged = _count(flagged["support_rows_flagged"])
            out.append(Text(f"{n_flagged} support rows carry a label flag{note}"))
        for hint in e.get("hints") or []:
            text = hint.get("text", "") if isinstance(hint, Mapping) else hint
            if text:
                out.append(Text("• " + safe_text(text), style=self._s("warning")))
        if e.get("source"):
            out.append(Text(safe_text(e["source"]), style=self._s("muted")))
        return out
