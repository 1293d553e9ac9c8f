"""Refits of the SVM without one training row: the problem each exact-LOO refit solves.

Two classes: a warm start from the full solution with our own solver (:mod:`holdfast.learners.smo`, with
the kernel matrix, stored kernel rows or rows computed from X; :mod:`holdfast.learners.smo_linear` for
the linear kernel; alpha seeding, DeCoste & Wagstaff 2000, "Alpha seeding for support vector
machines", KDD). The refit is solved to ``WARM_TOL`` (tighter than libsvm's default) so that it is the
optimum of the problem without the row to rounding error, not just one of the many points within the
stopping tolerance: the reference (a cold libsvm solve per row) then differs from it only by libsvm's own
tolerance, and a decision value can only come out with another sign when it is that close to zero.

With ``ties="libsvm"`` (``holdfast.learners.svm.TIES``) a refit with a decision value within
:func:`tie_tolerance` of 0 is solved again by libsvm, cold, so that its signs are the reference's; with
"optimum" our refit's signs stand (the optimum's), and neither safeguard below calls libsvm.

Safeguard kept from the libsvm working-set path: when the refit's objective is flat in the intercept
(several optimal models; libsvm takes the middle of the optimal interval from its own final state), the
whole problem is handed to libsvm cold, so the choice is the reference's (``_intercept_is_unique``).

With the "libsvm" engine the libsvm working-set solve of earlier versions is used: a solve on the support
rows and rows near the margin, then a KKT check of every other row (Osuna, Freund & Girosi 1997).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
from sklearn.svm import SVC

from holdfast.learners import smo, smo_linear, warm
from holdfast.learners.base import ESSENTIAL_CHANGE, RefitOutcome, refit_outcome
from holdfast.learners.face import FaceInverse
from holdfast.learners.kernels import kernel_matrix, submatrix
from holdfast.learners.pairs import PairState, ovr_from_ovo, refit_pairs, tied_machines, vote_codes

#: Stopping tolerance of our own solver (full fit and warm refits). libsvm's default in holdfast is 1e-6;
#: a warm refit stops at a different point of the tolerance region than a cold solve would, so both are
#: brought to the optimum itself (the Newton step of ``warm.polish`` makes the tight tolerance cheap).
WARM_TOL = 1e-9


#: Decision values closer to 0 than this are taken from libsvm itself in a fallback refit: far above the
#: rounding difference between two sums of the same kernel values (~1e-12 here).
LIBSVM_SIGN_ZONE = 1e-6


def tie_tolerance(tol: float, alpha_sum: float, k_max: float) -> float:
    """How close to 0 a decision value may come before its sign is left to libsvm.

    Decision values of two solvers of the same problem differ by (a) the stopping tolerance: libsvm stops
    when the largest KKT violation is below ``tol`` (Chang & Lin 2011, "LIBSVM", ACM TIST 2(3), eq. 4.13),
    which leaves f off by the order of ``tol``; and (b) libsvm keeps kernel values in single precision in
    its cache (``Qfloat``, relative error about 6e-8 per value), which perturbs the problem it solves by
    about 6e-8 sum_t alpha_t max|K| in f (|K_st| <= max_t K_tt for a positive semi-definite kernel).
    Neither is a proven bound on the final difference, so the allowance is empirical: 2 tol + 2e-9
    sum(alpha) max K. Measured over every training row of sampled refits on the benchmark data
    (bench_solver_scale.py's set), largest difference between our refits and scikit-learn's SVC (tol 1e-6):
    1.3e-6 at 2,000 rows (25 refits, sum alpha ~ 600: allowance 3.2e-6) and 2.3e-6 at 5,000 rows (8
    refits, sum alpha ~ 1,300: allowance 4.6e-6). A wider allowance sends more refits to a cold libsvm
    solve (10 tol + 1e-8 sum(alpha) max K sent 3% of the refits at 5,000 rows, most of the LOO time). An
    exact tie (f = 0 in exact arithmetic, e.g. a row midway between two others) gets whatever sign
    rounding gives each solver; below the allowance holdfast asks libsvm, as the reference does, so ties
    come out as the reference's.
    """
    return 2.0 * tol + 2e-9 * alpha_sum * k_max


def intercept_is_unique(ypm: np.ndarray, g: np.ndarray, c: np.ndarray, intercept: float, eps: float) -> bool:
    """True when no other intercept is optimal for a two-class solution's weight vector.

    With w fixed, the primal objective as a function of the intercept b is
    ``h(b) = sum_i C_i max(0, 1 - y_i (g_i + b))`` (g_i = f(x_i) - intercept), convex and piecewise
    linear with kinks at t_i = y_i - g_i (Cortes & Vapnik 1995, "Support-vector networks", Machine
    Learning 20: the soft-margin primal). The optimal b form an interval; when it is wider than a point,
    several models are optimal and the solver's choice among them depends on its final state (libsvm takes
    the middle of the interval), so a warm-started or working-set solve may pick another one than a cold
    full refit. That happens exactly when h is flat on one side of the solution: a one-sided slope of zero.
    Rows within ``eps`` of a kink count as sitting on it.
    """
    t = ypm - g
    pos, neg = ypm > 0, ypm < 0
    right = -c[pos & (t > intercept + eps)].sum() + c[neg & (t <= intercept + eps)].sum()
    left = -c[pos & (t > intercept - eps)].sum() + c[neg & (t < intercept - eps)].sum()
    flat = 1e-9 * float(c.max())
    return bool(right > flat and left < -flat)


def intercept_movers(
    ypm: np.ndarray, dec: np.ndarray, c: np.ndarray, support: np.ndarray, intercept: float, eps: float
) -> np.ndarray:
    """Rows outside the support set whose removal alone can change a two-class model's intercept.

    Removing a row with alpha = 0 leaves the dual solution optimal (w stays), but the intercept is the
    minimiser of ``h(b)`` (see :func:`intercept_is_unique`), to which the row adds ``C_i max(0, t_i - b)``
    (y = +1) or ``C_i max(0, b - t_i)`` (y = -1), zero on the optimal interval [bl, bu]. Without it, h
    changes only beyond its kink t_i, so the optimal interval (and libsvm's choice in it, the middle)
    can change only when t_i is the interval's end on that side: t_i = bl for y = +1, t_i = bu for y = -1
    (within ``eps``). On the margin of a unique intercept (bl = bu = b, y f(x_i) = 1) that is a row whose
    removal can leave the intercept free, and its LOO prediction can then differ from its training
    prediction (a decision value of 0 in a refit by libsvm). Such rows need a refit like the support rows.
    """
    g = dec - intercept
    t = ypm - g
    pos = ypm > 0
    kinks = np.unique(t)
    op, on = np.argsort(t[pos]), np.argsort(t[~pos])
    tp, cp = t[pos][op], c[pos][op]
    tn, cn = t[~pos][on], c[~pos][on]
    cum_p = np.concatenate([[0.0], np.cumsum(cp)])
    cum_n = np.concatenate([[0.0], np.cumsum(cn)])

    def slope(b: np.ndarray, right: bool) -> np.ndarray:
        side = "right" if right else "left"
        above_p = cum_p[-1] - cum_p[np.searchsorted(tp, b, side=side)]  # y = +1 rows with kink above b
        below_n = cum_n[np.searchsorted(tn, b, side=side)]  # y = -1 rows with kink below b
        return below_n - above_p

    flat = 1e-9 * float(c.max())
    up = kinks[(kinks >= intercept - eps) & (slope(kinks, True) > flat)]
    down = kinks[(kinks <= intercept + eps) & (slope(kinks, False) < -flat)]
    bu = up.min() if up.size else np.inf
    bl = down.max() if down.size else -np.inf
    end = np.where(pos, np.abs(t - bl), np.abs(t - bu))
    return np.flatnonzero(~support & (end <= eps))


def _always(*_: object) -> bool:
    return True


def _never(*_: object) -> float:
    return -1.0


def libsvm_pair_decision(
    X: np.ndarray,
    y: np.ndarray,
    rows: np.ndarray,
    a: int,
    b: int,
    kernel_args: tuple[str, float, int, float],
    params: dict[str, Any],
) -> np.ndarray:
    """Decision values of every row of ``X`` under libsvm's two-class machine of classes a (> 0) and b on
    ``rows`` (training rows of those two classes), in libsvm's own sign: scikit-learn's two-class SVC gives
    f > 0 for its second class (b) and negates libsvm's value to do so."""
    kernel, gamma, degree, coef0 = kernel_args
    weights = params.get("class_weight")
    pair = dict(params, class_weight={c: w for c, w in weights.items() if c in (a, b)} if weights else None)
    clf = SVC(kernel=kernel, gamma=gamma, degree=degree, coef0=coef0, **pair).fit(X[rows], y[rows])
    return -clf.decision_function(X)


@dataclass
class SVMRefitProblem:
    """Self-contained SVM training problem for refits without one row (picklable for joblib/dask)."""

    y: np.ndarray
    n_classes: int
    svc_params: dict[str, Any]
    full_prediction: np.ndarray
    full_decision: np.ndarray
    K: np.ndarray | None = None
    X: np.ndarray | None = None
    #: initial working set for two-class refits (support rows and rows near the margin), or None
    working: np.ndarray | None = None
    #: without K: kernel rows of ``working`` against all training rows (len(working) x m), the position of
    #: each training row in ``working`` (-1 outside), and (kernel, gamma, degree, coef0) for other rows
    KW: np.ndarray | None = None
    w_pos: np.ndarray | None = None
    kernel_args: tuple[str, float, int, float] | None = None
    #: two classes, our own solver: kernel source and the full solution (alpha, gradient Qa - e) to
    #: warm-start every refit from, and the per-row box C
    solver: smo.Kernel | None = None
    alpha: np.ndarray | None = None
    grad: np.ndarray | None = None
    c_row: np.ndarray | None = None
    qd: np.ndarray | None = None
    #: rows a warm refit's SMO works on first (y f(x) < 1 + slack under the full model, plus every row
    #: with a non-zero alpha): shrinking, exact either way (smo._smo)
    near: np.ndarray | None = None
    #: the inverse over the full solution's free rows, for cheap Newton steps in refits (learners.face)
    face: FaceInverse | None = None
    eps: float = WARM_TOL
    #: more than two classes, our own solver: the one-vs-one machines and their decision values
    pairs: list[PairState] | None = None
    ovo_full: np.ndarray | None = None
    #: per machine, a full-model decision value at a tie (pairs.tied_machines; computed at the first refit)
    ovo_tied: np.ndarray | None = None
    #: per machine, libsvm's own decision values of every training row for the machine on all its rows
    #: (``_libsvm_machine``; filled as refits ask, in each process that refits)
    ovo_libsvm: dict[int, np.ndarray] = field(default_factory=dict)
    #: the training matrix, for whole-problem fallbacks computed exactly as the reference computes them
    #: (with ``kernel_args``)
    X_ref: np.ndarray | None = None
    #: how a decision value within the tie allowance of 0 gets its sign (``holdfast.learners.svm.TIES``,
    #: resolved): "libsvm" solves the whole refit again with libsvm; "optimum" keeps our refit's sign
    ties: str = "libsvm"
    #: two classes, our solver: let a refit leave rows far from the margin with the full model's gradient
    #: when a certificate settles them (``warm.Certificate``; the learner sets it by size)
    certify: bool = True
    #: the solver's order of the rows: its position p holds training row ``order[p]`` (None: training
    #: order). ``solver``, ``alpha``, ``grad``, ``c_row``, ``qd``, ``near`` and ``face`` are in it; the
    #: other fields and every result are in training order. The learner puts the rows near the margin
    #: first, so that the part of a stored kernel row the refits work on is one contiguous block (at 20,000
    #: rows, 21% less time per refit: SMO's gradient updates read a third of each row). ``rank`` is its
    #: inverse (the position of each training row).
    order: np.ndarray | None = None
    rank: np.ndarray | None = None

    def set_order(self, order: np.ndarray) -> None:
        """Set ``order`` (a permutation of the training rows) and its inverse ``rank``."""
        self.order = np.asarray(order, dtype=np.int64)
        self.rank = np.empty(len(order), dtype=np.int64)
        self.rank[self.order] = np.arange(len(order))

    def in_solver_order(self, values: np.ndarray) -> np.ndarray:
        """Per-row ``values`` in training order, put in the solver's order."""
        return values if self.order is None else values[self.order]

    def in_training_order(self, values: np.ndarray) -> np.ndarray:
        """Per-row ``values`` in the solver's order, put back in training order."""
        return values if self.rank is None else values[self.rank]

    def _row_c(self, rows: np.ndarray) -> np.ndarray:
        """The box limit C (times the class weight) of each row."""
        weights = self.svc_params.get("class_weight")
        c = float(self.svc_params["C"])
        if not weights:
            return np.full(len(rows), c)
        per_class = np.array([weights.get(k, 1.0) for k in range(self.n_classes)])
        return c * per_class[self.y[rows]]

    def _kernel_block(self, rows: np.ndarray, cols: np.ndarray) -> np.ndarray:
        """Kernel values K(rows, cols): sliced from K or KW, computed for rows outside the working set."""
        if self.K is not None:
            return self.K[np.ix_(rows, cols)]
        assert self.KW is not None and self.w_pos is not None and self.kernel_args is not None
        pos = self.w_pos[rows]
        have = pos >= 0
        out = np.empty((len(rows), len(cols)))
        out[have] = self.KW[np.ix_(pos[have], cols)]
        if not have.all():
            out[~have] = kernel_matrix(self.X[rows[~have]], self.X[cols], *self.kernel_args)  # type: ignore[index]
        return out

    def _decision_all(self, sv: np.ndarray, coef: np.ndarray, intercept: float) -> np.ndarray:
        """sum_j coef_j K(sv_j, x) + intercept for every training row x."""
        if self.K is not None:
            return coef @ self.K[sv] + intercept  # K symmetric: row gather
        assert self.KW is not None and self.w_pos is not None and self.kernel_args is not None
        pos = self.w_pos[sv]
        have = pos >= 0
        spread = np.zeros(self.KW.shape[0])
        spread[pos[have]] = coef[have]
        dec = spread @ self.KW + intercept  # no |sv| x m copy
        if not have.all():
            dec += coef[~have] @ kernel_matrix(self.X[sv[~have]], self.X, *self.kernel_args)  # type: ignore[index]
        return dec

    def _intercept_is_unique(self, dec: np.ndarray, intercept: float, row: int) -> bool:
        """Two classes: :func:`intercept_is_unique` for the refit without ``row`` (decision values dec)."""
        y = np.where(self.y == 1, 1.0, -1.0)
        keep = np.ones(len(y), dtype=bool)
        keep[row] = False
        return self._unique(y[keep], (dec - intercept)[keep], self._row_c(np.flatnonzero(keep)), intercept)

    def _tie(self, alpha_sum: float, k_max: float) -> float:
        """:func:`tie_tolerance` with the learner's ``tol``."""
        return tie_tolerance(float(self.svc_params.get("tol", 1e-6)), alpha_sum, k_max)

    def _unique(self, ypm: np.ndarray, g: np.ndarray, c: np.ndarray, intercept: float) -> bool:
        """:func:`intercept_is_unique` with the kink tolerance from the learner's ``tol``."""
        return intercept_is_unique(ypm, g, c, intercept, 100.0 * float(self.svc_params.get("tol", 1e-6)))

    def _fit_without(self, row: int) -> tuple[np.ndarray, np.ndarray | None]:
        """The whole problem without ``row`` (what a fast refit falls back to). With the training matrix at
        hand (``X_ref``) this is the reference's own computation: libsvm computing the kernel from the rows,
        predictions by ``SVC.predict``, so that even a decision value at an exact tie gets its sign."""
        m = self.y.shape[0]
        keep = np.concatenate([np.arange(row), np.arange(row + 1, m)])
        if self.X_ref is None or self.kernel_args is None or np.unique(self.y[keep]).size < 2:
            return self.fit_predict(keep)
        kernel, gamma, degree, coef0 = self.kernel_args
        params = self._precomputed_params()
        clf = SVC(kernel=kernel, gamma=gamma, degree=degree, coef0=coef0, **params).fit(
            self.X_ref[keep], self.y[keep]
        )
        if self.solver is not None and self.n_classes == 2:
            dec = self._libsvm_decision(clf, keep)
        else:
            dec = clf.decision_function(self.X_ref)
        full = np.unique(self.y[keep]).size == self.n_classes
        if dec.ndim == 1:
            # two classes: the sign of the decision value is libsvm's prediction; at an exact 0 the two
            # differ (sklearn negates libsvm's value), so those rows ask SVC.predict, the reference's call
            pred = np.where(dec > 0, clf.classes_[1], clf.classes_[0])
            zero = np.flatnonzero(dec == 0)
            if len(zero):
                pred[zero] = clf.predict(self.X_ref[zero])
        else:
            pred = clf.predict(self.X_ref)
        return pred.astype(np.int64), (dec if full else None)

    def _libsvm_decision(self, clf: SVC, keep: np.ndarray) -> np.ndarray:
        """Decision values of every training row under a two-class SVC fitted on the rows ``keep``: summed
        from our kernel rows (stored or computed: the same kernel to rounding, ~1e-12), and asked of libsvm
        itself (``decision_function``) for the rows within ``LIBSVM_SIGN_ZONE`` of 0, so that every sign
        is libsvm's while the pass over all rows is not repeated (at 20,000 rows it took 2 s a fallback)."""
        assert self.solver is not None and self.X_ref is not None
        sv = keep[clf.support_] if self.rank is None else self.rank[keep[clf.support_]]
        # scikit-learn's two-class dual_coef_ and intercept_ give f > 0 for classes_[1]
        dec = self.solver.combo(sv, np.ascontiguousarray(clf.dual_coef_[0]), None) + float(clf.intercept_[0])
        dec = self.in_training_order(dec)
        close = np.flatnonzero(np.abs(dec) < LIBSVM_SIGN_ZONE)
        if len(close):
            dec[close] = clf.decision_function(self.X_ref[close])
        return dec

    def _fit_working_set(self, row: int) -> tuple[np.ndarray, np.ndarray | None]:
        """Two classes, precomputed kernel: solve on a working set, then add every row outside it that
        violates its optimality condition (y f(x) >= 1 - tol for alpha = 0) and solve again, until none does.

        A row outside the working set with alpha = 0 that satisfies y f(x) >= 1 already meets the KKT
        conditions of the full problem, so the result is the optimum of the full problem to the solver's own
        tolerance (the decomposition argument of Osuna, Freund & Girosi 1997, "An improved training
        algorithm for support vector machines"; libsvm stops on the same condition).
        """
        m = self.y.shape[0]
        ypm = np.where(self.y == 1, 1.0, -1.0)
        work = self.working[self.working != row]
        outside = np.ones(m, dtype=bool)
        tol = float(self.svc_params.get("tol", 1e-6))
        while True:
            y_work = self.y[work]
            if np.unique(y_work).size < 2:  # too small a working set: solve the whole problem
                return self._fit_without(row)
            clf = SVC(kernel="precomputed", **self._precomputed_params())
            clf.fit(self._kernel_block(work, work), y_work)
            sv = work[clf.support_]
            if not np.any(np.abs(clf.dual_coef_[0]) < 0.999 * self._row_c(sv)):
                # no free support row: the intercept is not unique and libsvm picks it from the bounds of
                # all rows, so only the whole problem gives the same intercept as a full refit
                return self._fit_without(row)
            dec = self._decision_all(sv, clf.dual_coef_[0], float(clf.intercept_[0]))
            outside[:] = True
            outside[work] = False
            outside[row] = False
            violators = np.flatnonzero(outside & (ypm * dec < 1.0 - tol))
            if violators.size == 0:
                if not self._intercept_is_unique(dec, float(clf.intercept_[0]), row):
                    return self._fit_without(row)
                pred = np.where(dec > 0, clf.classes_[1], clf.classes_[0]).astype(np.int64)
                return pred, dec
            work = np.union1d(work, violators)

    def _precomputed_params(self) -> dict[str, Any]:
        """The SVC parameters for a precomputed kernel (without the kernel's own parameters)."""
        return {k: v for k, v in self.svc_params.items() if k not in ("kernel", "gamma", "degree", "coef0")}

    def fit_predict(self, keep: np.ndarray) -> tuple[np.ndarray, np.ndarray | None]:
        """Fit on rows ``keep``; return predicted codes and decision values for all training rows."""
        y_keep = self.y[keep]
        present = np.unique(y_keep)
        m = self.y.shape[0]
        if present.size < 2:  # the remaining rows hold one class only: every prediction is that class
            return np.full(m, present[0], dtype=np.int64), None
        if self.K is not None:
            clf = SVC(kernel="precomputed", **self.svc_params)
            clf.fit(submatrix(self.K, keep), y_keep)
            if present.size == 2:
                sv = keep[clf.support_]
                dec = clf.dual_coef_[0] @ self.K[sv] + clf.intercept_[0]  # K symmetric: row gather
                pred = np.where(dec > 0, clf.classes_[1], clf.classes_[0]).astype(np.int64)
                return pred, (dec if self.n_classes == 2 else None)
            cross = self.K[:, keep]
        else:
            params = dict(self.svc_params)
            clf = SVC(**params)
            clf.fit(self.X[keep], y_keep)
            cross = self.X
            if present.size == 2:
                dec = clf.decision_function(cross)
                pred = np.where(dec > 0, clf.classes_[1], clf.classes_[0]).astype(np.int64)
                return pred, (dec if self.n_classes == 2 else None)
        dec = clf.decision_function(cross)
        pred = clf.classes_[vote_codes(dec)].astype(np.int64)
        return pred, (dec if present.size == self.n_classes else None)

    def _fit_warm(self, row: int) -> tuple[np.ndarray, np.ndarray | None, np.ndarray | None]:
        """Two classes, our solver: warm start from the full solution without ``row`` (warm.refit_without),
        decision values of every training row from the final gradient (f = y (G + 1) - rho), and the rows
        whose decision value was left behind under a certificate (see :meth:`_stale_zone`), or None."""
        assert self.solver is not None and self.alpha is not None and self.grad is not None
        assert self.c_row is not None and self.qd is not None
        m = self.y.shape[0]
        ypm = np.where(self.in_solver_order(self.y) == 1, 1.0, -1.0)  # everything in the solver's order
        pos = row if self.rank is None else int(self.rank[row])
        alpha, grad, c = self.alpha.copy(), self.grad.copy(), self.c_row.copy()
        idx = np.arange(m)
        cert = None
        if smo_linear.is_linear(self.solver):  # linear kernel from X: SMO from the primal vector
            args = (self.eps, self.qd, self.near)
            rho, _ = smo_linear.refit_without(self.solver, ypm, c, alpha, grad, pos, *args)
        else:
            cert = warm.Certificate(self.alpha, self.grad, self._stale_zone()) if self.certify else None
            args = (self.eps, True, self.qd, self.near, self.face, cert)
            rho, _ = warm.refit_without(self.solver, idx, ypm, c, alpha, grad, pos, *args)
        dec = ypm * (grad + 1.0) - rho
        if cert is not None and cert.stale is not None and self._essential_unsettled(dec, cert):
            cert.complete(self.solver, idx, ypm, c, alpha, grad, self.eps, self.qd)
            rho = smo.rho(ypm, c, alpha, grad, pos)
            dec = ypm * (grad + 1.0) - rho
        dec = self.in_training_order(dec)
        stale = None if cert is None or cert.stale is None else self.in_training_order(cert.stale)
        if self.ties == "libsvm" and (
            not self._intercept_is_unique(dec, -rho, row) or self._near_zero(dec, alpha)
        ):
            return (*self._fit_without(row), None)
        return np.where(dec > 0, 1, 0).astype(np.int64), dec, stale

    def _stale_zone(self) -> float:
        """How far from 0 a decision value (and from 1 a margin y f) must stay, whatever the rows it left
        behind, for a warm refit to skip their update (:func:`holdfast.learners.smo.certify`). With
        ``ties="libsvm"``: the tie allowance of :meth:`_near_zero` (at its largest, sum(alpha) <= sum(C))
        and the kink tolerance of :meth:`_unique`, so both checks come out as with every row updated."""
        if self.ties != "libsvm":
            return 0.0
        assert self.c_row is not None and self.qd is not None
        tol = float(self.svc_params.get("tol", 1e-6))
        return max(100.0 * tol, tie_tolerance(tol, float(self.c_row.sum()), float(self.qd.max())))

    def _essential_unsettled(self, dec: np.ndarray, cert: warm.Certificate) -> bool:
        """True when whether the refit changes the model (``ESSENTIAL_CHANGE``) depends on the rows a
        certificate left behind: no updated row moved that far, and a left row may have."""
        assert cert.stale is not None and self.qd is not None
        moved = np.abs(dec - self.in_solver_order(self.full_decision))  # the solver's order, as cert and qd
        if float(np.max(moved[~cert.stale])) > ESSENTIAL_CHANGE:
            return False
        reach = moved[cert.stale] + cert.radius * np.sqrt(self.qd[cert.stale])
        return bool(reach.size and float(np.max(reach)) > ESSENTIAL_CHANGE)

    def _near_zero(self, dec: np.ndarray, alpha: np.ndarray) -> bool:
        """True when a decision value is too close to 0 for its sign to be the reference's (see
        :func:`tie_tolerance`); the refit then goes to libsvm cold, the reference's own computation."""
        assert self.qd is not None
        tol = float(self.svc_params.get("tol", 1e-6))
        return bool(np.min(np.abs(dec)) < tie_tolerance(tol, float(alpha.sum()), float(self.qd.max())))

    def _fit_pairs(self, row: int) -> tuple[np.ndarray, np.ndarray | None]:
        """More than two classes: warm refits of the machines ``row`` is a support row of, the rest reused
        (holdfast.learners.pairs); a machine at a tie or with an intercept that is not unique is libsvm's
        own solve of that machine (:meth:`_libsvm_machine`)."""
        assert self.solver is not None and self.pairs is not None and self.ovo_full is not None
        if self.ties == "libsvm":
            if self.ovo_tied is None:
                self.ovo_tied = tied_machines(self.pairs, self.ovo_full, self._tie, self._unique)
            ovo, ask = refit_pairs(
                self.solver, self.pairs, self.ovo_full, row, self.eps, self._unique, self._tie, self.ovo_tied
            )
            for k in ask:
                column = self._libsvm_machine(k, row)
                if column is None:
                    return self._fit_without(row)
                ovo[:, k] = column
        else:  # the optimum's signs and intercept (libsvm's rule on our solution): no libsvm solve
            ovo, _ = refit_pairs(self.solver, self.pairs, self.ovo_full, row, self.eps, _always, _never)
        dec = ovr_from_ovo(ovo, self.n_classes)
        return vote_codes(dec), dec

    def _libsvm_machine(self, k: int, row: int) -> np.ndarray | None:
        """libsvm's decision values of every training row for one-vs-one machine ``k`` without ``row``.

        libsvm trains the machine of classes a and b on the rows of a, then those of b, each in training
        order, with C times each class's weight (Chang & Lin 2011, "LIBSVM", ACM TIST 2(3), section 7), so a
        two-class SVC on those rows alone gives the same machine, bit for bit (checked in
        tests/test_pairs.py on iris, wine and digits), at a fraction of the whole problem's cost (one
        machine instead of k(k-1)/2). A machine without a row of its classes is the full model's machine:
        its values are kept for the next refit. None when a value is exactly 0 (libsvm votes for b there,
        ``ovr_from_ovo`` for a): the caller then solves the whole problem with libsvm."""
        assert self.pairs is not None and self.X_ref is not None and self.kernel_args is not None
        s = self.pairs[k]
        pos = int(np.searchsorted(s.idx, row))
        inside = pos < len(s.idx) and s.idx[pos] == row
        column = None if inside else self.ovo_libsvm.get(k)
        if column is None:
            rows = np.delete(s.idx, pos) if inside else s.idx
            column = libsvm_pair_decision(
                self.X_ref, self.y, rows, s.a, s.b, self.kernel_args, self._precomputed_params()
            )
            if not inside:
                self.ovo_libsvm[k] = column
        return None if np.any(column == 0.0) else column

    def refit_without(self, row: int) -> RefitOutcome:
        """Refit without training row ``row``; its LOO prediction, the flipped rows, the largest change."""
        m = self.y.shape[0]
        counts = np.bincount(self.y, minlength=self.n_classes)
        counts[self.y[row]] -= 1
        present = int(np.count_nonzero(counts))  # classes left without the row (np.unique: 2 ms at 100,000)
        fast = self.K is not None or self.KW is not None
        two = present == 2
        stale = None
        if self.alpha is not None and two:
            pred, dec, stale = self._fit_warm(row)
        elif self.pairs is not None and present == self.n_classes:
            pred, dec = self._fit_pairs(row)
        elif self.working is not None and fast and two:
            pred, dec = self._fit_working_set(row)
        else:
            pred, dec = self.fit_predict(np.concatenate([np.arange(row), np.arange(row + 1, m)]))
        return refit_outcome(row, pred, dec, self.y, self.full_prediction, self.full_decision, stale)


@dataclass
class DualModel:
    """A two-class model from our own solver, shaped like the parts of a fitted SVC that holdfast reads:
    ``f(x) = sum_t dual_coef_t K(x_t, x) + intercept`` with ``dual_coef_t = y_t alpha_t`` (y = +1 for
    class code 1, so f > 0 predicts class 1, as in scikit-learn's two-class SVC)."""

    support_: np.ndarray
    dual_coef_: np.ndarray
    intercept_: np.ndarray
    classes_: np.ndarray
    #: decision values of the training rows, and (kernel, gamma, degree, coef0)
    train_decision: np.ndarray
    kernel_args: tuple[str, float, int, float]

    @classmethod
    def from_dual(
        cls,
        alpha: np.ndarray,
        ypm: np.ndarray,
        rho: float,
        dec: np.ndarray,
        args: tuple[str, float, int, float],
    ) -> DualModel:
        sv = np.flatnonzero(alpha > 0)
        return cls(
            support_=sv,
            dual_coef_=(alpha[sv] * ypm[sv])[None, :],
            intercept_=np.array([-rho]),
            classes_=np.array([0, 1]),
            train_decision=dec,
            kernel_args=args,
        )

    def decision_rows(self, X: np.ndarray, X_train: np.ndarray) -> np.ndarray:
        """Decision values of new rows ``X``, kernel values against the support rows only (in chunks)."""
        out = np.empty(len(X))
        for k in range(0, len(X), 2048):
            cross = kernel_matrix(X[k : k + 2048], X_train[self.support_], *self.kernel_args)
            out[k : k + 2048] = cross @ self.dual_coef_[0] + self.intercept_[0]
        return out

    def decision_function(self, K_cross: np.ndarray) -> np.ndarray:
        """Decision values from the kernel values of new rows against the training rows."""
        return K_cross[:, self.support_] @ self.dual_coef_[0] + self.intercept_[0]
