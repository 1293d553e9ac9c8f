"""Perceptron: the update set is a compression set, exact LOO from refits of the update rows only.

References:
* scikit-learn's ``Perceptron(shuffle=False, tol=None, max_iter=epochs)`` with ``LeaveOneOut`` +
  ``cross_val_predict`` (Pedregosa et al. 2011, "Scikit-learn: Machine Learning in Python", JMLR 12) on
  the bundled breast-cancer, digits (two classes and all ten, subsampled), iris and wine sets;
* Floyd & Warmuth 1995, "Sample compression, learnability, and the Vapnik-Chervonenkis dimension",
  Machine Learning 21: rerunning on the update rows alone, in order, gives the same weights;
* Novikoff 1962, "On convergence proofs on perceptrons": at most (R / gamma)^2 updates when separable.
"""

from __future__ import annotations

import pickle
import warnings

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from sklearn.datasets import load_breast_cancer, load_digits, load_iris, load_wine
from sklearn.exceptions import ConvergenceWarning
from sklearn.linear_model import Perceptron
from sklearn.model_selection import LeaveOneOut, cross_val_predict
from sklearn.preprocessing import StandardScaler

from holdfast.engine.loo import exact_loo
from holdfast.errors import SpecError
from holdfast.learners import make_learner, validate_params
from holdfast.learners.perceptron import PerceptronLearner, run_perceptron


def _dataset(name: str) -> tuple[np.ndarray, np.ndarray]:
    if name.startswith("digits"):
        X, y = load_digits(return_X_y=True)
        if name == "digits-2":  # two classes: 3 vs 8
            keep = np.isin(y, (3, 8))
            X, y = X[keep], (y[keep] == 8).astype(np.int64)
        else:  # all ten, subsampled to keep the reference's 600 refits quick
            idx = np.random.default_rng(0).choice(len(y), size=600, replace=False)
            X, y = X[idx], y[idx]
    else:
        loader = {"cancer": load_breast_cancer, "iris": load_iris, "wine": load_wine}[name]
        X, y = loader(return_X_y=True)
    return StandardScaler().fit_transform(X), y.astype(np.int64)


def _sk(epochs: int, intercept: bool = True) -> Perceptron:
    return Perceptron(shuffle=False, tol=None, max_iter=epochs, fit_intercept=intercept)


@pytest.mark.parametrize(
    ("name", "epochs", "intercept"),
    [
        ("cancer", 1, True),
        ("cancer", 5, True),
        ("cancer", 3, False),
        ("digits-2", 5, True),
        ("digits", 3, True),
        ("iris", 5, True),
        ("wine", 10, True),
    ],
)
def test_loo_equals_leave_one_out_with_sklearn_perceptron(name, epochs, intercept):
    # reference: scikit-learn Perceptron(shuffle=False, tol=None) + LeaveOneOut + cross_val_predict
    X, y = _dataset(name)
    learner = PerceptronLearner(epochs=epochs, intercept=intercept)
    model = learner.fit(X, y)
    loo = exact_loo(model, learner.refit_problem())
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        est = _sk(epochs, intercept).fit(X, y)
        reference = cross_val_predict(_sk(epochs, intercept), X, y, cv=LeaveOneOut())
    assert np.array_equal(learner.W_, est.coef_)  # the same update rule, bit for bit
    assert np.array_equal(model.prediction, est.predict(X))
    assert np.array_equal(loo.loo_code, reference)
    # only the update rows were refitted, and the others kept their training prediction
    assert loo.refits == int(model.support.sum()) < len(y)
    assert np.array_equal(loo.loo_code[~model.support], model.prediction[~model.support])


@pytest.mark.parametrize("name", ["cancer", "wine", "iris"])
def test_update_set_is_a_compression_set(name):
    # Floyd & Warmuth 1995: the run on the update rows alone, in order, makes the same updates
    X, y = _dataset(name)
    learner = PerceptronLearner(epochs=5)
    model = learner.fit(X, y)
    per_class = model.extras["update_rows"]
    for k in range(per_class.shape[0]):
        ypm = np.where(y == (1 if learner.n_classes_ == 2 else k), 1.0, -1.0)
        rows = np.flatnonzero(per_class[k] > 0)
        w, b, upd = run_perceptron(X, ypm, rows, 5)
        assert np.array_equal(w, learner.W_[k]) and b == learner.b_[k]
        assert np.array_equal(upd, per_class[k])
        # the union of all classes' update sets reproduces each class too (the multi-class compression set)
        w_all, _, _ = run_perceptron(X, ypm, np.flatnonzero(model.support), 5)
        assert np.array_equal(w_all, learner.W_[k])
        # not trivially: dropping one update row changes the weights
        w_less, _, _ = run_perceptron(X, ypm, rows[1:], 5)
        assert not np.array_equal(w_less, learner.W_[k])


def test_novikoff_mistake_bound_holds_when_separable():
    # Novikoff 1962: updates <= (R / gamma)^2 for data separable with margin gamma; iris setosa vs the
    # rest is linearly separable (Fisher 1936)
    X, y = load_iris(return_X_y=True)
    X = StandardScaler().fit_transform(X)
    y = (y == 0).astype(np.int64)
    model = PerceptronLearner(epochs=20).fit(X, y)
    nov = model.extras["novikoff"]
    assert nov["applies"] and nov["gamma"] > 0
    assert (model.prediction == y).all()
    assert 0 < nov["updates"] <= nov["bound"]


def test_novikoff_bound_does_not_apply_when_not_separated():
    X, y = _dataset("cancer")
    model = PerceptronLearner(epochs=2).fit(X, y)
    assert (model.prediction != y).any()
    assert not model.extras["novikoff"]["applies"] and model.extras["novikoff"]["bound"] is None


def test_flip_counts_equal_full_refits():
    # reference: scikit-learn Perceptron fitted without each update row, predicting every training row
    X, y = _dataset("wine")
    learner = PerceptronLearner(epochs=5)
    model = learner.fit(X, y)
    loo = exact_loo(model, learner.refit_problem())
    for r in np.flatnonzero(model.support):
        keep = np.delete(np.arange(len(y)), r)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", ConvergenceWarning)
            pred = _sk(5).fit(X[keep], y[keep]).predict(X)
        changed = pred != model.prediction
        changed[r] = False
        assert loo.flip_count[r] == changed.sum()


def test_params_are_validated_with_one_line():
    good = validate_params({"family": "perceptron", "epochs": 3}, "s.toml")
    assert good == {"family": "perceptron", "epochs": 3, "intercept": True}
    assert isinstance(make_learner(good), PerceptronLearner)
    with pytest.raises(SpecError, match=r"s.toml: 'learner.epochs' must be an integer from 1 to 10000"):
        validate_params({"family": "perceptron", "epochs": 0}, "s.toml")
    with pytest.raises(SpecError, match=r"'learner.intercept' must be true or false"):
        validate_params({"family": "perceptron", "intercept": "yes"}, "s.toml")


@settings(max_examples=30, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    seed=st.integers(0, 10_000),
    m=st.integers(6, 40),
    epochs=st.integers(1, 6),
    classes=st.sampled_from([2, 3]),
)
def test_compression_and_loo_on_random_sets(seed, m, epochs, classes):
    # Floyd & Warmuth 1995 on random data (integers: exact zeros and ties in y f(x) are common), and the
    # LOO against scikit-learn Perceptron(shuffle=False, tol=None) + LeaveOneOut + cross_val_predict
    rng = np.random.default_rng(seed)
    X = rng.integers(-2, 3, size=(m, 3)).astype(float)
    y = np.arange(m) % classes
    rng.shuffle(y)
    learner = PerceptronLearner(epochs=epochs)
    model = learner.fit(X, y)
    per_class = model.extras["update_rows"]
    for k in range(per_class.shape[0]):
        ypm = np.where(y == (1 if classes == 2 else k), 1.0, -1.0)
        w, b, _ = run_perceptron(X, ypm, np.flatnonzero(model.support), epochs)
        assert np.array_equal(w, learner.W_[k]) and b == learner.b_[k]
    loo = exact_loo(model, pickle.loads(pickle.dumps(learner.refit_problem())))  # as a dask worker gets it
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        reference = cross_val_predict(_sk(epochs), X, y, cv=LeaveOneOut())
    assert np.array_equal(loo.loo_code, reference)
