"""SMO for the linear kernel from the primal vector: no kernel rows, the work per step grows with the
active rows only (numba, nogil).

The problem is the same C-SVC dual as :mod:`holdfast.learners.smo` (Chang & Lin 2011, "LIBSVM: a library
for support vector machines", ACM TIST 2(3), section 4.1) with ``K(x_s, x_t) = x_s'x_t``. Then
``(Qa)_t = y_t w'x_t`` with the primal vector ``w = sum_s a_s y_s x_s`` (Cortes & Vapnik 1995,
"Support-vector networks", Machine Learning 20), so

* a pair update changes w by ``dw = da_i y_i x_i + da_j y_j x_j`` (O(p)) and the gradient of an active row
  by ``y_t dw'x_t`` (O(p) per row), instead of reading two kernel rows of m values;
* the second-order working-set selection (Fan, Chen & Lin 2005, "Working set selection using second
  order information for training support vector machines", JMLR 6, WSS 2) needs ``K_it = x_i'x_t`` only
  for the candidate rows, computed when needed;
* shrinking (Joachims 1999, "Making large-scale SVM learning practical"; libsvm's rule ``be_shrunk`` in
  Chang & Lin 2011, section 5.1) keeps the active rows few: every ``min(n, 1000)`` steps, rows at a bound
  that cannot join a violating pair leave the active set;
* when the active rows meet the stopping rule, w is recomputed from alpha and the gradient of every row
  from it (O(m p)); the solver stops only when every row meets libsvm's stopping rule
  ``m(a) - M(a) < eps`` (Chang & Lin 2011, eq. 4.13) under that fresh gradient, else it goes on with the
  rows ``be_shrunk`` keeps. The result therefore does not depend on shrinking.

Pair update and clipping are libsvm's (Chang & Lin 2011, section 4.1.2; ``tau = 1e-12``), as in
``smo._smo``. Warm refits (:func:`refit_without`) seed alpha as :func:`holdfast.learners.warm.seed_without`
does (DeCoste & Wagstaff 2000, "Alpha seeding for support vector machines", KDD).
"""

from __future__ import annotations

import numpy as np
from numba import njit

from holdfast.learners.smo import TAU, Kernel, _extremes, _keep, max_iterations, pair_step, rho
from holdfast.learners.warm import seed_without


@njit(nogil=True, cache=True)
def _dot(X, t, v):
    acc = 0.0
    for f in range(X.shape[1]):
        acc += X[t, f] * v[f]
    return acc


@njit(nogil=True, cache=True)
def _rows_dot(X, s, t):
    acc = 0.0
    for f in range(X.shape[1]):
        acc += X[s, f] * X[t, f]
    return acc


@njit(nogil=True, cache=True)
def _refresh(X, y, alpha, w, G):
    """w = sum_t alpha_t y_t x_t afresh, then G_t = y_t w'x_t - 1 for every row (no accumulated rounding)."""
    p = X.shape[1]
    for f in range(p):
        w[f] = 0.0
    for t in range(X.shape[0]):
        a = alpha[t]
        if a != 0.0:
            c = a * y[t]
            for f in range(p):
                w[f] += c * X[t, f]
    for t in range(X.shape[0]):
        G[t] = y[t] * _dot(X, t, w) - 1.0


@njit(nogil=True, cache=True)
def _smo_linear(X, y, C, QD, alpha, G, w, eps, max_iter, act, shrink_every, fresh_at_cap):
    """SMO over ``act`` first with shrinking, then over every row until all meet the stopping rule.

    On entry G must be right for every row and ``w`` must match alpha; on return both are recomputed
    afresh (``_refresh``), except when ``max_iter`` stopped the run and ``fresh_at_cap`` is False: G is
    then right on the active rows only (the free rows among them). Returns (pair updates, full checks).
    """
    n = X.shape[0]
    p = X.shape[1]
    dw = np.empty(p)
    it = 0
    checks = 0
    since = 0
    while True:
        if it >= max_iter:
            if fresh_at_cap:
                _refresh(X, y, alpha, w, G)
                checks += 1
            break
        if since >= shrink_every:
            since = 0
            g1, g2 = _extremes(y, C, alpha, G, act)
            act = _keep(y, C, alpha, G, act, g1, g2)
        # i: the most violating row in I_up (libsvm's select_working_set)
        gmax = -np.inf
        i = -1
        for t in act:
            if y[t] > 0:
                if alpha[t] < C[t] and -G[t] >= gmax:
                    gmax = -G[t]
                    i = t
            elif alpha[t] > 0 and G[t] >= gmax:
                gmax = G[t]
                i = t
        j = -1
        gmax2 = -np.inf
        if i >= 0:
            # j: in I_low, the largest second-order decrease (Fan, Chen & Lin 2005, WSS 2)
            obj_min = np.inf
            for t in act:
                if y[t] > 0:
                    if alpha[t] > 0:
                        gd = gmax + G[t]
                        if G[t] >= gmax2:
                            gmax2 = G[t]
                    else:
                        continue
                else:
                    if alpha[t] < C[t]:
                        gd = gmax - G[t]
                        if -G[t] >= gmax2:
                            gmax2 = -G[t]
                    else:
                        continue
                if gd > 0:
                    qc = QD[i] + QD[t] - 2.0 * _rows_dot(X, i, t)
                    od = -(gd * gd) / (qc if qc > 0 else TAU)
                    if od <= obj_min:
                        j = t
                        obj_min = od
        if i == -1 or j == -1 or gmax + gmax2 < eps:
            # the active rows are optimal: every row's gradient afresh, the stopping rule over all rows
            _refresh(X, y, alpha, w, G)
            checks += 1
            everyone = np.arange(n)
            g1, g2 = _extremes(y, C, alpha, G, everyone)
            if g1 + g2 < eps:
                break
            act = _keep(y, C, alpha, G, everyone, g1, g2)
            since = 0
            continue
        it += 1
        since += 1
        qc = QD[i] + QD[j] - 2.0 * _rows_dot(X, i, j)
        if qc <= 0:
            qc = TAU
        dai, daj = pair_step(i, j, y, C, alpha, G, qc)
        for f in range(p):
            dw[f] = dai * X[i, f] + daj * X[j, f]
            w[f] += dw[f]
        for t in act:
            G[t] += y[t] * _dot(X, t, dw)
    return it, checks


def is_linear(kernel: Kernel) -> bool:
    """True when ``kernel`` is the linear kernel computed from X (no matrix, no stored rows)."""
    return kernel.kind == 0 and not kernel.precomputed and kernel.KW.shape[0] == 0


def solve(
    X: np.ndarray,
    y: np.ndarray,
    C: np.ndarray,
    alpha: np.ndarray,
    G: np.ndarray,
    eps: float,
    QD: np.ndarray | None = None,
    active: np.ndarray | None = None,
    max_iter: int | None = None,
    w: np.ndarray | None = None,
    current: bool = False,
) -> tuple[int, int]:
    """SMO on every row of ``X`` from a feasible ``alpha`` (``y`` +1/-1 float, ``C`` per-row box, 0 takes a
    row out); ``alpha`` and ``G`` in place, G recomputed afresh at the end. ``active``: rows to work on
    first (all rows meet the stopping rule at the end either way). A run stopped by a given ``max_iter``
    leaves G right on the free rows only (the next call recomputes it unless ``current``); the default
    cap (libsvm's) leaves it right everywhere. ``w``: an array (p) for the primal vector, kept up to date
    in place; with ``current`` it already matches ``alpha`` and G is right on the ``active`` rows (no
    O(m p) pass to start), else both are computed afresh. Returns (pair updates, full checks)."""
    X = np.ascontiguousarray(X, dtype=np.float64)
    if QD is None:
        QD = np.einsum("ij,ij->i", X, X)
    n = X.shape[0]
    if w is None:
        w = np.zeros(X.shape[1])
    if not current:
        _refresh(X, y, alpha, w, G)
    act = np.arange(n) if active is None else np.ascontiguousarray(active, dtype=np.int64)
    its, checks = _smo_linear(
        X,
        y,
        C,
        QD,
        alpha,
        G,
        w,
        float(eps),
        max_iterations(n) if max_iter is None else int(max_iter),
        act,
        min(n, SHRINK_EVERY),
        max_iter is None,
    )
    return int(its), int(checks)


#: Pair updates between shrinking passes (libsvm: 1,000; a step here costs O(p) per active row, not O(1),
#: so shrinking pays sooner; measured: 100 instead of 1,000 with NEAR_BAND 0.02 instead of 0.05, 15-20%
#: less time per refit at 20,000 and 100,000 rows, loaded machine).
SHRINK_EVERY = 100
#: Rounds of face steps, each followed by a short SMO run, before a plain SMO run finishes a solve.
FACE_ROUNDS = 30
#: The violation SMO reaches before the first face steps (measured at 5,000 rows: 1e-1 and 1e-2 cost the
#: same per refit, 3e-3 four times more: SMO's own tail).
LOOSE = 1e-1
#: Rows with |y f(x) - 1| below this under the full model start in a refit's active set (with the free
#: rows and the rows the seed changed); measured at 5,000 rows: 0.05 against y f < 1.2 (every row at C),
#: a quarter of the time per refit; 0.02 a little less again at 20,000 and 100,000 rows (SHRINK_EVERY).
NEAR_BAND = 0.02
#: Most free rows a Newton step is solved for ((n+1)^2 system); past it SMO goes on alone.
MAX_FACE_ROWS = 1500
#: Pair updates of the short SMO run after face steps.
SHORT_RUN = 200


def face_steps(
    X: np.ndarray, y: np.ndarray, C: np.ndarray, alpha: np.ndarray, G: np.ndarray, w: np.ndarray | None = None
) -> bool:
    """Steps on the face of the box the current alpha lies on (rows at 0 or C stay there), until the face
    problem is solved or no free row is left; alpha changed in place, G kept right on the free rows only.

    On the face over the free rows F the dual is ``min g'd + 1/2 d'Q_FF d`` with ``y_F'd = 0``, and for the
    linear kernel ``Q_FF = V V'`` with ``V = diag(y_F) X_F`` (rank <= p). With ``M = [V'; y_F']``:

    * when g is not in the row space of M, the face problem is unbounded below along ``d = -r``, the part
      of g orthogonal to it (``V'd = 0``, ``y_F'd = 0``: w and y'a unchanged, the objective falls linearly
      by ``|r|^2``), so the step goes to the first bound it meets and that row leaves F;
    * otherwise the face problem is bounded below and the Newton step solves its KKT system
      ``Q_FF d + b y_F = -g``, ``y_F'd = 0`` (consistent then; least squares picks one solution when Q_FF is
      singular; e.g. Nocedal & Wright 2006, *Numerical Optimization*, section 16.1): taken in full when it
      stays in the box, else up to the first bound (a convex quadratic falls all along the way to its
      minimiser).

    An active-set method (Nocedal & Wright 2006, section 16.5) on the p + 1 dimensional (w, b) side of the
    face, so a step that frees no minimiser costs O(|F| p^2). The caller finishes with SMO at
    the target tolerance, so the result does not depend on these steps. Returns True when a full Newton
    step was taken.
    """
    dw = np.zeros(X.shape[1])
    full = bool(_face_steps(X, y, C, alpha, G, MAX_FACE_ROWS, dw))
    if w is not None:
        w += dw
    return full


@njit(nogil=True, cache=True)
def _lstsq(A, b):
    """numpy's ``lstsq(A, b, rcond=None)`` (cut-off eps max(A.shape)) in numba."""
    eps = np.finfo(np.float64).eps
    return np.linalg.lstsq(np.ascontiguousarray(A), b, eps * max(A.shape[0], A.shape[1]))[0]


@njit(nogil=True, cache=True)
def _face_steps(X, y, C, alpha, G, max_rows, dw):
    """:func:`face_steps` compiled (the loop ran about 80 small least-squares solves a refit in Python);
    the change of the primal vector is added to ``dw``."""
    n_all = alpha.shape[0]
    p = X.shape[1]
    F = np.empty(n_all, dtype=np.int64)
    n = 0
    for t in range(n_all):
        if alpha[t] > 0 and alpha[t] < C[t]:
            F[n] = t
            n += 1
    F = F[:n].copy()
    while True:
        n = F.shape[0]
        if n == 0:
            return False
        yF = y[F]
        V = np.empty((n, p))
        for i in range(n):
            for f in range(p):
                V[i, f] = X[F[i], f] * yF[i]
        MT = np.empty((n, p + 1))  # M' = [V, y_F]
        MT[:, :p] = V
        MT[:, p] = yF
        g = G[F].copy()
        coef = _lstsq(MT, g)
        r = g - MT @ coef
        newton = False
        if np.linalg.norm(r) > 1e-9 * max(1.0, np.linalg.norm(g)):
            d = -r
        else:
            if n > max_rows:
                return False
            A = np.empty((n + 1, n + 1))
            A[:n, :n] = V @ V.T
            A[:n, n] = yF
            A[n, :n] = yF
            A[n, n] = 0.0
            rhs = np.empty(n + 1)
            rhs[:n] = -g
            rhs[n] = 0.0
            d = _lstsq(A, rhs)[:n].copy()
            newton = True
        d -= yF * (np.dot(yF, d) / n)  # y_F'd = 0 to rounding: the step keeps y'a = 0
        if not np.all(np.isfinite(d)) or not np.any(d != 0.0):
            return False
        k = 0
        tau = np.inf
        for i in range(n):
            a = alpha[F[i]]
            if d[i] < 0:
                lim = -a / d[i]
            elif d[i] > 0:
                lim = (C[F[i]] - a) / d[i]
            else:
                lim = np.inf
            if lim < tau:  # first minimum, as np.argmin
                tau = lim
                k = i
        full = newton and tau >= 1.0
        if not full and not (tau > 0 and np.isfinite(tau)):
            return False
        new = np.empty(n)
        for i in range(n):
            step = d[i] if full else tau * d[i]
            new[i] = min(max(alpha[F[i]] + step, 0.0), C[F[i]])
        if not full:
            new[k] = 0.0 if d[k] < 0 else C[F[k]]  # exactly on the bound it reached
        delta = new - alpha[F]
        if abs(np.dot(yF, delta)) > 1e-12 * max(1.0, np.sum(C[F])):
            return False  # rounding would move y'a; SMO goes on instead
        for i in range(n):
            alpha[F[i]] = new[i]
        step_w = V.T @ delta  # the change of w: sum over F of y_t delta_t x_t
        dw += step_w
        upd = V @ step_w
        for i in range(n):
            G[F[i]] += upd[i]  # Q_FF delta = V (V'delta)
        if full:
            return True
        keep = 0
        for i in range(n):
            if new[i] > 0 and new[i] < C[F[i]]:
                F[keep] = F[i]
                keep += 1
        F = F[:keep].copy()


def finish(
    kernel: Kernel,
    y: np.ndarray,
    C: np.ndarray,
    alpha: np.ndarray,
    G: np.ndarray,
    eps: float,
    QD: np.ndarray,
    active: np.ndarray | None = None,
) -> int:
    """From a feasible ``alpha``: SMO to a loose violation, then rounds of :func:`face_steps` each
    followed by a short SMO run at ``eps``; an unlimited SMO run at ``eps`` is the last word. SMO alone has
    a long linear tail here (measured at 20,000 rows: millions of pair updates between 1e-6 and 1e-9, and
    tens of thousands to bring the free rows down to about p + 1). Returns the pair updates."""
    X = kernel.X
    w = np.zeros(X.shape[1])  # the primal vector, carried between the steps below (G right on free rows)
    its, _ = solve(X, y, C, alpha, G, max(eps, LOOSE), QD, active, w=w)
    for _ in range(FACE_ROUNDS):
        face_steps(X, y, C, alpha, G, w)
        more, _ = solve(X, y, C, alpha, G, eps, QD, _first(alpha, C), SHORT_RUN, w, True)
        its += more
        if more < SHORT_RUN:
            return its
    more, _ = solve(X, y, C, alpha, G, eps, QD, _first(alpha, C), w=w, current=True)
    return its + more


def _first(alpha: np.ndarray, C: np.ndarray) -> np.ndarray:
    """The free rows: where SMO starts after face steps (shrinking brings back any row needed)."""
    return np.flatnonzero((alpha > 0) & (alpha < C))


def fit_dual(
    kernel: Kernel, y: np.ndarray, C: np.ndarray, eps: float, alpha: np.ndarray | None = None
) -> tuple[np.ndarray, np.ndarray, float]:
    """A whole-problem solve with :func:`finish`, cold (``alpha`` None) or from a feasible ``alpha`` (e.g.
    another solver's solution): (alpha, G, rho), G computed afresh."""
    n = len(y)
    alpha = np.zeros(n) if alpha is None else np.clip(np.asarray(alpha, dtype=np.float64), 0.0, C)
    G = np.empty(n)
    finish(kernel, y, C, alpha, G, eps, kernel.diag(np.arange(n)))
    return alpha, G, rho(y, C, alpha, G)


#: Below this many rows :func:`fit_staged` solves cold; above, it starts from a solve on every
#: ``STAGE_STRIDE``-th row.
STAGED_MIN_ROWS = 5_000
STAGE_STRIDE = 10


def fit_staged(
    kernel: Kernel, y: np.ndarray, C: np.ndarray, eps: float
) -> tuple[np.ndarray, np.ndarray, float]:
    """A whole-problem solve (:func:`fit_dual`) from a feasible start built on a subset: the solution on
    every ``STAGE_STRIDE``-th row, plus every other row that solution puts inside the margin (y f < 1) at
    its bound C, one class scaled down so that y'a = 0. Most rows of a large noisy set end at C, so this
    start is near the optimum; the result is the optimum all the same (:func:`fit_dual` checks every row).
    Cold below ``STAGED_MIN_ROWS`` rows, or when the subset holds one class only."""
    m = len(y)
    sub = np.arange(0, m, STAGE_STRIDE)
    if m < STAGED_MIN_ROWS or np.unique(y[sub]).size < 2:
        return fit_dual(kernel, y, C, eps)
    X = kernel.X
    a_s, _, r_s = fit_dual(Kernel(X=np.ascontiguousarray(X[sub]), kind="linear"), y[sub], C[sub], eps)
    start = np.zeros(m)
    start[sub] = a_s
    f = X @ (X[sub].T @ (a_s * y[sub])) - r_s
    rest = np.ones(m, dtype=bool)
    rest[sub] = False
    inside = rest & (y * f < 1.0)
    pos, neg = inside & (y > 0), inside & (y < 0)
    low = min(C[pos].sum(), C[neg].sum())
    if low > 0:
        start[pos] = C[pos] * (low / C[pos].sum())
        start[neg] = C[neg] * (low / C[neg].sum())
    return fit_dual(kernel, y, C, eps, start)


def near_rows(y: np.ndarray, decision: np.ndarray) -> np.ndarray:
    """Rows (boolean) within ``NEAR_BAND`` of the margin (``|y f(x) - 1|``) under decision values f."""
    return np.abs(y * decision - 1.0) < NEAR_BAND


def refit_without(
    kernel: Kernel,
    y: np.ndarray,
    C: np.ndarray,
    alpha: np.ndarray,
    G: np.ndarray,
    pos: int,
    eps: float,
    QD: np.ndarray | None = None,
    near: np.ndarray | None = None,
) -> tuple[float, int]:
    """Warm refit without row ``pos`` (arrays changed in place): alpha seeding as
    :func:`holdfast.learners.warm.seed_without`, then :func:`solve` working first on ``near`` (boolean per
    row), the free rows and the rows the seed changed. Returns (rho without ``pos``, pair updates)."""
    before = alpha.copy()
    seed_without(kernel, np.arange(len(y)), y, C, alpha, G, pos, True)
    first = (alpha > 0) & (alpha < C)
    first |= alpha != before
    if near is not None:
        first |= near
    first[pos] = False
    its = finish(kernel, y, C, alpha, G, eps, QD, np.flatnonzero(first))
    return rho(y, C, alpha, G, pos), its
