"""Cancellation and resumption: refits finished before a cancel are kept and reused, results unchanged."""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.datasets import load_breast_cancer
from sklearn.preprocessing import StandardScaler

from holdfast.engine.cache import RefitStore
from holdfast.engine.loo import exact_loo, support_key
from holdfast.errors import Cancelled
from holdfast.learners.svm import SVMLearner


@pytest.fixture(scope="module")
def fitted():
    X, y = load_breast_cancer(return_X_y=True)  # Wolberg et al. 1995, bundled with scikit-learn
    X = StandardScaler().fit_transform(X[:250])
    learner = SVMLearner(kernel="rbf", C=1.0)
    return learner, learner.fit(X, y[:250])


def test_cancel_then_resume_gives_the_same_result(fitted, tmp_path):
    learner, model = fitted
    key = support_key(model)
    full = exact_loo(model, learner.refit_problem())
    calls = {"n": 0}

    def cancel_after_ten() -> bool:
        calls["n"] += 1
        return calls["n"] > 10

    store = RefitStore(tmp_path / "refits.sqlite", key)
    with pytest.raises(Cancelled):
        exact_loo(model, learner.refit_problem(), store=store, should_cancel=cancel_after_ten)
    store.close()
    kept = RefitStore(tmp_path / "refits.sqlite", key)
    n_kept = len(kept.load())
    assert 0 < n_kept < int(model.support.sum())
    seen = []
    resumed = exact_loo(
        model, learner.refit_problem(), store=kept, progress=lambda done, total, eta: seen.append(done)
    )
    kept.close()
    assert resumed.resumed == n_kept and resumed.refits == int(model.support.sum()) - n_kept
    assert seen[0] == n_kept
    assert np.array_equal(resumed.loo_code, full.loo_code)
    assert np.array_equal(resumed.flip_count, full.flip_count)
    assert np.array_equal(resumed.essential, full.essential)


def test_store_for_another_fit_is_emptied(fitted, tmp_path):
    learner, model = fitted
    store = RefitStore(tmp_path / "r.sqlite", support_key(model))
    exact_loo(model, learner.refit_problem(), store=store)
    assert len(store.load()) == int(model.support.sum())
    store.close()
    other = RefitStore(tmp_path / "r.sqlite", "another-fit")
    assert other.load() == {}
    other.close()
