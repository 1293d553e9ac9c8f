"""RowDetailPanel: one row explained (header, flags, features against the class, neighbours, flips).

The panel draws a :class:`holdfast.insight.detail.RowDetail`; it computes nothing about the row. It is a
Line API widget (``ScrollView`` + ``render_line``): :meth:`RowDetailPanel.show` lays the detail out once
for the panel's width into plain strips, and scrolling only picks strips, so following the cursor stays
cheap. Every text that comes from the data set (ids, labels, feature names and values) goes through
``safe_text`` and is drawn as a plain ``Segment``: it is never parsed as markup, and control codes are
shown as visible escapes.
"""

from __future__ import annotations

from typing import ClassVar

import numpy as np
from rich.cells import cell_len
from rich.segment import Segment
from rich.style import Style
from textual import events
from textual.geometry import Size
from textual.scroll_view import ScrollView
from textual.strip import Strip

from holdfast.insight.detail import RowDetail
from holdfast.ui.textsafe import safe_text
from holdfast.ui.widgets.text_layout import (
    DASH,
    Col,
    Line,
    Part,
    fit,
    fmt_number,
    fmt_value,
    grid,
    records,
    wrap,
)

#: |z| at or above this marks a feature value as unusual for the class. Common practice (the "three
#: sigma" rule of thumb), not a test: with many features some values pass it by chance.
UNUSUAL_Z = 3.0
#: one part of the score: (name, weight, value, used, contribution), see ``insight.score.score_parts``
ScorePart = tuple[str, float, float, float, float]
#: flipped rows listed before "... and N more"
FLIPPED_SHOWN = 40
UNUSUAL_MARK = "!"
DISSENT_MARK = "≠"
ARROW = "→"


class RowDetailPanel(ScrollView):
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
        scrollbar-gutter: stable;
        & > .row-detail--id { text-style: bold; }
        & > .row-detail--heading { text-style: bold; }
        & > .row-detail--muted { color: $text-muted; }
        & > .row-detail--flag { color: $warning; }
        & > .row-detail--miss { color: $error; text-style: bold; }
        & > .row-detail--agree { color: $success; }
        & > .row-detail--unusual { color: $warning; text-style: bold; }
        & > .row-detail--dissent { color: $warning; }
        & > .row-detail--decision { color: $accent; text-style: bold; }
    }
    """

    def __init__(self, *, name: str | None = None, id: str | None = None, classes: str | None = None) -> None:
        super().__init__(name=name, id=id, classes=classes)
        self.detail: RowDetail | None = None
        self.decision: str | None = None
        self.parts: list[ScorePart] | None = None
        self.provisional = False
        self.empty = "No row selected."
        self._lines: list[Line] = []
        self._strips: list[Strip] = []
        self._laid_width = -1
        self._styles: dict[str, Style] = {}

    # -- public ----------------------------------------------------------------------------------------

    def show(
        self,
        detail: RowDetail | None,
        *,
        decision: str | None = None,
        parts: list[ScorePart] | None = None,
        provisional: bool = False,
        empty: str | None = None,
    ) -> None:
        """Draw ``detail``; ``decision`` is the row's current decision as text (e.g. ``"relabel → b"``);
        ``parts`` the score's parts (``holdfast.insight.score.score_parts``); ``provisional`` says the
        row's LOO refit has not arrived yet. The panel scrolls back to the top when the row changes."""
        same_row = detail is not None and self.detail is not None and detail.position == self.detail.position
        self.detail = detail
        self.decision = decision
        self.parts = parts
        self.provisional = provisional
        self.empty = empty or "No row selected."
        self._relayout()
        if not same_row:
            self.scroll_to(0, 0, animate=False)

    @property
    def lines(self) -> list[str]:
        """The laid-out lines as plain text (what the panel shows, top to bottom, before scrolling)."""
        return ["".join(text for text, _ in line) for line in self._lines]

    # -- layout ----------------------------------------------------------------------------------------

    def _width(self) -> int:
        return max(10, self.scrollable_content_region.width)

    def _relayout(self) -> None:
        width = self._width()
        self._laid_width = width
        self._lines = self.layout(self.detail, width, self.decision)
        self._strips = []
        self.virtual_size = Size(width, len(self._lines))
        self.refresh()

    def layout(self, d: RowDetail | None, width: int, decision: str | None = None) -> list[Line]:
        """The panel's lines for ``d`` at ``width`` cells."""
        if d is None:
            return [[(self.empty, "muted")]]
        out: list[Line] = []
        out += self._header(d, width, decision)
        if self.parts and not d.held_out:
            out += [[], *self._score(d, self.parts, width)]
        out += [[], *self._flags(d, width)]
        out += [[], *self._features(d, width)]
        out += [[], *self._neighbours(d, width)]
        if d.support or len(d.flipped):
            out += [[], *self._flipped(d, width)]
        return out

    def _header(self, d: RowDetail, width: int, decision: str | None) -> list[Line]:
        miss = d.loo_prediction is not None and d.loo_prediction != d.label
        out = wrap(
            [
                (safe_text(d.id), "id"),
                ("  label ", "muted"),
                (safe_text(d.label), ""),
                (f" {ARROW} predicted " if d.held_out else f" {ARROW} LOO ", "muted"),  # held out: no LOO
                (safe_text(d.loo_prediction or DASH), "miss" if miss else "agree"),
            ],
            width,
            indent=2,
        )
        numbers: list[Part] = []
        for title, value in (
            ("margin", fmt_number(d.margin, "+.3f")),
            ("LOO margin", fmt_number(d.loo_margin, "+.3f")),
            ("logit", fmt_number(d.linear_logit, "+.2f")),  # out-of-fold logistic log-odds of the label
            ("score", fmt_number(d.score, ".3f")),
            ("rank", f"{d.rank:,}" if d.rank else DASH),
        ):
            numbers += [(f"{title} ", "muted"), (f"{value}   ", "")]
        out += wrap(numbers, width, indent=2)
        if d.held_out:
            out += wrap([("held-out row: never trained on", "muted")], width)
        elif d.support:
            kinds = [d.support_name] + (
                ["bounded" if d.bounded else "free"] if "bounded" in d.family_columns else []
            )
            kinds += ["essential"] if d.essential else []
            alpha = f"   {d.alpha_name} {fmt_number(d.alpha, '.4g')}" if "alpha" in d.family_columns else ""
            out += wrap(
                [(" · ".join(kinds), ""), (f"{alpha}   flips {d.flip_count:,}", "muted")],
                width,
                indent=2,
            )
        elif d.support_is_compression:
            text = f"not a {d.support_name}: leaving it out changes nothing"
            out += wrap([(text, "muted")], width, indent=2)
        else:  # k-NN, logistic: every row counts a little; the family's words say what was measured
            out += wrap([(f"not a {d.support_name}   flips {d.flip_count:,}", "muted")], width, indent=2)
        if not d.loo_exact:
            out += wrap([("LOO approximate (one Newton step; not refitted)", "muted")], width, indent=2)
        out += wrap([("prediction with all rows ", "muted"), (safe_text(d.prediction or DASH), "")], width, 2)
        if decision:
            out += wrap([("decision ", "muted"), (safe_text(decision), "decision")], width, indent=2)
        return out

    def _score(self, d: RowDetail, parts: list[ScorePart], width: int) -> list[Line]:
        head: list[Part] = [("Why this score", "heading"), (f"  {fmt_number(d.score, '.3f')} = ", "muted")]
        head.append((" + ".join(f"({p[4]:+.3f})" for p in parts), "muted"))
        out = wrap(head, width)
        if self.provisional:
            out += wrap(
                [("provisional: the LOO refit has not arrived; the full-fit margin stands in", "muted")],
                width,
                2,
            )
        rows: list[list[Part]] = [
            [("part", "muted"), ("value", "muted"), ("used", "muted"), ("weight", "muted"), ("adds", "muted")]
        ]
        for name, weight, value, used, contribution in parts:
            rows.append(
                [
                    (name, ""),
                    (fmt_number(value, "+.3f"), ""),
                    (fmt_number(used, "+.3f"), "muted" if used == value else ""),
                    (f"{weight:+g}", "muted"),
                    (f"{contribution:+.3f}", "miss" if contribution > 0 else "agree"),
                ]
            )
        cols = [
            Col(min=8, max=32, flex=True),
            Col("right", 6, 9),
            Col("right", 6, 9),
            Col("right", 6, 7),
            Col("right", 6, 8),
        ]
        out += grid(rows, cols, width)
        out += wrap(
            [("used: after the clip (a missing value counts as 0, a missing LOO margin as ±1)", "muted")],
            width,
        )
        return out

    def _flags(self, d: RowDetail, width: int) -> list[Line]:
        out = wrap([("Flags", "heading"), ("  evidence, not proof", "muted")], width)
        if not d.flags:
            return [*out, [("no flags raised", "muted")]]
        name_w = min(max(cell_len(safe_text(n)) for n, _ in d.flags), max(8, width // 3))
        for name, reason in d.flags:
            out += wrap(
                [(fit(safe_text(name), name_w), "flag"), (" " + safe_text(reason), "")], width, name_w + 1
            )
        return out

    def _features(self, d: RowDetail, width: int) -> list[Line]:
        out = wrap(
            [
                ("Features", "heading"),
                (f"  vs label {safe_text(d.label)}, {d.class_rows:,} other training rows", "muted"),
            ],
            width,
        )
        f = d.features
        if f.empty:
            return [*out, [("no features", "muted")]]
        rows: list[list[Part]] = [
            [("feature", "muted"), ("value", "muted"), ("class mean", "muted"), ("z", "muted"), ("", "")]
        ]
        unusual_seen = False
        if "z" in f:  # the features that stand out most for the label first (|z| largest; no z last)
            f = f.iloc[
                np.argsort(-np.nan_to_num(np.abs(f["z"].to_numpy(dtype=float)), nan=-1.0), kind="stable")
            ]
        for r in records(f):
            if r.kind == "categorical":
                share = "" if np.isnan(r.share) else f"{r.share:.0%} share"
                rows.append(
                    [
                        (safe_text(r.feature), ""),
                        (fmt_value(r.value), ""),
                        (share, "muted"),
                        ("", ""),
                        ("", ""),
                    ]
                )
                continue
            unusual = bool(not np.isnan(r.z) and abs(r.z) >= UNUSUAL_Z)
            unusual_seen |= unusual
            style = "unusual" if unusual else ""
            rows.append(
                [
                    (safe_text(r.feature), style),
                    (fmt_value(r.value), style),
                    (fmt_number(r.class_mean, ".4g"), ""),
                    (fmt_number(r.z, "+.2f"), style),
                    (UNUSUAL_MARK if unusual else "", style),
                ]
            )
        cols = [
            Col(min=6, max=40, flex=True),
            Col("right", 5, 14),
            Col("right", 10, 14),
            Col("right", 6, 7),
            Col(max=1),
        ]
        out += grid(rows, cols, width)
        numeric = [r for r in records(f[["feature", "kind", "note"]]) if r.kind == "numeric"]
        notes = [str(r.note) for r in numeric]
        if notes and all(n == notes[0] for n in notes):
            if notes[0]:
                out += wrap([(notes[0], "muted")], width)
        else:
            for r in numeric:
                if r.note:
                    out += wrap([(f"{safe_text(r.feature)}: {r.note}", "muted")], width, indent=2)
        if unusual_seen:
            out += wrap([(f"{UNUSUAL_MARK} |z| >= {UNUSUAL_Z:g}: unusual for the label", "muted")], width)
        return out

    def _neighbours(self, d: RowDetail, width: int) -> list[Line]:
        nb = d.neighbours
        head: list[Part] = [("Nearest training rows", "heading")]
        if len(nb):
            other = int((~nb["same_label"].astype(bool)).sum())
            head.append((f"  {other} of {len(nb)} carry another label", "muted"))
        out = wrap(head, width)
        if nb.empty:
            return [*out, [("no other training rows", "muted")]]
        rows: list[list[Part]] = [[("", ""), ("id", "muted"), ("label", "muted"), ("distance", "muted")]]
        for r in records(nb):
            style = "" if r.same_label else "dissent"
            rows.append(
                [
                    ("" if r.same_label else DISSENT_MARK, style),
                    (safe_text(r.id), style),
                    (safe_text(r.label), style),
                    (fmt_number(r.distance, ".3f"), ""),
                ]
            )
        return out + grid(
            rows, [Col(max=1), Col(min=6, flex=True), Col(min=5, max=18), Col("right", 8, 10)], width
        )

    def _flipped(self, d: RowDetail, width: int) -> list[Line]:
        fl = d.flipped
        out = wrap([("Rows that flip without it", "heading"), (f"  {len(fl):,}", "muted")], width)
        if fl.empty:
            return out + wrap([("no other row changes its prediction without it", "muted")], width)
        rows: list[list[Part]] = [[("id", "muted"), ("label", "muted"), ("prediction", "muted")]]
        for r in records(fl.head(FLIPPED_SHOWN)):
            change = safe_text(r.prediction)
            if r.prediction_without is not None:
                change += f" {ARROW} {safe_text(r.prediction_without)}"
            rows.append([(safe_text(r.id), ""), (safe_text(r.label), ""), (change, "")])
        out += grid(rows, [Col(min=6, flex=True), Col(min=5, max=16), Col(min=10, max=34)], width)
        if len(fl) > FLIPPED_SHOWN:
            out += [[(f"... and {len(fl) - FLIPPED_SHOWN:,} more", "muted")]]
        return out

    # -- drawing ---------------------------------------------------------------------------------------

    def _style(self, name: str) -> Style:
        style = self._styles.get(name)
        if style is None:
            style = self.rich_style if name == "" else self.get_component_rich_style(f"row-detail--{name}")
            self._styles[name] = style
        return style

    def _strip(self, index: int) -> Strip:
        if not self._strips:
            base = self._style("")
            self._strips = [
                Strip([Segment(text, base + self._style(style)) for text, style in line if text])
                for line in self._lines
            ]
        return self._strips[index]

    def render_line(self, y: int) -> Strip:
        scroll_x, scroll_y = self.scroll_offset
        width = self.scrollable_content_region.width
        base = self._style("")
        index = scroll_y + y
        if index >= len(self._lines):
            return Strip.blank(width, base)
        return self._strip(index).crop_extend(scroll_x, scroll_x + width, base)

    def on_resize(self, event: events.Resize) -> None:
        if self._width() != self._laid_width:
            self._relayout()

    def notify_style_update(self) -> None:
        super().notify_style_update()
        self._styles = {}
        self._strips = []
