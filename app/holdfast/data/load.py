"""Reading the data set (Parquet with pyarrow; CSV as a convenience) and fingerprinting it."""

from __future__ import annotations

import hashlib
from pathlib import Path

import pandas as pd
import pyarrow as pa
import pyarrow.csv as pacsv
import pyarrow.parquet as pq

from holdfast.errors import DataError

SUFFIXES = (".parquet", ".pq", ".csv")


def read_table(path: str | Path) -> pd.DataFrame:
    """Read a Parquet (or CSV) file into a DataFrame with a fresh RangeIndex.

    Raises :class:`DataError` naming the file when it is missing, a folder, or cannot be parsed.
    """
    p = Path(path)
    if not p.exists():
        raise DataError(f"{p}: data file not found")
    if p.is_dir():
        raise DataError(f"{p}: is a folder, expected a Parquet or CSV file")
    suffix = p.suffix.lower()
    try:
        table = pacsv.read_csv(p) if suffix == ".csv" else pq.read_table(p)
    except (pa.ArrowInvalid, pa.ArrowIOError, OSError) as exc:
        kind = "CSV" if suffix == ".csv" else "Parquet"
        first = str(exc).splitlines()[0] if str(exc) else exc.__class__.__name__
        raise DataError(f"{p}: cannot read as {kind} ({first[:160]})") from None
    if table.num_rows == 0:
        raise DataError(f"{p}: the file has no rows")
    frame = table.to_pandas()
    frame.index = pd.RangeIndex(len(frame))
    return frame


def fingerprint_file(path: str | Path) -> str:
    """SHA-256 of the file's bytes (first 16 hex digits): identifies the exact data a scan used."""
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()[:16]
