"""Exact LOO and flip counts checked against full refits.

Reference: scikit-learn's own ``LeaveOneOut`` with ``cross_val_predict`` (Pedregosa et al. 2011,
"Scikit-learn: Machine Learning in Python", JMLR 12), i.e. a full refit per row on the same prepared
matrix; data: scikit-learn's bundled breast-cancer set (Wolberg, Street & Mangasarian 1995, UCI).
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from sklearn.datasets import load_breast_cancer, load_iris
from sklearn.model_selection import LeaveOneOut, cross_val_predict
from sklearn.preprocessing import StandardScaler
from sklearn.svm import SVC

from holdfast.engine.loo import exact_loo
from holdfast.learners.svm import SVMLearner


def _reference_svc(learner: SVMLearner) -> SVC:
    """scikit-learn's SVC with the learner's frozen gamma, class weights and tolerance."""
    return SVC(
        kernel=learner.kernel,
        C=learner.C,
        gamma=learner.gamma_,
        degree=learner.degree,
        coef0=learner.coef0,
        tol=learner.tol,
        class_weight=learner.class_weight_,
    )


def _reference_loo(X, y, learner: SVMLearner) -> np.ndarray:
    """Full refit per row with scikit-learn's LeaveOneOut, same frozen gamma and tolerance."""
    est = _reference_svc(learner)
    return cross_val_predict(est, X, y, cv=LeaveOneOut(), n_jobs=1)


def _reference_flips(X, y, learner: SVMLearner, full_pred: np.ndarray, rows: np.ndarray) -> np.ndarray:
    """Flip count of each row in ``rows`` from an independent full refit without it (libsvm's own kernel)."""
    out = []
    for r in rows:
        keep = np.delete(np.arange(len(y)), r)
        est = _reference_svc(learner)
        pred = est.fit(X[keep], y[keep]).predict(X)
        changed = pred != full_pred
        changed[r] = False
        out.append(int(changed.sum()))
    return np.array(out)


@pytest.fixture(scope="module")
def cancer_subsample():
    X, y = load_breast_cancer(return_X_y=True)
    idx = np.random.default_rng(7).choice(len(y), size=300, replace=False)
    return StandardScaler().fit_transform(X[idx]), y[idx]


@pytest.mark.parametrize(
    ("kernel", "C", "gamma"),
    [("linear", 0.1, "scale"), ("rbf", 1.0, "scale"), ("rbf", 10.0, 0.05), ("poly", 1.0, "scale")],
)
def test_exact_loo_matches_leave_one_out_on_breast_cancer(cancer_subsample, kernel, C, gamma):
    X, y = cancer_subsample
    learner = SVMLearner(kernel=kernel, C=C, gamma=gamma, degree=2, coef0=1.0)
    model = learner.fit(X, y)
    result = exact_loo(model, learner.refit_problem())
    reference = _reference_loo(X, y, learner)
    assert int((result.loo_code != reference).sum()) == 0
    # Vapnik 1995 (The Nature of Statistical Learning Theory): LOO errors <= number of support vectors
    assert int((result.loo_code != y).sum()) <= int(model.support.sum())
    # non-support rows keep their training prediction
    assert np.array_equal(result.loo_code[~model.support], model.prediction[~model.support])
    # flip counts equal an independent full refit per support row (libsvm computing the kernel itself)
    sv = np.flatnonzero(model.support)
    assert np.array_equal(result.flip_count[sv], _reference_flips(X, y, learner, model.prediction, sv))
    assert np.all(result.flip_count[~model.support] == 0)


def test_breast_cancer_full_reference_counts():
    """Check values (computed with scikit-learn; /shared notes): all 569 rows, standardized, RBF gamma=1/30,
    C=1, tol=1e-8 -> 119 support rows, 62 bounded, 13 exact LOO errors."""
    X, y = load_breast_cancer(return_X_y=True)
    X = StandardScaler().fit_transform(X)
    learner = SVMLearner(kernel="rbf", C=1.0, gamma=1 / 30, tol=1e-8)
    model = learner.fit(X, y)
    result = exact_loo(model, learner.refit_problem())
    assert int(model.support.sum()) == 119
    assert int(model.bounded.sum()) == 62
    assert int((result.loo_code != y).sum()) == 13


def test_multiclass_iris_matches_leave_one_out():
    """Three classes (iris, Fisher 1936, bundled with scikit-learn): one-vs-one SVC, same reference."""
    X, y = load_iris(return_X_y=True)
    X = StandardScaler().fit_transform(X)
    learner = SVMLearner(kernel="rbf", C=1.0, gamma="scale")
    model = learner.fit(X, y)
    result = exact_loo(model, learner.refit_problem())
    assert int((result.loo_code != _reference_loo(X, y, learner)).sum()) == 0


def test_parallel_refits_match_serial(cancer_subsample):
    X, y = cancer_subsample
    learner = SVMLearner(kernel="rbf", C=1.0)
    model = learner.fit(X, y)
    serial = exact_loo(model, learner.refit_problem(), jobs=1)
    parallel = exact_loo(model, learner.refit_problem(), jobs=2)
    assert np.array_equal(serial.loo_code, parallel.loo_code)
    assert np.array_equal(serial.flip_count, parallel.flip_count)


@pytest.mark.parametrize("solver", ["own", "libsvm"])
def test_no_precompute_path_matches(cancer_subsample, solver):
    """Above the precompute limit no m x m kernel matrix is kept: same LOO predictions and flip counts.
    Our solver refits warm from libsvm's cold fit with the most used kernel rows stored; the libsvm engine
    solves each refit on a working set."""
    X, y = cancer_subsample
    a = SVMLearner(kernel="rbf", C=1.0)
    b = SVMLearner(kernel="rbf", C=1.0, precompute_max_rows=10, solver=solver)
    ma, mb = a.fit(X, y), b.fit(X, y)
    assert np.array_equal(ma.support, mb.support)
    assert a.refit_problem().K is not None and b.refit_problem().K is None
    if solver == "own":
        kernel = b.refit_problem().solver
        assert kernel is not None and 0 < kernel.KW.shape[0] < len(y)  # support rows and rows near the margin
    else:
        assert b.refit_problem().KW is not None  # working-set kernel rows
    ra = exact_loo(ma, a.refit_problem())
    rb = exact_loo(mb, b.refit_problem())
    assert np.array_equal(ra.loo_code, rb.loo_code)
    assert np.array_equal(ra.flip_count, rb.flip_count)
    assert np.allclose(ra.loo_margin, rb.loo_margin, atol=1e-6)


@pytest.mark.parametrize("slack", [0.5, -0.9])
def test_working_set_rows_above_the_limit_match_leave_one_out(cancer_subsample, monkeypatch, slack):
    """Above the precompute limit, refits on the working set's kernel rows equal scikit-learn's LeaveOneOut.

    With a negative slack the first working set is little more than the support rows, so refits must add
    rows that break their optimality condition; those rows' kernel values are computed on demand.
    """
    import holdfast.learners.svm as svm

    monkeypatch.setattr(svm, "WORKING_SET_SLACK", slack)
    X, y = cancer_subsample
    learner = SVMLearner(kernel="rbf", C=10.0, gamma=0.05, precompute_max_rows=10, solver="libsvm")
    model = learner.fit(X, y)
    problem = learner.refit_problem()
    assert problem.KW is not None and len(problem.working) < len(y)
    result = exact_loo(model, problem)
    assert int((result.loo_code != _reference_loo(X, y, learner)).sum()) == 0
    rows = np.flatnonzero(model.support)[::7]
    ref = _reference_flips(X, y, learner, model.prediction, rows)
    assert np.array_equal(result.flip_count[rows], ref)


def test_working_set_kernel_rows_equal_the_full_kernel(cancer_subsample):
    """Kernel blocks and decision values from the working-set rows (plus rows computed on demand) equal those
    of the full kernel matrix (scikit-learn's ``rbf_kernel``)."""
    from sklearn.metrics.pairwise import rbf_kernel

    X, y = cancer_subsample
    learner = SVMLearner(kernel="rbf", C=1.0, precompute_max_rows=10, solver="libsvm")
    learner.fit(X, y)
    problem = learner.refit_problem()
    K = rbf_kernel(X, gamma=learner.gamma_)
    outside = np.setdiff1d(np.arange(len(y)), problem.working)
    assert len(outside) > 0
    rows = np.concatenate([problem.working[:5], outside[:5]])
    cols = np.arange(0, len(y), 3)
    assert np.allclose(problem._kernel_block(rows, cols), K[np.ix_(rows, cols)])
    coef = np.linspace(-1.0, 1.0, len(rows))
    assert np.allclose(problem._decision_all(rows, coef, 0.25), coef @ K[rows] + 0.25)


@pytest.mark.parametrize("stored", [0, 25, 10_000])
def test_own_refits_above_the_limit_match_leave_one_out(cancer_subsample, monkeypatch, stored):
    """Above the precompute limit our warm refits read the stored kernel rows (``smo.Kernel.KW``) and compute
    the others from X: LOO predictions equal scikit-learn's LeaveOneOut (Pedregosa et al. 2011,
    "Scikit-learn: machine learning in Python", JMLR 12) and flip counts equal full SVC refits, with no
    row stored, a few, and all that qualify."""
    import holdfast.learners.svm as svm

    X, y = cancer_subsample
    monkeypatch.setattr(svm, "WORKING_ROWS_MAX_BYTES", stored * 8 * len(y))
    learner = SVMLearner(kernel="rbf", C=10.0, gamma=0.05, precompute_max_rows=10)
    model = learner.fit(X, y)
    kernel = learner.refit_problem().solver
    assert kernel is not None and kernel.KW.shape[0] == min(stored, kernel.KW.shape[0])
    assert (kernel.KW.shape[0] == stored) == (stored < 100)
    result = exact_loo(model, learner.refit_problem())
    assert int((result.loo_code != _reference_loo(X, y, learner)).sum()) == 0
    rows = np.flatnonzero(model.support)[::5]
    assert np.array_equal(result.flip_count[rows], _reference_flips(X, y, learner, model.prediction, rows))


def test_stored_kernel_rows_equal_the_full_kernel():
    """``smo.Kernel`` with some rows stored: blocks and sums of kernel rows equal scikit-learn's
    ``rbf_kernel`` whether a row is stored or computed from X."""
    from sklearn.metrics.pairwise import rbf_kernel

    from holdfast.learners import smo

    X = np.random.default_rng(3).normal(size=(40, 3))
    K = rbf_kernel(X, gamma=0.3)
    stored = np.array([2, 5, 11, 30])
    wpos = np.full(40, -1)
    wpos[stored] = np.arange(4)
    kernel = smo.Kernel(X=X, kind="rbf", gamma=0.3, KW=K[stored].copy(), wpos=wpos)
    rows = np.array([5, 7, 30, 0, 2])
    cols = np.array([1, 5, 39, 2])
    assert np.allclose(kernel.rows(rows, cols), K[np.ix_(rows, cols)])
    assert np.allclose(kernel.rows(stored[:2], cols), K[np.ix_(stored[:2], cols)])
    assert np.allclose(kernel.rows(rows, None), K[rows])
    coef = np.array([0.5, -1.0, 2.0, 0.25, -0.75])
    assert np.allclose(kernel.combo(rows, coef, None), coef @ K[rows])
    assert np.allclose(kernel.combo(rows, coef, cols), coef @ K[np.ix_(rows, cols)])


@pytest.mark.parametrize("limit", [12_000, 10])
def test_balanced_class_weights_match_leave_one_out(cancer_subsample, limit):
    """class_weight="balanced" scales each row's C by its class weight (frozen on the full training set):
    LOO predictions and flip counts equal scikit-learn's full refits with the same weights, with the kernel
    precomputed and above the precompute limit."""
    X, y = cancer_subsample
    keep = np.r_[np.flatnonzero(y == 0), np.flatnonzero(y == 1)[:60]]  # make the classes unequal
    X, y = X[keep], y[keep]
    learner = SVMLearner(kernel="rbf", C=1.0, class_weight="balanced", precompute_max_rows=limit)
    model = learner.fit(X, y)
    weights = learner.class_weight_
    assert weights is not None and weights[0] != weights[1]
    result = exact_loo(model, learner.refit_problem())
    assert int((result.loo_code != _reference_loo(X, y, learner)).sum()) == 0
    rows = np.flatnonzero(model.support)[::5]
    assert np.array_equal(result.flip_count[rows], _reference_flips(X, y, learner, model.prediction, rows))


@pytest.mark.parametrize("solver", ["own", "libsvm"])
def test_a_refit_whose_intercept_is_not_unique_matches_a_full_refit(solver):
    """A case hypothesis found (1-D, linear, C=10): without row 13 every support row of the full refit is
    bounded and a whole interval of intercepts is optimal; the working-set solve had found a free row at
    one end of it, the full refit takes its middle, and three near-zero predictions differed. The refit
    now notices the flat objective and solves the whole problem (the reference is scikit-learn's SVC).
    Checked on both refit engines: our warm-started solver and the libsvm working-set solve."""
    x = [
        -1.110751114509097, 0.10050799041473951, 1.7415482047117106, 0.11662117265537934,
        -0.9625645476589045, -1.5330523275390278, 1.0872205360460692, -0.9845946860616286,
        -0.15162230023492193, -0.3737911474506912, -1.0381384392388477, -0.2722458972916483,
        0.7599909318865058, 0.5857703419070982, -0.5678244975053383, 0.630968104630885,
        1.2007710811766377, -0.4585645462501292, 0.18289944774966643, 0.25999739672996797,
        -1.4457900746048642, -1.3495573998994792, 0.3376571711056589, 1.2374579205297518,
        -0.19896722199841754, 1.2644974352549854, 0.28473007648919096, 0.30051716501283854,
    ]  # fmt: skip
    X = np.array(x).reshape(-1, 1)
    y = np.array([0, 1, 1, 0, 0, 0, 1, 0, 0, 0, 0, 1, 1, 1, 0, 1, 1, 0, 0, 1, 0, 0, 0, 1, 0, 1, 1, 0])
    learner = SVMLearner(kernel="linear", C=10.0, solver=solver)
    model = learner.fit(X, y)
    problem = learner.refit_problem()
    if solver == "own":
        assert problem.alpha is not None  # the warm-start path is the one under test
    else:
        assert problem.working is not None  # the working-set path is the one under test
    result = exact_loo(model, problem)
    sv = np.flatnonzero(model.support)
    assert 13 in sv
    assert np.array_equal(result.flip_count[sv], _reference_flips(X, y, learner, model.prediction, sv))
    assert int((result.loo_code != _reference_loo(X, y, learner)).sum()) == 0


@st.composite
def small_problems(draw):
    n = draw(st.integers(min_value=8, max_value=40))
    p = draw(st.integers(min_value=1, max_value=4))
    seed = draw(st.integers(min_value=0, max_value=2**31 - 1))
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, p))
    noise = draw(st.floats(min_value=0.0, max_value=2.0))
    y = (X[:, 0] + noise * rng.normal(size=n) > 0).astype(np.int64)
    # the reference needs two classes in every leave-one-out fold: at least two rows of each class
    for c in (0, 1):
        short = 2 - int((y == c).sum())
        if short > 0:
            y[np.flatnonzero(y != c)[:short]] = c
    kernel = draw(st.sampled_from(["linear", "rbf"]))
    C = draw(st.sampled_from([0.1, 1.0, 10.0]))
    return X, y, kernel, C


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(small_problems())
def test_exact_loo_matches_leave_one_out_on_random_data(problem):
    X, y, kernel, C = problem
    learner = SVMLearner(kernel=kernel, C=C)
    model = learner.fit(X, y)
    result = exact_loo(model, learner.refit_problem())
    reference = _reference_loo(X, y, learner)
    assert int((result.loo_code != reference).sum()) == 0
    assert int((result.loo_code != y).sum()) <= int(model.support.sum())
    sv = np.flatnonzero(model.support)
    assert np.array_equal(result.flip_count[sv], _reference_flips(X, y, learner, model.prediction, sv))


@pytest.mark.parametrize("limit", [12_000, 10])
def test_fallback_decision_values_are_libsvms(cancer_subsample, limit):
    """A refit that falls back to libsvm sums its decision values from our kernel rows and asks libsvm
    (scikit-learn's ``SVC.decision_function``; Chang & Lin 2011, "LIBSVM", ACM TIST 2(3)) only near 0:
    the values equal libsvm's own to rounding, and the predictions are libsvm's."""
    X, y = cancer_subsample
    learner = SVMLearner(kernel="rbf", C=1.0, precompute_max_rows=limit)
    model = learner.fit(X, y)
    problem = learner.refit_problem()
    row = int(np.flatnonzero(model.support)[3])
    pred, dec = problem._fit_without(row)
    keep = np.delete(np.arange(len(y)), row)
    ref = _reference_svc(learner).fit(X[keep], y[keep])
    assert dec is not None
    assert np.allclose(dec, ref.decision_function(X), rtol=0, atol=1e-9)
    assert np.array_equal(pred, ref.predict(X))


@pytest.mark.parametrize("stored", [None, 20])
def test_multiclass_above_the_limit_matches_leave_one_out(monkeypatch, stored):
    """More than two classes with no m x m matrix: our one-vs-one machines with kernel rows from X (all of
    libsvm's support rows stored, or only 20 of them), refitting only the machines a row is in. Reference:
    LeaveOneOut and independent SVC refits on the wine data (Forina et al., UCI; bundled with
    scikit-learn), class weights on."""
    from sklearn.datasets import load_wine

    import holdfast.learners.svm as svm_mod

    if stored is not None:
        monkeypatch.setattr(svm_mod, "WORKING_ROWS_MAX_BYTES", 8 * 178 * stored)
    X, y = load_wine(return_X_y=True)
    X = StandardScaler().fit_transform(X)
    learner = SVMLearner(kernel="rbf", C=1.0, class_weight="balanced", precompute_max_rows=10)
    model = learner.fit(X, y)
    problem = learner.refit_problem()
    assert problem.K is None and problem.pairs is not None
    assert problem.solver.KW.shape[0] == (stored or problem.solver.KW.shape[0]) < len(y)
    result = exact_loo(model, problem)
    assert int((result.loo_code != _reference_loo(X, y, learner)).sum()) == 0
    sv = np.flatnonzero(model.support)
    assert np.array_equal(result.flip_count[sv], _reference_flips(X, y, learner, model.prediction, sv))
