"""How the row table shows a column: the spec, the cell formatters, the default findings columns.

Nothing here draws or orders rows: :mod:`holdfast.ui.widgets.row_model` orders them, and
:class:`holdfast.ui.widgets.row_table.RowTable` draws the few on screen with these formatters.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import Any, Literal

import numpy as np
import pandas as pd
from rich.cells import cell_len, set_cell_size

from holdfast.ui.textsafe import safe_text

Alignment = Literal["left", "right", "center"]
Formatter = Callable[[Any], str]
Kind = Literal["bool", "int", "float", "time", "text"]

_ELLIPSIS = "…"
_AUTO_WIDTH_MAX = 40
_AUTO_WIDTH_SAMPLE = 256


@dataclass(frozen=True)
class ColumnSpec:
    """How one column is shown.

    Parameters
    ----------
    key
        Column name in the frame.
    title
        Header text; ``None`` uses ``key``.
    width
        Width in terminal cells; ``None`` fits the title and a sample of formatted values (at most 40).
    alignment
        ``"left"``, ``"right"`` or ``"center"``; ``None`` aligns numbers right and the rest left.
    formatter
        Value -> text for one cell, called only for rows on screen; ``None`` picks one by dtype. Its
        output still goes through ``safe_text``.
    """

    key: str
    title: str | None = None
    width: int | None = None
    alignment: Alignment | None = None
    formatter: Formatter | None = None


def format_bool(value: Any) -> str:
    """``True`` -> ``"yes"``, ``False`` -> ``"no"``, missing -> ``""``."""
    if value is None or value is pd.NA:
        return ""
    return "yes" if bool(value) else "no"


def format_int(value: Any) -> str:
    """Integer (possibly held as float for missing values) -> text; missing -> ``""``."""
    if value is None or value is pd.NA or (isinstance(value, float | np.floating) and np.isnan(value)):
        return ""
    return str(int(value))


def format_float(value: Any, spec: str = ".4g") -> str:
    """Float -> text with ``format(value, spec)``; NaN or missing -> ``""``."""
    if value is None or value is pd.NA or np.isnan(value):
        return ""
    return format(float(value), spec)


def format_text(value: Any) -> str:
    """Any value -> ``str(value)``; ``None``, NaN and ``pd.NA`` -> ``""``."""
    if value is None or value is pd.NA or (isinstance(value, float) and value != value):
        return ""
    return str(value)


def float_formatter(spec: str) -> Formatter:
    """A formatter that writes floats with ``format(value, spec)``."""

    def fmt(value: Any) -> str:
        return format_float(value, spec)

    return fmt


DEFAULT_FORMATTERS: dict[Kind, Formatter] = {
    "bool": format_bool,
    "int": format_int,
    "float": format_float,
    "time": format_text,
    "text": format_text,
}


def default_columns(frame: pd.DataFrame) -> list[ColumnSpec]:
    """Column specs for the findings columns (plus ``decision``) present in ``frame``, in triage order.

    The order puts what an analyst reads first (rank, id, label, LOO prediction, decision, score,
    flags) on the left; columns of ``frame`` not in the findings contract are left out.
    """
    specs = [
        ColumnSpec("rank", "rank", 6),
        ColumnSpec("id", "id", None, "left"),
        ColumnSpec("label", "label", None, "left"),
        ColumnSpec("loo_prediction", "LOO pred", None, "left"),
        ColumnSpec("decision", "decision", 12, "left"),
        ColumnSpec("score", "score", 7, "right", float_formatter(".3f")),
        ColumnSpec("flag_names", "flags", 24, "left"),
        ColumnSpec("loo_miss", "miss", 4, "center"),
        ColumnSpec("support", "supp", 4, "center"),
        ColumnSpec("essential", "ess", 4, "center"),
        ColumnSpec("bounded", "bnd", 4, "center"),
        ColumnSpec("flip_count", "flips", 5, "right"),
        ColumnSpec("alpha", "alpha", 8, "right", float_formatter(".3g")),
        ColumnSpec("margin", "margin", 8, "right", float_formatter("+.3f")),
        ColumnSpec("prediction", "pred", None, "left"),
        ColumnSpec("held_out", "held", 4, "center"),
        ColumnSpec("row", "row", 7, "right"),
    ]
    return [spec for spec in specs if spec.key in frame.columns]


def fit_cells(text: str, width: int, alignment: Alignment) -> str:
    """Pad or cut ``text`` to exactly ``width`` terminal cells (cut text ends in an ellipsis)."""
    size = len(text) if text.isascii() else cell_len(text)
    if size > width:
        return set_cell_size(text, width - 1) + _ELLIPSIS if width > 1 else set_cell_size(text, width)
    pad = width - size
    if pad == 0:
        return text
    if alignment == "right":
        return " " * pad + text
    if alignment == "center":
        left = pad // 2
        return " " * left + text + " " * (pad - left)
    return text + " " * pad


@dataclass
class ShownColumn:
    """A displayed column: its spec resolved against the data (the values stay in the row model)."""

    key: str
    title: str
    width: int
    alignment: Alignment
    formatter: Formatter
    custom_formatter: bool


def resolve_column(spec: ColumnSpec, values: np.ndarray, kind: Kind) -> ShownColumn:
    """Fill in what ``spec`` leaves open: formatter and alignment by kind, width from a sample of values.

    The width fits the title and the formatted values of up to 256 evenly spaced rows (at most 40 cells).
    """
    formatter = spec.formatter or DEFAULT_FORMATTERS[kind]
    alignment: Alignment = spec.alignment or ("right" if kind in ("int", "float") else "left")
    title = safe_text(spec.title if spec.title is not None else spec.key)
    width = spec.width
    if width is None:
        step = max(1, len(values) // _AUTO_WIDTH_SAMPLE)
        sample = values[::step][:_AUTO_WIDTH_SAMPLE]
        widest = max((cell_len(safe_text(formatter(v))) for v in sample), default=0)
        width = min(_AUTO_WIDTH_MAX, max(widest, cell_len(title) + 2))
    return ShownColumn(spec.key, title, max(1, int(width)), alignment, formatter, spec.formatter is not None)
