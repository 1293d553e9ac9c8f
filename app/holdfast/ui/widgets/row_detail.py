"""RowDetailPanel: one row explained (header, flags, features against the class, neighbours, flips).

The panel draws a :class:`holdfast.insight.detail.RowDetail`; it computes nothing about the row. It is a
Line API widget (``ScrollView`` + ``render_line``): :meth:`RowDetailPanel.show` lays the detail out once
for the panel's width into plain strips, and scrolling only picks strips, so following the cursor stays
cheap. Every text that comes from the data set (ids, labels, feature names and values) goes through
``safe_text`` and is drawn as a plain ``Segment``: it is never parsed as markup, and control codes are
shown as visible escapes.
"""

from __future__ import annotations

import math
import re
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any, ClassVar, Literal

import numpy as np
import pandas as pd
from rich.cells import cell_len, set_cell_size
from rich.segment import Segment
from rich.style import Style
from textual import events
from textual.geometry import Size
from textual.scroll_view import ScrollView
from textual.strip import Strip

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
ELLIPSIS = "…"

Part = tuple[str, str]  # (text, component-class suffix or "" for plain)
Line = list[Part]
Align = Literal["left", "right"]


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


class _Record(dict):
    """One table row with its columns as attributes."""

    __getattr__ = dict.__getitem__


def records(frame: pd.DataFrame) -> list[_Record]:
    """The rows of a small frame as records (much cheaper than ``itertuples`` for a few rows)."""
    columns = [str(c) for c in frame.columns]
    data = [frame[c].tolist() for c in frame.columns]
    return [_Record(zip(columns, values, strict=True)) for values in zip(*data, strict=True)]


def fit(text: str, width: int, align: Align = "left") -> str:
    """``text`` padded or cut (with an ellipsis) to exactly ``width`` terminal cells."""
    if width <= 0:
        return ""
    size = cell_len(text)
    if size > width:
        return set_cell_size(text, width - 1) + ELLIPSIS if width > 1 else ELLIPSIS
    pad = " " * (width - size)
    return pad + text if align == "right" else text + pad


def wrap(parts: Sequence[Part], width: int, indent: int = 0) -> list[Line]:
    """Greedy word wrap of styled parts to ``width`` cells; continuation lines start with ``indent``
    spaces; a word longer than a line is cut into pieces."""
    width = max(1, width)
    indent = min(indent, width - 1) if width > 1 else 0
    lines: list[Line] = [[]]
    used = 0
    start = 0
    for text, style in parts:
        for token in re.findall(r"\S+|\s+", text):
            if token.isspace():
                if used > start:
                    _append(lines[-1], token, style)
                    used += cell_len(token)
                continue
            size = cell_len(token)
            if used + size > width and used > start:
                while lines[-1] and lines[-1][-1][0].isspace():
                    used -= cell_len(lines[-1].pop()[0])
                lines.append([(" " * indent, "")] if indent else [])
                used = start = indent
            while size > width - used:
                room = width - used
                piece = set_cell_size(token, room)
                lines[-1].append((piece, style))
                token = token[len(piece) :]
                size = cell_len(token)
                lines.append([(" " * indent, "")] if indent else [])
                used = start = indent
            _append(lines[-1], token, style)
            used += size
    return lines


def _append(line: Line, text: str, style: str) -> None:
    """Add ``text`` to ``line``, joining it to the last part when the style is the same."""
    if line and line[-1][1] == style:
        line[-1] = (line[-1][0] + text, style)
    else:
        line.append((text, style))


@dataclass(frozen=True)
class Col:
    """A column of a :func:`grid`: alignment, width limits, and whether it takes the spare width."""

    align: Align = "left"
    min: int = 1
    max: int = 40
    flex: bool = False


def grid(rows: Sequence[Sequence[Part]], cols: Sequence[Col], width: int) -> list[Line]:
    """Lay out rows of single-style cells in columns one space apart, fitted to ``width`` cells.

    Columns take their widest cell (within their limits); the flex column takes what is left and
    gives it back first when the width is short; a line that still does not fit is cut at the edge.
    """
    widths = [max([c.min, *(cell_len(r[j][0]) for r in rows)]) for j, c in enumerate(cols)]
    widths = [min(w, c.max) for w, c in zip(widths, cols, strict=True)]
    spare = width - sum(widths) - (len(cols) - 1)
    for j, c in enumerate(cols):
        if c.flex:
            widths[j] = max(c.min, widths[j] + spare) if spare < 0 else max(widths[j], c.min) + spare
            break
    out: list[Line] = []
    for r in rows:
        line: Line = []
        for j, (text, style) in enumerate(r):
            if j:
                line.append((" ", ""))
            line.append((fit(text, widths[j], cols[j].align), style))
        out.append(line)
    return out


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
        self._lines: list[Line] = []
        self._strips: list[Strip] = []
        self._laid_width = -1
        self._styles: dict[str, Style] = {}

    # -- public ----------------------------------------------------------------------------------------

    def show(self, detail: RowDetail | None, *, decision: str | None = None) -> None:
        """Draw ``detail``; ``decision`` is the row's current decision as text (e.g. ``"relabel → b"``).
        The panel scrolls back to the top when the row changes."""
        same_row = detail is not None and self.detail is not None and detail.position == self.detail.position
        self.detail = detail
        self.decision = decision
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
            return [[("No row selected.", "muted")]]
        out: list[Line] = []
        out += self._header(d, width, decision)
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
