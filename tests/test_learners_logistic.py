"""L2 logistic regression: one-step approximate LOO for every row, exact refits near the boundary.

References:
* scikit-learn's ``LogisticRegression`` (binary) and ``OneVsRestClassifier(LogisticRegression)`` (more
  classes) with ``LeaveOneOut`` + ``cross_val_predict`` (Pedregosa et al. 2011, "Scikit-learn: Machine
  Learning in Python", JMLR 12) on the bundled breast-cancer, digits (two classes and all ten,
  subsampled), iris and wine sets, standardized;
* Rad & Maleki 2020, "A scalable estimate of the out-of-sample prediction error via approximate
  leave-one-out", JRSS-B 82: the one-step estimate; the tolerance checked here (0.05 on breast cancer at
  C = 0.1, 13 LOO errors as LeaveOneOut) is the one set for this family.
"""

from __future__ import annotations

import pickle

import numpy as np
import pytest
from sklearn.datasets import load_breast_cancer, load_digits, load_iris, load_wine
from sklearn.linear_model import LogisticRegression
from sklearn.model_selection import LeaveOneOut, cross_val_predict
from sklearn.multiclass import OneVsRestClassifier
from sklearn.preprocessing import StandardScaler
from threadpoolctl import threadpool_limits

from holdfast.engine.loo import exact_loo
from holdfast.errors import SpecError
from holdfast.learners import make_learner, validate_params
from holdfast.learners.logistic import REFIT_BAND, LogisticLearner


@pytest.fixture(autouse=True)
def _one_blas_thread():
    """Hundreds of small fits: BLAS threads only contend on a shared machine (15x slower measured)."""
    with threadpool_limits(limits=1):
        yield


def _dataset(name: str) -> tuple[np.ndarray, np.ndarray]:
    if name.startswith("digits"):
        X, y = load_digits(return_X_y=True)
        if name == "digits-2":  # two classes: 3 vs 8
            keep = np.isin(y, (3, 8))
            X, y = X[keep], (y[keep] == 8).astype(np.int64)
        else:  # all ten, subsampled: the reference fits ten models per left-out row
            idx = np.random.default_rng(0).choice(len(y), size=200, replace=False)
            X, y = X[idx], y[idx]
    else:
        loader = {"cancer": load_breast_cancer, "iris": load_iris, "wine": load_wine}[name]
        X, y = loader(return_X_y=True)
    return StandardScaler().fit_transform(X), y.astype(np.int64)


def _tight(C: float) -> LogisticRegression:
    """The same objective solved to a tight tolerance (Newton-Cholesky: a few iterations per fit)."""
    return LogisticRegression(C=C, solver="newton-cholesky", tol=1e-10, max_iter=1000)


def _exact_loo_decisions(X, y, C):
    """LOO decision value of every row from a full scikit-learn refit without it (binary)."""
    out = np.empty(len(y))
    for i in range(len(y)):
        keep = np.delete(np.arange(len(y)), i)
        out[i] = _tight(C).fit(X[keep], y[keep]).decision_function(X[i : i + 1])[0]
    return out


def test_breast_cancer_one_step_estimate_within_tolerance_and_error_count_as_leave_one_out():
    # Rad & Maleki 2020 one-step ALO vs exact refits (scikit-learn LogisticRegression, tight tolerance);
    # LOO error count vs LeaveOneOut + cross_val_predict with the default LogisticRegression(C=0.1)
    X, y = _dataset("cancer")
    learner = LogisticLearner(C=0.1)
    model = learner.fit(X, y)
    loo = exact_loo(model, learner.refit_problem())
    sign = np.where(y == 1, 1.0, -1.0)
    exact = _exact_loo_decisions(X, y, 0.1)
    approx = model.extras["approx_loo_margin"] * sign
    assert np.max(np.abs(approx - exact)) <= 0.05
    # refitted rows are exact to the solvers' tolerance; the others keep the estimate
    ours = loo.loo_margin * sign
    assert loo.exact is not None
    assert np.max(np.abs(ours[loo.exact] - exact[loo.exact])) < 1e-5
    assert not loo.exact.all() and loo.exact.sum() == loo.refits
    # every row within the band of zero was refitted
    assert loo.exact[np.abs(model.extras["approx_loo_margin"]) < REFIT_BAND].all()
    reference = cross_val_predict(LogisticRegression(C=0.1), X, y, cv=LeaveOneOut())
    assert int((loo.loo_code != y).sum()) == int((reference != y).sum()) == 13
    assert np.array_equal(loo.loo_code, reference)


@pytest.mark.parametrize(
    ("name", "C"), [("cancer", 1.0), ("digits-2", 0.1), ("digits", 0.5), ("iris", 1.0), ("wine", 0.3)]
)
def test_loo_predictions_equal_leave_one_out(name, C):
    # reference: LogisticRegression (two classes) / OneVsRestClassifier(LogisticRegression) (more),
    # LeaveOneOut + cross_val_predict, tight solver tolerance so both sides solve the same problem
    X, y = _dataset(name)
    learner = LogisticLearner(C=C)
    model = learner.fit(X, y)
    loo = exact_loo(model, learner.refit_problem())
    est = _tight(C) if len(np.unique(y)) == 2 else OneVsRestClassifier(_tight(C))
    assert np.array_equal(model.prediction, est.fit(X, y).predict(X))
    reference = cross_val_predict(est, X, y, cv=LeaveOneOut())
    assert np.array_equal(loo.loo_code, reference)


def test_influential_rows_and_their_flip_counts_come_from_exact_refits():
    # Cook's distance (Pregibon 1981) above 4/m marks the influential rows; each is refitted, and its
    # flip count equals a full scikit-learn refit without it
    X, y = _dataset("wine")
    y = (y == 1).astype(np.int64)
    learner = LogisticLearner(C=1.0)
    model = learner.fit(X, y)
    loo = exact_loo(model, learner.refit_problem())
    cook = model.extras["cook"]
    assert np.array_equal(model.support, cook > model.extras["influence_threshold"])
    assert 0 < model.support.sum() < len(y)
    assert loo.exact is not None and loo.exact[model.support].all()
    full = _tight(1.0).fit(X, y).predict(X)
    for r in np.flatnonzero(loo.exact):
        keep = np.delete(np.arange(len(y)), r)
        changed = _tight(1.0).fit(X[keep], y[keep]).predict(X) != full
        changed[r] = False
        assert loo.flip_count[r] == changed.sum()
    # the most influential row moves the fit more than a typical row (influence is not noise)
    top, low = int(np.argmax(cook)), int(np.argmin(cook))
    problem = learner.refit_problem()
    assert problem.refit_without(top).max_change > problem.refit_without(low).max_change
    # the problem travels to dask workers by pickle and answers the same there
    shipped = pickle.loads(pickle.dumps(problem)).refit_without(top)
    assert shipped.loo_code == loo.loo_code[top] and np.isclose(shipped.loo_margin, loo.loo_margin[top])


def test_params_are_validated_with_one_line():
    good = validate_params({"family": "logistic", "C": 2}, "s.toml")
    assert good == {"family": "logistic", "C": 2.0, "tol": 1e-8}
    assert isinstance(make_learner(good), LogisticLearner)
    with pytest.raises(SpecError, match=r"s.toml: 'learner.C' must be a positive number"):
        validate_params({"family": "logistic", "C": 0}, "s.toml")
