"""Decision values near 0 (``learner.ties``), and the linear kernel's own fit above the precompute limit.

Reference: scikit-learn's SVC (Pedregosa et al. 2011, "Scikit-learn: Machine Learning in Python", JMLR 12)
on the bundled breast-cancer set (Wolberg, Street & Mangasarian 1995, UCI). Under "optimum" a refit's
signs are those of the optimum of the problem without the row; the outside check is libsvm itself driven
to a far tighter tolerance (``tol=1e-10``, Chang & Lin 2011, "LIBSVM", ACM TIST 2(3), eq. 4.13: the
largest KKT violation), which converges to the same optimum.
"""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.datasets import load_breast_cancer
from sklearn.model_selection import LeaveOneOut, cross_val_predict
from sklearn.preprocessing import StandardScaler
from sklearn.svm import SVC

from holdfast.data.spec import SpecError, spec_from_text
from holdfast.engine.loo import exact_loo
from holdfast.engine.summary_model import ties_summary
from holdfast.learners import smo, smo_linear, svm
from holdfast.learners.svm import SVMLearner
from holdfast.output.terminal import ties_line


@pytest.fixture(scope="module")
def cancer():
    X, y = load_breast_cancer(return_X_y=True)
    idx = np.random.default_rng(11).choice(len(y), size=260, replace=False)
    return StandardScaler().fit_transform(X[idx]), y[idx]


def _tight_svc(learner: SVMLearner, tol: float) -> SVC:
    return SVC(
        kernel=learner.kernel, C=learner.C, gamma=learner.gamma_, tol=tol, class_weight=learner.class_weight_
    )


def _tight_refits(X, y, learner: SVMLearner, rows: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(LOO code, flip count, |LOO decision value|) of each row in ``rows`` from a cold libsvm refit at
    tol 1e-10 without it, against the full model's predictions under the same tolerance."""
    full = _tight_svc(learner, 1e-10).fit(X, y).predict(X)
    codes, flips, near = [], [], []
    for r in rows:
        keep = np.delete(np.arange(len(y)), r)
        clf = _tight_svc(learner, 1e-10).fit(X[keep], y[keep])
        pred = clf.predict(X)
        changed = pred != full
        changed[r] = False
        codes.append(int(pred[r]))
        flips.append(int(changed.sum()))
        near.append(float(np.abs(clf.decision_function(X[r : r + 1])[0])))
    return np.array(codes), np.array(flips), np.array(near)


@pytest.mark.parametrize(("kernel", "C"), [("rbf", 1.0), ("linear", 0.1)])
def test_optimum_rule_gives_the_converged_signs(cancer, kernel, C):
    X, y = cancer
    learner = SVMLearner(kernel=kernel, C=C, ties="optimum")
    model = learner.fit(X, y)
    assert learner.ties_ == "optimum" and learner.refit_problem().ties == "optimum"
    result = exact_loo(model, learner.refit_problem())
    sv = np.flatnonzero(model.support)
    codes, flips, _ = _tight_refits(X, y, learner, sv)
    assert np.array_equal(result.loo_code[sv], codes)
    assert np.array_equal(result.flip_count[sv], flips)
    # the tie allowance is reported with the counts of values inside it
    facts = ties_summary(model, result)
    assert facts["rule"] == "optimum" and facts["allowance"] > 0
    within = int(np.sum(np.abs(result.loo_margin[sv]) < facts["allowance"]))
    assert facts["loo_within"] == within


def test_auto_rule_follows_the_size(cancer, monkeypatch):
    X, y = cancer
    learner = SVMLearner(kernel="rbf")
    learner.fit(X, y)
    assert learner.ties_ == "libsvm"  # 260 rows: libsvm decides near-zero signs, as the reference does
    monkeypatch.setattr(svm, "TIES_LIBSVM_MAX_ROWS", 100)
    learner.fit(X, y)
    assert learner.ties_ == "optimum"
    assert learner.resolved_params()["ties_resolved"] == "optimum"


def test_linear_above_the_limit_fits_without_libsvm(cancer, monkeypatch):
    """Linear kernel above the precompute limit: our own fit (smo_linear.fit_staged, the subset start
    forced here), then LOO predictions equal scikit-learn's LeaveOneOut (ties by libsvm at this size)."""
    X, y = cancer
    monkeypatch.setattr(smo_linear, "STAGED_MIN_ROWS", 100)
    learner = SVMLearner(kernel="linear", C=0.1, precompute_max_rows=10)
    model = learner.fit(X, y)
    problem = learner.refit_problem()
    assert problem.K is None and smo_linear.is_linear(problem.solver)
    ref = _tight_svc(learner, 1e-10).fit(X, y)
    assert np.max(np.abs(model.extras["decision"] - ref.decision_function(X))) < 1e-6
    result = exact_loo(model, problem)
    reference = cross_val_predict(_tight_svc(learner, learner.tol), X, y, cv=LeaveOneOut())
    assert int((result.loo_code != reference).sum()) == 0


def test_staged_fit_reaches_the_cold_optimum(cancer, monkeypatch):
    X, y = cancer
    ypm = np.where(y == 1, 1.0, -1.0)
    C = np.where(y == 1, 0.5, 2.0)  # per-row box (class weights)
    kernel = smo.Kernel(X=np.ascontiguousarray(X), kind="linear")
    a0, _, r0 = smo_linear.fit_dual(kernel, ypm, C, 1e-9)
    monkeypatch.setattr(smo_linear, "STAGED_MIN_ROWS", 100)
    a1, _, r1 = smo_linear.fit_staged(kernel, ypm, C, 1e-9)
    assert abs(float(ypm @ a1)) < 1e-9 and np.all((a1 >= 0) & (a1 <= C))
    w0, w1 = X.T @ (a0 * ypm), X.T @ (a1 * ypm)
    assert np.max(np.abs((X @ w0 - r0) - (X @ w1 - r1))) < 1e-6


def test_ties_key_is_checked():
    text = '[data]\nlabel = "y"\n[learner]\nfamily = "svm"\nties = "sometimes"\n'
    with pytest.raises(
        SpecError, match=r"spec.toml: 'learner.ties' must be one of auto \| libsvm \| optimum"
    ):
        spec_from_text(text, "spec.toml")


def test_ties_line_says_what_the_signs_are():
    ties = {"rule": "optimum", "allowance": 3.2e-6, "training_within": 2, "loo_within": 5}
    line = ties_line(ties)
    assert "5 LOO and 2 training decision values within 3e-06 of 0" in line
    assert ties_line({**ties, "rule": "libsvm"}) == ""
    assert ties_line({**ties, "training_within": 0, "loo_within": 0}) == ""
