"""Soft-margin SVM with exact leave-one-out by refitting support rows.

Why only support rows: the SVM solution depends on the training rows only through those with a non-zero
dual weight; removing any other row leaves the optimum unchanged, so its leave-one-out prediction is its
training prediction (Vapnik 1995, *The Nature of Statistical Learning Theory*; the same argument gives the
bound LOO errors <= number of support vectors).

To keep that shortcut exact, everything except the learner is frozen: ``gamma="scale"``/``"auto"`` and
``class_weight="balanced"`` are resolved once on the full training matrix and the same numbers are used by
every refit. The kernel matrix is computed once (``kernel="precomputed"``) when it fits in memory
(``PRECOMPUTE_MAX_ROWS``). Then the full fit is our own solver (:mod:`holdfast.learners.smo`; one-vs-one
machines for more classes, :mod:`holdfast.learners.pairs`) and every refit starts warm from its solution
(:mod:`holdfast.learners.svm_refit`). Above the limit, two classes: libsvm's cold fit (scikit-learn's SVC,
with its shrinking and kernel cache) is the start, our solver takes it to the same tolerance as below the
limit, and every refit starts warm from that solution; the kernel rows of the support rows and rows near
the margin are stored against all rows (closest to the margin first, up to ``WORKING_ROWS_MAX_BYTES``),
the others computed from X when needed. The linear kernel with two classes uses its own solver from the
primal vector at every size (:mod:`holdfast.learners.smo_linear`); above the limit its full fit is ours
too (libsvm's took over 45 minutes at 100,000 rows). More than two classes above the limit: libsvm's fit
chooses the kernel rows to store (the support rows of any machine, free ones first), then one-vs-one
machines of our own as below the limit. ``solver="libsvm"`` gives the SVC engine (two-class
refits on a working set) everywhere.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from sklearn.svm import SVC

from holdfast.errors import SpecError
from holdfast.learners import smo, smo_linear, warm
from holdfast.learners.base import FittedModel, signed_margins
from holdfast.learners.face import FaceInverse
from holdfast.learners.kernels import kernel_matrix, resolve_gamma, row_margin, submatrix
from holdfast.learners.pairs import PairModel, fit_pairs, pair_decision, vote_codes
from holdfast.learners.svm_refit import (
    WARM_TOL,
    DualModel,
    SVMRefitProblem,
    intercept_is_unique,
    intercept_movers,
    tie_tolerance,
)

__all__ = [
    "SVMLearner",
    "SVMRefitProblem",
    "kernel_matrix",
    "resolve_gamma",
    "row_margin",
    "submatrix",
    "validate_svm_params",
]

KERNELS = ("linear", "rbf", "poly")
DEFAULTS: dict[str, Any] = {
    "kernel": "rbf",
    "C": 1.0,
    "gamma": "scale",
    "degree": 3,
    "coef0": 0.0,
    "class_weight": "none",
    "tol": 1e-6,
    "ties": "auto",
}
#: How a decision value within the tie allowance of 0 gets its sign (``svm_refit.tie_tolerance``):
#: "libsvm" solves that refit again with libsvm, cold, so that the sign is the one scikit-learn's SVC (and
#: so its LeaveOneOut) gives; "optimum" keeps the sign of our refit, solved to ``WARM_TOL``: the sign at the
#: optimum of the problem without the row, which a solver stopping at ``tol`` may miss; "auto" is "libsvm"
#: up to ``TIES_LIBSVM_MAX_ROWS`` training rows and "optimum" above.
TIES = ("auto", "libsvm", "optimum")
#: Above this many training rows a cold libsvm solve per near-tie costs more than the rest of the scan (at
#: 10,000 RBF rows: 68 of 3,036 refits, a third of the LOO time; linear kernel at 20,000 rows: every refit,
#: hours), so "auto" keeps the optimum's sign there.
TIES_LIBSVM_MAX_ROWS = 5_000
#: Largest training set for which the kernel matrix is precomputed (m*m float64: 1.2 GB at 12,000).
PRECOMPUTE_MAX_ROWS = 12_000
#: Above that, two-class refits keep the working set fast with the kernel rows of the initial working set
#: against all training rows (|W| x m float64), if they take at most this many bytes.
WORKING_ROWS_MAX_BYTES = 2 * 1024**3
#: Rows with y f(x) below 1 + this start in the working set of a two-class refit (others join if needed).
#: 0.2 rather than 0.5: 11-25% less time per refit on the demo data at 3,000-15,000 rows, the same results
#: (the KKT check adds any row that is needed); 0.0 needs a second solve too often (bench_scan_scale.py).
WORKING_SET_SLACK = 0.2
#: From this many training rows, two-class RBF/polynomial refits leave rows far from the margin under a
#: certificate (``warm.Certificate``) and update the active rows after Newton steps from one dense block
#: (``FaceInverse.KN``). Below, both cost more than they save: their numpy work holds the GIL that the
#: refit threads share (2,000 rows, two threads: LOO 1.3 -> 1.8 s); even at 5,000 rows; per refit 13.1 ->
#: 12.0 ms at 10,000 rows, 50 -> 29 ms at 20,000 and 172 -> 84 ms at 50,000 (one thread, saved problems).
CERTIFY_MIN_ROWS = 4_000
#: Kernel values per block when decision values are computed from kernel blocks (32 MB of float64).
COMBO_BLOCK_VALUES = 4_000_000
#: Kernel rows cached by our solver when it computes them from X (linear kernel above the limit):
#: 128 x m float64 per solve (100 MB at 100,000 rows).
LINEAR_CACHE_ROWS = 128
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
    if out["ties"] not in TIES:
        raise SpecError(f"{source}: 'learner.ties' must be one of {' | '.join(TIES)}, got {out['ties']!r}")
    return out


class SVMLearner:
    """Soft-margin SVM; parameters as in the spec (kernel, C, gamma, degree, coef0, class_weight, tol,
    ties)."""

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
        ties: str = "auto",
        precompute_max_rows: int = PRECOMPUTE_MAX_ROWS,
        working_set: bool = True,
        solver: str = "own",
    ) -> None:
        self.kernel = kernel
        self.C = C
        self.gamma = gamma
        self.degree = degree
        self.coef0 = coef0
        self.class_weight = class_weight
        self.tol = tol
        self.ties = ties
        self.precompute_max_rows = precompute_max_rows
        self.working_set = working_set
        #: "own": two-class fits and refits with our solver (holdfast.learners.smo) when the kernel matrix
        #: is precomputed; "libsvm": scikit-learn's SVC for every fit (the engine of earlier versions)
        self.solver = solver

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
        auto = "libsvm" if m <= TIES_LIBSVM_MAX_ROWS else "optimum"
        self.ties_ = auto if self.ties == "auto" else self.ties
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
            ties=self.ties_,
        )
        row_c = self.C * (np.array([weights[c] for c in y]) if weights else np.ones(m))
        clf: SVC | DualModel | PairModel
        own: DualModel | PairModel | None = None
        kernel: smo.Kernel | None = None
        seed_svc: SVC | None = None
        order: np.ndarray | None = None  # the solver's order of the rows (SVMRefitProblem.order)
        if self.solver == "own" and K is not None and self.kernel == "linear" and n_classes == 2:
            # linear: SMO from the primal vector (learners.smo_linear) beats kernel rows at every size
            seed_svc = SVC(kernel="linear", **svc_params).fit(X, y)
            kernel = smo.Kernel(X=X, kind="linear", cache_rows=LINEAR_CACHE_ROWS)
        elif self.solver == "own" and K is not None:
            kernel = smo.Kernel(K=K)
        elif self.solver == "own" and n_classes == 2 and self.kernel == "linear":
            # linear above the limit: our own fit from the primal vector (libsvm's took over 45 minutes at
            # 100,000 rows x 20 features), started from a solve on every tenth row (smo_linear.fit_staged)
            kernel = smo.Kernel(X=X, kind="linear", cache_rows=LINEAR_CACHE_ROWS)
        elif self.solver == "own" and n_classes == 2:
            # above the limit: libsvm's cold fit (shrinking, its own kernel cache) is the start, our solver
            # takes it to WARM_TOL with the most used kernel rows stored, and every refit starts from it
            seed_svc = SVC(**svc_params).fit(X, y)
            kernel, order = self._stored_rows_kernel(X, y, seed_svc, row_c)
        elif self.solver == "own" and self.kernel == "linear":  # no m x m matrix: K(x_i, .) = X x_i
            kernel = smo.Kernel(X=X, kind="linear", cache_rows=LINEAR_CACHE_ROWS)
        elif self.solver == "own" and n_classes > 2 and np.all(np.bincount(y, minlength=n_classes) > 0):
            # more classes above the limit: one-vs-one machines of our own (a refit re-solves only the
            # machines the row is a support row of), the kernel rows of libsvm's support rows stored
            seed_svc = SVC(**svc_params).fit(X, y)
            kernel, _ = self._stored_rows_kernel(X, y, seed_svc, row_c)
        if kernel is not None and n_classes == 2:
            own = self._fit_own(kernel, y, row_c, problem, seed_svc, order)
        elif kernel is not None and np.all(np.bincount(y, minlength=n_classes) > 0):
            own = self._fit_own_pairs(kernel, y, row_c, n_classes, problem)
        self.svc_on_X_ = False
        checked = self.ties_ == "libsvm" and own is not None and kernel is not None
        if checked and self._reference_decides(own, kernel, problem):  # type: ignore[arg-type]
            # a training decision value within the tie tolerance of 0, or an intercept that is not unique
            # (libsvm's choice in the interval depends on its final state): the full model is the
            # reference's own computation (libsvm computing the kernel from X), so that its signs are the
            # reference's; refits still start warm from our solution (an optimum of the same problem)
            if seed_svc is not None:  # already fitted on X above the limit
                clf = seed_svc
            else:
                on_x = {"kernel": self.kernel, "gamma": gamma, "degree": self.degree, "coef0": self.coef0}
                clf = SVC(**{**svc_params, **on_x}).fit(X, y)  # svc_params has them above the limit
            self.svc_on_X_ = True
        elif own is not None:
            clf = own
        elif K is not None:
            clf = SVC(kernel="precomputed", **svc_params).fit(K, y)
        else:
            clf = SVC(**svc_params).fit(X, y)
        self.svc_ = clf
        problem.X_ref = X
        problem.kernel_args = (self.kernel, gamma, self.degree, self.coef0)
        if own is not None and clf is own:
            decision = own.train_decision
        else:
            decision = self._train_decision(clf, None if self.svc_on_X_ else K, X, n_classes)
        prediction = self._codes(decision, clf.classes_)
        if self.svc_on_X_:
            prediction = np.asarray(clf.predict(X), dtype=np.int64)  # libsvm's own vote, as the reference
        problem.full_prediction = prediction
        problem.full_decision = decision
        if n_classes == 2 and self.working_set and problem.alpha is None:
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
        bounded = support & np.isclose(alpha, row_c, rtol=1e-8, atol=0.0)
        margin = signed_margins(decision, y)
        # rows off the support set whose removal can free the intercept (of a one-vs-one machine): refit
        # them too
        movers = np.empty(0, dtype=np.int64)
        if n_classes == 2:
            ypm = np.where(y == 1, 1.0, -1.0)
            intercept = float(np.ravel(clf.intercept_)[0])
            movers = intercept_movers(ypm, decision, row_c, support, intercept, self._mover_eps())
        elif problem.pairs is not None:
            movers = np.concatenate([s.idx[s.movers] for s in problem.pairs if s.movers is not None])
            movers = movers[~support[movers]]
        refit_rows = np.union1d(np.flatnonzero(support), movers) if movers.size else None
        extras: dict[str, Any] = {"kernel_r2": self._kernel_r2(K, X, gamma), "decision": decision}
        extras["ties"] = self.ties_
        extras["tie_allowance"] = tie_tolerance(self.tol, float(alpha.sum()), self._k_max(K, X))
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
            refit_rows=refit_rows,
        )

    def _kernel_is_psd(self) -> bool:
        """True when the kernel is positive semi-definite whatever the data, so that it is an inner product
        in some feature space (what the refit certificate's Cauchy-Schwarz bound needs): RBF and linear
        always; the polynomial kernel (gamma x'z + coef0)^degree for coef0 >= 0 (a sum of powers of x'z
        with non-negative weights: products of positive semi-definite kernels are positive semi-definite,
        the Schur product theorem; e.g. Shawe-Taylor & Cristianini 2004, *Kernel Methods for Pattern
        Analysis*, chapter 3 on the properties of kernels). With coef0 < 0 it can be indefinite: no
        certificate."""
        if self.kernel == "poly":
            return self.coef0 >= 0 and self.gamma_ > 0 and self.degree >= 1
        return True

    def _seed_decision(self, X: np.ndarray, seed: SVC) -> np.ndarray:
        """A two-class SVC's decision values on X, ``dual_coef_ K(support, x) + intercept_``, from kernel
        blocks against its support rows (BLAS, in chunks): what ``seed.decision_function(X)`` gives, to
        rounding (libsvm works row by row: 3.1 s against 0.4 s at 20,000 rows). Used only to choose the
        rows whose kernel rows are stored."""
        sv = X[seed.support_]
        coef = seed.dual_coef_[0]
        out = np.empty(len(X))
        step = max(1, COMBO_BLOCK_VALUES // max(1, len(sv)))
        for k in range(0, len(X), step):
            block = kernel_matrix(X[k : k + step], sv, self.kernel, self.gamma_, self.degree, self.coef0)
            out[k : k + step] = block @ coef + seed.intercept_[0]
        return out

    def _stored_rows_kernel(
        self, X: np.ndarray, y: np.ndarray, seed: SVC, row_c: np.ndarray
    ) -> tuple[smo.Kernel, np.ndarray | None]:
        """Kernel rows from X, with the rows refits use most stored (``smo.Kernel.KW``): support rows and
        rows near the margin under ``seed``, closest to the margin first, up to ``WORKING_ROWS_MAX_BYTES``
        (none for the linear kernel, whose sums go through the primal vector). Two classes: the kernel is
        in the solver's order (``SVMRefitProblem.order``, returned with it): those rows first, the others
        after them; more classes: training order (None)."""
        m = len(y)
        args = dict(kind=self.kernel, gamma=self.gamma_, degree=self.degree, coef0=self.coef0)
        if self.kernel == "linear":
            return smo.Kernel(X=X, cache_rows=LINEAR_CACHE_ROWS, **args), None  # type: ignore[arg-type]
        budget = max(0, int(WORKING_ROWS_MAX_BYTES // (8 * m)))
        order = None
        if len(seed.classes_) > 2:  # one-vs-one machines: the support rows of any machine, free ones first
            free = np.abs(seed.dual_coef_).max(axis=0) < 0.999 * row_c[seed.support_]
            rows = np.sort(seed.support_[np.argsort(~free, kind="stable")][:budget])
        else:
            ypm = np.where(y == 1, 1.0, -1.0)
            yf = ypm * self._seed_decision(X, seed)
            first = yf < 1.0 + WORKING_SET_SLACK
            first[seed.support_] = True
            near = np.flatnonzero(first)
            rows = np.sort(near[np.argsort(np.abs(yf[near] - 1.0), kind="stable")][:budget])
            order = np.concatenate([near, np.flatnonzero(~first)])
        rank = np.arange(m) if order is None else np.argsort(order)
        Xs = X if order is None else np.ascontiguousarray(X[order])
        wpos = np.full(m, -1, dtype=np.int64)
        wpos[rank[rows]] = np.arange(len(rows))
        KW = np.empty((len(rows), m))
        for k in range(0, len(rows), 512):
            KW[k : k + 512] = kernel_matrix(
                X[rows[k : k + 512]], Xs, self.kernel, self.gamma_, self.degree, self.coef0
            )
        kernel = smo.Kernel(X=Xs, cache_rows=LINEAR_CACHE_ROWS, KW=KW, wpos=wpos, **args)  # type: ignore[arg-type]
        return kernel, order

    def _fit_own(
        self,
        kernel: smo.Kernel,
        y: np.ndarray,
        row_c: np.ndarray,
        problem: SVMRefitProblem,
        seed: SVC | None = None,
        order: np.ndarray | None = None,
    ) -> DualModel:
        """Two classes: our own SMO solver (holdfast.learners.smo), to ``WARM_TOL``, cold or from the
        solution of ``seed`` (libsvm's fit, above the limit); the solution is kept in ``problem`` as the
        warm start of every refit. ``order``: the kernel's order of the rows (``SVMRefitProblem.order``);
        ``y``, ``row_c`` and the returned model are in training order."""
        m = len(y)
        if order is not None:
            problem.set_order(order)
            y, row_c = y[order], row_c[order]
        ypm = np.where(y == 1, 1.0, -1.0)
        linear = smo_linear.is_linear(kernel)
        if seed is None and linear:
            alpha, grad, rho = smo_linear.fit_staged(kernel, ypm, row_c.astype(np.float64), WARM_TOL)
        elif seed is None:
            alpha, grad, rho, _ = smo.fit_dual(kernel, np.arange(m), ypm, row_c.astype(np.float64), WARM_TOL)
        else:
            alpha = np.zeros(m)
            alpha[seed.support_] = np.abs(seed.dual_coef_[0])
            if order is not None:
                alpha = alpha[order]
            if linear:  # SMO from the primal vector with face steps (no kernel rows at all)
                alpha, grad, rho = smo_linear.fit_dual(kernel, ypm, row_c.astype(np.float64), WARM_TOL, alpha)
            else:
                alpha, grad, rho = warm.tighten(kernel, ypm, row_c.astype(np.float64), alpha, WARM_TOL)
        problem.solver = kernel
        problem.alpha, problem.grad, problem.c_row = alpha, grad, row_c.astype(np.float64)
        problem.qd = kernel.diag(np.arange(m))
        dec = ypm * (grad + 1.0) - rho
        problem.near = smo_linear.near_rows(ypm, dec) if linear else ypm * dec < 1.0 + WORKING_SET_SLACK
        large = m >= CERTIFY_MIN_ROWS
        problem.certify = large and self._kernel_is_psd()
        if not linear:
            work = np.flatnonzero(problem.near | ((alpha > 0) & (alpha < problem.c_row)))
            near = work if large else None
            problem.face = FaceInverse.build(kernel, np.arange(m), ypm, alpha, problem.c_row, near)
        if order is not None:  # the model in training order
            rank = problem.rank
            assert rank is not None
            alpha, ypm, dec = alpha[rank], ypm[rank], dec[rank]
        return DualModel.from_dual(alpha, ypm, rho, dec, self._args())

    def _fit_own_pairs(
        self, kernel: smo.Kernel, y: np.ndarray, row_c: np.ndarray, n_classes: int, problem: SVMRefitProblem
    ) -> PairModel:
        """More than two classes: one-vs-one machines with our own solver (holdfast.learners.pairs); the
        solutions are kept in ``problem`` so that a refit re-solves only the machines a row is in."""
        states = fit_pairs(kernel, y, row_c.astype(np.float64), n_classes, WARM_TOL)
        for s in states:  # rows off a machine's support set that can move its intercept (see fit)
            dec, intercept = s.intercept_parts()
            s.movers = intercept_movers(s.ypm, dec, s.c, s.alpha > 0, intercept, self._mover_eps())
        problem.solver = kernel
        problem.pairs = states
        problem.ovo_full = np.column_stack(
            [pair_decision(kernel, *s.coef(), s.rho) for s in states]  # all training rows, pair order
        )
        return PairModel.from_states(states, n_classes, len(y), problem.ovo_full, self._args())

    def _mover_eps(self) -> float:
        """How close a row's kink must be to an end of the optimal intercept interval to be refitted
        (``svm_refit.intercept_movers``): a wide margin over the solver's tolerance."""
        return 100.0 * self.tol

    def _args(self) -> tuple[str, float, int, float]:
        return (self.kernel, self.gamma_, self.degree, self.coef0)

    def _reference_decides(
        self, own: DualModel | PairModel, kernel: smo.Kernel, problem: SVMRefitProblem
    ) -> bool:
        """True when a training decision value of our own fit is within ``tie_tolerance`` of 0, or the
        intercept (of a one-vs-one machine) is not unique (``svm_refit.intercept_is_unique``)."""
        k_max = float(np.max(kernel.diag(np.arange(len(problem.y)))))
        eps = 100.0 * self.tol  # the kink tolerance of the refits' check (SVMRefitProblem._unique)
        if isinstance(own, DualModel):
            assert problem.alpha is not None and problem.grad is not None and problem.c_row is not None
            ypm = np.where(problem.in_solver_order(problem.y) == 1, 1.0, -1.0)  # as grad
            g = ypm * (problem.grad + 1.0)
            intercept = float(own.intercept_[0])
            if not intercept_is_unique(ypm, g, problem.c_row, intercept, eps):
                return True
            return bool(
                np.min(np.abs(g + intercept)) < tie_tolerance(self.tol, float(problem.alpha.sum()), k_max)
            )
        assert problem.pairs is not None and problem.ovo_full is not None
        if not all(
            intercept_is_unique(s.ypm, s.ypm * (s.grad + 1.0), s.c, -s.rho, eps) for s in problem.pairs
        ):
            return True
        sums = np.array([s.alpha.sum() for s in problem.pairs])
        limits = np.array([tie_tolerance(self.tol, float(a), k_max) for a in sums])
        return bool(np.any(np.min(np.abs(problem.ovo_full), axis=0) < limits))

    def _k_max(self, K: np.ndarray | None, X: np.ndarray) -> float:
        """The largest K(x, x) over the training rows."""
        if K is not None:
            return float(K.diagonal().max())
        if self.kernel == "rbf":
            return 1.0
        sq = np.einsum("ij,ij->i", X, X)
        if self.kernel == "linear":
            return float(sq.max())
        return float(np.max((self.gamma_ * sq + self.coef0) ** self.degree))

    def _kernel_r2(self, K: np.ndarray | None, X: np.ndarray, gamma: float) -> float:
        """R^2 = max K - min K over the training kernel values (for the xi-alpha estimate)."""
        if K is None:
            idx = np.random.default_rng(0).choice(X.shape[0], size=min(X.shape[0], 4000), replace=False)
            K = kernel_matrix(X[idx], X[idx], self.kernel, gamma, self.degree, self.coef0)
        return float(K.max() - K.min())

    def _train_decision(
        self, clf: SVC | DualModel | PairModel, K: np.ndarray | None, X: np.ndarray, n_classes: int
    ) -> np.ndarray:
        if n_classes == 2 and K is not None:
            return clf.dual_coef_[0] @ K[clf.support_] + clf.intercept_[0]  # K symmetric: row gather
        return clf.decision_function(K if K is not None else X)

    @staticmethod
    def _codes(decision: np.ndarray, classes: np.ndarray) -> np.ndarray:
        if decision.ndim == 1:
            return np.where(decision > 0, classes[1], classes[0]).astype(np.int64)
        return classes[vote_codes(decision)].astype(np.int64)

    # -- after fitting -------------------------------------------------------------------------------
    def refit_problem(self) -> SVMRefitProblem:
        """The problem of the last fit, for exact LOO refits."""
        return self.problem_

    def decision(self, X: np.ndarray) -> np.ndarray:
        """Decision values for new rows under the fitted model."""
        X = np.ascontiguousarray(X, dtype=np.float64)
        if isinstance(self.svc_, DualModel | PairModel) and self.problem_.K is None:
            return self.svc_.decision_rows(X, self.X_train_)
        if self.problem_.K is not None and not self.svc_on_X_:
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
            "ties": self.ties,
            "ties_resolved": getattr(self, "ties_", None),
            "precomputed_kernel": getattr(self, "problem_", None) is not None and self.problem_.K is not None,
        }
