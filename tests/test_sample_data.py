"""The fruit-packhouse demo data set: committed files match the generator, values are realistic, the planted
grading slips are what the README says, and the demo spec gives a small support set that holds the slips.

Range checks are plausibility limits for dessert apples on a grading line, from memory (common practice
in fruit grading, not from a cited table): diameter 45-110 mm, firmness 25-130 N, soluble solids 8-19
degrees Brix, blush 0-100 %, surface defects 0-10, weight 40-650 g.
"""

from __future__ import annotations

import importlib.util
import re
import tomllib
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from scipy.stats import binomtest, spearmanr
from sklearn.model_selection import StratifiedKFold, cross_val_predict
from sklearn.svm import SVC

SAMPLE = Path(__file__).resolve().parents[1] / "sample_data"
SENSORS = ["diameter_mm", "firmness_n", "brix", "blush_pct", "defects", "weight_g"]
FEATURES = [*SENSORS, "variety", "orchard_block"]


def _load_generator():
    spec = importlib.util.spec_from_file_location("make_packhouse", SAMPLE / "make_packhouse.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


gen = _load_generator()


@pytest.fixture(scope="module")
def data() -> pd.DataFrame:
    return pd.read_parquet(SAMPLE / "packhouse.parquet")


@pytest.fixture(scope="module")
def planted() -> pd.DataFrame:
    return pd.read_csv(SAMPLE / "packhouse_planted.csv")


@pytest.fixture(scope="module")
def spec() -> dict:
    return tomllib.loads((SAMPLE / "packhouse.toml").read_text(encoding="utf-8"))


def _assert_same_values(a: pd.DataFrame, b: pd.DataFrame) -> None:
    assert list(a.columns) == list(b.columns)
    assert len(a) == len(b)
    for name in a.columns:
        x, y = a[name], b[name]
        if pd.api.types.is_float_dtype(x):
            np.testing.assert_allclose(x.to_numpy(), y.to_numpy(float), rtol=0, atol=1e-9, err_msg=name)
        else:
            assert x.tolist() == y.tolist(), name


# -- committed files are the generator's output ---------------------------------------------------------


def test_committed_files_match_a_fresh_run(tmp_path, data, planted):
    paths = gen.write_packhouse(tmp_path)
    _assert_same_values(pd.read_parquet(paths["data"]), data)
    _assert_same_values(pd.read_csv(paths["planted"]), planted)
    assert paths["planted"].read_text() == (SAMPLE / "packhouse_planted.csv").read_text()
    assert paths["spec"].read_text() == (SAMPLE / "packhouse.toml").read_text()
    # Same pyarrow version as the committed file: the Parquet bytes are identical too.
    written_by = pq.ParquetFile(SAMPLE / "packhouse.parquet").metadata.created_by
    if written_by.endswith(f"version {pa.__version__}"):
        assert paths["data"].read_bytes() == (SAMPLE / "packhouse.parquet").read_bytes()


def test_make_packhouse_returns_the_committed_frames(data, planted):
    d, p = gen.make_packhouse()
    _assert_same_values(d, data)
    _assert_same_values(p.assign(holdout=p["holdout"].astype(bool)), planted)


def test_command_line_writes_into_the_given_folder(tmp_path):
    assert gen.main([str(tmp_path / "out")]) == 0
    assert sorted(p.name for p in (tmp_path / "out").iterdir()) == [
        "packhouse.parquet",
        "packhouse.toml",
        "packhouse_planted.csv",
    ]
    assert gen.main(["a", "b"]) == 2


def test_seed_and_size_are_honoured():
    a, pa_ = gen.make_packhouse(600, seed=7)
    b, _ = gen.make_packhouse(600, seed=7)
    c, _ = gen.make_packhouse(600, seed=8)
    _assert_same_values(a, b)
    assert not a["diameter_mm"].equals(c["diameter_mm"])
    assert len(a) == 600 and len(pa_) == round(0.03 * 600)
    with pytest.raises(ValueError):
        gen.make_packhouse(10)


def test_parquet_file_is_small():
    assert (SAMPLE / "packhouse.parquet").stat().st_size < 300_000


# -- columns and realism ---------------------------------------------------------------------------------


def test_columns_and_types(data):
    assert list(data.columns) == ["lot_id", *SENSORS, "variety", "orchard_block", "shift", "holdout", "grade"]
    assert 2500 <= len(data) <= 3500
    for name in ("diameter_mm", "firmness_n", "brix", "blush_pct", "weight_g"):
        assert pd.api.types.is_float_dtype(data[name]), name
    assert pd.api.types.is_integer_dtype(data["defects"])
    assert pd.api.types.is_bool_dtype(data["holdout"])
    assert set(data["grade"]) == {"premium", "processing"}
    assert set(data["shift"]) == {"early", "day", "late"}
    assert set(data["orchard_block"]) == {f"B{i:02d}" for i in range(1, 13)}
    assert 4 <= data["variety"].nunique() <= 8
    assert not data.isna().any().any()


def test_lot_ids_are_unique_and_well_formed(data):
    assert data["lot_id"].is_unique
    assert all(re.fullmatch(r"LOT-2026-\d{6}", s) for s in data["lot_id"])


@pytest.mark.parametrize(
    ("column", "low", "high"),
    [
        ("diameter_mm", 45, 110),
        ("firmness_n", 25, 130),
        ("brix", 8, 19),
        ("blush_pct", 0, 100),
        ("defects", 0, 10),
        ("weight_g", 40, 650),
    ],
)
def test_readings_within_plausible_ranges(data, column, low, high):
    col = data[column]
    assert col.min() >= low and col.max() <= high
    assert col.std() > 0


def test_weight_follows_diameter(data):
    # Weight = density x volume of a sphere of that diameter; apple flesh density about 0.8-0.9 g/cm^3
    # (from memory), so the implied density of most fruit must fall in 0.7-1.0.
    volume = np.pi / 6 * (data["diameter_mm"] / 10) ** 3
    density = data["weight_g"] / volume
    assert 0.8 <= density.median() <= 0.9
    assert ((density > 0.7) & (density < 1.0)).mean() > 0.99
    assert spearmanr(data["diameter_mm"], data["weight_g"]).statistic > 0.95


def test_varieties_differ(data):
    by = data.groupby("variety")
    assert by["diameter_mm"].mean().max() - by["diameter_mm"].mean().min() > 5
    assert by["brix"].mean().max() - by["brix"].mean().min() > 1.5
    blush = by["blush_pct"].median()
    assert blush["Granny Smith"] < 15  # the green variety
    assert (blush.drop("Granny Smith") > 35).all()


def test_premium_fruit_is_bigger_firmer_sweeter_and_cleaner(data):
    by = data.groupby("grade")
    for column in ("diameter_mm", "firmness_n", "brix"):
        assert by[column].mean()["premium"] > by[column].mean()["processing"], column
    assert by["defects"].mean()["premium"] < by["defects"].mean()["processing"]


def test_classes_moderately_unbalanced(data):
    share = (data["grade"] == "premium").mean()
    assert 0.52 <= share <= 0.68


def test_holdout_share_near_15_percent(data):
    assert abs(data["holdout"].mean() - 0.15) < 0.02


# -- planted slips ---------------------------------------------------------------------------------------


def test_planted_rows_point_at_their_rows(data, planted):
    assert list(planted.columns) == ["lot_id", "row", "given_grade", "true_grade", "shift", "holdout"]
    assert planted["row"].is_unique
    rows = data.iloc[planted["row"]]
    assert rows["lot_id"].tolist() == planted["lot_id"].tolist()
    assert rows["grade"].tolist() == planted["given_grade"].tolist()
    assert rows["shift"].tolist() == planted["shift"].tolist()
    assert rows["holdout"].tolist() == planted["holdout"].tolist()


def test_planted_grades_really_differ_from_the_truth(planted):
    assert (planted["given_grade"] != planted["true_grade"]).all()
    assert set(planted["true_grade"]) == {"premium", "processing"}  # slips go both ways


def test_about_three_percent_planted(data, planted):
    assert 0.025 <= len(planted) / len(data) <= 0.035
    assert 0 < planted["holdout"].sum() < len(planted)  # some in each split


def test_planted_slips_concentrate_in_the_late_shift(data, planted):
    # Exact binomial test (scipy.stats.binomtest): are slips in "late" more frequent than that shift's
    # share of all lots?
    late = int((planted["shift"] == "late").sum())
    share = (data["shift"] == "late").mean()
    assert late / len(planted) >= 0.6
    assert binomtest(late, len(planted), share, alternative="greater").pvalue < 1e-6
    assert planted["shift"].value_counts().idxmax() == "late"


def test_slips_mostly_near_the_threshold_some_clear(data, planted):
    sensors = {c: data[c].to_numpy() for c in SENSORS}
    score = np.abs(gen.premium_score(sensors, data["variety"].to_numpy()))
    is_planted = np.zeros(len(data), dtype=bool)
    is_planted[planted["row"]] = True
    assert np.median(score[is_planted]) < 0.5 * np.median(score[~is_planted])
    clear = (score[is_planted] >= gen.CLEAR_SCORE).mean()
    assert 0.1 <= clear <= 0.5


# -- the demo spec ---------------------------------------------------------------------------------------


def test_spec_names_existing_columns(spec, data):
    assert spec["data"] == {"label": "grade", "id": "lot_id", "features": FEATURES, "split": "holdout"}
    assert "shift" not in spec["data"]["features"]
    assert spec["prepare"] == {"scale": "standard", "categorical": "onehot"}
    assert spec["learner"]["family"] == "svm" and spec["learner"]["kernel"] == "rbf"
    assert spec["learner"]["gamma"] == "scale" and spec["learner"]["C"] > 0
    assert spec["run"] == {"jobs": -1}
    assert set(FEATURES) <= set(data.columns)


def test_spec_loads_with_the_project_loader(spec):
    from holdfast.data.spec import load_spec

    loaded = load_spec(SAMPLE / "packhouse.toml")
    assert loaded.data.label == "grade" and loaded.data.split == "holdout"
    assert list(loaded.data.features) == FEATURES
    assert loaded.learner["C"] == spec["learner"]["C"]


def _training_matrix(data: pd.DataFrame) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Training rows prepared as the spec says (numeric columns standardized, categoricals one-hot)."""
    train = data[~data["holdout"]]
    num = train[SENSORS].to_numpy(float)
    num = (num - num.mean(axis=0)) / num.std(axis=0)
    onehot = pd.get_dummies(train[["variety", "orchard_block"]]).to_numpy(float)
    return np.hstack([num, onehot]), train["grade"].to_numpy(), train.index.to_numpy()


def test_demo_spec_gives_a_small_support_set_holding_the_slips(data, planted, spec):
    # scikit-learn's SVC (libsvm; Chang & Lin 2011) with gamma="scale", the spec's C.
    X, y, index = _training_matrix(data)
    c = spec["learner"]["C"]
    clf = SVC(kernel="rbf", C=c, gamma="scale", tol=1e-6).fit(X, y)
    m = len(y)
    support_share = len(clf.support_) / m
    assert 0.10 <= support_share <= 0.25
    bounded = np.zeros(m, dtype=bool)
    bounded[clf.support_[np.isclose(np.abs(clf.dual_coef_[0]), c, rtol=1e-8, atol=0)]] = True
    slip = np.isin(index, planted["row"])
    assert bounded[slip].mean() >= 0.8
    assert bounded[~slip].mean() <= 0.2


def test_slips_are_over_represented_among_cross_validation_misses(data, planted, spec):
    # 5-fold cross-validated predictions (scikit-learn cross_val_predict): a slip is predicted by a model
    # that never saw it, so most slips come out "wrong" while few clean rows do.
    X, y, index = _training_matrix(data)
    clf = SVC(kernel="rbf", C=spec["learner"]["C"], gamma="scale", tol=1e-6)
    pred = cross_val_predict(clf, X, y, cv=StratifiedKFold(5, shuffle=True, random_state=0))
    miss = pred != y
    slip = np.isin(index, planted["row"])
    assert miss[slip].mean() >= 0.6
    assert miss[~slip].mean() <= 0.1
    assert miss[slip].mean() >= 8 * miss[~slip].mean()
