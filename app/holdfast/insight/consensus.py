"""Evidence from a second model family for the suspicion score: out-of-fold logistic regression.

A row that learners of different families reject is a stronger suspect than one only the SVM rejects: the
consensus filter of Brodley & Friedl 1999, "Identifying mislabeled training data", Journal of Artificial
Intelligence Research 11. Here the second family is L2-regularized logistic regression (scikit-learn's
``LogisticRegression`` defaults, C=1, on the prepared matrix), and its verdict enters the score as a small
weighted term rather than a vote (``holdfast.insight.score``). Each row's value comes from the model fitted
on the other folds (out of fold: the row never votes on itself), with stratified, unshuffled folds, so the
result is deterministic.

The value per row is the log-odds of its given label against the most likely other class,
``log p(y_i | x_i) - max_{c != y_i} log p(c | x_i)``: for two classes, the logistic decision value signed by
the label. Negative: the linear model prefers another class.
"""

from __future__ import annotations

import warnings

import numpy as np

#: folds of the out-of-fold fit (fewer when a class has fewer training rows)
N_FOLDS = 5


def linear_label_logit(X: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Out-of-fold logistic-regression log-odds of each row's label against the best other class.

    Parameters
    ----------
    X : array of shape (m, p)
        Prepared training matrix.
    y : array of shape (m,)
        Class codes 0..K-1.

    Returns
    -------
    ndarray of shape (m,); all NaN when some class has fewer than 2 rows (no fold split is possible).
    """
    from sklearn.exceptions import ConvergenceWarning
    from sklearn.linear_model import LogisticRegression
    from sklearn.model_selection import StratifiedKFold, cross_val_predict

    y = np.asarray(y)
    classes, counts = np.unique(y, return_counts=True)
    folds = min(N_FOLDS, int(counts.min())) if len(classes) > 1 else 0
    if folds < 2:
        return np.full(len(y), np.nan)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        z = cross_val_predict(
            LogisticRegression(max_iter=2000),
            X,
            y,
            cv=StratifiedKFold(n_splits=folds),
            method="decision_function",
        )
    if z.ndim == 1:  # two classes: z is the log-odds of the second class
        return np.where(y == classes[1], z, -z)
    # more classes (multinomial): log p_c = z_c - logsumexp(z), so the log-odds is z_own - max other z
    own = np.searchsorted(classes, y)
    rows = np.arange(len(y))
    mine = z[rows, own].copy()
    z[rows, own] = -np.inf
    return mine - z.max(axis=1)
