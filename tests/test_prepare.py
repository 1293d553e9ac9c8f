"""Data checks and preparation: one clear message per mistake; preparation fitted on training rows."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from holdfast.data.load import read_table
from holdfast.data.prepare import prepare
from holdfast.data.spec import parse_spec
from holdfast.errors import DataError


def _frame(n=40, seed=0):
    rng = np.random.default_rng(seed)
    return pd.DataFrame(
        {
            "lot": [f"L{i:03d}" for i in range(n)],
            "size": rng.normal(70, 5, n),
            "firm": rng.normal(60, 8, n),
            "variety": rng.choice(["Gala", "Fuji", "Jonagold"], n),
            "bruised": rng.random(n) < 0.2,
            "held": np.arange(n) % 5 == 0,
            "grade": np.where(rng.random(n) < 0.5, "premium", "processing"),
        }
    )


def _spec(**data):
    return parse_spec({"data": {"label": "grade", **data}})


def test_preparation_scales_on_training_rows_and_one_hot_encodes():
    f = _frame()
    p = prepare(f, _spec(id="lot", split="held"))
    assert p.features == ["size", "firm", "variety", "bruised"]
    assert p.feature_names[:3] == ["size", "firm", "bruised"]
    assert [n for n in p.feature_names if n.startswith("variety=")] == [
        "variety=Fuji",
        "variety=Gala",
        "variety=Jonagold",
    ]
    train = p.X[p.train]
    np.testing.assert_allclose(train[:, :3].mean(axis=0), 0, atol=1e-12)  # scaled on training rows only
    np.testing.assert_allclose(train[:, :3].std(axis=0), 1, atol=1e-12)
    assert set(np.unique(p.X[:, 3:])) <= {0.0, 1.0}
    assert p.train.sum() == 32 and list(p.ids[:2]) == ["L000", "L001"]
    assert p.classes == ["premium", "processing"]


@pytest.mark.parametrize(
    ("mutate", "spec", "expected"),
    [
        (lambda f: f, {"label": "grad"}, r"d.parquet: no column 'grad' \(label\); did you mean 'grade'\?"),
        (lambda f: f.assign(grade="premium"), {}, r"label column 'grade' has one class only"),
        (lambda f: f.assign(size=f["size"].where(f.index != 3)), {}, r"feature column 'size' has 1 NaN"),
        (
            lambda f: f.assign(firm=f["firm"].where(f.index != 5, np.inf)),
            {},
            r"feature column 'firm' has 1 infinite",
        ),
        (lambda f: f.assign(lot="same"), {"id": "lot"}, r"id column 'lot' repeats id 'same'"),
        (lambda f: f.assign(held="yes"), {"split": "held"}, r"split column 'held' must be boolean"),
        (
            lambda f: f.assign(grade=f["grade"].where(f.index != 2)),
            {},
            r"label column 'grade' is empty at row 2",
        ),
        (lambda f: f, {"features": ["size", "colour"]}, r"no column 'colour' \(feature\)"),
    ],
)
def test_bad_data_names_the_column(mutate, spec, expected):
    f = mutate(_frame())
    with pytest.raises(DataError, match=expected):
        prepare(f, parse_spec({"data": {"label": "grade", "id": "lot", **spec}}), source="d.parquet")


def test_id_like_text_feature_is_refused():
    f = _frame(300)
    f["serial"] = [f"S{i}" for i in range(300)]
    with pytest.raises(DataError, match=r"'serial' has \d+ distinct text values in 300 training"):
        prepare(f, _spec(id="lot"), source="d.parquet")


def test_read_table_errors(tmp_path):
    with pytest.raises(DataError, match=r"missing.parquet: data file not found"):
        read_table(tmp_path / "missing.parquet")
    bad = tmp_path / "corrupt.parquet"
    bad.write_bytes(b"this is not parquet at all")
    with pytest.raises(DataError, match=r"corrupt.parquet: cannot read as Parquet"):
        read_table(bad)
    csv = tmp_path / "d.csv"
    _frame().to_csv(csv, index=False)
    assert len(read_table(csv)) == 40
