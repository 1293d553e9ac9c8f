"""L2-regularized logistic regression with approximate LOO for every row and exact refits where it matters.

The model minimizes ``C * sum_i log(1 + exp(-y_i f(x_i))) + ||w||^2 / 2`` with an unpenalized intercept
(scikit-learn's ``LogisticRegression(C=C)`` objective), solved by Newton's method with a backtracking line
search to a gradient of at most ``tol``. Every row has some weight, so there is no small set outside which
removing a row leaves the model unchanged. Instead:

* **Approximate LOO for every row** by one Newton step from the full fit on the objective without the row
  (Rad & Maleki 2020, "A scalable estimate of the out-of-sample prediction error via approximate
  leave-one-out", JRSS-B 82): with the Hessian ``A`` of the full objective, ``h_i = x_i' A^-1 x_i`` and
  ``p_i`` the fitted probability of class 1,
  ``f_-i(x_i) ~= f(x_i) + C (p_i - y_i) h_i / (1 - C p_i (1 - p_i) h_i)`` (Sherman-Morrison, y in {0, 1}).
* **Exact refits** (Newton from the full fit: warm start) for the rows whose approximate LOO decision
  value is within ``REFIT_BAND`` of zero (their LOO prediction could go either way), for the influential
  rows and for every row that the one-step estimate says flips another row; these rows are marked exact.
* **Influential rows** (the family's support rows): Cook's distance for logistic regression (Pregibon
  1981, "Logistic regression diagnostics", Annals of Statistics 9(4)),
  ``D_i = r_i^2 H_ii / (df (1 - H_ii)^2)`` with the Pearson residual ``r_i``, the leverage ``H_ii`` (the
  diagonal of the hat matrix ``C D^1/2 X A^-1 X' D^1/2``) and ``df`` its trace (effective degrees of
  freedom), above ``4 / m`` (common practice: Bollen & Jackman 1985, "Regression diagnostics",
  Sociological Methods & Research 13; from memory).

More than two classes: one-vs-rest, one binary problem per class, the prediction the class with the
largest decision value (scikit-learn's ``OneVsRestClassifier(LogisticRegression(C=C))``).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy.special import expit
from threadpoolctl import ThreadpoolController

from holdfast.errors import SpecError
from holdfast.learners.base import DirectLoo, FittedModel, RefitOutcome, refit_outcome, signed_margins

DEFAULTS: dict[str, Any] = {"C": 1.0, "tol": 1e-8}
#: Rows whose approximate LOO decision value (own class minus best other) is within this of zero get an
#: exact refit. The one-step estimate is within 0.05 of the exact value on breast cancer (C = 0.1,
#: tests/test_learners_logistic.py); the band is ten times that.
REFIT_BAND = 0.5
#: Cook's distance threshold, as a multiple of 1 / m (4 / m: common practice, from memory)
COOK_MULTIPLE = 4.0
#: a row whose removal moves its own decision value by more than this changes the model (essential)
ESSENTIAL_TOL = 1e-4
_MAX_NEWTON = 100
#: bytes of scratch for the one-step estimate of every row's effect on every other row
_BLOCK_BYTES = 64 * 2**20


_CONTROLLER: ThreadpoolController | None = None


def _blas() -> ThreadpoolController:
    """One controller for the process (finding the BLAS libraries costs milliseconds per call)."""
    global _CONTROLLER
    if _CONTROLLER is None:
        _CONTROLLER = ThreadpoolController()
    return _CONTROLLER


def validate_logistic_params(table: dict[str, Any], source: str) -> dict[str, Any]:
    """Validate the ``[learner]`` table of the logistic family and fill in defaults."""
    out = {"family": "logistic", **DEFAULTS, **{k: v for k, v in table.items() if k != "family"}}
    c = out["C"]
    if isinstance(c, bool) or not isinstance(c, int | float) or not c > 0 or not np.isfinite(c):
        raise SpecError(f"{source}: 'learner.C' must be a positive number, got {c!r}")
    out["C"] = float(c)
    t = out["tol"]
    if isinstance(t, bool) or not isinstance(t, int | float) or not 0 < t < 1:
        raise SpecError(f"{source}: 'learner.tol' must be a number in (0, 1), got {t!r}")
    out["tol"] = float(t)
    return out


def _augment(X: np.ndarray) -> np.ndarray:
    return np.column_stack([np.asarray(X, dtype=np.float64), np.ones(len(X))])


def _objective(Xa: np.ndarray, t: np.ndarray, beta: np.ndarray, C: float) -> float:
    f = Xa @ beta
    return float(C * np.logaddexp(0.0, -t * f).sum() + 0.5 * beta[:-1] @ beta[:-1])


def newton_fit(
    Xa: np.ndarray, y01: np.ndarray, C: float, tol: float, beta0: np.ndarray | None = None
) -> np.ndarray:
    """Minimize C sum log(1 + exp(-t_i x_i' beta)) + |beta without intercept|^2 / 2 by Newton's method
    (Nocedal & Wright 2006, *Numerical Optimization*, ch. 3: Newton with backtracking line search)."""
    p = Xa.shape[1]
    t = np.where(y01 == 1, 1.0, -1.0)
    reg = np.ones(p)
    reg[-1] = 0.0
    beta = np.zeros(p) if beta0 is None else beta0.copy()
    obj = _objective(Xa, t, beta, C)
    for _ in range(_MAX_NEWTON):
        prob = expit(Xa @ beta)
        grad = C * (Xa.T @ (prob - y01)) + reg * beta
        if np.max(np.abs(grad)) <= tol * max(1.0, C * len(y01)):
            break
        H = C * (Xa.T * (prob * (1 - prob))) @ Xa + np.diag(reg) + 1e-12 * np.eye(p)
        step = np.linalg.solve(H, grad)
        size = 1.0
        while True:
            cand = beta - size * step
            new = _objective(Xa, t, cand, C)
            if new <= obj - 1e-4 * size * float(grad @ step) or size < 1e-10:
                break
            size *= 0.5
        beta, obj = cand, new
        if size * np.max(np.abs(step)) < tol * 1e-3:
            break
    return beta


@dataclass
class LogisticRefitProblem:
    """The training problem for exact refits without one row (warm-started from the full fit)."""

    Xa: np.ndarray
    y: np.ndarray
    n_classes: int
    C: float
    tol: float
    #: (K', p + 1) coefficients of the full fit (K' = 1 for two classes)
    B: np.ndarray
    full_prediction: np.ndarray
    full_decision: np.ndarray

    def targets(self, k: int) -> np.ndarray:
        positive = 1 if self.n_classes == 2 else k
        return (self.y == positive).astype(np.float64)

    def fit_predict(self, keep: np.ndarray) -> tuple[np.ndarray, np.ndarray | None]:
        """Codes and decision values of every row for a fit on ``keep`` (warm start from the full fit)."""
        m = len(self.y)
        present = np.unique(self.y[keep])
        if present.size < 2:
            return np.full(m, present[0], dtype=np.int64), None
        if self.n_classes > 2 and present.size < self.n_classes:  # a class gone: over the classes left
            cols = [
                self.Xa @ newton_fit(self.Xa[keep], (self.y[keep] == k).astype(float), self.C, self.tol)
                for k in present
            ]
            return present[np.argmax(np.column_stack(cols), axis=1)].astype(np.int64), None
        B = np.array(
            [
                newton_fit(self.Xa[keep], self.targets(k)[keep], self.C, self.tol, self.B[k])
                for k in range(self.B.shape[0])
            ]
        )
        dec = self.Xa @ B.T
        if self.n_classes == 2:
            dec = dec[:, 0]
            return (dec > 0).astype(np.int64), dec
        return np.argmax(dec, axis=1).astype(np.int64), dec

    def refit_without(self, row: int) -> RefitOutcome:
        """Exact refit without ``row``: its LOO prediction and margin, the flipped rows."""
        m = len(self.y)
        keep = np.concatenate([np.arange(row), np.arange(row + 1, m)])
        # small matrices: BLAS threads only contend (a refit took 12x longer with them, measured on the
        # demo data); the parallel runner gives each refit its own thread instead
        with _blas().limit(limits=1, user_api="blas"):
            pred, dec = self.fit_predict(keep)
        return refit_outcome(row, pred, dec, self.y, self.full_prediction, self.full_decision)


@dataclass
class _Diagnostics:
    """Per binary problem: fitted probabilities, x' A^-1 x, the one-step LOO decision values, Cook's D."""

    prob: np.ndarray
    h: np.ndarray
    loo_decision: np.ndarray
    cook: np.ndarray
    #: coefficient of column i in the one-step change of every row's decision value without row i
    step_coef: np.ndarray
    Ainv: np.ndarray


def diagnostics(Xa: np.ndarray, y01: np.ndarray, beta: np.ndarray, C: float) -> _Diagnostics:
    """One-step (Rad & Maleki 2020) LOO decision values and Cook's distances (Pregibon 1981) of one
    binary problem at its optimum ``beta``."""
    p = Xa.shape[1]
    reg = np.ones(p)
    reg[-1] = 0.0
    f = Xa @ beta
    prob = expit(f)
    w = prob * (1 - prob)
    A = C * (Xa.T * w) @ Xa + np.diag(reg)
    Ainv = np.linalg.inv(A)
    h = np.einsum("ij,jk,ik->i", Xa, Ainv, Xa)
    lev = C * w * h  # diagonal of the hat matrix
    step_coef = C * (prob - y01) / (1.0 - lev)
    loo_decision = f + step_coef * h
    pearson2 = (y01 - prob) ** 2 / np.maximum(w, 1e-300)
    df = float(lev.sum())
    cook = pearson2 * lev / (df * (1.0 - lev) ** 2)
    return _Diagnostics(prob, h, loo_decision, cook, step_coef, Ainv)


def one_step_flips(
    Xa: np.ndarray, diags: list[_Diagnostics], decision: np.ndarray, pred: np.ndarray
) -> np.ndarray:
    """For every row i, how many other rows the one-step estimate says change class without row i.

    The Newton step without row i moves every decision value by ``step_coef_i * x_j' A^-1 x_i`` (the same
    step as the LOO estimate), so the whole m x m effect is ``X A^-1 X'`` scaled by column.
    """
    m = Xa.shape[0]
    dec = decision if decision.ndim == 2 else decision[:, None]
    K = dec.shape[1]
    block = max(1, _BLOCK_BYTES // (8 * m * K))
    counts = np.zeros(m, dtype=np.int64)
    for start in range(0, m, block):
        cols = np.arange(start, min(m, start + block))
        new = np.empty((m, len(cols), K))
        for k, d in enumerate(diags):
            G = Xa @ (d.Ainv @ Xa[cols].T)  # m x B
            new[:, :, k] = dec[:, k : k + 1] + G * d.step_coef[cols]
        codes = (new[:, :, 0] > 0).astype(np.int64) if decision.ndim == 1 else np.argmax(new, axis=2)
        changed = codes != pred[:, None]
        changed[cols, np.arange(len(cols))] = False
        counts[cols] = changed.sum(axis=0)
    return counts


class LogisticLearner:
    """L2 logistic regression; parameters as in the spec (C, tol)."""

    family = "logistic"

    def __init__(self, C: float = 1.0, tol: float = 1e-8) -> None:
        self.C = C
        self.tol = tol

    def fit(self, X: np.ndarray, y: np.ndarray) -> FittedModel:
        """Fit, estimate every row's LOO by one Newton step, choose the rows the engine refits exactly."""
        Xa = _augment(X)
        y = np.asarray(y, dtype=np.int64)
        m = len(y)
        n_classes = int(y.max()) + 1
        problem = LogisticRefitProblem(
            Xa, y, n_classes, self.C, self.tol, np.empty(0), np.empty(0), np.empty(0)
        )
        n_problems = 1 if n_classes == 2 else n_classes
        B = np.array([newton_fit(Xa, problem.targets(k), self.C, self.tol) for k in range(n_problems)])
        problem.B = B
        diags = [diagnostics(Xa, problem.targets(k), B[k], self.C) for k in range(n_problems)]
        dec = Xa @ B.T
        approx = np.column_stack([d.loo_decision for d in diags])
        if n_classes == 2:
            dec, approx = dec[:, 0], approx[:, 0]
            pred = (dec > 0).astype(np.int64)
            approx_code = (approx > 0).astype(np.int64)
        else:
            pred = np.argmax(dec, axis=1).astype(np.int64)
            approx_code = np.argmax(approx, axis=1).astype(np.int64)
        problem.full_prediction, problem.full_decision = pred, dec
        approx_margin = signed_margins(approx, y)
        cook = np.max(np.column_stack([d.cook for d in diags]), axis=1)
        threshold = COOK_MULTIPLE / m
        influential = cook > threshold
        flips_est = one_step_flips(Xa, diags, dec, pred)
        refit = np.flatnonzero((np.abs(approx_margin) < REFIT_BAND) | influential | (flips_est > 0))
        self.B_, self.n_classes_, self.problem_ = B, n_classes, problem
        direct = DirectLoo(
            code=approx_code,
            margin=approx_margin,
            exact=np.zeros(m, dtype=bool),
            flip_count=np.zeros(m, dtype=np.int64),
            essential=np.abs(approx_margin - signed_margins(dec, y)) > ESSENTIAL_TOL,
        )
        leverage = np.max(np.column_stack([self.C * d.prob * (1 - d.prob) * d.h for d in diags]), axis=1)
        return FittedModel(
            family="logistic",
            params=self.resolved_params(),
            classes=np.arange(n_classes),
            y=y,
            prediction=pred,
            margin=signed_margins(dec, y),
            support=influential,
            alpha=np.zeros(m),
            bounded=np.zeros(m, dtype=bool),
            loo_exact=False,
            extras={
                "decision": dec,
                "cook": cook,
                "leverage": leverage,
                "influence_threshold": threshold,
                "refit_band": REFIT_BAND,
                "approx_loo_margin": approx_margin,
                "one_step_flips": flips_est,
            },
            direct_loo=direct,
            refit_rows=refit,
        )

    def refit_problem(self) -> LogisticRefitProblem:
        """The problem of the last fit, for exact (warm-started) refits."""
        return self.problem_

    def decision(self, X: np.ndarray) -> np.ndarray:
        """Decision values (log-odds) for new rows: (n,) for two classes, (n, K) otherwise."""
        dec = _augment(X) @ self.B_.T
        return dec[:, 0] if self.n_classes_ == 2 else dec

    def predict(self, X: np.ndarray) -> np.ndarray:
        """Class codes for new rows."""
        dec = self.decision(X)
        return (dec > 0).astype(np.int64) if dec.ndim == 1 else np.argmax(dec, axis=1).astype(np.int64)

    def resolved_params(self) -> dict[str, Any]:
        """The parameters as used."""
        return {"family": "logistic", "C": self.C, "tol": self.tol}
