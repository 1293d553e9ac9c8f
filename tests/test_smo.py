"""Our own SMO solver (holdfast.learners.smo) against scikit-learn's SVC (libsvm).

Reference: libsvm through scikit-learn's ``SVC`` (Chang & Lin 2011, "LIBSVM: a library for support vector
machines", ACM TIST 2(3); Pedregosa et al. 2011, "Scikit-learn: Machine Learning in Python", JMLR 12) on
data sets bundled with scikit-learn: breast cancer (Wolberg, Street & Mangasarian 1995, UCI), iris (Fisher
1936), wine (Forina et al., UCI) and digits (Alpaydin & Kaynak 1998, UCI), each reduced to two classes.
Both solve the same C-SVC dual; at a tight tolerance the solutions agree to the tolerance: the same support
rows, dual coefficients, intercept and decision values, and identical predictions.
"""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.datasets import load_breast_cancer, load_digits, load_iris, load_wine
from sklearn.preprocessing import StandardScaler
from sklearn.svm import SVC

from holdfast.learners import smo, warm
from holdfast.learners.kernels import kernel_matrix, resolve_gamma


def _two_class(name: str) -> tuple[np.ndarray, np.ndarray]:
    if name == "cancer":
        X, y = load_breast_cancer(return_X_y=True)
    elif name == "iris":  # versicolor vs virginica: the two classes that overlap
        X, y = load_iris(return_X_y=True)
        X, y = X[y > 0], (y[y > 0] == 2).astype(np.int64)
    elif name == "wine":  # classes 0 and 1
        X, y = load_wine(return_X_y=True)
        X, y = X[y < 2], y[y < 2]
    else:  # digits: 3 vs 8, a hard pair
        X, y = load_digits(return_X_y=True)
        keep = (y == 3) | (y == 8)
        X, y = X[keep], (y[keep] == 8).astype(np.int64)
    return StandardScaler().fit_transform(X), y.astype(np.int64)


def _rbf_problem(
    X: np.ndarray, y: np.ndarray
) -> tuple[np.ndarray, int, np.ndarray, np.ndarray, smo.Kernel, np.ndarray]:
    """The RBF kernel matrix (gamma "scale"), m, labels as +1/-1, the box C = 1, the kernel source and
    every position: the setup of the warm-refit tests."""
    K = kernel_matrix(X, X, "rbf", resolve_gamma("scale", X), 3, 0.0)
    m = len(y)
    return K, m, np.where(y == 1, 1.0, -1.0), np.full(m, 1.0), smo.Kernel(K=K), np.arange(m)


CASES = [
    (data, kernel, C)
    for data in ("cancer", "iris", "wine", "digits")
    for kernel, C in (("linear", 0.5), ("rbf", 1.0), ("rbf", 20.0), ("poly", 1.0))
]


@pytest.mark.parametrize(("data", "kernel", "C"), CASES)
@pytest.mark.parametrize("weighted", [False, True])
def test_full_fit_equals_libsvm(data, kernel, C, weighted):
    X, y = _two_class(data)
    gamma = resolve_gamma("scale", X)
    K = kernel_matrix(X, X, kernel, gamma, 2, 1.0)
    weights = {0: 1.0, 1: 2.5} if weighted else None
    tol = 1e-10
    ref = SVC(kernel="precomputed", C=C, tol=tol, class_weight=weights).fit(K, y)
    ypm = np.where(y == 1, 1.0, -1.0)
    c_row = C * (np.where(y == 1, 2.5, 1.0) if weighted else np.ones(len(y)))
    alpha, grad, rho, its = smo.fit_dual(smo.Kernel(K=K), np.arange(len(y)), ypm, c_row, tol)
    assert its > 0
    # the solution is feasible: 0 <= alpha <= C, y'alpha = 0 (Chang & Lin 2011, eq. 4.1)
    assert np.all(alpha >= 0) and np.all(alpha <= c_row)
    assert abs(float(ypm @ alpha)) < 1e-10 * max(1.0, float(alpha.sum()))
    ref_coef = np.zeros(len(y))
    ref_coef[ref.support_] = ref.dual_coef_[0]
    scale = float(c_row.max())
    # same support rows, except rows whose weight is at rounding level in one of the two solutions
    ours_sv = alpha > 1e-6 * scale
    ref_sv = np.abs(ref_coef) > 1e-6 * scale
    assert np.array_equal(ours_sv, ref_sv)
    assert np.allclose(alpha * ypm, ref_coef, atol=1e-4 * scale)
    assert abs(-rho - float(ref.intercept_[0])) < 1e-4
    ours_dec = ypm * (grad + 1.0) - rho
    ref_dec = ref.decision_function(K)
    assert np.allclose(ours_dec, ref_dec, atol=1e-4)
    # identical predictions (no training decision value is that close to zero on these sets)
    assert np.array_equal(ours_dec > 0, ref_dec > 0)


def test_kernel_rows_computed_from_X_equal_the_matrix():
    """Without a precomputed matrix, the solver's kernel rows (computed in numba, cached) give the same
    solution as with the matrix from scikit-learn's pairwise kernels."""
    X, y = _two_class("wine")
    ypm = np.where(y == 1, 1.0, -1.0)
    idx = np.arange(len(y))
    for kernel in ("linear", "rbf", "poly"):
        gamma = resolve_gamma("scale", X)
        K = kernel_matrix(X, X, kernel, gamma, 3, 1.0)
        c = np.full(len(y), 1.0)
        a1, _, r1, _ = smo.fit_dual(smo.Kernel(K=K), idx, ypm, c, 1e-10)
        lazy = smo.Kernel(X=X, kind=kernel, gamma=gamma, degree=3, coef0=1.0, cache_rows=8)
        a2, _, r2, _ = smo.fit_dual(lazy, idx, ypm, c, 1e-10)
        assert np.allclose(a1, a2, atol=1e-8) and abs(r1 - r2) < 1e-8
        assert np.allclose(lazy.rows(idx[:5], idx), K[:5], atol=1e-12)


def test_subset_through_idx_equals_the_sliced_problem():
    """Solving on the rows ``idx`` of a larger matrix equals solving the sliced matrix (libsvm reference)."""
    X, y = _two_class("cancer")
    K = kernel_matrix(X, X, "rbf", resolve_gamma("scale", X), 3, 0.0)
    idx = np.arange(0, len(y), 3)
    ypm = np.where(y[idx] == 1, 1.0, -1.0)
    _, grad, rho, _ = smo.fit_dual(smo.Kernel(K=K), idx, ypm, np.full(len(idx), 2.0), 1e-10)
    ref = SVC(kernel="precomputed", C=2.0, tol=1e-10).fit(K[np.ix_(idx, idx)], y[idx])
    assert np.allclose(ypm * (grad + 1.0) - rho, ref.decision_function(K[np.ix_(idx, idx)]), atol=1e-4)


@pytest.mark.parametrize("kernel", ["linear", "rbf"])
def test_warm_refit_equals_a_cold_solve_without_the_row(kernel):
    """Alpha seeding + Newton steps + SMO reach the same optimum as a cold solve of the problem without
    the row (DeCoste & Wagstaff 2000, "Alpha seeding for support vector machines", KDD), and the seed is
    feasible: y'alpha = 0 and the box hold before any SMO step."""
    X, y = _two_class("cancer")
    K = kernel_matrix(X, X, kernel, resolve_gamma("scale", X), 3, 0.0)
    m = len(y)
    ypm = np.where(y == 1, 1.0, -1.0)
    c = np.full(m, 1.0)
    kern = smo.Kernel(K=K)
    idx = np.arange(m)
    alpha, grad, _, _ = smo.fit_dual(kern, idx, ypm, c, 1e-10)
    for row in np.flatnonzero(alpha > 0)[::9]:
        a, g, cc = alpha.copy(), grad.copy(), c.copy()
        warm.seed_without(kern, idx, ypm, cc, a, g, int(row), True)
        assert a[row] == 0 and cc[row] == 0
        assert abs(float(ypm @ a)) < 1e-10 and np.all(a >= 0) and np.all(a <= cc)
        assert np.allclose(g, smo.gradient(kern, idx, ypm, a), atol=1e-9)  # the O(n) gradient update
        a, g, cc = alpha.copy(), grad.copy(), c.copy()
        rho, _ = warm.refit_without(kern, idx, ypm, cc, a, g, int(row), 1e-10, True)
        keep = np.delete(idx, row)
        cold_c = c.copy()
        cold_c[row] = 0.0
        ref = SVC(kernel="precomputed", C=1.0, tol=1e-10).fit(K[np.ix_(keep, keep)], y[keep])
        ref_dec = ref.decision_function(K[:, keep])
        assert np.allclose(ypm * (g + 1.0) - rho, ref_dec, atol=1e-4)
        assert np.array_equal(ypm * (g + 1.0) - rho > 0, ref_dec > 0)


@pytest.mark.parametrize("data", ["cancer", "digits"])
def test_warm_refit_that_must_grow_its_active_rows(data, monkeypatch):
    """A warm refit told to work on the free rows only (``near`` all False) must let rows join
    (``smo.regrow``) until every row meets the stopping rule: the result equals a cold libsvm solve
    without the row (Chang & Lin 2011), and the gradient it leaves is right for every row, not only the
    active ones."""
    X, y = _two_class(data)
    K, m, ypm, c, kern, idx = _rbf_problem(X, y)
    alpha, grad, _, _ = smo.fit_dual(kern, idx, ypm, c, 1e-10)
    grown = []

    def regrow(*args):
        out = smo.regrow(*args)
        grown.append(len(out) > len(args[7]))
        return out

    monkeypatch.setattr(warm, "regrow", regrow)
    for row in np.flatnonzero(alpha >= 1.0 - 1e-12)[::7]:  # rows at C: their removal moves the most
        a, g, cc = alpha.copy(), grad.copy(), c.copy()
        rho, _ = warm.refit_without(kern, idx, ypm, cc, a, g, int(row), 1e-10, True, near=np.zeros(m, bool))
        assert np.allclose(g, smo.gradient(kern, idx, ypm, a), atol=1e-8)
        keep = np.delete(idx, row)
        ref = SVC(kernel="precomputed", C=1.0, tol=1e-10).fit(K[np.ix_(keep, keep)], y[keep])
        ref_dec = ref.decision_function(K[:, keep])
        assert np.allclose(ypm * (g + 1.0) - rho, ref_dec, atol=1e-4)
        assert np.array_equal(ypm * (g + 1.0) - rho > 0, ref_dec > 0)
    assert any(grown)  # rows outside the first active set did join


def test_regrow_brings_every_gradient_up_to_date():
    """``smo.regrow`` after SMO ran with ``defer`` on some rows: every row's gradient equals one computed
    afresh, and it returns no rows exactly when every row meets the stopping rule."""
    X, y = _two_class("cancer")
    _, m, ypm, c, kern, idx = _rbf_problem(X, y)
    alpha, G = np.zeros(m), -np.ones(m)
    active = np.arange(0, m, 3)
    acc = (np.zeros(m), np.zeros(m, dtype=np.bool_))
    smo.solve(kern, idx, ypm, c, alpha, G, 1e-8, active=active, acc=acc, defer=True)
    nxt = smo.regrow(kern, idx, ypm, c, alpha, G, 1e-8, active, acc)
    assert np.allclose(G, smo.gradient(kern, idx, ypm, alpha), atol=1e-10)
    assert not acc[1].any() and np.all(acc[0] == 0)
    assert len(nxt) > len(active) and np.all(np.isin(active, nxt))  # the other rows were never looked at
    smo.solve(kern, idx, ypm, c, alpha, G, 1e-8)
    assert len(smo.regrow(kern, idx, ypm, c, alpha, G, 1e-8, np.arange(m), acc)) == 0


@pytest.mark.parametrize("stored", [False, True])
@pytest.mark.parametrize("stop_at", [None, 1, 2, 3])
def test_newton_steps_keep_the_gradient_right(stored, stop_at, monkeypatch):
    """However a run of Newton steps ends (a full step, a step cut at a bound, no step possible at the
    first, second or third try), ``warm.polish`` leaves the gradient of every active row equal to one
    computed afresh from alpha, with the kernel matrix and with kernel rows from X and stored rows (the
    F0 block of the face inverse is then used); breast cancer, RBF (Wolberg, Street & Mangasarian 1995)."""
    from holdfast.learners.face import FaceInverse

    X, y = _two_class("cancer")
    gamma = resolve_gamma("scale", X)
    K = kernel_matrix(X, X, "rbf", gamma, 3, 0.0)
    m = len(y)
    ypm = np.where(y == 1, 1.0, -1.0)
    c = np.full(m, 1.0)
    idx = np.arange(m)
    if stored:
        keep = np.arange(0, m, 2)
        wpos = np.full(m, -1, dtype=np.int64)
        wpos[keep] = np.arange(len(keep))
        kern = smo.Kernel(X=X, kind="rbf", gamma=gamma, KW=K[keep], wpos=wpos)
    else:
        kern = smo.Kernel(K=K)
    alpha, grad, _, _ = smo.fit_dual(kern, idx, ypm, c, 1e-10)
    face = FaceInverse.build(kern, idx, ypm, alpha, c)
    assert face is not None
    real = warm._newton_step
    calls = []

    def step(*args):
        calls.append(1)
        return None if stop_at is not None and len(calls) >= stop_at else real(*args)

    monkeypatch.setattr(warm, "_newton_step", step)
    checked = 0
    for row in np.flatnonzero(alpha > 0)[::15]:
        a, g, cc = alpha.copy(), grad.copy(), c.copy()
        warm.seed_without(kern, idx, ypm, cc, a, g, int(row), True)
        near = ypm * (ypm * (g + 1.0)) < 1.5
        active = np.flatnonzero(near | ((a > 0) & (a < cc)))
        acc = (np.zeros(m), np.zeros(m, dtype=np.bool_))
        smo.solve(kern, idx, ypm, cc, a, g, 1e-1, active=active, acc=acc, defer=True)
        before = a.copy()
        calls.clear()
        warm.polish(kern, idx, ypm, cc, a, g, True, face, active, acc)
        fresh = smo.gradient(kern, idx, ypm, a)
        assert np.allclose(g[active], fresh[active], atol=1e-9)
        checked += int(not np.array_equal(a, before))
        # without active rows: every row's gradient
        a, g, cc = alpha.copy(), grad.copy(), c.copy()
        warm.seed_without(kern, idx, ypm, cc, a, g, int(row), True)
        smo.solve(kern, idx, ypm, cc, a, g, 1e-1)
        calls.clear()
        warm.polish(kern, idx, ypm, cc, a, g, True, face)
        assert np.allclose(g, smo.gradient(kern, idx, ypm, a), atol=1e-9)
    if stop_at != 1:
        assert checked > 0  # steps were taken


@pytest.mark.parametrize("data", ["cancer", "digits"])
def test_certified_refit_leaves_nothing_a_full_update_would_change(data):
    """A warm refit whose last update of the rows outside the active set is skipped under the certificate
    (``smo.certify``, ``warm.Certificate``): the solution is the one of the same refit without the
    certificate; every left row's true gradient lies within ``radius sqrt(K(x, x))`` of the full model's
    (Cauchy-Schwarz), its decision value's sign and the side of the margin it is on are the true ones; the
    rows it leaves in doubt (some here) and the active rows have their true gradient; and ``complete``
    brings every gradient up to date with the stopping rule (Chang & Lin 2011, eq. 4.13) met. The true
    values are computed afresh from alpha."""
    X, y = _two_class(data)
    K, m, ypm, c, kern, idx = _rbf_problem(X, y)
    alpha0, grad0, rho0, _ = smo.fit_dual(kern, idx, ypm, c, 1e-10)
    near = ypm * (ypm * (grad0 + 1.0) - rho0) < 1.2
    zone = 1e-4
    certified = doubted = 0
    for row in np.flatnonzero(alpha0 > 0)[::5]:
        a, g, cc = alpha0.copy(), grad0.copy(), c.copy()
        cert = warm.Certificate(alpha0, grad0, zone)
        rho, _ = warm.refit_without(kern, idx, ypm, cc, a, g, int(row), 1e-10, True, near=near, cert=cert)
        a2, g2, c2 = alpha0.copy(), grad0.copy(), c.copy()
        rho2, _ = warm.refit_without(kern, idx, ypm, c2, a2, g2, int(row), 1e-10, True, near=near)
        assert np.array_equal(a, a2) and rho == rho2  # the same work on the active rows
        fresh = smo.gradient(kern, idx, ypm, a)
        if cert.stale is None:
            assert np.allclose(g, fresh, atol=1e-8)
            continue
        certified += 1
        stale = cert.stale
        doubted += int((~stale).sum()) - len(cert._active)  # rows computed exactly besides the active ones
        assert not stale[row] and stale.any()
        assert np.allclose(g[~stale], fresh[~stale], atol=1e-8)
        assert np.array_equal(g[stale], grad0[stale])
        assert np.all(np.abs(fresh[stale] - g[stale]) <= cert.radius * np.sqrt(np.diag(K)[stale]))
        dec, true = ypm * (g + 1.0) - rho, ypm * (fresh + 1.0) - rho
        assert np.array_equal(dec > 0, true > 0)
        assert np.all(np.abs(true[stale]) > zone) and np.all(np.abs(ypm * true - 1.0)[stale] > zone)
        assert np.array_equal((ypm * dec > 1.0)[stale], (ypm * true > 1.0)[stale])
        cert.complete(kern, idx, ypm, cc, a, g, 1e-10, kern.diag(idx))
        assert cert.stale is None and np.allclose(g, fresh, atol=1e-8)
        assert len(smo.regrow(kern, idx, ypm, cc, a, g, 1e-10, idx, (np.zeros(m), np.zeros(m, bool)))) == 0
    assert certified >= 3 and doubted > 0
