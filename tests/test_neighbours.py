"""Neighbour checks against brute-force numpy, scikit-learn's k-NN classifier and pandas group statistics.

Sources: k-nearest-neighbour vote (Cover & Hart 1967, Nearest neighbor pattern classification, IEEE Trans.
Inf. Theory 13(1)); iris (Fisher 1936) and wine (Forina et al., UCI) as bundled with scikit-learn.
The brute-force references below use the documented distance sqrt(sum((x_i - x_j)^2)) and the documented
tie rule (distance, then row position), written independently of the module.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra import numpy as hnp
from sklearn.datasets import load_iris, load_wine
from sklearn.model_selection import LeaveOneOut, cross_val_predict
from sklearn.neighbors import KNeighborsClassifier
from sklearn.preprocessing import StandardScaler

from holdfast.insight.neighbours import (
    class_zscore_matrix,
    class_zscores,
    neighbour_dissent,
    neighbour_dissents,
    twin_conflicts,
)


def _distance_matrix(X: np.ndarray) -> np.ndarray:
    return np.sqrt(((X[:, None, :] - X[None, :, :]) ** 2).sum(axis=-1))


def _brute_neighbours(X: np.ndarray, y: np.ndarray, k: int):
    """Plain-Python reference: k nearest other rows by (distance, position); share of other labels; vote."""
    D = _distance_matrix(np.asarray(X, dtype=float))
    n = len(X)
    k = min(k, n - 1)
    idx = np.empty((n, k), dtype=int)
    dissent = np.empty(n)
    majority = []
    for i in range(n):
        order = sorted((j for j in range(n) if j != i), key=lambda j: (D[i, j], j))[:k]
        idx[i] = order
        dissent[i] = np.mean([y[j] != y[i] for j in order])
        counts: dict = {}
        for j in order:
            counts[y[j]] = counts.get(y[j], 0) + 1
        top = max(counts.values())
        majority.append(next(y[j] for j in order if counts[y[j]] == top))  # tie: nearer neighbour's label
    return idx, D, dissent, np.array(majority)


def _assert_matches_brute(X, y, k, **kwargs):
    res = neighbour_dissent(X, y, k=k, **kwargs)
    idx, D, dissent, majority = _brute_neighbours(X, y, k)
    np.testing.assert_array_equal(res.indices, idx)
    np.testing.assert_allclose(res.distances, np.take_along_axis(D, idx, axis=1).astype(np.float32))
    np.testing.assert_allclose(res.dissent, dissent)
    np.testing.assert_array_equal(res.majority, majority)
    assert res.indices.dtype == np.int32 and res.distances.dtype == np.float32
    return res


_values = st.one_of(st.sampled_from([-1.0, 0.0, 0.5, 1.0, 2.0]), st.floats(-100, 100, width=32))


@settings(max_examples=150, deadline=None)
@given(
    data=st.data(),
    n=st.integers(2, 40),
    p=st.integers(1, 4),
    k=st.integers(1, 45),
)
def test_dissent_matches_brute_force(data, n, p, k):
    # Grid values make many exact ties and duplicates; k may exceed n - 1 (clipped).
    X = data.draw(hnp.arrays(np.float64, (n, p), elements=_values))
    y = data.draw(hnp.arrays(np.int64, n, elements=st.integers(0, 2)))
    _assert_matches_brute(X, y, k)


def test_many_duplicates_settle_ties_by_position():
    # 60 identical rows: the initial search window is too small, the widened search must still return
    # the lowest positions; checked against the brute-force reference, for every search algorithm.
    rng = np.random.default_rng(0)
    X = np.vstack([np.zeros((60, 3)), rng.normal(size=(40, 3))])
    y = rng.integers(0, 2, size=100)
    for algorithm in ("brute", "kd_tree", "ball_tree"):
        res = _assert_matches_brute(X, y, 10, algorithm=algorithm)
        np.testing.assert_array_equal(res.indices[0], np.arange(1, 11))
        assert np.all(res.distances[:60] == 0)


@pytest.mark.parametrize("loader", [load_iris, load_wine])
def test_dissent_on_bundled_data_matches_brute_force(loader):
    # iris has repeated rows and many tied distances (one decimal place); wine is standardized first.
    X, y = loader(return_X_y=True)
    if loader is load_wine:
        X = StandardScaler().fit_transform(X)
    res = _assert_matches_brute(X, y, 10)
    for algorithm in ("kd_tree", "ball_tree", "brute"):
        again = neighbour_dissent(X, y, k=10, algorithm=algorithm, n_jobs=2)
        np.testing.assert_array_equal(again.indices, res.indices)


@pytest.mark.parametrize("loader", [load_iris, load_wine])
def test_one_search_for_several_k_matches_brute_force_for_each(loader):
    """The scan asks for k and 2k neighbours from one search (``neighbour_dissents``): each k's answer is
    the brute-force one for that k alone (iris: many tied distances, so the tie rule is exercised)."""
    X, y = loader(return_X_y=True)
    found = neighbour_dissents(X, y, (10, 5, 20), n_jobs=2)
    for k in (5, 10, 20):
        idx, _, dissent, majority = _brute_neighbours(X, y, k)
        np.testing.assert_array_equal(found[k].indices, idx)
        np.testing.assert_allclose(found[k].dissent, dissent)
        np.testing.assert_array_equal(found[k].majority, majority)
        assert found[k].k == k


def test_majority_matches_scikit_learn_leave_one_out_knn():
    # Cover & Hart 1967 k-NN vote without the row itself = scikit-learn's KNeighborsClassifier under
    # LeaveOneOut, wherever neither a vote tie nor a distance tie at the k-th neighbour makes the answer
    # depend on tie rules (scikit-learn documents those as implementation-dependent).
    X, y = load_wine(return_X_y=True)
    X = StandardScaler().fit_transform(X)
    k = 7  # odd k with 3 classes can still tie (3-3-1); those rows are skipped
    res = neighbour_dissent(X, y, k=k)
    loo = cross_val_predict(KNeighborsClassifier(n_neighbors=k), X, y, cv=LeaveOneOut())
    D = _distance_matrix(X)
    np.fill_diagonal(D, np.inf)
    kth = np.sort(D, axis=1)[:, k - 1 : k + 1]
    no_distance_tie = kth[:, 0] < kth[:, 1]
    counts = np.stack([(y[res.indices] == c).sum(axis=1) for c in np.unique(y)], axis=1)
    no_vote_tie = (counts == counts.max(axis=1, keepdims=True)).sum(axis=1) == 1
    clear = no_distance_tie & no_vote_tie
    assert clear.mean() > 0.9
    np.testing.assert_array_equal(res.majority[clear], loo[clear])
    np.testing.assert_allclose(res.majority_share[clear], counts.max(axis=1)[clear] / k)


def test_string_labels_and_bad_input():
    X = np.array([[0.0], [1.0], [2.0], [10.0]])
    y = np.array(["apple", "apple", "pear", "pear"])
    res = neighbour_dissent(X, y, k=1)
    assert list(res.majority) == ["apple", "apple", "apple", "pear"]
    np.testing.assert_allclose(res.dissent, [0, 0, 1, 0])
    with pytest.raises(ValueError, match="NaN"):
        neighbour_dissent(np.array([[0.0], [np.nan]]), np.array([0, 1]))
    with pytest.raises(ValueError, match="at least 2 rows"):
        neighbour_dissent(np.zeros((1, 2)), np.array([0]))


# ---------------------------------------------------------------------------------------------------------
# Twin conflicts


def _brute_twins(X: np.ndarray, y: np.ndarray, radius: float) -> np.ndarray:
    dist = _distance_matrix(X)
    close = dist <= radius
    np.fill_diagonal(close, False)
    return (close & (y[:, None] != y[None, :])).sum(axis=1)


def test_exact_duplicates_with_other_labels_are_twin_conflicts():
    # iris plus copies: rows 0-4 copied with another label (conflicts), rows 5-9 copied with the same
    # label (no conflict); iris's own repeated rows carry equal labels.
    X, y = load_iris(return_X_y=True)
    X2 = np.vstack([X, X[0:5], X[5:10]])
    y2 = np.concatenate([y, (y[0:5] + 1) % 3, y[5:10]])
    twins = twin_conflicts(X2, y2)
    expected = np.zeros(len(y2), dtype=int)
    expected[[0, 1, 2, 3, 4, 150, 151, 152, 153, 154]] = 1
    np.testing.assert_array_equal(twins, _brute_twins(X2, y2, 0.0))
    np.testing.assert_array_equal(twins, expected)


def test_negative_zero_is_a_duplicate():
    X = np.array([[0.0, 1.0], [-0.0, 1.0], [0.0, 2.0]])
    np.testing.assert_array_equal(twin_conflicts(X, np.array([0, 1, 1])), [1, 1, 0])


@settings(max_examples=150, deadline=None)
@given(
    data=st.data(),
    n=st.integers(1, 50),
    p=st.integers(1, 3),
    tol=st.sampled_from([0.0, 0.05, 0.3, 1.0]),
)
def test_twin_conflicts_match_brute_force(data, n, p, tol):
    # Near twins: distance <= tol * sqrt(sum of column variances) (the documented scale).
    X = data.draw(hnp.arrays(np.float64, (n, p), elements=st.sampled_from([0.0, 0.1, 0.5, 1.0, 3.0])))
    y = data.draw(hnp.arrays(np.int64, n, elements=st.integers(0, 2)))
    radius = tol * np.sqrt(X.var(axis=0).sum())
    np.testing.assert_array_equal(twin_conflicts(X, y, tol=tol), _brute_twins(X, y, radius))


def test_twin_conflicts_memory_does_not_grow_with_n_squared():
    # 300,000 rows on 3 distinct points: n^2 pairs would need terabytes; counts follow from the labels.
    rng = np.random.default_rng(1)
    point = rng.integers(0, 3, size=300_000)
    X = np.eye(3)[point]
    y = rng.integers(0, 2, size=300_000)
    per = np.zeros((3, 2), dtype=int)
    np.add.at(per, (point, y), 1)
    np.testing.assert_array_equal(twin_conflicts(X, y, tol=0.01), per[point, 1 - y])


# ---------------------------------------------------------------------------------------------------------
# Class z-scores against pandas group statistics


@pytest.fixture(scope="module")
def wine_frame():
    X, y = load_wine(return_X_y=True, as_frame=True)
    frame = X.iloc[:, :5].copy()
    frame.loc[frame.index[[3, 40, 100]], "ash"] = np.nan
    frame["hue_band"] = pd.cut(X["hue"], 3, labels=["low", "mid", "high"])
    frame["strong"] = X["alcohol"] > 13
    return frame, y.to_numpy()


@pytest.mark.parametrize("row", [0, 3, 77, 177])
def test_class_zscores_match_pandas_groupby(wine_frame, row):
    frame, y = wine_frame
    got = class_zscores(frame, y, row)
    rest = frame.drop(index=frame.index[row])
    rest_y = np.delete(y, row)
    numeric = rest.select_dtypes("number").columns
    mean = rest[numeric].groupby(rest_y).mean().loc[y[row]]
    std = rest[numeric].groupby(rest_y).std().loc[y[row]]
    z = (frame[numeric].iloc[row] - mean) / std
    np.testing.assert_allclose(got.loc[numeric, "class_mean"].astype(float), mean, rtol=1e-12)
    np.testing.assert_allclose(got.loc[numeric, "class_std"].astype(float), std, rtol=1e-12)
    np.testing.assert_allclose(got.loc[numeric, "z"].astype(float), z, rtol=1e-10)
    for col in ["hue_band", "strong"]:
        shares = rest[col].groupby(rest_y, observed=False).value_counts(normalize=True)
        assert got.loc[col, "kind"] == "categorical"
        assert got.loc[col, "same_share"] == pytest.approx(shares.loc[(y[row], frame[col].iloc[row])])
    assert got.loc["ash", "class_rows"] == rest["ash"][rest_y == y[row]].notna().sum()


def test_class_zscore_matrix_matches_leave_one_out_groupby(wine_frame):
    frame, y = wine_frame
    got = class_zscore_matrix(frame, y)
    assert list(got.columns) == list(frame.select_dtypes("number").columns)
    for row in [0, 3, 40, 59, 130, 177]:
        rest = frame.drop(index=frame.index[row])[got.columns]
        rest_y = np.delete(y, row)
        mean = rest.groupby(rest_y).mean().loc[y[row]]
        std = rest.groupby(rest_y).std().loc[y[row]]
        expected = (frame[got.columns].iloc[row] - mean) / std
        np.testing.assert_allclose(got.iloc[row].to_numpy(dtype=float), expected.to_numpy(), rtol=1e-8)


def test_class_zscore_matrix_without_leaving_out_matches_groupby_transform(wine_frame):
    frame, y = wine_frame
    got = class_zscore_matrix(frame, y, exclude_self=False)
    numeric = frame[got.columns]
    grouped = numeric.groupby(y)
    expected = (numeric - grouped.transform("mean")) / grouped.transform("std")
    np.testing.assert_allclose(got.to_numpy(), expected.to_numpy(), rtol=1e-10)


def test_zero_spread_gives_infinite_or_zero_z():
    # Other rows of the class all equal: z is +inf for a different value, 0 for the same value.
    frame = pd.DataFrame({"w": [5.0, 5.0, 5.0, 7.0, 1.0, 2.0]})
    labels = np.array([0, 0, 0, 0, 1, 1])
    single = class_zscores(frame, labels, 3)
    assert single.loc["w", "class_std"] == 0 and single.loc["w", "z"] == np.inf
    matrix = class_zscore_matrix(frame, labels)
    assert matrix.loc[3, "w"] == np.inf
    assert np.isnan(matrix.loc[4, "w"])  # one other row in its class: no spread to compare with
    assert np.isnan(class_zscores(frame, labels, 4).loc["w", "z"])
    same = pd.DataFrame({"w": [5.0, 5.0, 5.0, 1.0, 2.0]})
    same_labels = np.array([0, 0, 0, 1, 1])
    assert class_zscores(same, same_labels, 0).loc["w", "z"] == 0.0
    assert class_zscore_matrix(same, same_labels).loc[0, "w"] == 0.0
