"""Kernel values and the frozen kernel parameters shared by the SVM learner and its refits."""

from __future__ import annotations

import numpy as np
from sklearn.metrics.pairwise import polynomial_kernel, rbf_kernel


def resolve_gamma(gamma: str | float, X: np.ndarray) -> float:
    """Turn ``"scale"`` (1 / (p * Var(X))) or ``"auto"`` (1 / p) into a number, as scikit-learn's SVC does."""
    p = X.shape[1]
    if gamma == "scale":
        var = float(X.var())
        return 1.0 / (p * var) if var > 0 else 1.0
    if gamma == "auto":
        return 1.0 / p
    return float(gamma)


def kernel_matrix(
    A: np.ndarray, B: np.ndarray, kernel: str, gamma: float, degree: int, coef0: float
) -> np.ndarray:
    """Kernel values K(a, b): linear <a,b>; rbf exp(-gamma |a-b|^2); poly (gamma <a,b> + coef0)^degree."""
    if kernel == "linear":
        return A @ B.T
    if kernel == "rbf":
        return rbf_kernel(A, B, gamma=gamma)
    return polynomial_kernel(A, B, degree=degree, gamma=gamma, coef0=coef0)


def submatrix(K: np.ndarray, keep: np.ndarray) -> np.ndarray:
    """``K[keep][:, keep]``; when ``keep`` is all rows but one, built from four block copies (memcpy speed:
    ~10x faster than fancy indexing at a few thousand rows)."""
    m = K.shape[0]
    if len(keep) == m - 1:
        missing = np.setdiff1d(np.arange(m), keep, assume_unique=True)
        if len(missing) == 1 and np.all(np.diff(keep) > 0):
            i = int(missing[0])
            out = np.empty((m - 1, m - 1), dtype=K.dtype)
            out[:i, :i] = K[:i, :i]
            out[:i, i:] = K[:i, i + 1 :]
            out[i:, :i] = K[i + 1 :, :i]
            out[i:, i:] = K[i + 1 :, i + 1 :]
            return out
    return K[np.ix_(keep, keep)]


def row_margin(decision: np.ndarray | float, label: int) -> float:
    """y * f(x) of one row: the two-class decision value signed by the label (+1 for class code 1), or
    for more classes its own class's decision value minus the largest other one (as in ``fit``)."""
    d = np.asarray(decision, dtype=np.float64)
    if d.ndim == 0:
        return float(d) if label == 1 else -float(d)
    return float(d[label] - np.max(np.delete(d, label)))
