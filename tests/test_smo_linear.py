"""The linear-kernel solver (learners/smo_linear.py) and the refits above the precompute limit that use it.

References: scikit-learn's ``LeaveOneOut`` with ``cross_val_predict`` (Pedregosa et al. 2011,
"Scikit-learn: Machine Learning in Python", JMLR 12): one cold libsvm fit per row (Chang & Lin 2011,
"LIBSVM: a library for support vector machines", ACM TIST 2(3)) with the learner's frozen class weights
and tolerance; flip counts from independent full SVC refits. Data bundled with scikit-learn: breast cancer
(Wolberg, Street & Mangasarian 1995, UCI), wine (Forina et al., UCI), iris (Fisher 1936). The solver core
is checked against our kernel-row SMO (learners/smo.py) on a precomputed kernel matrix and against
libsvm's stopping rule (Chang & Lin 2011, eq. 4.13) on random problems drawn by hypothesis.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from sklearn.datasets import load_breast_cancer, load_iris, load_wine
from sklearn.model_selection import LeaveOneOut, cross_val_predict
from sklearn.preprocessing import StandardScaler
from sklearn.svm import SVC

from holdfast.engine.loo import exact_loo
from holdfast.learners import smo, smo_linear
from holdfast.learners.svm import SVMLearner


def _two_class(name: str) -> tuple[np.ndarray, np.ndarray]:
    if name == "cancer":  # the first 300 rows keep the reference's one fit per row affordable
        X, y = load_breast_cancer(return_X_y=True)
        X, y = X[:300], y[:300]
    elif name == "wine":  # classes 0 and 1
        X, y = load_wine(return_X_y=True)
        X, y = X[y < 2], y[y < 2]
    else:  # iris versicolor against virginica: the two classes that overlap
        X, y = load_iris(return_X_y=True)
        X, y = X[y > 0], y[y > 0] - 1
    return StandardScaler().fit_transform(X), y.astype(np.int64)


def _svc(learner: SVMLearner) -> SVC:
    return SVC(kernel="linear", C=learner.C, tol=learner.tol, class_weight=learner.class_weight_)


def _flips(X, y, learner, full_pred, rows) -> np.ndarray:
    out = []
    for r in rows:
        keep = np.delete(np.arange(len(y)), r)
        changed = _svc(learner).fit(X[keep], y[keep]).predict(X) != full_pred
        changed[r] = False
        out.append(int(changed.sum()))
    return np.array(out)


@pytest.mark.parametrize("name", ["cancer", "wine", "iris"])
@pytest.mark.parametrize("class_weight", ["none", "balanced"])
def test_linear_refits_above_the_limit_match_leave_one_out(name, class_weight):
    """Above the precompute limit (forced with precompute_max_rows=10), linear two-class refits run on the
    primal-vector solver; every LOO prediction equals a cold SVC fit without the row (LeaveOneOut), and
    flip counts of sampled support rows equal independent SVC refits."""
    X, y = _two_class(name)
    learner = SVMLearner(kernel="linear", C=1.0, class_weight=class_weight, precompute_max_rows=10)
    model = learner.fit(X, y)
    problem = learner.refit_problem()
    assert problem.K is None and problem.solver is not None and smo_linear.is_linear(problem.solver)
    whole = problem._fit_without
    fallbacks = []

    def counted(row: int):
        fallbacks.append(row)
        return whole(row)

    problem._fit_without = counted  # the libsvm fallbacks (ties, flat intercepts) stay rare
    result = exact_loo(model, problem)
    assert len(fallbacks) <= 0.1 * int(model.support.sum())
    reference = cross_val_predict(_svc(learner), X, y, cv=LeaveOneOut())
    assert int((result.loo_code != reference).sum()) == 0
    rows = np.flatnonzero(model.support)[::7]
    assert np.array_equal(result.flip_count[rows], _flips(X, y, learner, model.prediction, rows))


def _check_optimal(X, ypm, C, alpha, G, eps) -> None:
    """Feasible, G = Qa - e computed afresh, and libsvm's stopping rule m(a) - M(a) < eps over all rows."""
    assert np.all(alpha >= 0) and np.all(alpha <= C)
    assert abs(float(ypm @ alpha)) < 1e-9 * max(1.0, float(C.sum()))
    w = X.T @ (alpha * ypm)
    assert np.allclose(G, ypm * (X @ w) - 1.0, atol=1e-9)
    up = ((ypm > 0) & (alpha < C)) | ((ypm < 0) & (alpha > 0))
    low = ((ypm > 0) & (alpha > 0)) | ((ypm < 0) & (alpha < C))
    score = -ypm * G
    assert score[up].max() - score[low].min() < eps


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    n=st.integers(min_value=6, max_value=120),
    p=st.integers(min_value=1, max_value=6),
    C=st.sampled_from([0.01, 1.0, 100.0]),
    seed=st.integers(min_value=0, max_value=2**31 - 1),
    warm=st.booleans(),
)
def test_primal_solver_matches_kernel_row_solver(n, p, C, seed, warm):
    """Random problems (more free rows possible than p + 1 when n is large and p small): the primal-vector
    solver meets libsvm's stopping rule over every row, and its decision values equal those of our
    kernel-row SMO on the precomputed matrix X X' (the same problem, a unique decision function when the
    intercept is unique; checked on the rows where both solvers' intercepts agree with a free row)."""
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, p))
    ypm = np.where(rng.random(n) < 0.5, -1.0, 1.0)
    ypm[0], ypm[1] = 1.0, -1.0
    X += 0.8 * ypm[:, None] * rng.random(p)
    Cv = np.full(n, C) * np.where(ypm > 0, 1.0, 1.7)
    kernel = smo.Kernel(X=X, kind="linear")
    start = None
    if warm:  # a feasible start away from 0: equal weight on one row of each class
        start = np.zeros(n)
        start[0] = start[1] = min(Cv[0], Cv[1]) / 2
    alpha, G, rho = smo_linear.fit_dual(kernel, ypm, Cv, 1e-9, start)
    _check_optimal(X, ypm, Cv, alpha, G, 1e-9)
    K = X @ X.T
    a2, _, rho2, _ = smo.fit_dual(smo.Kernel(K=K), np.arange(n), ypm, Cv, 1e-9)
    # the primal w is unique (strictly convex in w); both solutions give the same w to the tolerance
    w1, w2 = X.T @ (alpha * ypm), X.T @ (a2 * ypm)
    scale = max(1.0, float(np.abs(w2).max()))
    assert np.allclose(w1, w2, atol=1e-5 * scale)
    free = (a2 > 1e-8 * Cv) & (a2 < Cv * (1 - 1e-8))
    if free.any():
        assert abs(rho - rho2) < 1e-5 * scale


@settings(max_examples=20, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    n=st.integers(min_value=8, max_value=80),
    p=st.integers(min_value=1, max_value=5),
    seed=st.integers(min_value=0, max_value=2**31 - 1),
)
def test_primal_refit_equals_a_cold_solve_without_the_row(n, p, seed):
    """A warm refit without a row (seeding, face steps, SMO) reaches the same w as a cold solve of the
    problem without that row (the optimum of a strictly convex problem in w; Cortes & Vapnik 1995)."""
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, p))
    ypm = np.where(rng.random(n) < 0.5, -1.0, 1.0)
    ypm[:2] = [1.0, -1.0]
    ypm[2:4] = [1.0, -1.0]
    X += 0.5 * ypm[:, None]
    Cv = np.ones(n)
    kernel = smo.Kernel(X=X, kind="linear")
    alpha, G, _ = smo_linear.fit_dual(kernel, ypm, Cv, 1e-9)
    row = int(np.flatnonzero(alpha > 0)[0])
    a, g, c = alpha.copy(), G.copy(), Cv.copy()
    smo_linear.refit_without(kernel, ypm, c, a, g, row, 1e-9, kernel.diag(np.arange(n)))
    assert a[row] == 0.0
    _check_optimal(X, ypm, c, a, g, 1e-9)
    keep = np.delete(np.arange(n), row)
    cold, _, _ = smo_linear.fit_dual(smo.Kernel(X=X[keep], kind="linear"), ypm[keep], Cv[keep], 1e-9)
    w_warm, w_cold = X.T @ (a * ypm), X[keep].T @ (cold * ypm[keep])
    assert np.allclose(w_warm, w_cold, atol=1e-5 * max(1.0, float(np.abs(w_cold).max())))
