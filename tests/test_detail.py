"""Row detail checked against independent computations on a real scan.

Data: scikit-learn's bundled iris data (Fisher, R. A. (1936). The use of multiple measurements in
taxonomic problems. Annals of Eugenics 7(2):179-188), which holds exact duplicate rows, so neighbour ties
are exercised. Class statistics are checked against a direct pandas ``groupby`` on the rows without the row
in question; neighbours against a brute-force numpy distance computation; flipped rows against
``scan.flips`` and the findings frame.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from sklearn.datasets import load_iris

from holdfast.data.spec import spec_from_text
from holdfast.engine.scan import Scan, run_scan
from holdfast.insight.detail import (
    FEATURE_COLUMNS,
    FLIPPED_COLUMNS,
    NEIGHBOUR_COLUMNS,
    DetailContext,
    row_detail,
)
from holdfast.insight.flags import FLAG_REASONS

NUMERIC = ["sepal_length", "sepal_width", "petal_length", "petal_width", "tray_const"]
BENCHES = np.array(["north", "south", "east"], dtype=object)
UNSEEN = 149  # held-out row whose label never occurs among the training rows


def iris_frame() -> pd.DataFrame:
    """Iris as a packhouse-style table: numbers, a categorical bench, a split, ids and a binary label."""
    data = load_iris(as_frame=True)
    X = data.data.copy()
    X.columns = NUMERIC[:4]
    n = len(X)
    frame = X.assign(
        # constant within "other" except one row: exercises a zero class spread
        tray_const=np.where(np.arange(n) == 10, 2.0, 1.0),
        # a function of the measurements, so identical iris rows stay identical
        bench=BENCHES[np.rint(X["sepal_length"] * 10).astype(int) % 3],
        held=(np.arange(n) % 9 == 4),
        crate=[f"crate-{i:03d}" for i in range(n)],
        grade=np.where(data.target.to_numpy() == 1, "versicolor", "other"),
    )
    frame.loc[UNSEEN, "held"] = True
    frame.loc[UNSEEN, "grade"] = "unsure"
    return frame


SPEC = """
[data]
label = "grade"
id = "crate"
split = "held"
features = ["sepal_length", "sepal_width", "petal_length", "petal_width", "tray_const", "bench"]
[learner]
kernel = "rbf"
C = 1.0
[insight]
k = 7
"""


@pytest.fixture(scope="module")
def scan(tmp_path_factory) -> Scan:
    tmp = tmp_path_factory.mktemp("detail")
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("HOLDFAST_CACHE_DIR", str(tmp / "cache"))
        path = tmp / "iris.parquet"
        iris_frame().to_parquet(path)
        return run_scan(path, spec_from_text(SPEC, "iris.toml"))


@pytest.fixture(scope="module")
def ctx(scan) -> DetailContext:
    return DetailContext.from_scan(scan)


def _positions(scan: Scan) -> list[int]:
    rows = scan.findings.rows
    train = ~rows["held_out"].to_numpy()
    support = rows["support"].to_numpy()
    picks = list(np.flatnonzero(train & support)[:6]) + list(np.flatnonzero(train & ~support)[:6])
    picks += [*np.flatnonzero(~train)[:4], 10]
    return [int(p) for p in picks]


def _pandas_class_stats(frame: pd.DataFrame, position: int) -> tuple[pd.Series, pd.Series, pd.DataFrame]:
    """Mean, std (ddof=1) and bench shares of the row's class over the training rows without the row."""
    train = frame[~frame["held"]].drop(index=position, errors="ignore")
    label = frame.at[position, "grade"]
    grouped = train.groupby("grade")
    mean = grouped[NUMERIC].mean().loc[label]
    std = grouped[NUMERIC].std().loc[label]  # pandas' default ddof=1
    shares = grouped["bench"].value_counts(normalize=True).unstack(fill_value=0.0)
    return mean, std, shares.loc[label]


def test_numeric_zscores_and_shares_match_pandas_groupby(scan, ctx):
    frame = iris_frame()
    for position in _positions(scan):
        d = ctx.row_detail(position)
        assert list(d.features.columns) == list(FEATURE_COLUMNS)
        feats = d.features.set_index("feature")
        mean, std, shares = _pandas_class_stats(frame, position)
        for f in NUMERIC:
            assert feats.at[f, "value"] == frame.at[position, f]
            assert feats.at[f, "class_mean"] == pytest.approx(mean[f], rel=1e-12, abs=1e-12)
            assert feats.at[f, "class_std"] == pytest.approx(std[f], rel=1e-9, abs=1e-12)
            if std[f] > 0:
                z = (frame.at[position, f] - mean[f]) / std[f]
                assert feats.at[f, "z"] == pytest.approx(z, rel=1e-9, abs=1e-9)
        value = frame.at[position, "bench"]
        assert feats.at["bench", "value"] == value
        assert feats.at["bench", "share"] == pytest.approx(shares.get(value, 0.0), rel=1e-12)
        assert feats.at["bench", "kind"] == "categorical" and np.isnan(feats.at["bench", "z"])
        n_class = int(((frame["grade"] == frame.at[position, "grade"]) & ~frame["held"]).sum())
        assert d.class_rows == n_class - (0 if frame.at[position, "held"] else 1)


def test_zero_class_spread_gives_zero_or_infinite_z(scan, ctx):
    frame = iris_frame()
    other = frame.index[(frame["grade"] == "other") & ~frame["held"]]
    # row 10 is the only tray_const != 1 in its class: the others are constant at 1
    odd = ctx.row_detail(10).features.set_index("feature").loc["tray_const"]
    assert odd["class_std"] == 0.0 and odd["z"] == np.inf and odd["note"] == "constant in the class"
    # any other row of the class sees row 10 among its peers: spread > 0, z finite and negative
    peer = ctx.row_detail(int(other[other != 10][0])).features.set_index("feature").loc["tray_const"]
    assert peer["class_std"] > 0 and np.isfinite(peer["z"]) and peer["z"] < 0
    # rows of the other class all sit at 1: z is 0, not NaN
    vers = frame.index[(frame["grade"] == "versicolor") & ~frame["held"]]
    assert ctx.row_detail(int(vers[0])).features.set_index("feature").at["tray_const", "z"] == 0.0


def _brute_neighbours(scan: Scan, position: int, k: int) -> tuple[np.ndarray, np.ndarray]:
    """k nearest training rows by explicit Euclidean distance, ordered by (distance, position)."""
    p = scan.prepared
    train = np.flatnonzero(p.train)
    train = train[train != position]
    dist = np.linalg.norm(p.X[train] - p.X[position], axis=1)
    order = np.lexsort((train, dist))[:k]
    return train[order], dist[order]


def test_neighbours_match_brute_force_distances(scan, ctx):
    frame = iris_frame()
    # iris rows 101 and 142 are identical: each is the other's nearest neighbour at distance 0
    dup = frame.loc[[101, 142], NUMERIC[:4]].to_numpy()
    assert (dup[0] == dup[1]).all()
    for position in [*_positions(scan), 101, 142]:
        for k in (1, 7, 25):
            nb = ctx.row_detail(position, k=k).neighbours
            assert list(nb.columns) == list(NEIGHBOUR_COLUMNS)
            pos, dist = _brute_neighbours(scan, position, k)
            assert nb["position"].tolist() == pos.tolist()
            np.testing.assert_allclose(nb["distance"].to_numpy(), dist, rtol=1e-12, atol=1e-12)
            assert nb["id"].tolist() == frame.loc[pos, "crate"].tolist()
            assert nb["label"].tolist() == frame.loc[pos, "grade"].tolist()
            same = frame.loc[pos, "grade"].to_numpy() == frame.at[position, "grade"]
            assert nb["same_label"].tolist() == same.tolist()
            assert not frame.loc[pos, "held"].any()
    if scan.prepared.train[101] and scan.prepared.train[142]:
        assert ctx.row_detail(101, k=1).neighbours["distance"].iloc[0] == 0.0


def test_neighbours_agree_with_the_dissent_column(scan, ctx):
    """The neighbours shown are the ones the neighbour-dissent evidence counted (same k, same order)."""
    rows = scan.findings.rows
    for position in np.flatnonzero(~rows["held_out"].to_numpy()):
        d = ctx.row_detail(int(position))
        assert d.k == scan.spec.insight.k == len(d.neighbours)
        dissent = 1.0 - d.neighbours["same_label"].mean()
        assert dissent == pytest.approx(rows.at[position, "neighbour_dissent"], abs=1e-12)


def test_flipped_rows_equal_scan_flips(scan, ctx):
    rows = scan.findings.rows
    assert any(len(v) for v in scan.flips.values())
    for position in range(len(rows)):
        d = ctx.row_detail(position)
        expected = np.sort(np.asarray(scan.flips.get(position, []), dtype=np.int64))
        assert list(d.flipped.columns) == list(FLIPPED_COLUMNS)
        assert d.flipped["position"].tolist() == expected.tolist()
        assert len(d.flipped) == d.flip_count == rows.at[position, "flip_count"]
        if len(expected):
            assert d.support
            assert d.flipped["id"].tolist() == rows.loc[expected, "id"].tolist()
            assert d.flipped["prediction"].tolist() == rows.loc[expected, "prediction"].astype(str).tolist()
            assert (d.flipped["prediction_without"] != d.flipped["prediction"]).all()


def test_header_fields_follow_the_findings(scan, ctx):
    rows = scan.findings.rows
    for position in _positions(scan):
        d = ctx.row_detail(position)
        r = rows.loc[position]
        assert (d.id, d.label) == (r["id"], str(r["label"]))
        assert d.loo_prediction == str(r["loo_prediction"]) and d.prediction == str(r["prediction"])
        assert (d.support, d.bounded, d.essential, d.held_out) == (
            r["support"],
            r["bounded"],
            r["essential"],
            r["held_out"],
        )
        assert d.rank == r["rank"] and d.alpha == r["alpha"]
        np.testing.assert_equal([d.margin, d.score], [r["margin"], r["score"]])
        np.testing.assert_equal([d.loo_margin, d.linear_logit], [r["loo_margin"], r["linear_logit"]])
        names = [s for s in r["flag_names"].split(",") if s]
        least = scan.findings.summary["heavy_flip_min"]
        extra = {"heavy_flip": f" ({least} or more)"}
        assert d.flags == [(name, FLAG_REASONS[name] + extra.get(name, "")) for name in names]
        if "heavy_flip" in names:
            assert d.flip_count >= least


def test_held_out_row_with_an_unseen_label(scan, ctx):
    d = ctx.row_detail(UNSEEN)
    assert d.held_out and d.label == "unsure" and d.class_rows == 0
    assert d.features["class_mean"].isna().all() and d.features["share"].isna().all()
    assert (d.features["note"] == "label not in the training rows").all()
    pos, _ = _brute_neighbours(scan, UNSEEN, scan.spec.insight.k)
    assert d.neighbours["position"].tolist() == pos.tolist()
    assert not d.neighbours["same_label"].any() and d.flipped.empty


def test_one_off_call_bad_position_and_large_k(scan, ctx):
    assert row_detail(scan, 3).features.equals(ctx.row_detail(3).features)
    m = int(scan.prepared.train.sum())
    assert len(ctx.row_detail(3, k=10_000).neighbours) == m - 1
    assert len(ctx.row_detail(UNSEEN, k=10_000).neighbours) == m
    with pytest.raises(IndexError):
        ctx.row_detail(len(scan.findings.rows))
