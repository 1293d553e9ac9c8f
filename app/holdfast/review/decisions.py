"""The decisions as a table: built from the journal, read back from a file, applied to the data.

Decisions table columns (``DECISION_COLUMNS``), one row per row that carries a decision or a note:
``id`` (text), ``old_label`` (the label in the data, as text), ``new_label`` (text, relabels only),
``decision`` (relabel, confirm, exclude, defer; ``clear`` = no decision, the row only carries a note),
``note``, ``score`` (suspicion score from the findings), ``flag_names`` (comma-separated), ``time`` (ISO-8601
UTC of the row's last change). Missing values are empty (null in Parquet, empty cell in CSV).
"""

from __future__ import annotations

from collections.abc import Mapping
from pathlib import Path

import numpy as np
import pandas as pd

from holdfast.data.prepare import row_ids
from holdfast.errors import DataError, UserError
from holdfast.review.events import DECISIONS, Decision
from holdfast.review.journal import Journal
from holdfast.textsafe import csv_cell_back

DECISION_COLUMNS: tuple[str, ...] = (
    "id",
    "old_label",
    "new_label",
    "decision",
    "note",
    "score",
    "flag_names",
    "time",
)
#: Columns a decisions file must have to be read back (the others are filled with empty values).
REQUIRED_COLUMNS: tuple[str, ...] = ("id", "decision", "new_label")
_TEXT_COLUMNS = tuple(c for c in DECISION_COLUMNS if c != "score")
FORMATS = (".parquet", ".csv")


def decisions_frame(journal: Journal, rows: pd.DataFrame) -> pd.DataFrame:
    """The decisions table of ``journal`` joined with the findings per-row frame ``rows``.

    ``rows`` needs the columns ``id``, ``label``, ``score`` and ``flag_names`` (see holdfast.engine.findings).
    Rows of
    the journal whose id is not in ``rows`` still appear, with empty ``old_label``, ``score`` and ``flags``.
    Output order: the order of ``rows`` first, then unmatched ids in the order they were last changed.
    """
    missing = [c for c in ("id", "label", "score", "flag_names") if c not in rows.columns]
    if missing:
        raise ValueError(f"findings frame lacks column(s) {', '.join(missing)}")
    current = journal.current(include_notes_only=True)
    lookup = {str(i): n for n, i in enumerate(rows["id"].tolist())}
    position = {rid: lookup.get(rid, len(lookup) + k) for k, rid in enumerate(current)}
    records = []
    labels = rows["label"].tolist()
    scores = rows["score"].tolist()
    flags = rows["flag_names"].tolist()
    for rid in sorted(current, key=position.__getitem__):
        d = current[rid]
        n = lookup.get(rid)
        records.append(
            {
                "id": rid,
                "old_label": None if n is None else _text(labels[n]),
                "new_label": d.new_label,
                "decision": d.decision,
                "note": d.note,
                "score": np.nan if n is None else _float(scores[n]),
                "flag_names": None if n is None else _text(flags[n]),
                "time": d.time,
            }
        )
    return _normalise(pd.DataFrame.from_records(records, columns=list(DECISION_COLUMNS)))


def read_decisions(path: str | Path) -> pd.DataFrame:
    """Read a decisions file written by :func:`export_decisions` (or edited by hand) and validate it.

    Needs the columns ``id``, ``decision`` and ``new_label``; other columns of the format are added empty
    when absent and extra columns are dropped. Raises DataError naming the file and the missing column,
    an unknown decision, a relabel without a new label, or a repeated id.
    """
    source = Path(path)
    suffix = table_suffix(source)
    if not source.is_file():
        raise DataError(f"{source}: no such decisions file")
    try:
        if suffix == ".parquet":
            frame = pd.read_parquet(source)
        else:
            frame = pd.read_csv(source, dtype=str, keep_default_na=False)
            frame = frame.map(csv_cell_back)  # written by csv_cell: formula guards removed
            frame.columns = [csv_cell_back(c) for c in frame.columns]
    except Exception as exc:  # pyarrow, pandas and OS errors alike: the file cannot be read
        raise DataError(f"{source}: cannot read decisions file ({type(exc).__name__}: {exc})") from exc
    for column in REQUIRED_COLUMNS:
        if column not in frame.columns:
            raise DataError(f"{source}: decisions file has no column '{column}'")
    for column in DECISION_COLUMNS:
        if column not in frame.columns:
            frame[column] = np.nan if column == "score" else None
    frame = frame[list(DECISION_COLUMNS)].copy()
    try:
        frame = _normalise(frame)
    except ValueError as exc:
        raise DataError(f"{source}: column 'score' is not numeric ({exc})") from exc
    _validate(frame, source)
    return frame


def _validate(frame: pd.DataFrame, source: Path) -> None:
    for i, (rid, decision, new_label) in enumerate(
        zip(frame["id"], frame["decision"], frame["new_label"], strict=True)
    ):
        if rid is None:
            raise DataError(f"{source}: row {i + 1} has an empty id")
        if decision not in DECISIONS:
            raise DataError(
                f"{source}: row id '{rid}' has unknown decision '{decision}' "
                f"(expected one of {', '.join(DECISIONS)})"
            )
        if decision == "relabel" and new_label is None:
            raise DataError(f"{source}: row id '{rid}' is relabelled but has no new_label")
    dup = frame["id"][frame["id"].duplicated()]
    if len(dup):
        raise DataError(f"{source}: row id '{dup.iloc[0]}' appears more than once")


#: classes listed in the message about a relabel to an unknown class
LIST_CLASSES = 12


def check_relabels(
    decisions: Mapping[str, Decision] | pd.DataFrame, labels: pd.Series, *, label_column: str, source: str
) -> None:
    """Refuse a relabel to a value that is not a class of the label column (DataError naming the row id,
    the new label and the classes). ``labels`` is the data's label column; ``source`` names the decisions."""
    table = decisions_dict(decisions) if isinstance(decisions, pd.DataFrame) else decisions
    values = pd.unique(labels.dropna())
    texts = {str(v) for v in values}
    caster = _LabelCaster(labels, label_column)
    for rid, d in table.items():
        if d.decision != "relabel" or d.new_label is None or d.new_label in texts:
            continue
        try:
            known = caster(d.new_label) in set(values.tolist())
        except (DataError, TypeError):
            known = False
        if not known:
            shown = sorted(texts)
            listed = ", ".join(shown[:LIST_CLASSES]) + (
                f" and {len(shown) - LIST_CLASSES} more" if len(shown) > LIST_CLASSES else ""
            )
            raise DataError(
                f"{source}: row id '{rid}' is relabelled to '{d.new_label}', which is not a class of label "
                f"column '{label_column}' (classes: {listed})"
            )


def apply_decisions(
    data: pd.DataFrame,
    decisions: Mapping[str, Decision] | pd.DataFrame,
    *,
    id_column: str | None,
    label_column: str,
) -> pd.DataFrame:
    """The data with decisions applied: relabels written, excluded rows removed, nothing else changed.

    ``decisions`` is a journal's :meth:`~holdfast.review.journal.Journal.current` dict or a decisions frame
    (as
    from :func:`read_decisions`); frames are converted to the dict shape. Confirm, defer and clear leave a
    row as it is; decisions whose id is not in the data are ignored here (see ``Journal.reconcile``).
    Columns, their order and dtypes, and the row order and index of the kept rows are preserved. A new
    label is matched to an existing label with the same text, else cast to the label column's dtype
    (UserError naming the value when it cannot be).
    """
    if label_column not in data.columns:
        raise DataError(f"label column '{label_column}' is not in the data")
    table = decisions_dict(decisions) if isinstance(decisions, pd.DataFrame) else decisions
    ids = row_ids(data, id_column)
    if len(set(ids)) != len(ids):
        seen: set[str] = set()
        dup = next(i for i in ids if i in seen or seen.add(i))  # type: ignore[func-returns-value]
        raise DataError(f"id column '{id_column}' has the id '{dup}' more than once")
    column = data[label_column]
    labels = column.tolist()
    keep = np.ones(len(data), dtype=bool)
    caster = _LabelCaster(column, label_column)
    for n, rid in enumerate(ids):
        d = table.get(rid)
        if d is None:
            continue
        if d.decision == "exclude":
            keep[n] = False
        elif d.decision == "relabel" and d.new_label is not None:
            labels[n] = caster(d.new_label)
    out = data.copy()
    out[label_column] = pd.Series(labels, index=data.index, dtype=column.dtype)
    return out.loc[keep]


def decisions_dict(frame: pd.DataFrame) -> dict[str, Decision]:
    """Turn a decisions frame into the ``Journal.current()`` shape (row id -> Decision)."""
    out: dict[str, Decision] = {}
    for rec in frame.to_dict("records"):
        out[str(rec["id"])] = Decision(
            row_id=str(rec["id"]),
            decision=str(rec["decision"]),
            new_label=_text(rec.get("new_label")),
            note=_text(rec.get("note")),
            time=_text(rec.get("time")) or "",
        )
    return out


class _LabelCaster:
    """Turn a journal label (text) into a value of the label column's dtype."""

    def __init__(self, column: pd.Series, name: str) -> None:
        self.dtype = column.dtype
        self.name = name
        self.by_text: dict[str, object] = {}
        if pd.api.types.is_bool_dtype(column.dtype):
            self.by_text.update({"True": True, "False": False})
        if isinstance(column.dtype, pd.CategoricalDtype):
            self.by_text.update({str(c): c for c in column.dtype.categories})
        self.by_text.update({str(v): v for v in pd.unique(column.dropna())})

    def __call__(self, text: str) -> object:
        if text in self.by_text:
            return self.by_text[text]
        dtype = self.dtype
        try:
            if isinstance(dtype, pd.CategoricalDtype):
                raise ValueError("not one of the categories")
            if pd.api.types.is_bool_dtype(dtype):
                raise ValueError("not True or False")
            if pd.api.types.is_numeric_dtype(dtype):
                value = pd.Series([text]).astype(dtype).iloc[0]
                if pd.api.types.is_float_dtype(dtype) or float(text) == value:
                    return value
                raise ValueError("not a whole number")
            if pd.api.types.is_datetime64_any_dtype(dtype):
                return pd.Series([text]).astype(dtype).iloc[0]
        except (ValueError, TypeError, OverflowError) as exc:
            raise DataError(
                f"label column '{self.name}': new label '{text}' does not fit the column type {dtype} ({exc})"
            ) from exc
        return text


def table_suffix(path: Path) -> str:
    """The suffix of a decisions or data file we read or write: .parquet or .csv (UserError otherwise)."""
    suffix = path.suffix.lower()
    if suffix not in FORMATS:
        raise UserError(f"{path}: unknown file type '{path.suffix}'; use .parquet or .csv")
    return suffix


def _normalise(frame: pd.DataFrame) -> pd.DataFrame:
    """Text columns as object with None for empty; score as float."""
    for column in _TEXT_COLUMNS:
        frame[column] = pd.Series([_text(v) for v in frame[column].tolist()], index=frame.index, dtype=object)
    frame["score"] = pd.to_numeric(
        pd.Series([None if v is None or v == "" else v for v in frame["score"].tolist()], index=frame.index),
        errors="raise",
    ).astype(float)
    return frame


def _text(value: object) -> str | None:
    if value is None or value is pd.NA or (isinstance(value, float) and np.isnan(value)):
        return None
    text = str(value)
    return text if text != "" else None


def _float(value: object) -> float:
    try:
        return float(value)  # type: ignore[arg-type]
    except (TypeError, ValueError):
        return float("nan")
