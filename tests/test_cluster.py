"""Refits on a real dask LocalCluster bound to 127.0.0.1 give the same exact LOO as in-process refits."""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.datasets import load_wine
from sklearn.preprocessing import StandardScaler

from holdfast.engine.loo import exact_loo
from holdfast.learners.svm import SVMLearner

distributed = pytest.importorskip("distributed")


@pytest.fixture(scope="module")
def cluster():
    from distributed import LocalCluster

    with LocalCluster(
        n_workers=2, threads_per_worker=1, host="127.0.0.1", dashboard_address=None, processes=True
    ) as c:
        yield c


def test_dask_scheduler_matches_in_process(cluster):
    # wine (Forina et al., bundled with scikit-learn), class 0 vs the rest
    X, y = load_wine(return_X_y=True)
    X = StandardScaler().fit_transform(X)
    y = (y == 0).astype(np.int64)
    learner = SVMLearner(kernel="rbf", C=1.0)
    model = learner.fit(X, y)
    local = exact_loo(model, learner.refit_problem())
    seen: list[int] = []
    remote = exact_loo(
        model,
        learner.refit_problem(),
        backend="dask",
        scheduler=cluster.scheduler_address,
        progress=lambda done, total, eta: seen.append(done),
    )
    assert np.array_equal(local.loo_code, remote.loo_code)
    assert np.array_equal(local.flip_count, remote.flip_count)
    assert seen[-1] == int(model.support.sum())


def test_unreachable_scheduler_is_a_user_error():
    from holdfast.errors import UserError

    X, y = load_wine(return_X_y=True)
    y = (y == 0).astype(np.int64)
    learner = SVMLearner(kernel="linear", C=1.0)
    model = learner.fit(StandardScaler().fit_transform(X), y)
    with pytest.raises(UserError, match=r"127\.0\.0\.1:1"):
        exact_loo(model, learner.refit_problem(), backend="dask", scheduler="tcp://127.0.0.1:1")
