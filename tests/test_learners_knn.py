"""k-NN: exact LOO for every row, critical rows and flip counts.

References:
* scikit-learn's ``KNeighborsClassifier`` with ``LeaveOneOut`` + ``cross_val_predict`` (Pedregosa et al.
  2011, "Scikit-learn: Machine Learning in Python", JMLR 12): one refit per row, on scikit-learn's bundled
  breast-cancer (Wolberg, Street & Mangasarian 1995), digits (Alpaydin & Kaynak 1998), iris (Fisher 1936)
  and wine (Aeberhard et al. 1992) sets, standardized as holdfast prepares them.
* brute-force refits (``KNeighborsClassifier`` fitted without each row, predicting every training row) on
  small random sets, for critical rows and flip counts (hypothesis); with duplicated rows and tied
  distances, brute-force refits of the rule written out plainly (scikit-learn's order among exactly tied
  distances follows its own floating-point rounding).
* Hart 1968, "The condensed nearest neighbor rule", IEEE Trans. Information Theory 14(3): the 1-NN rule
  on the condensed set classifies every training row outside it correctly.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from sklearn.datasets import load_breast_cancer, load_digits, load_iris, load_wine
from sklearn.model_selection import LeaveOneOut, cross_val_predict
from sklearn.neighbors import KNeighborsClassifier
from sklearn.preprocessing import StandardScaler

from holdfast.engine.loo import exact_loo
from holdfast.errors import DataError, SpecError
from holdfast.learners import make_learner, validate_params
from holdfast.learners.knn import KNNLearner, condensed_errors, condensed_set


def _dataset(name: str) -> tuple[np.ndarray, np.ndarray]:
    if name == "digits-2":  # two classes: 3 vs 8
        X, y = load_digits(return_X_y=True)
        keep = np.isin(y, (3, 8))
        X, y = X[keep], (y[keep] == 8).astype(np.int64)
    else:
        loader = {"cancer": load_breast_cancer, "digits": load_digits, "iris": load_iris, "wine": load_wine}
        X, y = loader[name](return_X_y=True)
    return StandardScaler().fit_transform(X), y.astype(np.int64)


CASES = [
    ("cancer", 5, "uniform", "euclidean"),
    ("cancer", 4, "distance", "manhattan"),
    ("digits-2", 4, "uniform", "cosine"),
    ("digits", 5, "uniform", "euclidean"),
    ("digits", 6, "distance", "cosine"),
    ("iris", 4, "uniform", "manhattan"),
    ("iris", 7, "uniform", "euclidean"),
    ("wine", 3, "distance", "euclidean"),
    ("wine", 6, "uniform", "cosine"),
]


@pytest.mark.parametrize(("name", "k", "weights", "metric"), CASES)
def test_loo_equals_leave_one_out_with_kneighbors_classifier(name, k, weights, metric):
    # reference: scikit-learn KNeighborsClassifier + LeaveOneOut + cross_val_predict (Pedregosa et al. 2011)
    X, y = _dataset(name)
    learner = KNNLearner(k=k, weights=weights, metric=metric)
    model = learner.fit(X, y)
    loo = exact_loo(model, learner.refit_problem())
    est = KNeighborsClassifier(n_neighbors=k, weights=weights, metric=metric)
    reference = cross_val_predict(est, X, y, cv=LeaveOneOut())
    assert np.array_equal(loo.loo_code, reference)
    assert np.array_equal(model.prediction, est.fit(X, y).predict(X))
    assert loo.refits == 0 and loo.exact is not None and loo.exact.all()
    # the LOO margin's sign agrees with the LOO prediction (positive: own class ahead)
    assert np.all((loo.loo_margin > 0) <= (loo.loo_code == y))


def _brute_flips(X, y, k, weights, metric, full_pred):
    """Flip count of every row from a refit without it (scikit-learn, brute force)."""
    out = np.zeros(len(y), dtype=np.int64)
    for r in range(len(y)):
        keep = np.delete(np.arange(len(y)), r)
        est = KNeighborsClassifier(n_neighbors=k, weights=weights, metric=metric, algorithm="brute")
        pred = est.fit(X[keep], y[keep]).predict(X)
        changed = pred != full_pred
        changed[r] = False
        out[r] = changed.sum()
    return out


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    seed=st.integers(0, 10_000),
    m=st.integers(8, 30),
    k=st.integers(1, 5),
    weights=st.sampled_from(["uniform", "distance"]),
    metric=st.sampled_from(["euclidean", "manhattan"]),
)
def test_critical_rows_and_flip_counts_equal_brute_force_refits(seed, m, k, weights, metric):
    # reference: scikit-learn KNeighborsClassifier (brute force) refitted without each row; continuous
    # features, so no two distances tie and scikit-learn's own rounding cannot reorder neighbours
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(m, 3))
    y = rng.integers(0, 3 if seed % 2 else 2, size=m)
    if len(np.unique(y)) < 2:
        y[0] = 1 - y[1] if y[1] < 2 else 0
    k = min(k, m - 2)
    learner = KNNLearner(k=k, weights=weights, metric=metric)
    model = learner.fit(X, y)
    loo = exact_loo(model, learner.refit_problem())
    est = KNeighborsClassifier(n_neighbors=k, weights=weights, metric=metric, algorithm="brute")
    full = est.fit(X, y).predict(X)
    assert np.array_equal(model.prediction, full)
    flips = _brute_flips(X, y, k, weights, metric, full)
    assert np.array_equal(loo.flip_count, flips)
    assert np.array_equal(model.support, flips > 0)
    ref_loo = cross_val_predict(
        KNeighborsClassifier(n_neighbors=k, weights=weights, metric=metric, algorithm="brute"),
        X,
        y,
        cv=LeaveOneOut(),
    )
    assert np.array_equal(loo.loo_code, ref_loo)
    # the refit problem answers a refit request with the same flips (used if a run asks for one)
    problem = learner.refit_problem()
    for r in np.flatnonzero(model.support)[:3]:
        assert len(problem.refit_without(int(r)).flipped) == flips[r]


def _plain_knn_predict(X, y, train, queries, k, weights, n_classes):
    """The k-NN rule written out: neighbours by (Euclidean distance, position), votes 1 or 1/d (only the
    zero-distance neighbours when there are any), the lowest class on equal votes."""
    out = []
    for q in queries:
        d = np.sqrt(((X[train] - X[q]) ** 2).sum(axis=1))
        order = np.lexsort((train, d))[:k]
        votes = np.zeros(n_classes)
        zero = (d[order] == 0).any()
        for t in order:
            w = 1.0 if weights == "uniform" else (float(d[t] == 0) if zero else 1.0 / d[t])
            votes[y[train[t]]] += w
        out.append(int(np.argmax(votes)))
    return np.array(out)


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    seed=st.integers(0, 10_000),
    m=st.integers(8, 24),
    k=st.integers(1, 5),
    weights=st.sampled_from(["uniform", "distance"]),
    n_dup=st.integers(1, 5),
)
def test_with_duplicates_and_ties_equal_brute_force_refits_of_the_rule(seed, m, k, weights, n_dup):
    # exact duplicates (other labels too) and integer features: many exactly tied distances. Scikit-learn
    # orders exactly tied neighbours by its own floating-point rounding (|a|^2 - 2ab + |b|^2), so the
    # reference here is a brute-force refit per row of the rule itself, ties by row position
    rng = np.random.default_rng(seed)
    X = rng.integers(-2, 3, size=(m, 2)).astype(float)
    for _ in range(n_dup):
        a, b = rng.integers(0, m, size=2)
        X[b] = X[a]
    y = rng.integers(0, 2, size=m)
    y[:2] = (0, 1)
    k = min(k, m - 2)
    learner = KNNLearner(k=k, weights=weights)
    model = learner.fit(X, y)
    loo = exact_loo(model, learner.refit_problem())
    every = np.arange(m)
    full = _plain_knn_predict(X, y, every, every, k, weights, 2)
    assert np.array_equal(model.prediction, full)
    for r in range(m):
        without = np.delete(every, r)
        pred = _plain_knn_predict(X, y, without, every, k, weights, 2)
        assert loo.loo_code[r] == pred[r]
        changed = pred != full
        changed[r] = False
        assert loo.flip_count[r] == changed.sum()
        assert model.support[r] == changed.any()


def test_exact_duplicate_is_a_neighbour_in_the_loo():
    # row 0 and row 1 are identical, labelled 0; rows 2-4 sit nearby labelled 1. 1-NN LOO of row 0 must
    # use row 1 (distance 0, by position), not skip it as "itself".
    X = np.array([[0.0, 0.0], [0.0, 0.0], [0.5, 0.0], [0.0, 0.5], [0.6, 0.6]])
    y = np.array([0, 0, 1, 1, 1])
    learner = KNNLearner(k=1)
    model = learner.fit(X, y)
    assert model.direct_loo is not None
    assert model.direct_loo.code[0] == 0 and model.direct_loo.code[1] == 0
    ref = cross_val_predict(KNeighborsClassifier(n_neighbors=1), X, y, cv=LeaveOneOut())
    assert np.array_equal(model.direct_loo.code, ref)


@pytest.mark.parametrize("name", ["cancer", "iris", "wine"])
def test_condensed_set_is_consistent(name):
    # Hart 1968: 1-NN on the condensed store classifies every training row outside it correctly
    X, y = _dataset(name)
    store = condensed_set(X, y, "euclidean")
    assert 0 < len(store) < len(y)
    assert condensed_errors(X, y, store, "euclidean") == 0
    # and it is not trivially so: a random subset of the same size misclassifies some rows
    other = np.sort(np.random.default_rng(0).choice(len(y), size=len(store), replace=False))
    assert condensed_errors(X, y, other, "euclidean") > 0


def test_params_are_validated_with_one_line():
    good = validate_params({"family": "knn", "k": 3}, "s.toml")
    assert good == {"family": "knn", "k": 3, "weights": "uniform", "metric": "euclidean"}
    assert isinstance(make_learner(good), KNNLearner)
    with pytest.raises(SpecError, match=r"s.toml: 'learner.k' must be a positive integer"):
        validate_params({"family": "knn", "k": 0}, "s.toml")
    with pytest.raises(SpecError, match=r"'learner.metric' must be one of euclidean \| manhattan \| cosine"):
        validate_params({"family": "knn", "metric": "chebyshev"}, "s.toml")
    with pytest.raises(DataError, match=r"learner.k = 9 needs at least 10 training rows"):
        KNNLearner(k=9).fit(np.zeros((5, 2)), np.array([0, 1, 0, 1, 0]))
