"""One-vs-one machines of our own (holdfast.learners.pairs): the refitted machines' decision values.

A refitted machine's values for the other classes' rows are the full machine's plus the change from the
rows whose alpha moved (``refitted_decision``); they must equal the sum over the refit's support rows
computed afresh (f(x) = sum_t y_t alpha_t K(x_t, x) - rho; Chang & Lin 2011, "LIBSVM", ACM TIST 2(3)),
and the LOO predictions built from them equal scikit-learn's LeaveOneOut (Pedregosa et al. 2011, JMLR 12)
on wine and iris (UCI data sets bundled with scikit-learn).

A machine at a tie is libsvm's own solve of that machine alone (``svm_refit.libsvm_pair_decision``): libsvm
trains the machine of classes a and b on those classes' rows only (Chang & Lin 2011, section 7), so a
two-class SVC on them must give the multi-class SVC's decision values for that pair, bit for bit.
"""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.datasets import load_digits, load_iris, load_wine
from sklearn.model_selection import LeaveOneOut, cross_val_predict
from sklearn.preprocessing import StandardScaler
from sklearn.svm import SVC

from holdfast.engine.loo import exact_loo
from holdfast.learners import pairs, svm_refit, warm
from holdfast.learners.svm import SVMLearner


@pytest.mark.parametrize("loader", [load_wine, load_iris])
@pytest.mark.parametrize("kernel", ["rbf", "linear"])
def test_refitted_machine_values_equal_the_sum_over_its_support_rows(loader, kernel):
    X, y = loader(return_X_y=True)
    X = StandardScaler().fit_transform(X)
    learner = SVMLearner(kernel=kernel, C=1.0)
    model = learner.fit(X, y)
    problem = learner.refit_problem()
    assert problem.pairs is not None and problem.ovo_full is not None
    assert all(s.face is not None for s in problem.pairs)  # the Newton steps' inverse is built
    checked = 0
    for row in np.flatnonzero(model.support)[::2]:
        for k, s in enumerate(problem.pairs):
            pos = int(np.searchsorted(s.idx, row))
            if pos >= len(s.idx) or s.idx[pos] != row or s.alpha[pos] <= 0:
                continue
            alpha, grad, c = s.alpha.copy(), s.grad.copy(), s.c.copy()
            args = (problem.eps, False, s.qd, s.near, s.face)
            rho, _ = warm.refit_without(problem.solver, s.idx, s.ypm, c, alpha, grad, pos, *args)
            sv = np.flatnonzero(alpha > 0)
            direct = pairs.pair_decision(problem.solver, s.idx[sv], alpha[sv] * s.ypm[sv], rho)
            ours = pairs.refitted_decision(problem.solver, s, alpha, grad, rho, problem.ovo_full[:, k])
            np.testing.assert_allclose(ours, direct, rtol=0, atol=1e-10)
            assert np.array_equal(np.sort(np.concatenate([s.idx, s.outside])), np.arange(len(y)))
            checked += 1
    assert checked >= 10
    result = exact_loo(model, problem)
    svc = SVC(kernel=kernel, C=1.0, gamma=learner.gamma_, tol=learner.tol)
    assert np.array_equal(result.loo_code, cross_val_predict(svc, X, y, cv=LeaveOneOut()))


def test_faces_beyond_the_budget_are_left_out(monkeypatch):
    """With no room for any face inverse, the machines solve their Newton steps directly: same LOO."""
    X, y = load_wine(return_X_y=True)
    X = StandardScaler().fit_transform(X)
    with_faces = SVMLearner(kernel="rbf", C=1.0)
    a = exact_loo(with_faces.fit(X, y), with_faces.refit_problem())
    monkeypatch.setattr(pairs, "PAIR_FACES_MAX_BYTES", 0)
    without = SVMLearner(kernel="rbf", C=1.0)
    model = without.fit(X, y)
    assert all(s.face is None for s in without.refit_problem().pairs)
    b = exact_loo(model, without.refit_problem())
    assert np.array_equal(a.loo_code, b.loo_code) and np.array_equal(a.flip_count, b.flip_count)


@pytest.mark.parametrize("loader", [load_iris, load_wine, load_digits])
@pytest.mark.parametrize(
    "params",
    [
        {"kernel": "rbf", "gamma": 0.05, "C": 1.0, "class_weight": None},
        {"kernel": "linear", "gamma": 1.0, "C": 10.0, "class_weight": None},
        {"kernel": "rbf", "gamma": 0.1, "C": 3.0, "class_weight": {0: 2.0, 1: 0.5, 2: 1.5}},
    ],
)
def test_one_machine_from_libsvm_is_the_multi_class_machine_bit_for_bit(loader, params):
    X, y = loader(return_X_y=True)
    X = StandardScaler().fit_transform(X)
    kernel, gamma, weights = params["kernel"], params["gamma"], params["class_weight"]
    full = SVC(kernel=kernel, gamma=gamma, C=params["C"], tol=1e-6, class_weight=weights)
    ovo = full.set_params(decision_function_shape="ovo").fit(X, y).decision_function(X)
    n = len(np.unique(y))
    pairs_ab = [(a, b) for a in range(n) for b in range(a + 1, n)]
    assert ovo.shape[1] == len(pairs_ab)
    fitted = {"C": params["C"], "tol": 1e-6, "class_weight": weights}
    for k, (a, b) in enumerate(pairs_ab):
        rows = np.flatnonzero((y == a) | (y == b))
        column = svm_refit.libsvm_pair_decision(X, y, rows, a, b, (kernel, gamma, 3, 0.0), fitted)
        assert np.array_equal(column, ovo[:, k]), (a, b)


@pytest.mark.parametrize(("kernel", "C"), [("rbf", 0.1), ("linear", 100.0)])
def test_a_machine_at_a_tie_is_refitted_by_libsvm_alone(kernel, C, monkeypatch):
    """iris: these settings put a decision value of some refitted machine within the tie allowance of 0.
    Those machines come from libsvm (one machine each), never the whole problem, and every LOO prediction
    and flip count is scikit-learn's (LeaveOneOut; full SVC refits without each support row)."""
    X, y = load_iris(return_X_y=True)
    X = StandardScaler().fit_transform(X)
    calls = {"machine": 0, "whole": 0}
    machine, whole = svm_refit.SVMRefitProblem._libsvm_machine, svm_refit.SVMRefitProblem._fit_without

    def counted_machine(self, k, row):
        calls["machine"] += 1
        return machine(self, k, row)

    def counted_whole(self, row):
        calls["whole"] += 1
        return whole(self, row)

    monkeypatch.setattr(svm_refit.SVMRefitProblem, "_libsvm_machine", counted_machine)
    monkeypatch.setattr(svm_refit.SVMRefitProblem, "_fit_without", counted_whole)
    learner = SVMLearner(kernel=kernel, C=C)
    model = learner.fit(X, y)
    result = exact_loo(model, learner.refit_problem())
    assert calls["machine"] > 0 and calls["whole"] == 0
    svc = SVC(kernel=kernel, C=C, gamma=learner.gamma_, tol=learner.tol)
    assert np.array_equal(result.loo_code, cross_val_predict(svc, X, y, cv=LeaveOneOut()))
    for row in np.flatnonzero(model.support):
        keep = np.delete(np.arange(len(y)), row)
        changed = svc.fit(X[keep], y[keep]).predict(X) != model.prediction
        changed[row] = False
        assert result.flip_count[row] == int(changed.sum()), row
