"""RowDetailPanel: one row explained (header, flags, features against the class, neighbours, flips).

The panel draws a :class:`holdfast.insight.detail.RowDetail`; it computes nothing. Every text that comes
from the data set (ids, labels, feature names and values) goes through ``safe_text`` into a
``rich.text.Text``, which is never parsed as markup. Tables are ``rich`` grids that fit the width they
are given, so the panel works from about 40 columns up and scrolls vertically.
"""

from __future__ import annotations

import math
from typing import Any, ClassVar

import numpy as np
from rich.console import Group, RenderableType
from rich.style import Style
from rich.table import Table
from rich.text import Text
from textual.app import ComposeResult
from textual.containers import VerticalScroll
from textual.widgets import Static

from holdfast.insight.detail import RowDetail
from holdfast.ui.textsafe import safe_text

#: |z| at or above this marks a feature value as unusual for the class. Common practice (the "three
#: sigma" rule of thumb), not a test: with many features some values pass it by chance.
UNUSUAL_Z = 3.0
#: flipped rows listed before "... and N more"
FLIPPED_SHOWN = 40
UNUSUAL_MARK = "!"
DISSENT_MARK = "≠"
ARROW = "→"
DASH = "–"


def fmt_number(value: Any, spec: str = ".4g") -> str:
    """A number for the panel: NaN as a dash, infinities as +inf / -inf."""
    try:
        v = float(value)
    except (TypeError, ValueError):
        return safe_text(value)
    if math.isnan(v):
        return DASH
    if math.isinf(v):
        return "+inf" if v > 0 else "-inf"
    return format(v, spec)


def fmt_value(value: Any) -> str:
    """A data value in its own units: integers and text as they are, floats to 6 significant digits."""
    if value is None:
        return ""
    if isinstance(value, bool | np.bool_):
        return str(bool(value))
    if isinstance(value, int | np.integer):
        return str(int(value))
    if isinstance(value, float | np.floating):
        return fmt_number(value, ".6g")
    return safe_text(value)


def grid(*, expand: bool = False) -> Table:
    """A borderless ``rich`` table with one space between columns."""
    return Table.grid(padding=(0, 1), expand=expand)


def cell(value: str, style: Style | str = "") -> Text:
    """A literal table cell (our own text or text already passed through ``safe_text``)."""
    return Text(value, style=style, no_wrap=True, overflow="ellipsis")


class RowDetailPanel(VerticalScroll):
    """Scrollable detail of one row; call :meth:`show` with a :class:`RowDetail` (or ``None``)."""

    COMPONENT_CLASSES: ClassVar[set[str]] = {
        "row-detail--id",
        "row-detail--heading",
        "row-detail--muted",
        "row-detail--flag",
        "row-detail--miss",
        "row-detail--agree",
        "row-detail--unusual",
        "row-detail--dissent",
        "row-detail--decision",
    }
    """
    | Class | Styles |
    | :- | :- |
    | `row-detail--id` | the row id in the header |
    | `row-detail--heading` | section headings |
    | `row-detail--muted` | column titles, notes, empty states |
    | `row-detail--flag` | flag names |
    | `row-detail--miss` | a LOO prediction that differs from the label |
    | `row-detail--agree` | a LOO prediction equal to the label |
    | `row-detail--unusual` | feature rows with abs(z) >= 3 |
    | `row-detail--dissent` | neighbours carrying another label |
    | `row-detail--decision` | the decision in the header |
    """

    DEFAULT_CSS = """
    RowDetailPanel {
        height: 1fr;
        overflow-x: hidden;
        & > .row-detail--id { text-style: bold; }
        & > .row-detail--heading { text-style: bold; }
        & > .row-detail--muted { color: $text-muted; }
        & > .row-detail--flag { color: $warning; }
        & > .row-detail--miss { color: $error; text-style: bold; }
        & > .row-detail--agree { color: $success; }
        & > .row-detail--unusual { color: $warning; text-style: bold; }
        & > .row-detail--dissent { color: $warning; }
        & > .row-detail--decision { color: $accent; text-style: bold; }
        & > Static { width: 1fr; }
    }
    """

    def __init__(self, *, name: str | None = None, id: str | None = None, classes: str | None = None) -> None:
        super().__init__(name=name, id=id, classes=classes)
        self.detail: RowDetail | None = None
        self.decision: str | None = None

    def compose(self) -> ComposeResult:
        yield Static("", classes="row-detail-body", markup=False)

    def _s(self, name: str) -> Style:
        return self.get_component_rich_style(f"row-detail--{name}", partial=True)

    def show(self, detail: RowDetail | None, *, decision: str | None = None) -> None:
        """Draw ``detail``; ``decision`` is the row's current decision as text (e.g. ``"relabel → b"``)."""
        self.detail = detail
        self.decision = decision
        body = self.query_one(".row-detail-body", Static)
        if detail is None:
            body.update(Text("No row selected.", style=self._s("muted")))
            return
        body.update(Group(*self.render_parts(detail, decision)))

    # -- parts -----------------------------------------------------------------------------------------

    def render_parts(self, d: RowDetail, decision: str | None = None) -> list[RenderableType]:
        """The renderables of the panel, top to bottom."""
        parts: list[RenderableType] = [*self._header(d, decision), Text("")]
        parts += self._flags(d)
        parts += [Text(""), *self._features(d)]
        parts += [Text(""), *self._neighbours(d)]
        if d.support or len(d.flipped):
            parts += [Text(""), *self._flipped(d)]
        return parts

    def _header(self, d: RowDetail, decision: str | None) -> list[RenderableType]:
        muted = self._s("muted")
        line = Text()
        line.append(safe_text(d.id), style=self._s("id"))
        line.append("  label ", style=muted)
        line.append(safe_text(d.label))
        line.append(f" {ARROW} LOO ", style=muted)
        miss = d.loo_prediction is not None and d.loo_prediction != d.label
        line.append(safe_text(d.loo_prediction or DASH), style=self._s("miss" if miss else "agree"))
        numbers = Text()
        for title, value in (
            ("margin", fmt_number(d.margin, "+.3f")),
            ("score", fmt_number(d.score, ".3f")),
            ("rank", f"{d.rank:,}" if d.rank else DASH),
        ):
            numbers.append(f"{title} ", style=muted)
            numbers.append(f"{value}   ")
        numbers.rstrip()
        lines: list[RenderableType] = [line, numbers]
        if d.held_out:
            lines.append(Text("held-out row: never trained on", style=muted))
        else:
            role = Text()
            if d.support:
                kinds = ["support row", "bounded" if d.bounded else "free"]
                kinds += ["essential"] if d.essential else []
                role.append(" · ".join(kinds))
                role.append(f"   alpha {fmt_number(d.alpha, '.4g')}   flips {d.flip_count:,}", style=muted)
            else:
                role.append("not a support row (leaving it out changes nothing)", style=muted)
            lines.append(role)
        pred = Text()
        pred.append("prediction with all rows ", style=muted)
        pred.append(safe_text(d.prediction or DASH))
        lines.append(pred)
        if decision:
            dec = Text()
            dec.append("decision ", style=muted)
            dec.append(safe_text(decision), style=self._s("decision"))
            lines.append(dec)
        return lines

    def _flags(self, d: RowDetail) -> list[RenderableType]:
        heading = Text("Flags", style=self._s("heading"))
        heading.append("  evidence, not proof", style=self._s("muted"))
        if not d.flags:
            return [heading, Text("no flags raised", style=self._s("muted"))]
        table = grid()
        table.add_column(no_wrap=True)
        table.add_column(overflow="fold")
        for name, reason in d.flags:
            table.add_row(cell(safe_text(name), self._s("flag")), Text(safe_text(reason)))
        return [heading, table]

    def _features(self, d: RowDetail) -> list[RenderableType]:
        muted = self._s("muted")
        heading = Text("Features", style=self._s("heading"))
        heading.append(f"  vs label {safe_text(d.label)}, {d.class_rows:,} other training rows", style=muted)
        f = d.features
        if f.empty:
            return [heading, Text("no features", style=muted)]
        table = grid(expand=True)
        table.add_column(ratio=1, no_wrap=True, overflow="ellipsis", min_width=6)
        table.add_column(justify="right", no_wrap=True, overflow="ellipsis", max_width=14)
        table.add_column(justify="right", no_wrap=True, overflow="ellipsis", max_width=14)
        table.add_column(justify="right", no_wrap=True, width=6)
        table.add_column(no_wrap=True, width=1)
        titles = ("feature", "value", "class mean", "z")
        table.add_row(*(cell(t, muted) for t in titles), "")
        unusual_seen = False
        for r in f.itertuples(index=False):
            if r.kind == "categorical":
                share = "" if np.isnan(r.share) else f"{r.share:.0%} share"
                name, value = cell(safe_text(r.feature)), cell(fmt_value(r.value))
                table.add_row(name, value, cell(share, muted), "", "")
                continue
            unusual = bool(abs(r.z) >= UNUSUAL_Z) if not np.isnan(r.z) else False
            unusual_seen |= unusual
            style = self._s("unusual") if unusual else ""
            table.add_row(
                cell(safe_text(r.feature), style),
                cell(fmt_value(r.value), style),
                cell(fmt_number(r.class_mean, ".4g")),
                cell(fmt_number(r.z, "+.2f"), style),
                cell(UNUSUAL_MARK if unusual else "", style),
            )
        parts: list[RenderableType] = [heading, table]
        numeric = f[f["kind"] == "numeric"]
        notes = [str(n) for n in numeric["note"]]
        if notes and all(n == notes[0] for n in notes):
            if notes[0]:
                parts.append(Text(notes[0], style=muted))
        else:
            for name, note in zip(numeric["feature"], notes, strict=True):
                if note:
                    parts.append(Text(f"{safe_text(name)}: {note}", style=muted))
        if unusual_seen:
            parts.append(Text(f"{UNUSUAL_MARK} |z| >= {UNUSUAL_Z:g}: unusual for the label", style=muted))
        return parts

    def _neighbours(self, d: RowDetail) -> list[RenderableType]:
        muted = self._s("muted")
        nb = d.neighbours
        heading = Text("Nearest training rows", style=self._s("heading"))
        if len(nb):
            other = int((~nb["same_label"].astype(bool)).sum())
            heading.append(f"  {other} of {len(nb)} carry another label", style=muted)
        if nb.empty:
            return [heading, Text("no other training rows", style=muted)]
        table = grid(expand=True)
        table.add_column(no_wrap=True, width=1)
        table.add_column(ratio=1, no_wrap=True, overflow="ellipsis", min_width=6)
        table.add_column(no_wrap=True, overflow="ellipsis", max_width=18)
        table.add_column(justify="right", no_wrap=True)
        table.add_row("", cell("id", muted), cell("label", muted), cell("distance", muted))
        for r in nb.itertuples(index=False):
            same = bool(r.same_label)
            style = "" if same else self._s("dissent")
            table.add_row(
                cell("" if same else DISSENT_MARK, style),
                cell(safe_text(r.id), style),
                cell(safe_text(r.label), style),
                cell(fmt_number(r.distance, ".3f")),
            )
        return [heading, table]

    def _flipped(self, d: RowDetail) -> list[RenderableType]:
        muted = self._s("muted")
        fl = d.flipped
        heading = Text("Rows that flip without it", style=self._s("heading"))
        heading.append(f"  {len(fl):,}", style=muted)
        if fl.empty:
            return [heading, Text("no other row changes its prediction without it", style=muted)]
        table = grid(expand=True)
        table.add_column(ratio=1, no_wrap=True, overflow="ellipsis", min_width=6)
        table.add_column(no_wrap=True, overflow="ellipsis", max_width=16)
        table.add_column(no_wrap=True, overflow="ellipsis", max_width=30)
        table.add_row(cell("id", muted), cell("label", muted), cell("prediction", muted))
        for r in fl.head(FLIPPED_SHOWN).itertuples(index=False):
            change = safe_text(r.prediction)
            if r.prediction_without is not None:
                change += f" {ARROW} {safe_text(r.prediction_without)}"
            table.add_row(cell(safe_text(r.id)), cell(safe_text(r.label)), cell(change))
        parts: list[RenderableType] = [heading, table]
        if len(fl) > FLIPPED_SHOWN:
            parts.append(Text(f"... and {len(fl) - FLIPPED_SHOWN:,} more", style=muted))
        return parts
