"""Newton steps from the full solution's face inverse (holdfast.learners.face) against a direct solve.

The step on a face solves the bordered KKT system ``[[Q_FF, y_F], [y_F', 0]] [d; b] = [-G_F; 0]``
(Nocedal & Wright 2006, *Numerical Optimization*, section 16.1). ``FaceInverse.step`` gets it from the
inverse over another free set by block elimination (Golub & Van Loan 2013, *Matrix Computations*,
section 3.2); here it is checked against numpy's direct solve of the bordered system on breast cancer
(Wolberg, Street & Mangasarian 1995, UCI; bundled with scikit-learn), for free sets that lost rows, gained
rows, and both.
"""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.datasets import load_breast_cancer
from sklearn.preprocessing import StandardScaler

from holdfast.learners import face as face_module
from holdfast.learners import smo
from holdfast.learners.face import FaceInverse
from holdfast.learners.kernels import kernel_matrix, resolve_gamma


@pytest.fixture(scope="module")
def solved() -> tuple[smo.Kernel, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    X, y = load_breast_cancer(return_X_y=True)
    X = StandardScaler().fit_transform(X)
    K = kernel_matrix(X, X, "rbf", resolve_gamma("scale", X), 3, 0.0)
    ypm = np.where(y == 1, 1.0, -1.0)
    C = np.full(len(y), 1.0)
    kernel = smo.Kernel(K=K)
    alpha, G, _, _ = smo.fit_dual(kernel, np.arange(len(y)), ypm, C, 1e-9)
    return kernel, ypm, C, alpha, G


def _direct(K: np.ndarray, y: np.ndarray, F: np.ndarray, G: np.ndarray) -> np.ndarray:
    n = len(F)
    A = np.zeros((n + 1, n + 1))
    A[:n, :n] = K[np.ix_(F, F)] * np.outer(y[F], y[F])
    A[:n, n] = A[n, :n] = y[F]
    return np.linalg.solve(A, np.concatenate([-G[F], [0.0]]))[:n]


@pytest.mark.parametrize("left, joined", [(0, 0), (5, 0), (0, 7), (6, 9)])
def test_face_step_equals_the_direct_solve(solved, left, joined):
    kernel, y, C, alpha, G = solved
    face = FaceInverse.build(kernel, np.arange(len(y)), y, alpha, C)
    assert face is not None and len(face.rows) > 20
    rng = np.random.default_rng(left * 10 + joined)
    others = np.setdiff1d(np.arange(len(y)), face.rows)
    F = np.sort(
        np.concatenate(
            [
                rng.choice(face.rows, size=len(face.rows) - left, replace=False),
                rng.choice(others, size=joined),
            ]
        )
    )
    F = np.unique(F)
    G_test = G + rng.normal(scale=1e-2, size=len(G))  # a gradient away from the optimum
    d = face.step(kernel, np.arange(len(y)), y, F, G_test)
    assert d is not None
    expected = _direct(kernel.K, y, F, G_test)
    assert np.allclose(d, expected, rtol=1e-6, atol=1e-8 * np.abs(expected).max())
    assert abs(float(y[F] @ d)) < 1e-9 * np.abs(d).sum()  # the step keeps y'a = 0


def test_no_face_inverse_for_a_singular_face():
    """Linear kernel in one dimension: Q over more than one free row has rank 1, so no inverse is kept
    (the step is then solved directly)."""
    x = np.linspace(-1, 1, 40)[:, None]
    y = np.where(np.sin(7 * x[:, 0]) > 0, 1.0, -1.0)
    kernel = smo.Kernel(K=x @ x.T)
    alpha = np.zeros(40)
    alpha[[3, 5, 8, 11]] = 0.5  # four free rows, not necessarily optimal: the inverse test is about Q
    assert FaceInverse.build(kernel, np.arange(40), y, alpha, np.ones(40)) is None


def test_face_combo_equals_the_kernel_sum(solved):
    """``FaceInverse.combo`` (the F0 x F0 part from the stored block, the rest from kernel rows) equals
    ``sum_k coef_k K(x_rows_k, x_cols)`` taken straight from the kernel matrix, for row and column sets
    inside F0, partly outside it, and wholly outside it."""
    kernel, ypm, C, alpha, _ = solved
    m = len(ypm)
    face = FaceInverse.build(kernel, np.arange(m), ypm, alpha, C)
    assert face is not None
    F0 = face.rows
    others = np.setdiff1d(np.arange(m), F0)
    rng = np.random.default_rng(3)
    sets = {
        "inside": np.sort(rng.choice(F0, len(F0) // 2, replace=False)),
        "mixed": np.sort(np.concatenate([F0[::3], others[::40]])),
        "outside": others[::25],
    }
    for rows in sets.values():
        coef = rng.standard_normal(len(rows))
        for cols in (*sets.values(), F0, np.arange(m)):
            expect = coef @ kernel.K[np.ix_(rows, cols)]
            assert np.allclose(face.combo(kernel, np.arange(m), rows, coef, cols), expect, atol=1e-12)


def test_face_spread_equals_the_kernel_sum(solved, monkeypatch):
    """``FaceInverse.spread`` (the F0 x N part from the stored block ``KN``, the rest from kernel rows)
    equals ``sum_k coef_k K(x_rows_k, x_cols)`` taken straight from the kernel matrix, for rows inside F0,
    partly and wholly outside it, and columns inside N, partly and wholly outside it; without ``KN`` (over
    its byte limit) it is the kernel sum itself."""
    kernel, ypm, C, alpha, G = solved
    m = len(ypm)
    near = np.flatnonzero((G + 1.0) < 1.3)  # some rows, holding F0 and more
    face = FaceInverse.build(kernel, np.arange(m), ypm, alpha, C, near)
    assert face is not None and face.KN is not None and face.KN.shape == (len(face.rows), len(near))
    F0 = face.rows
    assert np.all(np.isin(F0, near)) and len(near) > 2 * len(F0)
    others = np.setdiff1d(np.arange(m), F0)
    outside_n = np.setdiff1d(np.arange(m), near)
    rng = np.random.default_rng(4)
    row_sets = [F0, np.sort(np.concatenate([F0[::2], others[::30]])), others[::25]]
    col_sets = [near, np.sort(np.concatenate([near[::3], outside_n[::7]])), outside_n[::5], np.arange(m)]
    for rows in row_sets:
        coef = rng.standard_normal(len(rows))
        for cols in col_sets:
            expect = coef @ kernel.K[np.ix_(rows, cols)]
            assert np.allclose(face.spread(kernel, np.arange(m), rows, coef, cols), expect, atol=1e-12)
    monkeypatch.setattr(face_module, "NEAR_BLOCK_MAX_BYTES", len(F0) * len(near) * 8 - 1)
    small = FaceInverse.build(kernel, np.arange(m), ypm, alpha, C, near)
    assert small is not None and small.KN is None
    coef = rng.standard_normal(len(F0))
    assert np.allclose(small.spread(kernel, np.arange(m), F0, coef, near), coef @ kernel.K[np.ix_(F0, near)])
