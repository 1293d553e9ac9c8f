"""A two-class soft-margin SVM dual solver of our own (SMO), compiled with numba.

The problem is libsvm's C-SVC dual (Chang & Lin 2011, "LIBSVM: a library for support vector machines",
ACM TIST 2(3), section 4.1): minimise ``1/2 a'Qa - e'a`` subject to ``y'a = 0`` and ``0 <= a_t <= C_t``,
with ``Q_st = y_s y_t K(x_s, x_t)`` and a per-row box ``C_t`` (C times the row's class weight).

* Sequential minimal optimisation (Platt 1998, "Sequential minimal optimization: a fast algorithm for
  training support vector machines") with the second-order working-set selection of Fan, Chen & Lin 2005
  ("Working set selection using second order information for training support vector machines",
  JMLR 6), the pair update and clipping of libsvm (Chang & Lin 2011, section 4.1.2; ``tau = 1e-12``).
* libsvm's stopping rule: ``m(a) - M(a) <= eps`` with ``m(a) = max_{t in I_up} -y_t G_t`` and
  ``M(a) = min_{t in I_low} -y_t G_t`` (Chang & Lin 2011, eq. 4.13; Keerthi et al. 2001).
* libsvm's intercept: ``rho`` is the mean of ``y_t G_t`` over free rows, else the middle of the interval
  the bounded rows allow (Chang & Lin 2011, section 4.1.5); the decision value is
  ``f(x) = sum_t a_t y_t K(x_t, x) - rho``.

The solver may start from any feasible ``a`` with its gradient ``G = Qa - e`` (alpha seeding, DeCoste &
Wagstaff 2000, "Alpha seeding for support vector machines", KDD): :mod:`holdfast.learners.warm` turns a
full solution into a feasible start for the problem without one row. A row is taken out of a problem by
giving it the box ``C_t = 0`` (it is then in neither I_up nor I_low and never selected) and skipping it in
``rho``; its gradient is still kept up to date, so its decision value under the refit comes for free.

Kernel rows come from a precomputed matrix ``K`` (rows gathered through ``idx``) or, without one, are
computed from ``X`` on demand (linear, RBF, polynomial) and kept in a small row cache. Everything runs
with the GIL released (``nogil``) so refits run on joblib threads.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

#: libsvm's TAU: the curvature used when K_ii + K_jj - 2 K_ij <= 0 (Chang & Lin 2011, section 4.1.2).
TAU = 1e-12
#: kernel values per block when sums of kernel rows are computed from X in chunks (32 MB of float64)
COMBO_CHUNK_VALUES = 4_000_000
#: kernel codes for the numba functions
KERNEL_CODES = {"linear": 0, "rbf": 1, "poly": 2}


@njit(nogil=True, cache=True)
def _compute_row(X, r, kind, gamma, degree, coef0, idx, out):
    """out[q] = K(x_r, x_idx[q]) computed from X (linear, RBF or polynomial)."""
    p = X.shape[1]
    for q in range(idx.shape[0]):
        s = idx[q]
        acc = 0.0
        if kind == 1:
            for f in range(p):
                d = X[r, f] - X[s, f]
                acc += d * d
            out[q] = math.exp(-gamma * acc)
        else:
            for f in range(p):
                acc += X[r, f] * X[s, f]
            if kind == 0:
                out[q] = acc
            else:
                out[q] = (gamma * acc + coef0) ** degree


@njit(nogil=True, cache=True)
def _combo_rows(M, mrows, coef, idx, all_cols, out):
    """out[q] += sum_k coef_k M[mrows_k, idx_q] (every column when ``all_cols``), without copying rows."""
    for k in range(mrows.shape[0]):
        r = M[mrows[k]]
        c = coef[k]
        if all_cols:
            for q in range(out.shape[0]):
                out[q] += c * r[q]
        else:
            for q in range(out.shape[0]):
                out[q] += c * r[idx[q]]


@njit(nogil=True, cache=True)
def _gather(M, mrows, cols, out):
    """out[k, q] = M[mrows_k, cols_q]."""
    for k in range(mrows.shape[0]):
        r = M[mrows[k]]
        for q in range(cols.shape[0]):
            out[k, q] = r[cols[q]]


@njit(nogil=True, cache=True)
def _fetch(
    t, keep, K, X, kind, gamma, degree, coef0, idx, ident, cache, slot_of, owner, state, KW, wpos, wall
):
    """Kernel values K(x_idx[t], x_idx[q]) for every position q: a row of K, a row of the stored block
    ``KW`` (rows ``wpos`` >= 0 against every training row), or a cached gathered or computed row.

    ``keep`` is a position whose cached row must not be evicted (the other row of the current pair);
    ``wall``: ``idx`` is every training row in order, so a row of ``KW`` is used as it is.
    """
    if ident:
        return K[idx[t]]
    w = wpos[idx[t]] if wpos.shape[0] > 0 else -1
    if w >= 0 and wall:
        return KW[w]
    s = slot_of[t]
    if s >= 0:
        return cache[s]
    ncache = cache.shape[0]
    s = state[0]
    if owner[s] == keep and keep >= 0:
        s = (s + 1) % ncache
    state[0] = (s + 1) % ncache
    if owner[s] >= 0:
        slot_of[owner[s]] = -1
    owner[s] = t
    slot_of[t] = s
    row = cache[s]
    if w >= 0:
        kr = KW[w]
        for q in range(idx.shape[0]):
            row[q] = kr[idx[q]]
    elif K.shape[0] > 0:
        kr = K[idx[t]]
        for q in range(idx.shape[0]):
            row[q] = kr[idx[q]]
    else:
        _compute_row(X, idx[t], kind, gamma, degree, coef0, idx, row)
    return row


@njit(nogil=True, cache=True)
def _unshrink(
    K,
    X,
    kind,
    gamma,
    degree,
    coef0,
    idx,
    ident,
    y,
    G,
    dacc,
    touched,
    act,
    cache,
    slot_of,
    owner,
    state,
    KW,
    wpos,
    wall,
):
    """Bring the gradient of the rows outside ``act`` up to date: G_t += y_t sum_s dacc_s K_st."""
    n = idx.shape[0]
    inside = np.zeros(n, dtype=np.bool_)
    for t in act:
        inside[t] = True
    for s in range(n):
        if touched[s] and dacc[s] != 0.0:
            Ks = _fetch(
                s,
                -1,
                K,
                X,
                kind,
                gamma,
                degree,
                coef0,
                idx,
                ident,
                cache,
                slot_of,
                owner,
                state,
                KW,
                wpos,
                wall,
            )
            d = dacc[s]
            for t in range(n):
                if not inside[t]:
                    G[t] += y[t] * Ks[t] * d
        dacc[s] = 0.0
        touched[s] = False


@njit(nogil=True, cache=True, inline="always")
def pair_step(i, j, y, C, alpha, G, qc):
    """libsvm's update of the pair (i, j) with curvature ``qc`` and its clipping to the box (Chang & Lin
    2011, "LIBSVM", section 4.1.2; Platt 1998); y'a stays unchanged. Returns the changes of y_i a_i and
    y_j a_j."""
    ci = C[i]
    cj = C[j]
    oai = alpha[i]
    oaj = alpha[j]
    if y[i] != y[j]:
        delta = (-G[i] - G[j]) / qc
        diff = alpha[i] - alpha[j]
        alpha[i] += delta
        alpha[j] += delta
        if diff > 0:
            if alpha[j] < 0:
                alpha[j] = 0.0
                alpha[i] = diff
        elif alpha[i] < 0:
            alpha[i] = 0.0
            alpha[j] = -diff
        if diff > ci - cj:
            if alpha[i] > ci:
                alpha[i] = ci
                alpha[j] = ci - diff
        elif alpha[j] > cj:
            alpha[j] = cj
            alpha[i] = cj + diff
    else:
        delta = (G[i] - G[j]) / qc
        total = alpha[i] + alpha[j]
        alpha[i] -= delta
        alpha[j] += delta
        if total > ci:
            if alpha[i] > ci:
                alpha[i] = ci
                alpha[j] = total - ci
        elif alpha[j] < 0:
            alpha[j] = 0.0
            alpha[i] = total
        if total > cj:
            if alpha[j] > cj:
                alpha[j] = cj
                alpha[i] = total - cj
        elif alpha[i] < 0:
            alpha[i] = 0.0
            alpha[j] = total
    return (alpha[i] - oai) * y[i], (alpha[j] - oaj) * y[j]


@njit(nogil=True, cache=True)
def _grown(act, y, C, alpha, G, eps):
    """After the rows outside ``act`` got their gradient: ``act`` plus every outside row that could form a
    violating pair with an active row (so SMO stays shrunk), all rows when only outside rows violate
    together, or an empty array when every row meets the stopping rule ``m(a) - M(a) < eps``."""
    n = y.shape[0]
    inside = np.zeros(n, dtype=np.bool_)
    for t in act:
        inside[t] = True
    m_act = -np.inf  # max -y G over I_up, active rows
    big_m_act = np.inf  # min -y G over I_low, active rows
    m_all = -np.inf
    big_m_all = np.inf
    for t in range(n):
        v = -y[t] * G[t]
        up = (y[t] > 0 and alpha[t] < C[t]) or (y[t] < 0 and alpha[t] > 0)
        low = (y[t] > 0 and alpha[t] > 0) or (y[t] < 0 and alpha[t] < C[t])
        if up:
            m_all = max(m_all, v)
            if inside[t]:
                m_act = max(m_act, v)
        if low:
            big_m_all = min(big_m_all, v)
            if inside[t]:
                big_m_act = min(big_m_act, v)
    if m_all - big_m_all < eps:
        return np.empty(0, dtype=np.int64)
    extra = 0
    for t in range(n):
        if inside[t]:
            continue
        v = -y[t] * G[t]
        up = (y[t] > 0 and alpha[t] < C[t]) or (y[t] < 0 and alpha[t] > 0)
        low = (y[t] > 0 and alpha[t] > 0) or (y[t] < 0 and alpha[t] < C[t])
        if (up and v > big_m_act) or (low and v < m_act):
            inside[t] = True
            extra += 1
    if extra == 0:
        return np.arange(n)
    return np.flatnonzero(inside)


#: SMO pair updates between two looks at every active row for candidates (``_candidates``).
CANDIDATE_PERIOD = 100


@njit(nogil=True, cache=True)
def _extremes(y, C, alpha, G, act):
    """(Gmax1, Gmax2): max of -y_t G_t over I_up and of y_t G_t over I_low among ``act`` (libsvm's)."""
    g1 = -np.inf
    g2 = -np.inf
    for t in act:
        if y[t] > 0:
            if alpha[t] < C[t]:
                g1 = max(g1, -G[t])
            if alpha[t] > 0:
                g2 = max(g2, G[t])
        else:
            if alpha[t] > 0:
                g1 = max(g1, G[t])
            if alpha[t] < C[t]:
                g2 = max(g2, -G[t])
    return g1, g2


@njit(nogil=True, cache=True)
def _keep(y, C, alpha, G, act, g1, g2):
    """The rows of ``act`` that libsvm's ``be_shrunk`` keeps (free rows, and rows at a bound that could
    still join a violating pair); rows with C_t = 0 (taken out) never."""
    out = np.empty(act.shape[0], dtype=np.int64)
    k = 0
    for t in act:
        if C[t] <= 0:
            continue
        if alpha[t] >= C[t]:
            drop = (-G[t] > g1) if y[t] > 0 else (-G[t] > g2)
        elif alpha[t] <= 0:
            drop = (G[t] > g2) if y[t] > 0 else (G[t] > g1)
        else:
            drop = False
        if not drop:
            out[k] = t
            k += 1
    return out[:k]


@njit(nogil=True, cache=True)
def _candidates(act, y, C, alpha, G):
    """The rows of ``act`` that can be in a violating pair at the current alpha: libsvm's shrinking test
    (Chang & Lin 2011, "LIBSVM", section 5.1) drops a row at a bound whose -y G lies beyond the other side's
    extreme (m(a) for rows that may only go down, M(a) for rows that may only go up)."""
    g1, g2 = _extremes(y, C, alpha, G, act)
    return _keep(y, C, alpha, G, act, g1, g2)


@njit(nogil=True, cache=True)
def _regrow(
    K,
    X,
    kind,
    gamma,
    degree,
    coef0,
    idx,
    ident,
    y,
    C,
    alpha,
    G,
    eps,
    ncache,
    act,
    KW,
    wpos,
    wall,
    dacc,
    touched,
):
    """``_unshrink`` then ``_grown`` (see both) outside SMO: the rows SMO should work on next, or an empty
    array when every row meets the stopping rule."""
    n = idx.shape[0]
    cache = np.empty((max(ncache, 2), n if not ident else 1))
    slot_of = np.full(n, -1, dtype=np.int64)
    owner = np.full(cache.shape[0], -1, dtype=np.int64)
    state = np.zeros(1, dtype=np.int64)
    _unshrink(
        K,
        X,
        kind,
        gamma,
        degree,
        coef0,
        idx,
        ident,
        y,
        G,
        dacc,
        touched,
        act,
        cache,
        slot_of,
        owner,
        state,
        KW,
        wpos,
        wall,
    )
    return _grown(act, y, C, alpha, G, eps)


@njit(nogil=True, cache=True)
def _certify(y, C, alpha, G, alpha0, G0, QD, act, eps, zone, doubt):
    """The radius of the certificate of :func:`certify`, or -1.0 when it cannot be given; ``doubt`` marks
    the outside rows it does not settle."""
    n = y.shape[0]
    inside = np.zeros(n, dtype=np.bool_)
    for t in act:
        inside[t] = True
    for t in range(n):
        if not inside[t] and alpha[t] != alpha0[t]:
            return -1.0
    w2 = 0.0  # ||w - w0||^2 = (a - a0)'Q(a - a0) = sum_t (a_t - a0_t)(G_t - G0_t), over the active rows
    mass = 0.0
    for t in act:
        d = alpha[t] - alpha0[t]
        if d != 0.0:
            w2 += d * (G[t] - G0[t])
            mass += abs(d)
    r = math.sqrt(max(w2, 0.0) + 1e-10 * mass) + 1e-12
    m_act = -np.inf
    big_m_act = np.inf
    nfree = 0
    sfree = 0.0
    for t in act:
        if C[t] <= 0:
            continue
        v = -y[t] * G[t]
        if (y[t] > 0 and alpha[t] < C[t]) or (y[t] < 0 and alpha[t] > 0):
            m_act = max(m_act, v)
        if (y[t] > 0 and alpha[t] > 0) or (y[t] < 0 and alpha[t] < C[t]):
            big_m_act = min(big_m_act, v)
        if 0 < alpha[t] < C[t]:
            nfree += 1
            sfree += y[t] * G[t]
    if nfree == 0 or not m_act - big_m_act < eps:
        return -1.0
    rho = sfree / nfree
    for t in range(n):
        if inside[t] or C[t] <= 0:
            continue
        rt = r * math.sqrt(max(QD[t], 0.0))
        v = -y[t] * G0[t]
        f = y[t] * (G0[t] + 1.0) - rho
        if (
            (((y[t] > 0 and alpha[t] < C[t]) or (y[t] < 0 and alpha[t] > 0)) and v + rt > m_act)
            or (((y[t] > 0 and alpha[t] > 0) or (y[t] < 0 and alpha[t] < C[t])) and v - rt < big_m_act)
            or abs(f) <= rt + zone
            or abs(y[t] * f - 1.0) <= rt + zone
        ):
            doubt[t] = True
    return r


@njit(nogil=True, cache=True)
def _smo(
    K,
    X,
    kind,
    gamma,
    degree,
    coef0,
    idx,
    ident,
    y,
    C,
    QD,
    alpha,
    G,
    eps,
    max_iter,
    ncache,
    act,
    KW,
    wpos,
    wall,
    dacc,
    touched,
    defer,
):
    """SMO with second-order working-set selection until m(a) - M(a) < eps; alpha and G in place.

    ``act`` lists the positions SMO works on first (shrinking, Joachims 1999, "Making large-scale SVM
    learning practical"; libsvm's variant in Chang & Lin 2011, section 5.1): the gradient of the others is
    brought up to date from the accumulated alpha changes once the active rows are optimal; the rows that
    then violate the stopping rule with an active row join the active rows (``_grown``) and SMO goes on,
    until every row meets the stopping rule, so the result does not depend on ``act``.
    ``dacc``/``touched`` carry the accumulated changes (``dacc_s`` = change of y_s a_s) between calls; with
    ``defer`` the run stops when the active rows are optimal and leaves the other rows' gradient to a
    later call without ``defer`` (which brings it up to date once). Returns the number of pair updates.
    """
    n = idx.shape[0]
    shrunk = act.shape[0] < n
    if shrunk and dacc.shape[0] != n:
        dacc = np.zeros(n)
        touched = np.zeros(n, dtype=np.bool_)
    if ident:
        ncache = 1
    cache = np.empty((max(ncache, 2), n if not ident else 1))
    slot_of = np.full(n, -1, dtype=np.int64)
    owner = np.full(cache.shape[0], -1, dtype=np.int64)
    state = np.zeros(1, dtype=np.int64)
    it = 0
    sel = _candidates(act, y, C, alpha, G)  # the rows selection looks at; act's gradient stays current
    fresh = True
    since = 0
    while it < max_iter:
        if since >= CANDIDATE_PERIOD:
            sel = _candidates(act, y, C, alpha, G)
            fresh = True
            since = 0
        # i: the most violating row in I_up (libsvm's select_working_set)
        gmax = -np.inf
        i = -1
        for t in sel:
            if y[t] > 0:
                if alpha[t] < C[t] and -G[t] >= gmax:
                    gmax = -G[t]
                    i = t
            elif alpha[t] > 0 and G[t] >= gmax:
                gmax = G[t]
                i = t
        if i == -1 and not fresh:  # optimal over the candidates: look at every active row again
            sel = _candidates(act, y, C, alpha, G)
            fresh = True
            since = 0
            continue
        if i == -1:
            if shrunk and not defer:
                _unshrink(
                    K,
                    X,
                    kind,
                    gamma,
                    degree,
                    coef0,
                    idx,
                    ident,
                    y,
                    G,
                    dacc,
                    touched,
                    act,
                    cache,
                    slot_of,
                    owner,
                    state,
                    KW,
                    wpos,
                    wall,
                )
                act = _grown(act, y, C, alpha, G, eps)
                if act.shape[0] == 0:  # every row meets the stopping rule
                    shrunk = False
                    break
                shrunk = act.shape[0] < n
                sel = _candidates(act, y, C, alpha, G)
                fresh = True
                since = 0
                continue
            break
        Ki = _fetch(
            i, -1, K, X, kind, gamma, degree, coef0, idx, ident, cache, slot_of, owner, state, KW, wpos, wall
        )
        # j: in I_low, the largest second-order decrease of the objective (Fan, Chen & Lin 2005, WSS 2)
        gmax2 = -np.inf
        j = -1
        obj_min = np.inf
        for t in sel:
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
                qc = QD[i] + QD[t] - 2.0 * Ki[t]
                od = -(gd * gd) / (qc if qc > 0 else TAU)
                if od <= obj_min:
                    j = t
                    obj_min = od
        if (gmax + gmax2 < eps or j == -1) and not fresh:
            sel = _candidates(act, y, C, alpha, G)
            fresh = True
            since = 0
            continue
        if gmax + gmax2 < eps or j == -1:
            if shrunk and not defer:
                _unshrink(
                    K,
                    X,
                    kind,
                    gamma,
                    degree,
                    coef0,
                    idx,
                    ident,
                    y,
                    G,
                    dacc,
                    touched,
                    act,
                    cache,
                    slot_of,
                    owner,
                    state,
                    KW,
                    wpos,
                    wall,
                )
                act = _grown(act, y, C, alpha, G, eps)
                if act.shape[0] == 0:  # every row meets the stopping rule
                    shrunk = False
                    break
                shrunk = act.shape[0] < n
                sel = _candidates(act, y, C, alpha, G)
                fresh = True
                since = 0
                continue
            break
        it += 1
        Kj = _fetch(
            j, i, K, X, kind, gamma, degree, coef0, idx, ident, cache, slot_of, owner, state, KW, wpos, wall
        )
        if not ident and slot_of[i] >= 0:  # the fetch of j may have reused a slot; i's row is kept
            Ki = cache[slot_of[i]]
        qc = QD[i] + QD[j] - 2.0 * Ki[j]
        if qc <= 0:
            qc = TAU
        dai, daj = pair_step(i, j, y, C, alpha, G, qc)
        for t in act:
            G[t] += y[t] * (Ki[t] * dai + Kj[t] * daj)
        fresh = False
        since += 1
        if shrunk:
            dacc[i] += dai
            dacc[j] += daj
            touched[i] = True
            touched[j] = True
    if shrunk and not defer:  # stopped by max_iter: the caller still gets a gradient that is right everywhere
        _unshrink(
            K,
            X,
            kind,
            gamma,
            degree,
            coef0,
            idx,
            ident,
            y,
            G,
            dacc,
            touched,
            act,
            cache,
            slot_of,
            owner,
            state,
            KW,
            wpos,
            wall,
        )
    return it


@njit(nogil=True, cache=True)
def _rho(y, C, alpha, G, skip):
    """libsvm's rho: mean y_t G_t over free rows, else the middle of [lb, ub] from the bounded rows."""
    ub = np.inf
    lb = -np.inf
    nfree = 0
    sfree = 0.0
    for t in range(y.shape[0]):
        if t == skip:
            continue
        yg = y[t] * G[t]
        if alpha[t] >= C[t]:
            if y[t] < 0:
                ub = min(ub, yg)
            else:
                lb = max(lb, yg)
        elif alpha[t] <= 0:
            if y[t] > 0:
                ub = min(ub, yg)
            else:
                lb = max(lb, yg)
        else:
            nfree += 1
            sfree += yg
    if nfree > 0:
        return sfree / nfree
    return (ub + lb) / 2.0


def max_iterations(n: int) -> int:
    """libsvm's iteration cap: max(10,000,000, 100 n) (Chang & Lin 2011, the ``max_iter`` of Solver)."""
    return max(10_000_000, 100 * n)


class Kernel:
    """Where kernel rows come from: a precomputed matrix, or X with the kernel's parameters.

    Without the matrix, ``KW`` may hold the kernel rows of some training rows (``wpos[t]`` is row t's
    place in ``KW``, -1 for rows outside it) against every training row: the rows a refit touches most
    (support rows and rows near the margin) are then read, not computed.
    """

    def __init__(
        self,
        K: np.ndarray | None = None,
        X: np.ndarray | None = None,
        kind: str = "linear",
        gamma: float = 1.0,
        degree: int = 3,
        coef0: float = 0.0,
        cache_rows: int = 256,
        KW: np.ndarray | None = None,
        wpos: np.ndarray | None = None,
    ) -> None:
        self.K = K if K is not None else np.empty((0, 0))
        self.X = np.ascontiguousarray(X, dtype=np.float64) if X is not None else np.empty((0, 1))
        self.kind = KERNEL_CODES[kind]
        self.gamma = float(gamma)
        self.degree = int(degree)
        self.coef0 = float(coef0)
        self.cache_rows = int(cache_rows)
        self.KW = KW if KW is not None else np.empty((0, 0))
        self.wpos = np.asarray(wpos, dtype=np.int64) if wpos is not None else np.empty(0, dtype=np.int64)

    @property
    def precomputed(self) -> bool:
        return self.K.shape[0] > 0

    @property
    def n_rows(self) -> int:
        """Number of training rows."""
        return self.K.shape[0] if self.precomputed else self.X.shape[0]

    def diag(self, idx: np.ndarray) -> np.ndarray:
        """K(x_t, x_t) for the rows ``idx``."""
        if self.precomputed:
            return np.ascontiguousarray(self.K[idx, idx], dtype=np.float64)
        Xi = self.X[idx]
        sq = np.einsum("ij,ij->i", Xi, Xi)
        if self.kind == 1:
            return np.ones(len(idx))
        if self.kind == 0:
            return sq
        return (self.gamma * sq + self.coef0) ** self.degree

    def combo(self, rows: np.ndarray, coef: np.ndarray, idx: np.ndarray | None) -> np.ndarray:
        """``sum_k coef_k K(x_rows_k, x_idx)`` without a len(rows) x len(idx) block when it would be large:
        for the linear kernel through the primal vector ``w = sum_k coef_k x_k`` (O(len(idx) p)),
        otherwise in chunks of rows."""
        n = self.n_rows if idx is None else len(idx)
        if len(rows) == 0:
            return np.zeros(n)
        rows = np.asarray(rows, dtype=np.int64)
        coef = np.ascontiguousarray(coef, dtype=np.float64)
        cols = np.empty(0, dtype=np.int64) if idx is None else np.asarray(idx, dtype=np.int64)
        out = np.zeros(n)
        if self.precomputed:
            _combo_rows(self.K, rows, coef, cols, idx is None, out)
            return out
        Xc = self.X if idx is None else self.X[idx]
        if self.kind == 0:
            return Xc @ (coef @ self.X[rows])
        if self.wpos.shape[0]:  # stored rows are read, the others computed
            have = self.wpos[rows]
            stored = have >= 0
            _combo_rows(self.KW, have[stored], coef[stored], cols, idx is None, out)
            rows, coef = rows[~stored], coef[~stored]
        step = max(1, COMBO_CHUNK_VALUES // max(n, 1))
        for k in range(0, len(rows), step):
            out += coef[k : k + step] @ self.rows(rows[k : k + step], idx)
        return out

    def rows(self, rows: np.ndarray, idx: np.ndarray | None) -> np.ndarray:
        """K(x_rows, x_idx) as a dense (len(rows), len(idx)) block; ``idx=None`` means every training row."""
        if idx is None:
            if self.precomputed:
                return self.K[rows]
            idx = np.arange(self.X.shape[0])
            full = True
        else:
            full = False
        out = np.empty((len(rows), len(idx)))
        if self.precomputed:
            _gather(self.K, np.asarray(rows, dtype=np.int64), np.asarray(idx, dtype=np.int64), out)
            return out
        have = self.wpos[rows] if self.wpos.shape[0] else np.full(len(rows), -1)
        stored = have >= 0
        if stored.all() and not full:
            _gather(self.KW, have, np.asarray(idx, dtype=np.int64), out)
        elif stored.any():
            out[stored] = self.KW[have[stored]] if full else self.KW[np.ix_(have[stored], idx)]
        for k in np.flatnonzero(~stored):
            _compute_row(self.X, int(rows[k]), self.kind, self.gamma, self.degree, self.coef0, idx, out[k])
        return out


def _is_whole_matrix(kernel: Kernel, idx: np.ndarray) -> bool:
    """True when the kernel matrix is precomputed and ``idx`` is every training row in order (a row of K
    is then used as it is)."""
    return kernel.precomputed and len(idx) == kernel.K.shape[0] and bool(np.all(idx == np.arange(len(idx))))


def _is_all_rows(kernel: Kernel, idx: np.ndarray) -> bool:
    """True when ``kernel`` stores rows (``KW``) and ``idx`` is every training row in order."""
    n = kernel.wpos.shape[0]
    return bool(n > 0 and len(idx) == n and np.array_equal(idx, np.arange(n)))


def solve(
    kernel: Kernel,
    idx: np.ndarray,
    y: np.ndarray,
    C: np.ndarray,
    alpha: np.ndarray,
    G: np.ndarray,
    eps: float,
    QD: np.ndarray | None = None,
    max_iter: int | None = None,
    active: np.ndarray | None = None,
    acc: tuple[np.ndarray, np.ndarray] | None = None,
    defer: bool = False,
) -> int:
    """Run SMO on the rows ``idx`` (positions 0..n-1) from a feasible ``alpha`` with ``G = Qa - e``.

    ``y`` is +1/-1 (float), ``C`` the per-row box (0 takes a row out); ``alpha`` and ``G`` are updated in
    place. ``active``: positions to work on first (see ``_smo``; all rows meet the stopping rule at the
    end either way). Returns the number of pair updates (``max_iter`` of them at most: libsvm's cap).
    """
    idx = np.ascontiguousarray(idx, dtype=np.int64)
    ident = _is_whole_matrix(kernel, idx)
    if QD is None:
        QD = kernel.diag(idx)
    ncache = kernel.cache_rows if not kernel.precomputed else min(kernel.cache_rows, 64)
    return int(
        _smo(
            kernel.K,
            kernel.X,
            kernel.kind,
            kernel.gamma,
            kernel.degree,
            kernel.coef0,
            idx,
            ident,
            y,
            C,
            QD,
            alpha,
            G,
            float(eps),
            max_iterations(len(idx)) if max_iter is None else int(max_iter),
            max(2, ncache),
            np.arange(len(idx)) if active is None else np.ascontiguousarray(active, dtype=np.int64),
            kernel.KW,
            kernel.wpos,
            _is_all_rows(kernel, idx),
            acc[0] if acc is not None else np.zeros(1),
            acc[1] if acc is not None else np.zeros(1, dtype=np.bool_),
            bool(defer and acc is not None),
        )
    )


def regrow(
    kernel: Kernel,
    idx: np.ndarray,
    y: np.ndarray,
    C: np.ndarray,
    alpha: np.ndarray,
    G: np.ndarray,
    eps: float,
    active: np.ndarray,
    acc: tuple[np.ndarray, np.ndarray],
) -> np.ndarray:
    """After :func:`solve` runs with ``defer`` on ``active``: bring every other row's gradient up to date
    from ``acc`` (which is then cleared) and return the rows to work on next (``active`` plus the rows
    that violate the stopping rule with one of them, every row when only outside rows violate), or an
    empty array when every row meets the stopping rule ``m(a) - M(a) < eps``."""
    idx = np.ascontiguousarray(idx, dtype=np.int64)
    ident = _is_whole_matrix(kernel, idx)
    ncache = kernel.cache_rows if not kernel.precomputed else min(kernel.cache_rows, 64)
    return np.asarray(
        _regrow(
            kernel.K,
            kernel.X,
            kernel.kind,
            kernel.gamma,
            kernel.degree,
            kernel.coef0,
            idx,
            ident,
            y,
            C,
            alpha,
            G,
            float(eps),
            max(2, ncache),
            np.ascontiguousarray(active, dtype=np.int64),
            kernel.KW,
            kernel.wpos,
            _is_all_rows(kernel, idx),
            acc[0],
            acc[1],
        )
    )


def certify(
    y: np.ndarray,
    C: np.ndarray,
    alpha: np.ndarray,
    G: np.ndarray,
    alpha0: np.ndarray,
    G0: np.ndarray,
    QD: np.ndarray,
    eps: float,
    active: np.ndarray,
    zone: float,
    doubt: np.ndarray,
) -> float:
    """Whether the rows outside ``active`` need their gradient at all: the radius r of a certificate that
    settles everything asked of them except the rows it marks in ``doubt`` (boolean, in place), else
    -1.0 (then :func:`regrow` brings them up to date).

    ``alpha0``/``G0`` is a solution the problem started from (the full model, in a refit) with its exact
    gradient; the rows outside ``active`` still have their alpha from it, and the active rows' ``G`` is
    current. The weight vector moved by ``dw`` with ``||dw||^2 = (a - a0)'Q(a - a0) = sum_t (a_t - a0_t)
    (G_t - G0_t)`` (G = Qa - e), so by the Cauchy-Schwarz inequality an outside row's true gradient is within
    ``r_t = ||dw|| sqrt(K(x_t, x_t))`` of ``G0_t`` (for the RBF kernel K(x, x) = 1). r is returned (with an
    allowance for rounding) when, for every outside row, all values in that interval (a) meet libsvm's
    stopping rule with the active rows (Chang & Lin 2011, eq. 4.13: they neither raise m(a) nor lower M(a),
    and m(a) - M(a) < eps over the active rows), and (b) keep the decision value ``f = y (G + 1) - rho``
    more than ``zone`` away from 0 and the margin ``y f`` more than ``zone`` away from 1 (rho from the free
    rows, all active): the signs and the intercept's optimality are then those of the fully updated
    gradient. Rows for which (a) or (b) fails are marked in ``doubt``. -1.0 when there is no free row
    (rho would depend on the outside rows), the active rows do not meet the stopping rule, or an outside
    row's alpha is not ``alpha0``'s.
    """
    return float(
        _certify(
            y,
            C,
            alpha,
            G,
            alpha0,
            G0,
            QD,
            np.ascontiguousarray(active, dtype=np.int64),
            float(eps),
            float(zone),
            doubt,
        )
    )


def extremes(
    y: np.ndarray, C: np.ndarray, alpha: np.ndarray, G: np.ndarray, act: np.ndarray
) -> tuple[float, float]:
    """libsvm's (max of -y G over I_up, max of y G over I_low) among the positions ``act``: m(a) and
    -M(a) of the stopping rule (Chang & Lin 2011, eq. 4.13)."""
    g1, g2 = _extremes(y, C, alpha, G, np.ascontiguousarray(act, dtype=np.int64))
    return float(g1), float(g2)


def smo_sets(y: np.ndarray, C: np.ndarray, alpha: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Membership of I_up and I_low (Chang & Lin 2011, eq. 4.13; rows with C = 0 in neither)."""
    up = ((y > 0) & (alpha < C)) | ((y < 0) & (alpha > 0))
    low = ((y > 0) & (alpha > 0)) | ((y < 0) & (alpha < C))
    return up, low


def gradient(kernel: Kernel, idx: np.ndarray, y: np.ndarray, alpha: np.ndarray) -> np.ndarray:
    """``G = Qa - e`` computed afresh from the rows with a non-zero alpha (no accumulated rounding)."""
    sv = np.flatnonzero(alpha > 0)
    G = -np.ones(len(idx))
    if len(sv):
        G += y * kernel.combo(idx[sv], alpha[sv] * y[sv], idx)
    return G


def rho(y: np.ndarray, C: np.ndarray, alpha: np.ndarray, G: np.ndarray, skip: int = -1) -> float:
    """libsvm's intercept rule (see the module docstring); ``skip`` is a position left out."""
    return float(_rho(y, C, alpha, G, int(skip)))


def fit_dual(
    kernel: Kernel, idx: np.ndarray, y: np.ndarray, C: np.ndarray, eps: float
) -> tuple[np.ndarray, np.ndarray, float, int]:
    """A cold solve from ``alpha = 0``: (alpha, G, rho, iterations); G recomputed afresh at the end."""
    n = len(idx)
    alpha = np.zeros(n)
    G = -np.ones(n)
    QD = kernel.diag(idx)
    its = solve(kernel, idx, y, C, alpha, G, eps, QD)
    G = gradient(kernel, idx, y, alpha)
    its += solve(kernel, idx, y, C, alpha, G, eps, QD)  # usually 0: the fresh gradient is still optimal
    return alpha, G, rho(y, C, alpha, G), its


def compiled_code_cached() -> bool:
    """True when numba's cache holds the solver's compiled code (False on the first run after an install
    or upgrade, which compiles it: tens of seconds; also False when that cannot be told)."""
    import os

    try:
        return os.path.exists(_smo._cache._cache_file._index_path)  # numba internals: FunctionCache
    except AttributeError:
        return False
