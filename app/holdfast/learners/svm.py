"""Soft-margin SVM (scikit-learn's SVC, libsvm) with exact leave-one-out by refitting support rows.

Why only support rows: the SVM solution depends on the training rows only through those with a non-zero
dual weight; removing any other row leaves the optimum unchanged, so its leave-one-out prediction is its
training prediction (Vapnik 1995, *The Nature of Statistical Learning Theory*; the same argument gives the
bound LOO errors <= number of support vectors).

To keep that shortcut exact, everything except the learner is frozen: ``gamma="scale"``/``"auto"`` and
``class_weight="balanced"`` are resolved once on the full training matrix and the same numbers are used by
every refit. The kernel matrix is computed once and sliced for each refit (``kernel="precomputed"``) when
it fits in memory (``PRECOMPUTE_MAX_ROWS``). Two-class refits solve on a working set (support rows and rows
near the margin) and then check every other row's optimality condition. Above the limit, the kernel rows of
the first working set against all rows are computed once instead (``WORKING_ROWS_MAX_BYTES``), and the few
rows a refit adds to its working set get theirs computed on demand; beyond that budget (or with more than
two classes) each refit is a full libsvm fit with its own kernel cache: exact, but several times slower.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
from sklearn.metrics.pairwise import polynomial_kernel, rbf_kernel
from sklearn.svm import SVC

from holdfast.errors import SpecError
from holdfast.learners.base import FittedModel, RefitOutcome, signed_margins

KERNELS = ("linear", "rbf", "poly")
DEFAULTS: dict[str, Any] = {
    "kernel": "rbf",
    "C": 1.0,
    "gamma": "scale",
    "degree": 3,
    "coef0": 0.0,
    "class_weight": "none",
    "tol": 1e-6,
}
#: Largest training set for which the kernel matrix is precomputed (m*m float64: 1.2 GB at 12,000).
PRECOMPUTE_MAX_ROWS = 12_000
#: Above that, two-class refits keep the working set fast with the kernel rows of the initial working set
#: against all training rows (|W| x m float64), if they take at most this many bytes.
WORKING_ROWS_MAX_BYTES = 2 * 1024**3
#: Rows with y f(x) below 1 + this start in the working set of a two-class refit (others join if needed).
#: 0.2 rather than 0.5: 11-25% less time per refit on the demo data at 3,000-15,000 rows, the same results
#: (the KKT check adds any row that is needed); 0.0 needs a second solve too often (bench_scan_scale.py).
WORKING_SET_SLACK = 0.2
#: A refit whose training decision values all move by less than this left the model unchanged.
ESSENTIAL_TOL = 1e-4


#: Accepted ranges of the SVM parameters (ours; common practice). Beyond them a fit on standard-scaled
#: data takes minutes or never ends, and libsvm's solver cannot be interrupted while it runs: a C above
#: 1e5 asks for a nearly hard margin on data that is not separable (the solver's iteration count grows
#: with C), a numeric gamma below 1e-6 makes every kernel value nearly 1 (an ill-conditioned problem) and
#: one above 1e4 makes every row its own island, and a polynomial degree above 10 overflows the kernel
#: values of standard-scaled rows. Usual grid searches stay well inside (C 1e-3..1e3, gamma 1e-4..10).
C_RANGE = (1e-6, 1e5)
GAMMA_RANGE = (1e-6, 1e4)
DEGREE_RANGE = (1, 10)


def _in_range(value: float, limits: tuple[float, float]) -> bool:
    return limits[0] <= value <= limits[1]


def validate_svm_params(table: dict[str, Any], source: str) -> dict[str, Any]:
    """Validate the ``[learner]`` table of the svm family and fill in defaults (ranges: ``C_RANGE``...)."""
    out = {"family": "svm", **DEFAULTS, **{k: v for k, v in table.items() if k != "family"}}
    if out["kernel"] not in KERNELS:
        raise SpecError(
            f"{source}: 'learner.kernel' must be one of {' | '.join(KERNELS)}, got {out['kernel']!r}"
        )
    c = out["C"]
    if isinstance(c, bool) or not isinstance(c, int | float) or not c > 0 or not np.isfinite(c):
        raise SpecError(f"{source}: 'learner.C' must be a positive number, got {c!r}")
    if not _in_range(c, C_RANGE):
        raise SpecError(
            f"{source}: 'learner.C' must be between {C_RANGE[0]:g} and {C_RANGE[1]:g}, got {c!r} "
            f"(beyond, the fit takes minutes or never ends)"
        )
    out["C"] = float(c)
    g = out["gamma"]
    if isinstance(g, str):
        if g not in ("scale", "auto"):
            raise SpecError(
                f'{source}: \'learner.gamma\' must be "scale", "auto" or a positive number, got {g!r}'
            )
    elif isinstance(g, bool) or not isinstance(g, int | float) or not g > 0 or not np.isfinite(g):
        raise SpecError(
            f'{source}: \'learner.gamma\' must be "scale", "auto" or a positive number, got {g!r}'
        )
    elif not _in_range(g, GAMMA_RANGE):
        raise SpecError(
            f"{source}: 'learner.gamma' must be between {GAMMA_RANGE[0]:g} and {GAMMA_RANGE[1]:g}, got "
            f"{g!r} (beyond, the kernel is nearly constant or every row is its own island)"
        )
    else:
        out["gamma"] = float(g)
    d = out["degree"]
    if isinstance(d, bool) or not isinstance(d, int) or d < 1:
        raise SpecError(f"{source}: 'learner.degree' must be a positive integer, got {d!r}")
    if not _in_range(d, DEGREE_RANGE):
        raise SpecError(
            f"{source}: 'learner.degree' must be between {DEGREE_RANGE[0]} and {DEGREE_RANGE[1]}, got {d!r} "
            f"(higher degrees overflow the kernel values)"
        )
    c0 = out["coef0"]
    if isinstance(c0, bool) or not isinstance(c0, int | float) or not np.isfinite(c0):
        raise SpecError(f"{source}: 'learner.coef0' must be a number, got {c0!r}")
    out["coef0"] = float(c0)
    if out["class_weight"] not in ("none", "balanced"):
        raise SpecError(
            f'{source}: \'learner.class_weight\' must be "none" or "balanced", got {out["class_weight"]!r}'
        )
    t = out["tol"]
    if isinstance(t, bool) or not isinstance(t, int | float) or not 0 < t < 1:
        raise SpecError(f"{source}: 'learner.tol' must be a number in (0, 1), got {t!r}")
    out["tol"] = float(t)
    return out


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
        """True when no other intercept is optimal for the refit's weight vector.

        With w fixed, the primal objective as a function of the intercept b is
        ``h(b) = sum_i C_i max(0, 1 - y_i (g_i + b))`` (g_i = f(x_i) - intercept), convex and piecewise
        linear with kinks at t_i = y_i - g_i (Cortes & Vapnik 1995, "Support-vector networks", Machine
        Learning 20: the soft-margin primal). The optimal b form an interval; when it is wider than a point,
        several models are optimal and the solver's choice among them depends on every row (libsvm takes
        the middle of the interval), so a working-set solve may pick another one than a full refit. That
        happens exactly when h is flat on one side of the solution: a one-sided slope of zero.
        """
        y = np.where(self.y == 1, 1.0, -1.0)
        keep = np.ones(len(y), dtype=bool)
        keep[row] = False
        y, t, c = y[keep], (y - (dec - intercept))[keep], self._row_c(np.flatnonzero(keep))
        eps = 100.0 * float(self.svc_params.get("tol", 1e-6))  # rows this close to the kink sit on it
        pos, neg = y > 0, y < 0
        right = -c[pos & (t > intercept + eps)].sum() + c[neg & (t <= intercept + eps)].sum()
        left = -c[pos & (t > intercept - eps)].sum() + c[neg & (t < intercept - eps)].sum()
        flat = 1e-9 * float(c.max())
        return right > flat and left < -flat

    def _fit_without(self, row: int) -> tuple[np.ndarray, np.ndarray | None]:
        """The whole problem without ``row`` (what a working-set solve falls back to)."""
        m = self.y.shape[0]
        return self.fit_predict(np.concatenate([np.arange(row), np.arange(row + 1, m)]))

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
        pred = clf.classes_[np.argmax(dec, axis=1)].astype(np.int64)
        return pred, (dec if present.size == self.n_classes else None)

    def refit_without(self, row: int) -> RefitOutcome:
        """Refit without training row ``row``; its LOO prediction, the flipped rows, the largest change."""
        m = self.y.shape[0]
        keep = np.concatenate([np.arange(row), np.arange(row + 1, m)])
        fast = self.K is not None or self.KW is not None
        if self.working is not None and fast and np.unique(self.y[keep]).size == 2:
            pred, dec = self._fit_working_set(row)
        else:
            pred, dec = self.fit_predict(keep)
        changed = pred != self.full_prediction
        changed[row] = False
        max_change = float(np.max(np.abs(dec - self.full_decision))) if dec is not None else float("inf")
        return RefitOutcome(
            row=row,
            loo_code=int(pred[row]),
            flipped=np.flatnonzero(changed).astype(np.int64),
            max_change=max_change,
            loo_margin=row_margin(dec[row], int(self.y[row])) if dec is not None else float("nan"),
        )


class SVMLearner:
    """Soft-margin SVM; parameters as in the spec (kernel, C, gamma, degree, coef0, class_weight, tol)."""

    family = "svm"

    def __init__(
        self,
        kernel: str = "rbf",
        C: float = 1.0,
        gamma: str | float = "scale",
        degree: int = 3,
        coef0: float = 0.0,
        class_weight: str = "none",
        tol: float = 1e-6,
        precompute_max_rows: int = PRECOMPUTE_MAX_ROWS,
        working_set: bool = True,
    ) -> None:
        self.kernel = kernel
        self.C = C
        self.gamma = gamma
        self.degree = degree
        self.coef0 = coef0
        self.class_weight = class_weight
        self.tol = tol
        self.precompute_max_rows = precompute_max_rows
        self.working_set = working_set

    # -- fitting -------------------------------------------------------------------------------------
    def fit(self, X: np.ndarray, y: np.ndarray) -> FittedModel:
        """Fit on the prepared training matrix; resolve gamma and class weights once (frozen for refits)."""
        X = np.ascontiguousarray(X, dtype=np.float64)
        y = np.asarray(y, dtype=np.int64)
        m = X.shape[0]
        n_classes = int(y.max()) + 1
        gamma = resolve_gamma(self.gamma, X)
        weights: dict[int, float] | None = None
        if self.class_weight == "balanced":
            counts = np.bincount(y, minlength=n_classes)
            weights = {c: float(m / (n_classes * counts[c])) for c in range(n_classes) if counts[c] > 0}
        self.gamma_ = gamma
        self.class_weight_ = weights
        self.X_train_ = X
        svc_params: dict[str, Any] = {
            "C": self.C,
            "tol": self.tol,
            "class_weight": weights,
            "cache_size": 500,
        }
        K = None
        if m <= self.precompute_max_rows:
            K = kernel_matrix(X, X, self.kernel, gamma, self.degree, self.coef0)
        else:
            svc_params.update(kernel=self.kernel, gamma=gamma, degree=self.degree, coef0=self.coef0)
        problem = SVMRefitProblem(
            y=y,
            n_classes=n_classes,
            svc_params=svc_params,
            full_prediction=np.empty(0),
            full_decision=np.empty(0),
            K=K,
            X=None if K is not None else X,
        )
        if K is not None:
            clf = SVC(kernel="precomputed", **svc_params).fit(K, y)
        else:
            clf = SVC(**svc_params).fit(X, y)
        self.svc_ = clf
        decision = self._train_decision(clf, K, X, n_classes)
        prediction = self._codes(decision, clf.classes_)
        problem.full_prediction = prediction
        problem.full_decision = decision
        if n_classes == 2 and self.working_set:
            ypm = np.where(y == 1, 1.0, -1.0)
            near = np.flatnonzero(
                (ypm * decision < 1.0 + WORKING_SET_SLACK) | np.isin(np.arange(m), clf.support_)
            )
            if len(near) < 0.8 * m and K is not None:
                problem.working = near
            elif len(near) < 0.8 * m and len(near) * m * 8 <= WORKING_ROWS_MAX_BYTES:
                args = (self.kernel, gamma, self.degree, self.coef0)
                problem.KW = kernel_matrix(X[near], X, *args)
                problem.w_pos = np.full(m, -1, dtype=np.int64)
                problem.w_pos[near] = np.arange(len(near))
                problem.kernel_args = args
                problem.working = near
        self.problem_ = problem

        support = np.zeros(m, dtype=bool)
        support[clf.support_] = True
        alpha = np.zeros(m)
        coef = np.abs(clf.dual_coef_)
        alpha[clf.support_] = coef.max(axis=0)
        row_c = self.C * (np.array([weights[c] for c in y]) if weights else np.ones(m))
        bounded = support & np.isclose(alpha, row_c, rtol=1e-8, atol=0.0)
        margin = signed_margins(decision, y)
        extras: dict[str, Any] = {"kernel_r2": self._kernel_r2(K, X, gamma), "decision": decision}
        if K is not None:
            extras["K"] = K
        return FittedModel(
            family="svm",
            params=self.resolved_params(),
            classes=np.arange(n_classes),
            y=y,
            prediction=prediction,
            margin=margin,
            support=support,
            alpha=alpha,
            bounded=bounded,
            loo_exact=True,
            extras=extras,
        )

    def _kernel_r2(self, K: np.ndarray | None, X: np.ndarray, gamma: float) -> float:
        """R^2 = max K - min K over the training kernel values (for the xi-alpha estimate)."""
        if K is None:
            idx = np.random.default_rng(0).choice(X.shape[0], size=min(X.shape[0], 4000), replace=False)
            K = kernel_matrix(X[idx], X[idx], self.kernel, gamma, self.degree, self.coef0)
        return float(K.max() - K.min())

    def _train_decision(self, clf: SVC, K: np.ndarray | None, X: np.ndarray, n_classes: int) -> np.ndarray:
        if n_classes == 2 and K is not None:
            return clf.dual_coef_[0] @ K[clf.support_] + clf.intercept_[0]  # K symmetric: row gather
        return clf.decision_function(K if K is not None else X)

    @staticmethod
    def _codes(decision: np.ndarray, classes: np.ndarray) -> np.ndarray:
        if decision.ndim == 1:
            return np.where(decision > 0, classes[1], classes[0]).astype(np.int64)
        return classes[np.argmax(decision, axis=1)].astype(np.int64)

    # -- after fitting -------------------------------------------------------------------------------
    def refit_problem(self) -> SVMRefitProblem:
        """The problem of the last fit, for exact LOO refits."""
        return self.problem_

    def decision(self, X: np.ndarray) -> np.ndarray:
        """Decision values for new rows under the fitted model."""
        X = np.ascontiguousarray(X, dtype=np.float64)
        if self.problem_.K is not None:
            cross = kernel_matrix(X, self.X_train_, self.kernel, self.gamma_, self.degree, self.coef0)
            return self.svc_.decision_function(cross)
        return self.svc_.decision_function(X)

    def predict(self, X: np.ndarray) -> np.ndarray:
        """Class codes for new rows."""
        return self._codes(self.decision(X), self.svc_.classes_)

    def resolved_params(self) -> dict[str, Any]:
        """Parameters as used by every fit, with gamma and class weights resolved to numbers."""
        return {
            "family": "svm",
            "kernel": self.kernel,
            "C": self.C,
            "gamma": getattr(self, "gamma_", self.gamma),
            "gamma_spec": self.gamma,
            "degree": self.degree,
            "coef0": self.coef0,
            "class_weight": self.class_weight,
            "class_weight_resolved": getattr(self, "class_weight_", None),
            "tol": self.tol,
            "precomputed_kernel": getattr(self, "problem_", None) is not None and self.problem_.K is not None,
        }
