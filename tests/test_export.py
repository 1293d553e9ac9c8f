"""Exports: decisions table (Parquet/CSV round trips), cleaned data set, overwrite and atomicity rules."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from holdfast.data.prepare import row_ids
from holdfast.errors import DataError, UserError
from holdfast.output.tables import export_cleaned, export_decisions
from holdfast.review.decisions import (
    DECISION_COLUMNS,
    apply_decisions,
    decisions_frame,
    read_decisions,
)
from holdfast.review.journal import Journal


@pytest.fixture
def data() -> pd.DataFrame:
    """A small packhouse-like table: crate ids, sensor readings, a category, the grade label."""
    return pd.DataFrame(
        {
            "crate_id": [101, 102, 103, 104, 105, 106],
            "diameter_mm": [70.1, 63.2, 75.0, 68.4, 59.9, 72.3],
            "variety": pd.Categorical(["Gala", "Fuji", "Gala", "Elstar", "Fuji", "Gala"]),
            "grade": ["premium", "processing", "premium", "premium", "processing", "NA"],
            "defects": np.array([0, 2, 1, 0, 3, 0], dtype="int16"),
        }
    )


@pytest.fixture
def rows(data: pd.DataFrame) -> pd.DataFrame:
    """Findings-like per-row frame (holdfast.engine.findings column contract, the columns export needs)."""
    return pd.DataFrame(
        {
            "row": np.arange(len(data)),
            "id": pd.Series([str(v) for v in data["crate_id"]], dtype="string"),
            "label": data["grade"],
            "score": [0.1, 2.5, 0.0, 1.25, 3.0, 0.5],
            "flag_names": ["", "loo_miss,bounded", "", "support", "loo_miss", ""],
        }
    )


@pytest.fixture
def journal(tmp_path: Path):
    with Journal.create(
        tmp_path / "packhouse.holdfast.db",
        fingerprint="fp",
        data_path="packhouse.parquet",
        spec_text="",
        label_column="grade",
        id_column="crate_id",
    ) as j:
        j.record("105", "relabel", "premium", note='firm, "sweet"; re-check\nline 2 — ok')
        j.record_many([("102", "exclude", None, None), ("104", "confirm", None, "fine")])
        j.record("103", "defer")
        j.record("999", "relabel", "processing")  # no longer in the data
        j.set_note("106", "NA is a real grade here")  # a note without a decision
        yield j


# ----------------------------------------------------------------------------- decisions table
def test_decisions_frame_contents(journal: Journal, rows: pd.DataFrame) -> None:
    frame = decisions_frame(journal, rows)
    assert tuple(frame.columns) == DECISION_COLUMNS
    assert frame["id"].tolist() == ["102", "103", "104", "105", "106", "999"]  # data order, then unmatched
    by_id = frame.set_index("id")
    assert by_id.loc["105", "old_label"] == "processing"
    assert by_id.loc["105", "new_label"] == "premium"
    assert by_id.loc["105", "score"] == 3.0
    assert by_id.loc["102", "flag_names"] == "loo_miss,bounded"
    assert by_id.loc["102", "decision"] == "exclude"
    assert by_id.loc["104", "note"] == "fine"
    assert by_id.loc["106", "decision"] == "clear" and by_id.loc["106", "old_label"] == "NA"
    missing = by_id.loc["999"]
    assert missing["old_label"] is None and missing["flag_names"] is None and np.isnan(missing["score"])
    assert missing["decision"] == "relabel" and missing["new_label"] == "processing"
    assert all(t.endswith("+00:00") for t in frame["time"])


@pytest.mark.parametrize("suffix", [".parquet", ".csv"])
def test_decisions_round_trip(journal: Journal, rows: pd.DataFrame, tmp_path: Path, suffix: str) -> None:
    path = tmp_path / f"decisions{suffix}"
    assert export_decisions(journal, rows, path) == path
    back = read_decisions(path)
    pd.testing.assert_frame_equal(back, decisions_frame(journal, rows))
    assert back.set_index("id").loc["105", "note"] == 'firm, "sweet"; re-check\nline 2 — ok'
    assert back.set_index("id").loc["106", "old_label"] == "NA"  # not read as missing


def test_decisions_csv_is_plain_text(journal: Journal, rows: pd.DataFrame, tmp_path: Path) -> None:
    path = tmp_path / "decisions.csv"
    export_decisions(journal, rows, path)
    outside = pd.read_csv(path, dtype=str, keep_default_na=False)  # any CSV reader sees the same table
    assert outside.columns.tolist() == list(DECISION_COLUMNS)
    assert outside.loc[outside["id"] == "102", "decision"].item() == "exclude"


def test_export_refuses_overwrite(journal: Journal, rows: pd.DataFrame, tmp_path: Path) -> None:
    path = tmp_path / "decisions.parquet"
    path.write_bytes(b"keep me")
    with pytest.raises(UserError, match="already exists") as info:
        export_decisions(journal, rows, path)
    assert str(path) in str(info.value)
    assert path.read_bytes() == b"keep me"
    export_decisions(journal, rows, path, force=True)
    assert len(read_decisions(path)) == 6


def test_unknown_suffix(journal: Journal, rows: pd.DataFrame, tmp_path: Path) -> None:
    with pytest.raises(UserError, match=r"\.xlsx") as info:
        export_decisions(journal, rows, tmp_path / "decisions.xlsx")
    assert "decisions.xlsx" in str(info.value)
    assert list(tmp_path.glob("decisions*")) == []


@pytest.mark.parametrize(
    ("table", "message"),
    [
        ({"id": ["1"], "new_label": [""]}, "no column 'decision'"),
        ({"id": ["1"], "decision": ["confirm"]}, "no column 'new_label'"),
        ({"id": ["1"], "decision": ["discard"], "new_label": [""]}, "unknown decision 'discard'"),
        ({"id": ["1"], "decision": ["relabel"], "new_label": [""]}, "has no new_label"),
        ({"id": ["1", "1"], "decision": ["confirm", "defer"], "new_label": ["", ""]}, "more than once"),
        ({"id": ["1"], "decision": ["confirm"], "new_label": [""], "score": ["high"]}, "'score'"),
    ],
)
def test_read_decisions_validates(tmp_path: Path, table: dict, message: str) -> None:
    path = tmp_path / "edited.csv"
    pd.DataFrame(table).to_csv(path, index=False)
    with pytest.raises(DataError, match=message) as info:
        read_decisions(path)
    assert str(path) in str(info.value) and "\n" not in str(info.value)


def test_read_decisions_unreadable(tmp_path: Path) -> None:
    with pytest.raises(DataError, match="no such decisions file"):
        read_decisions(tmp_path / "nope.parquet")
    bad = tmp_path / "bad.parquet"
    bad.write_bytes(b"not parquet")
    with pytest.raises(DataError, match="cannot read") as info:
        read_decisions(bad)
    assert str(bad) in str(info.value)


def test_read_decisions_minimal_hand_written(tmp_path: Path) -> None:
    path = tmp_path / "what-if.parquet"
    pd.DataFrame(
        {"id": [105, 102], "decision": ["relabel", "exclude"], "new_label": ["premium", None]}
    ).to_parquet(path)
    back = read_decisions(path)
    assert tuple(back.columns) == DECISION_COLUMNS
    assert back["id"].tolist() == ["105", "102"]
    assert back["note"].isna().all() and back["score"].isna().all()


# ----------------------------------------------------------------------------- cleaned data set
def _expected_clean(data: pd.DataFrame) -> pd.DataFrame:
    """Built by hand from the fixture's decisions: 102 excluded, 105 relabelled premium."""
    out = data[data["crate_id"] != 102].copy()
    out.loc[out["crate_id"] == 105, "grade"] = "premium"
    return out


def test_apply_decisions_from_journal(journal: Journal, data: pd.DataFrame) -> None:
    original = data.copy()
    clean = apply_decisions(data, journal.current(), id_column="crate_id", label_column="grade")
    pd.testing.assert_frame_equal(clean, _expected_clean(data))
    assert clean.columns.tolist() == data.columns.tolist()
    assert clean.dtypes.tolist() == data.dtypes.tolist()
    pd.testing.assert_frame_equal(data, original)  # input untouched


def test_apply_decisions_from_file_equals_journal(
    journal: Journal, data: pd.DataFrame, rows: pd.DataFrame, tmp_path: Path
) -> None:
    path = tmp_path / "decisions.csv"
    export_decisions(journal, rows, path)
    from_file = apply_decisions(data, read_decisions(path), id_column="crate_id", label_column="grade")
    from_journal = apply_decisions(data, journal.current(), id_column="crate_id", label_column="grade")
    pd.testing.assert_frame_equal(from_file, from_journal)


def test_apply_by_position_and_typed_labels() -> None:
    data = pd.DataFrame({"x": [0.5, 1.5, 2.5, 3.5], "y": np.array([0, 1, 1, 0], dtype="int8")})
    decisions = pd.DataFrame(
        {"id": ["0", "2", "3"], "decision": ["relabel", "exclude", "relabel"], "new_label": ["1", None, "2"]}
    )
    clean = apply_decisions(data, decisions, id_column=None, label_column="y")
    assert clean.index.tolist() == [0, 1, 3]
    assert clean["y"].dtype == np.int8
    assert clean["y"].tolist() == [1, 1, 2]  # 2 is a new class, still a valid int8


@pytest.mark.parametrize(
    ("labels", "bad"),
    [
        (np.array([0, 1, 1, 0], dtype="int8"), "1.5"),
        (np.array([0, 1, 1, 0], dtype="int8"), "300"),
        (np.array([True, False, True, True]), "yes"),
        (pd.Categorical(["a", "b", "a", "b"]), "c"),
    ],
)
def test_apply_rejects_labels_that_do_not_fit(labels: object, bad: str) -> None:
    data = pd.DataFrame({"x": [1.0, 2.0, 3.0, 4.0], "y": labels})
    decisions = pd.DataFrame({"id": ["1"], "decision": ["relabel"], "new_label": [bad]})
    with pytest.raises(DataError, match=f"'{bad}'") as info:
        apply_decisions(data, decisions, id_column=None, label_column="y")
    assert "'y'" in str(info.value)


def test_apply_keeps_bool_and_category_types() -> None:
    data = pd.DataFrame(
        {
            "x": [1.0, 2.0, 3.0],
            "ok": [True, True, True],
            "c": pd.Categorical(["a", "a", "a"], categories=["a", "b"]),
        }
    )
    flips = pd.DataFrame({"id": ["1"], "decision": ["relabel"], "new_label": ["False"]})
    out = apply_decisions(data, flips, id_column=None, label_column="ok")
    assert out["ok"].dtype == bool and out["ok"].tolist() == [True, False, True]
    to_b = pd.DataFrame({"id": ["2"], "decision": ["relabel"], "new_label": ["b"]})
    out = apply_decisions(data, to_b, id_column=None, label_column="c")
    assert out["c"].dtype == data["c"].dtype and out["c"].tolist() == ["a", "a", "b"]


def test_apply_rejects_duplicate_ids_and_missing_columns(data: pd.DataFrame) -> None:
    twice = pd.concat([data, data.iloc[:1]], ignore_index=True)
    with pytest.raises(DataError, match="'101'"):
        apply_decisions(twice, {}, id_column="crate_id", label_column="grade")
    with pytest.raises(DataError, match="'crate'"):
        apply_decisions(data, {}, id_column="crate", label_column="grade")
    with pytest.raises(DataError, match="'fruit'"):
        apply_decisions(data, {}, id_column="crate_id", label_column="fruit")


def test_row_ids_match_findings_convention(data: pd.DataFrame) -> None:
    assert row_ids(data, "crate_id")[:2] == ["101", "102"]
    assert row_ids(data, None) == ["0", "1", "2", "3", "4", "5"]


@pytest.mark.parametrize("suffix", [".parquet", ".csv"])
def test_export_cleaned_round_trip(journal: Journal, data: pd.DataFrame, tmp_path: Path, suffix: str) -> None:
    path = tmp_path / f"clean{suffix}"
    result = export_cleaned(journal, data, path, id_column="crate_id", label_column="grade")
    assert (result.rows, result.relabelled, result.excluded, result.unmatched) == (5, 1, 1, ["999"])
    expected = _expected_clean(data).reset_index(drop=True)
    if suffix == ".parquet":
        back = pd.read_parquet(path)
        pd.testing.assert_frame_equal(back, expected)
    else:
        back = pd.read_csv(path, keep_default_na=False)
        assert back.columns.tolist() == expected.columns.tolist()
        assert back["crate_id"].tolist() == expected["crate_id"].tolist()
        assert back["grade"].tolist() == expected["grade"].tolist()


def test_export_cleaned_refuses_overwrite(journal: Journal, data: pd.DataFrame, tmp_path: Path) -> None:
    path = tmp_path / "clean.parquet"
    path.write_bytes(b"earlier export")
    with pytest.raises(UserError, match="already exists"):
        export_cleaned(journal, data, path, id_column="crate_id", label_column="grade")
    assert path.read_bytes() == b"earlier export"


@pytest.mark.parametrize("force", [False, True])
def test_failed_write_leaves_no_partial_file(
    journal: Journal, data: pd.DataFrame, tmp_path: Path, force: bool
) -> None:
    out_dir = tmp_path / "out"
    out_dir.mkdir()
    path = out_dir / "clean.parquet"
    if force:
        path.write_bytes(b"earlier export")
    broken = data.assign(mixed=pd.Series([1, "a", 2.5, None, b"x", 3], dtype=object))  # Arrow cannot store it
    with pytest.raises(UserError, match="cannot write") as info:
        export_cleaned(journal, broken, path, id_column="crate_id", label_column="grade", force=force)
    assert str(path) in str(info.value)
    left = sorted(p.name for p in out_dir.iterdir())
    assert left == (["clean.parquet"] if force else [])  # no temp file, no half-written export
    if force:
        assert path.read_bytes() == b"earlier export"


def test_atomic_write_uses_the_usual_file_permissions(tmp_path):
    import os

    from holdfast.atomic import atomic_write_bytes

    old = os.umask(0o022)
    try:
        path = atomic_write_bytes(tmp_path / "out.txt", b"x")
    finally:
        os.umask(old)
    assert path.stat().st_mode & 0o777 == 0o644


def test_decisions_parquet_types_do_not_depend_on_the_content(tmp_path: Path, rows: pd.DataFrame) -> None:
    """A journal with only a confirm (no new label, no note anywhere) still writes text columns as text:
    without a fixed schema pyarrow would infer the Arrow type ``null`` for an all-empty column."""
    import pyarrow.parquet as pq

    with Journal.create(
        tmp_path / "s.db",
        fingerprint="fp",
        data_path="d.parquet",
        spec_text="",
        label_column="grade",
        id_column=None,
    ) as j:
        j.record("104", "confirm")
        path = export_decisions(j, rows, tmp_path / "decisions.parquet")
    schema = pq.read_schema(path)
    assert schema.names == list(DECISION_COLUMNS)
    assert all(
        str(schema.field(c).type) == ("double" if c == "score" else "large_string") for c in DECISION_COLUMNS
    ), schema
    back = read_decisions(path)
    assert back["decision"].tolist() == ["confirm"] and back["new_label"].isna().all()


def test_csv_exports_end_lines_with_newline_on_every_platform(journal: Journal, rows, tmp_path: Path) -> None:
    raw = export_decisions(journal, rows, tmp_path / "decisions.csv").read_bytes()
    assert b"\r" not in raw  # pandas would use os.linesep ("\r\n" on Windows) unless told otherwise
    assert raw.count(b"\n") == 1 + 6 + 1  # header, six decisions, the line break inside one note
