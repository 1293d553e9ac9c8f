"""The score's second-family evidence: out-of-fold logistic log-odds of each row's label.

Reference: an independent loop over scikit-learn's ``StratifiedKFold`` fitting ``LogisticRegression`` on the
other folds (Pedregosa et al. 2011, "Scikit-learn: Machine Learning in Python", JMLR 12); for two classes the
log-odds of the label is the logistic decision value signed by the label (Hastie, Tibshirani & Friedman
2009, The Elements of Statistical Learning, 2nd ed., section 4.4). Data: breast cancer (Wolberg, Street &
Mangasarian 1995, UCI) and iris (Fisher 1936), both bundled with scikit-learn.
"""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.datasets import load_breast_cancer, load_iris
from sklearn.linear_model import LogisticRegression
from sklearn.model_selection import StratifiedKFold
from sklearn.preprocessing import StandardScaler

from holdfast.insight.consensus import linear_label_logit


def _by_hand(X: np.ndarray, y: np.ndarray) -> np.ndarray:
    out = np.empty(len(y))
    for fit, held in StratifiedKFold(n_splits=5).split(X, y):
        model = LogisticRegression(max_iter=2000).fit(X[fit], y[fit])
        if len(model.classes_) == 2:
            out[held] = np.where(y[held] == 1, 1.0, -1.0) * model.decision_function(X[held])
        else:
            logp = model.predict_log_proba(X[held])
            own = logp[np.arange(len(held)), y[held]]
            logp[np.arange(len(held)), y[held]] = -np.inf
            out[held] = own - logp.max(axis=1)
    return out


def test_two_classes_equal_the_signed_decision_value_of_the_other_folds_model():
    X, y = load_breast_cancer(return_X_y=True)
    X = StandardScaler().fit_transform(X)
    got = linear_label_logit(X, y)
    assert got == pytest.approx(_by_hand(X, y), abs=1e-6)
    # a flipped label turns its row's log-odds around (the model of the other folds does not see it)
    flipped = y.copy()
    flipped[[0, 100]] = 1 - flipped[[0, 100]]
    again = linear_label_logit(X, flipped)
    assert np.sign(again[[0, 100]]).tolist() == (-np.sign(got[[0, 100]])).tolist()


def test_three_classes_own_against_best_other():
    X, y = load_iris(return_X_y=True)
    X = StandardScaler().fit_transform(X)
    got = linear_label_logit(X, y)
    assert got == pytest.approx(_by_hand(X, y), abs=1e-6)
    assert (got > 0).mean() > 0.9  # iris is nearly separable: most rows are on their label's side


def test_a_class_with_one_row_gives_no_evidence():
    X, y = load_iris(return_X_y=True)
    keep = np.r_[0:50, 50:100, 100]  # a single virginica row: no fold split is possible
    assert np.isnan(linear_label_logit(X[keep], y[keep])).all()
