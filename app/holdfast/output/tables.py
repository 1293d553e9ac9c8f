"""The table files of a session: the decisions file and the cleaned data set (Parquet or CSV).

Both are written atomically; an existing file is refused unless ``force``. The decisions file's columns are
:data:`holdfast.review.decisions.DECISION_COLUMNS`.

CSV files are opened in spreadsheets: every text cell and column name goes through
:func:`holdfast.textsafe.csv_cell` (a cell that would start a formula gets a leading apostrophe, control
characters are escaped). Parquet keeps the raw values.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd
import pyarrow as pa

from holdfast.atomic import atomic_write
from holdfast.data.prepare import row_ids
from holdfast.errors import UserError
from holdfast.review.decisions import DECISION_COLUMNS, apply_decisions, decisions_frame, table_suffix
from holdfast.review.journal import Journal
from holdfast.textsafe import csv_cell

#: Parquet schema of a decisions file: fixed, so that a column with no values is still text, not null
DECISIONS_SCHEMA = pa.schema(
    [(c, pa.float64() if c == "score" else pa.large_string()) for c in DECISION_COLUMNS]
)


@dataclass
class CleanedExport:
    """What :func:`export_cleaned` wrote: rows kept, rows relabelled and excluded, unmatched ids."""

    path: Path
    rows: int
    relabelled: int
    excluded: int
    unmatched: list[str] = field(default_factory=list)


def export_decisions(journal: Journal, rows: pd.DataFrame, path: str | Path, *, force: bool = False) -> Path:
    """Write :func:`decisions_frame` to ``path`` (Parquet or CSV by suffix) atomically.

    An existing file is a UserError unless ``force``; an unknown suffix is a UserError naming it.
    """
    target = Path(path)
    table_suffix(target)
    _refuse_overwrite(target, force)
    _write_frame(decisions_frame(journal, rows), target, schema=DECISIONS_SCHEMA)
    return target


def export_cleaned(
    journal: Journal,
    data: pd.DataFrame,
    path: str | Path,
    *,
    id_column: str | None,
    label_column: str,
    force: bool = False,
) -> CleanedExport:
    """Write the data with the journal's decisions applied (:func:`apply_decisions`) to ``path`` atomically.

    Parquet or CSV by suffix; an existing file is a UserError unless ``force``.
    """
    target = Path(path)
    table_suffix(target)
    _refuse_overwrite(target, force)
    current = journal.current()
    cleaned = apply_decisions(data, current, id_column=id_column, label_column=label_column)
    present = set(row_ids(data, id_column))
    _write_frame(cleaned, target)
    return CleanedExport(
        path=target,
        rows=len(cleaned),
        relabelled=sum(d.decision == "relabel" and rid in present for rid, d in current.items()),
        excluded=len(data) - len(cleaned),
        unmatched=[rid for rid in current if rid not in present],
    )


def _refuse_overwrite(path: Path, force: bool) -> None:
    if path.exists() and not force:
        raise UserError(f"{path}: already exists; use --force to overwrite")


def csv_safe_frame(frame: pd.DataFrame) -> pd.DataFrame:
    """``frame`` with every text cell and column name through :func:`csv_cell` (numbers untouched)."""
    out = frame.copy()
    for column in out.columns:
        s = out[column]
        if pd.api.types.is_numeric_dtype(s.dtype) or pd.api.types.is_bool_dtype(s.dtype):
            continue
        if pd.api.types.is_datetime64_any_dtype(s.dtype) or pd.api.types.is_timedelta64_dtype(s.dtype):
            continue
        out[column] = pd.Series(
            [csv_cell(v) if isinstance(v, str) else v for v in s.tolist()], index=s.index, dtype=object
        )
    out.columns = [csv_cell(c) if isinstance(c, str) else c for c in out.columns]
    return out


def _write_frame(frame: pd.DataFrame, path: Path, schema: pa.Schema | None = None) -> None:
    """Write ``frame`` atomically; Parquet with ``schema`` if given, CSV with "\\n" line ends everywhere."""
    if table_suffix(path) == ".parquet":

        def writer(p: Path) -> None:
            frame.to_parquet(p, index=False, schema=schema)

    else:
        safe = csv_safe_frame(frame)

        def writer(p: Path) -> None:
            safe.to_csv(p, index=False, lineterminator="\n")

    try:
        atomic_write(path, writer, force=True)
    except UserError:
        raise
    except Exception as exc:  # OS and pyarrow errors: the file was not written, nothing is left behind
        raise UserError(f"{path}: cannot write ({type(exc).__name__}: {exc})") from exc
