"""Laying out text for the detail panels: numbers and values as text, wrapping, fitted columns.

Lines are lists of ``(text, style)`` parts, where the style is a component-class suffix of the widget
that draws them (``""`` for plain). Nothing here knows a row or a widget.
"""

from __future__ import annotations

import math
import re
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any, Literal

import numpy as np
import pandas as pd
from rich.cells import cell_len, set_cell_size

from holdfast.ui.textsafe import safe_text

ELLIPSIS = "…"
DASH = "–"

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
