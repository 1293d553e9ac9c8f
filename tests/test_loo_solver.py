"""Exact LOO with our own solver (warm-started refits) checked against scikit-learn's full refits.

Reference: scikit-learn's ``LeaveOneOut`` with ``cross_val_predict`` (Pedregosa et al. 2011,
"Scikit-learn: Machine Learning in Python", JMLR 12): one cold libsvm fit per row with the learner's
frozen gamma, class weights and tolerance; flip counts from independent full SVC refits. Data: the sets
bundled with scikit-learn (iris, Fisher 1936; wine, Forina et al., UCI; digits, Alpaydin & Kaynak 1998,
UCI; breast cancer, Wolberg, Street & Mangasarian 1995, UCI) and random small sets drawn by hypothesis.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from sklearn.datasets import load_breast_cancer, load_digits, load_iris, load_wine
from sklearn.model_selection import LeaveOneOut, cross_val_predict
from sklearn.preprocessing import StandardScaler
from sklearn.svm import SVC

from holdfast.engine.loo import exact_loo
from holdfast.learners import smo, warm
from holdfast.learners import svm as svm_module
from holdfast.learners.base import ESSENTIAL_CHANGE
from holdfast.learners.svm import SVMLearner


def _svc(learner: SVMLearner) -> SVC:
    return SVC(
        kernel=learner.kernel,
        C=learner.C,
        gamma=learner.gamma_,
        degree=learner.degree,
        coef0=learner.coef0,
        tol=learner.tol,
        class_weight=learner.class_weight_,
    )


def _flips(X, y, learner, full_pred, rows) -> np.ndarray:
    out = []
    for r in rows:
        keep = np.delete(np.arange(len(y)), r)
        changed = _svc(learner).fit(X[keep], y[keep]).predict(X) != full_pred
        changed[r] = False
        out.append(int(changed.sum()))
    return np.array(out)


def _load(name: str) -> tuple[np.ndarray, np.ndarray]:
    loader = {"iris": load_iris, "wine": load_wine, "digits": load_digits, "cancer": load_breast_cancer}
    X, y = loader[name](return_X_y=True)
    if name in ("digits", "cancer"):  # a subsample keeps the reference's 1 fit per row affordable
        idx = np.random.default_rng(3).choice(len(y), size=300, replace=False)
        X, y = X[idx], y[idx]
    return StandardScaler().fit_transform(X), y.astype(np.int64)


@pytest.mark.parametrize("name", ["iris", "wine", "digits", "cancer"])
@pytest.mark.parametrize(("kernel", "C"), [("rbf", 1.0), ("linear", 0.1), ("poly", 1.0)])
@pytest.mark.parametrize("class_weight", ["none", "balanced"])
def test_own_solver_loo_matches_leave_one_out(name, kernel, C, class_weight):
    X, y = _load(name)
    learner = SVMLearner(kernel=kernel, C=C, degree=2, coef0=1.0, class_weight=class_weight)
    model = learner.fit(X, y)
    problem = learner.refit_problem()
    # the paths under test: warm refits of one machine, or of the one-vs-one machines a row is in
    assert problem.alpha is not None if y.max() == 1 else problem.pairs is not None
    full = _svc(learner).fit(X, y)
    assert np.array_equal(full.predict(X), model.prediction)
    result = exact_loo(model, problem, jobs=2)
    reference = cross_val_predict(_svc(learner), X, y, cv=LeaveOneOut())
    assert int((result.loo_code != reference).sum()) == 0
    # Vapnik 1995 (The Nature of Statistical Learning Theory): LOO errors <= number of support vectors
    assert int((result.loo_code != y).sum()) <= int(model.support.sum())
    rows = np.flatnonzero(model.support)[::6]
    assert np.array_equal(result.flip_count[rows], _flips(X, y, learner, model.prediction, rows))


@st.composite
def small_problems(draw):
    """1-3 features, duplicated rows (same and opposite labels), tied coordinates, C from 0.01 to 100."""
    n = draw(st.integers(min_value=8, max_value=36))
    p = draw(st.integers(min_value=1, max_value=3))
    seed = draw(st.integers(min_value=0, max_value=2**31 - 1))
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, p))
    if draw(st.booleans()):  # ties: coordinates on a coarse grid
        X = np.round(X * 2) / 2
    noise = draw(st.floats(min_value=0.0, max_value=2.0))
    y = (X[:, 0] + noise * rng.normal(size=n) > 0).astype(np.int64)
    dups = draw(st.integers(min_value=0, max_value=4))
    if dups:
        pick = rng.choice(n, size=dups, replace=True)
        X = np.vstack([X, X[pick]])
        flip = draw(st.booleans())
        y = np.concatenate([y, 1 - y[pick] if flip else y[pick]])
    for c in (0, 1):  # every LOO fold of the reference needs both classes
        short = 2 - int((y == c).sum())
        if short > 0:
            y[np.flatnonzero(y != c)[:short]] = c
    kernel = draw(st.sampled_from(["linear", "rbf", "poly"]))
    C = draw(st.sampled_from([0.01, 0.1, 1.0, 10.0, 100.0]))
    weight = draw(st.sampled_from(["none", "balanced"]))
    return X, y, kernel, C, weight


@st.composite
def small_three_class_problems(draw):
    """As :func:`small_problems` with three classes: bands of the first coordinate plus noise, so that
    the one-vs-one machines share rows at ties and near-flat intercepts (the kind of case where a reused
    machine or a row off the support set decided a LOO vote)."""
    n = draw(st.integers(min_value=9, max_value=30))
    p = draw(st.integers(min_value=1, max_value=2))
    seed = draw(st.integers(min_value=0, max_value=2**31 - 1))
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, p)) * 1.5
    if draw(st.booleans()):
        X = np.round(X * 2) / 2
    noise = draw(st.floats(min_value=0.0, max_value=1.5))
    y = np.clip(np.round(X[:, 0] + noise * rng.normal(size=n)).astype(np.int64) + 1, 0, 2)
    if draw(st.booleans()):  # a class far along the line
        y[X[:, 0] > 1.0] = 2
        X[y == 2, 0] += draw(st.sampled_from([1.0, 3.0, 6.0]))
    for c in (0, 1, 2):  # every LOO fold of the reference needs every class: take rows of the largest
        while int((y == c).sum()) < 2:
            y[np.flatnonzero(y == np.argmax(np.bincount(y, minlength=3)))[0]] = c
    kernel = draw(st.sampled_from(["linear", "rbf", "poly"]))
    C = draw(st.sampled_from([0.01, 0.1, 1.0, 10.0, 100.0]))
    weight = draw(st.sampled_from(["none", "balanced"]))
    return X, y, kernel, C, weight


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(small_problems())
def test_warm_refits_match_leave_one_out_on_random_data(problem):
    X, y, kernel, C, weight = problem
    learner = SVMLearner(kernel=kernel, C=C, degree=2, coef0=1.0, class_weight=weight)
    model = learner.fit(X, y)
    # (a full fit with a training decision value at a tie hands the whole model to libsvm; either way
    # the LOO must equal the reference)
    result = exact_loo(model, learner.refit_problem())
    reference = cross_val_predict(_svc(learner), X, y, cv=LeaveOneOut())
    assert int((result.loo_code != reference).sum()) == 0
    sv = np.flatnonzero(model.support)
    assert np.array_equal(result.flip_count[sv], _flips(X, y, learner, model.prediction, sv))


@settings(max_examples=80, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(small_three_class_problems())
def test_pair_refits_match_leave_one_out_on_random_three_class_data(problem):
    """Three classes: the refits of the one-vs-one machines a row is in (the others reused) against
    scikit-learn's LeaveOneOut (libsvm's one-vs-one vote), and flip counts against full refits."""
    X, y, kernel, C, weight = problem
    assert np.all(np.bincount(y, minlength=3) >= 2)
    learner = SVMLearner(kernel=kernel, C=C, degree=2, coef0=1.0, class_weight=weight)
    model = learner.fit(X, y)
    result = exact_loo(model, learner.refit_problem())
    reference = cross_val_predict(_svc(learner), X, y, cv=LeaveOneOut())
    assert int((result.loo_code != reference).sum()) == 0
    sv = np.flatnonzero(model.support)
    assert np.array_equal(result.flip_count[sv], _flips(X, y, learner, model.prediction, sv))


def test_a_row_off_the_support_set_that_frees_the_intercept_is_refitted():
    """Found by the property test above: 1-D grid data, linear kernel, C = 0.01. The full model has w = 0
    and a unique intercept b = -1; row 2 (alpha = 0) sits on the margin, and without it the intercept is
    free in [-1, 1], so libsvm takes the middle and f(x_2) = 0 to rounding: LeaveOneOut predicts class 1
    for it although it is not a support row. ``svm_refit.intercept_movers`` must name it for a refit.
    Reference: scikit-learn's LeaveOneOut with SVC."""
    X = np.array([0.0, -0.0, 0.5, 0.0, -0.5, 0.5, 1.5, 1.0, 0.0, 1.5, 0.0]).reshape(-1, 1)
    y = np.array([0, 0, 0, 1, 0, 1, 0, 0, 1, 1, 1])
    learner = SVMLearner(kernel="linear", C=0.01)
    model = learner.fit(X, y)
    assert not model.support[2] and 2 in model.loo_candidates()
    result = exact_loo(model, learner.refit_problem())
    reference = cross_val_predict(_svc(learner), X, y, cv=LeaveOneOut())
    assert reference[2] != model.prediction[2]  # the case itself: a row off the support set that flips
    assert np.array_equal(result.loo_code, reference)


@pytest.mark.parametrize(("far", "row_is_support"), [([3.0, 3.5], False), ([5.0, 5.5, 6.0], True)])
def test_a_row_that_frees_a_pair_machines_intercept_is_refitted_with_that_machine(
    far: list[float], row_is_support: bool
) -> None:
    """The two-class case above as the machine of classes 0 and 1, with a third class further along the
    line (linear kernel, C = 0.01). Row 2 has alpha = 0 in that machine and sits at the end of its optimal
    intercept interval: without it libsvm's intercept of that machine moves and its vote at row 2 goes to
    class 1, which decides row 2's LOO prediction. With the third class at 3.0 and 3.5 row 2 is off every
    machine's support set (it must be refitted at all); at 5.0-6.0 it is a support row of the machine of
    classes 0 and 2 (its refit must re-solve the machine of 0 and 1, not reuse it).
    Reference: scikit-learn's LeaveOneOut with SVC (one-vs-one, libsvm's vote)."""
    X = np.array([0.0, -0.0, 0.5, 0.0, -0.5, 0.5, 1.5, 1.0, 0.0, 1.5, 0.0, *far]).reshape(-1, 1)
    y = np.array([0, 0, 0, 1, 0, 1, 0, 0, 1, 1, 1] + [2] * len(far))
    learner = SVMLearner(kernel="linear", C=0.01)
    model = learner.fit(X, y)
    assert bool(model.support[2]) is row_is_support and 2 in model.loo_candidates()
    result = exact_loo(model, learner.refit_problem())
    reference = cross_val_predict(_svc(learner), X, y, cv=LeaveOneOut())
    assert reference[2] == 1 and model.prediction[2] == 0  # the case itself
    assert np.array_equal(result.loo_code, reference)
    sv = np.flatnonzero(model.support)
    assert np.array_equal(result.flip_count[sv], _flips(X, y, learner, model.prediction, sv))


def test_a_tie_above_the_precompute_limit_is_fitted_by_libsvm_from_x():
    """Above the precompute limit (here lowered to 0 rows) a linear two-class fit works from X; a training
    decision value at a tie hands the full model to libsvm computing the kernel from X, whose parameters
    already carried the kernel (this raised "got multiple values for keyword argument 'kernel'"; found by a
    random search over small data). Reference: scikit-learn's LeaveOneOut with SVC."""
    X = np.array([0.0, -0.0, 0.5, 0.0, -0.5, 0.5, 1.5, 1.0, -0.5, -1.5, -0.5]).reshape(-1, 1)
    y = np.array([1, 0, 1, 0, 0, 1, 1, 1, 0, 0, 0])
    learner = SVMLearner(kernel="linear", C=0.1, precompute_max_rows=0)
    model = learner.fit(X, y)
    assert learner.svc_on_X_  # the tie path
    result = exact_loo(model, learner.refit_problem())
    reference = cross_val_predict(_svc(learner), X, y, cv=LeaveOneOut())
    assert np.array_equal(result.loo_code, reference)


def test_a_pair_machine_with_a_flat_intercept_is_libsvms():
    """Found by the three-class property test: 1-D data, linear kernel, C = 100. Every alpha of the machine
    of classes 1 and 2 is at its bound, so its optimal intercept is an interval, and libsvm's choice in it
    depends on its final state: ours predicted row 9 as another class than libsvm's full fit, so every
    refit (by libsvm) flipped row 9 against our full prediction, and 8 flip counts were one short. Such a
    full model is now libsvm's own, and refits that reuse the machine go to libsvm too.
    Reference: scikit-learn's SVC (full fit and refits without each row) and its LeaveOneOut."""
    x = [-0.43661687, -0.27629385, 2.22521136, -0.56526116, 1.60328929, 2.36951669, 1.03380098, 0.09909319]
    x += [-0.42171593, -0.35299293, -0.48897371, -0.22225144, 0.06695121, -0.63397532, 0.21807214]
    x += [-1.20334629, -1.43325274, 2.07320365, -0.79432487, -0.3267105, -1.71412207, -0.62954417]
    X = np.array([*x, 1.05334712, 0.98012332, -0.48927857]).reshape(-1, 1)
    y = np.array([1, 1, 2, 1, 2, 2, 2, 2, 1, 2, 2, 2, 0, 0, 2, 0, 0, 2, 1, 0, 0, 1, 2, 2, 0])
    learner = SVMLearner(kernel="linear", C=100.0)
    model = learner.fit(X, y)
    assert np.array_equal(model.prediction, _svc(learner).fit(X, y).predict(X))
    result = exact_loo(model, learner.refit_problem())
    assert np.array_equal(result.loo_code, cross_val_predict(_svc(learner), X, y, cv=LeaveOneOut()))
    sv = np.flatnonzero(model.support)
    assert np.array_equal(result.flip_count[sv], _flips(X, y, learner, model.prediction, sv))


def test_a_tie_in_a_reused_pair_machine_goes_to_libsvm():
    """Three classes on a 1-D grid, linear kernel, C = 0.01: the machine of classes 0 and 2 has w = 0 and
    b = 0, so its decision value at row 17 (class 1, not in that machine) is an exact tie. A refit without
    row 17 reuses that machine; libsvm's vote at 0 goes to the second class (class 2), which decides row
    17's LOO prediction. The reused machine's tie must send the refit to libsvm too.
    Reference: scikit-learn's LeaveOneOut with SVC (one-vs-one, libsvm's vote)."""
    x = [1.0, 0.5, 0.5, 1.5, -1.0, -0.5, -1.5, -0.0, 1.0, -0.0, 0.5, -2.0, 0.0, -1.0, 2.0, 1.0, 1.0]
    X = np.array([*x, -0.0, 0.5]).reshape(-1, 1)
    y = np.array([2, 1, 1, 2, 0, 0, 0, 2, 0, 2, 1, 0, 0, 0, 2, 2, 1, 1, 2])
    learner = SVMLearner(kernel="linear", C=0.01)
    model = learner.fit(X, y)
    result = exact_loo(model, learner.refit_problem())
    reference = cross_val_predict(_svc(learner), X, y, cv=LeaveOneOut())
    assert reference[17] == 2
    assert np.array_equal(result.loo_code, reference)
    sv = np.flatnonzero(model.support)
    assert np.array_equal(result.flip_count[sv], _flips(X, y, learner, model.prediction, sv))


def test_near_flat_intercepts_in_one_dimension():
    """Near-flat intercepts (the kind of case CI found earlier, see test_loo_reference): 1-D linear data
    with two clusters far apart and C large, where without a bounded row the optimal intercept can be a
    whole interval; many seeds, every refit compared with a full SVC refit."""
    for seed in range(12):
        rng = np.random.default_rng(seed)
        X = np.concatenate([rng.normal(-1.0, 0.4, 14), rng.normal(1.0, 0.4, 14)]).reshape(-1, 1)
        y = np.array([0] * 14 + [1] * 14)
        y[rng.choice(28, size=3, replace=False)] ^= 1
        for C in (10.0, 100.0):
            learner = SVMLearner(kernel="linear", C=C)
            model = learner.fit(X, y)
            result = exact_loo(model, learner.refit_problem())
            reference = cross_val_predict(_svc(learner), X, y, cv=LeaveOneOut())
            assert int((result.loo_code != reference).sum()) == 0, (seed, C)
            sv = np.flatnonzero(model.support)
            assert np.array_equal(result.flip_count[sv], _flips(X, y, learner, model.prediction, sv))


@pytest.mark.parametrize("name", ["cancer", "wine"])
def test_linear_kernel_above_the_precompute_limit(name):
    """Linear kernel above the precompute limit: our solver computes kernel rows from X on demand (no m x m
    matrix, no kernel matrix at all); LOO predictions and flip counts equal scikit-learn's full refits,
    held-out decision values equal SVC's on the full training set."""
    X, y = _load(name)
    learner = SVMLearner(kernel="linear", C=0.1, precompute_max_rows=10)
    model = learner.fit(X, y)
    problem = learner.refit_problem()
    assert problem.K is None and problem.solver is not None and not problem.solver.precomputed
    full = _svc(learner).fit(X, y)
    assert np.array_equal(full.predict(X), model.prediction)
    new = X[:40] + 0.1
    assert np.allclose(learner.decision(new), full.decision_function(new), atol=1e-4)
    result = exact_loo(model, problem)
    reference = cross_val_predict(_svc(learner), X, y, cv=LeaveOneOut())
    assert int((result.loo_code != reference).sum()) == 0
    rows = np.flatnonzero(model.support)[::5]
    assert np.array_equal(result.flip_count[rows], _flips(X, y, learner, model.prediction, rows))


@pytest.mark.parametrize("precompute", [True, False])
@pytest.mark.parametrize("ties", ["libsvm", "optimum"])
def test_certified_refits_tell_what_fully_updated_ones_tell(precompute, ties, monkeypatch):
    """Refits that leave rows far from the margin with the full model's gradient under a certificate
    (``smo.certify``) give the same LOO prediction, flipped rows, LOO margin and essential flag as the same
    refits with every row updated, on breast cancer (all 569 rows, RBF), with the kernel matrix and with
    kernel rows from X; and the certificate is actually given (for a fifth of the refits here). The LOO
    predictions also equal scikit-learn's LeaveOneOut (Pedregosa et al. 2011)."""
    X, y = load_breast_cancer(return_X_y=True)
    X = StandardScaler().fit_transform(X)
    learner = SVMLearner(kernel="rbf", C=1.0, ties=ties, precompute_max_rows=10_000 if precompute else 10)
    model = learner.fit(X, y)
    problem = learner.refit_problem()
    assert problem.alpha is not None and (problem.K is None) != precompute
    given = []

    def counted(*args):
        radius = smo.certify(*args)
        given.append(radius >= 0)
        return radius

    monkeypatch.setattr(warm, "certify", counted)
    rows = np.flatnonzero(model.support)
    assert not problem.certify  # off by default below svm.CERTIFY_MIN_ROWS; on here to test it
    problem.certify = True
    with_cert = [problem.refit_without(int(r)) for r in rows]
    if ties == "libsvm" and precompute:  # and against the reference itself
        reference = cross_val_predict(_svc(learner), X, y, cv=LeaveOneOut())
        assert np.array_equal(np.array([o.loo_code for o in with_cert]), reference[rows])
    problem.certify = False
    without = [problem.refit_without(int(r)) for r in rows]
    assert sum(given) >= 10  # 22 of 119 refits here; most at 20,000 rows (bench_solver_scale.py)
    for a, b in zip(with_cert, without, strict=True):
        assert a.loo_code == b.loo_code and np.array_equal(a.flipped, b.flipped)
        assert abs(a.loo_margin - b.loo_margin) < 1e-9
        assert (a.max_change > ESSENTIAL_CHANGE) == (b.max_change > ESSENTIAL_CHANGE)
        assert a.max_change <= b.max_change + 1e-12  # taken over fewer rows, never more


@pytest.mark.parametrize("kernel", ["rbf", "poly", "linear"])
def test_seed_decision_equals_svc_decision_function(kernel):
    """The decision values the fit above the precompute limit computes from kernel blocks (to choose the
    kernel rows it stores) equal scikit-learn's ``SVC.decision_function`` on breast cancer."""
    X, y = load_breast_cancer(return_X_y=True)
    X = StandardScaler().fit_transform(X)
    learner = SVMLearner(kernel=kernel, C=1.0, degree=2, coef0=1.0)
    learner.fit(X, y)
    seed = _svc(learner).fit(X, y)
    assert np.allclose(learner._seed_decision(X, seed), seed.decision_function(X), rtol=0, atol=1e-9)


@pytest.mark.parametrize("name", ["cancer", "digits"])
@pytest.mark.parametrize("kernel", ["rbf", "poly"])
@pytest.mark.parametrize("precompute", [True, False])
def test_large_problem_paths_on_small_data_match_leave_one_out(name, kernel, precompute, monkeypatch):
    """The paths the learner takes from ``CERTIFY_MIN_ROWS`` rows on (the certificate, the dense
    ``K(F0, near)`` block), forced on for small data: LOO predictions equal scikit-learn's LeaveOneOut
    (Pedregosa et al. 2011), flip counts equal independent full SVC refits."""
    monkeypatch.setattr(svm_module, "CERTIFY_MIN_ROWS", 0)
    X, y = _load(name)
    if name == "digits":  # two classes: 3 against the rest keeps the refits on one machine
        y = (y == 3).astype(np.int64)
    learner = SVMLearner(
        kernel=kernel, C=1.0, degree=2, coef0=1.0, precompute_max_rows=10_000 if precompute else 10
    )
    model = learner.fit(X, y)
    problem = learner.refit_problem()
    assert problem.certify and problem.face is not None and problem.face.KN is not None
    if not precompute:  # the solver's own order of the rows: near-margin rows first
        assert problem.order is not None and not np.array_equal(problem.order, np.arange(len(y)))
        assert np.array_equal(problem.order[problem.rank], np.arange(len(y)))
    result = exact_loo(model, problem, jobs=2)
    reference = cross_val_predict(_svc(learner), X, y, cv=LeaveOneOut())
    assert int((result.loo_code != reference).sum()) == 0
    rows = np.flatnonzero(model.support)[::6]
    assert np.array_equal(result.flip_count[rows], _flips(X, y, learner, model.prediction, rows))


@pytest.mark.parametrize(
    ("kernel", "coef0", "certified"), [("rbf", 0.0, True), ("poly", 1.0, True), ("poly", -1.0, False)]
)
def test_no_certificate_for_a_kernel_that_may_be_indefinite(kernel, coef0, certified, monkeypatch):
    """The certificate's bound needs a positive semi-definite kernel (an inner product in a feature space):
    RBF and the polynomial kernel with coef0 >= 0 get it; with coef0 < 0 the polynomial kernel can be
    indefinite (its Gram matrix here has a negative eigenvalue) and the refits update every row."""
    monkeypatch.setattr(svm_module, "CERTIFY_MIN_ROWS", 0)
    X, y = _load("cancer")
    learner = SVMLearner(kernel=kernel, C=1.0, degree=3, coef0=coef0)
    learner.fit(X, y)
    assert learner.refit_problem().certify is certified
    if not certified:
        K = learner.refit_problem().K
        assert K is not None and float(np.linalg.eigvalsh(K).min()) < -1e-6


def test_libsvm_fallback_decision_in_training_order():
    """Above the precompute limit the solver keeps its rows in its own order; the decision values of a
    fallback libsvm refit, summed from the solver's kernel rows, come back in training order: equal to
    scikit-learn's ``SVC.decision_function`` (breast cancer, RBF, 40 rows left out)."""
    X, y = load_breast_cancer(return_X_y=True)
    X = StandardScaler().fit_transform(X)
    learner = SVMLearner(kernel="rbf", C=1.0, precompute_max_rows=10)
    learner.fit(X, y)
    problem = learner.refit_problem()
    assert problem.order is not None
    keep = np.setdiff1d(np.arange(len(y)), np.arange(0, len(y), 14))
    clf = _svc(learner).fit(X[keep], y[keep])
    assert np.allclose(problem._libsvm_decision(clf, keep), clf.decision_function(X), rtol=0, atol=1e-9)
