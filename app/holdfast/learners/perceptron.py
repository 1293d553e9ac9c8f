"""The perceptron (Rosenblatt 1958) with a fixed row order: its update set is a compression set.

Training visits the rows in their order, ``epochs`` times, and adds ``y_i x_i`` to the weights (and
``y_i`` to the intercept) whenever ``y_i f(x_i) <= 0``, starting from zero: the update rule of
scikit-learn's ``Perceptron(shuffle=False, tol=None, max_iter=epochs, eta0=1)`` (hinge loss with threshold
0, constant learning rate 1, no penalty), with the dot product summed feature by feature as its SGD loop
does, so the two give the same weights.

Why the update set is a compression set (Floyd & Warmuth 1995, "Sample compression, learnability, and the
Vapnik-Chervonenkis dimension", Machine Learning 21): a row that never causes an update leaves the state
unchanged at each visit, so a run on the update rows alone, in the same order, meets every update row in
the same state and makes the same updates: the same weights, bit for bit. The same argument gives exact
leave-one-out: without a row that never updated, the run is the same, so its LOO prediction is its
training prediction and it flips nothing; only the update rows need a refit.

More than two classes: one-vs-rest, one binary perceptron per class (class k against the rest), the
prediction the class with the largest decision value, as scikit-learn's ``Perceptron``. The update set is
the union of the per-class update sets; a refit without a row reruns only the classes it updated.

Bounds: the compression bound on the update set; for two classes, when the final weights separate the
training rows, Novikoff's mistake bound (Novikoff 1962, "On convergence proofs on perceptrons",
Symposium on the Mathematical Theory of Automata 12): the number of updates is at most (R / gamma)^2, with
R the largest norm of a row (with a constant 1 for the intercept) and gamma the margin of the separating
weights, normalized.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numba
import numpy as np

from holdfast.errors import SpecError
from holdfast.learners.base import FittedModel, RefitOutcome, refit_outcome, signed_margins

DEFAULTS: dict[str, Any] = {"epochs": 5, "intercept": True}


def validate_perceptron_params(table: dict[str, Any], source: str) -> dict[str, Any]:
    """Validate the ``[learner]`` table of the perceptron family and fill in defaults."""
    out = {"family": "perceptron", **DEFAULTS, **{k: v for k, v in table.items() if k != "family"}}
    e = out["epochs"]
    if isinstance(e, bool) or not isinstance(e, int) or not 1 <= e <= 10_000:
        raise SpecError(f"{source}: 'learner.epochs' must be an integer from 1 to 10000, got {e!r}")
    if not isinstance(out["intercept"], bool):
        raise SpecError(f"{source}: 'learner.intercept' must be true or false, got {out['intercept']!r}")
    return out


@numba.njit(cache=True, nogil=True)
def _run(
    X: np.ndarray, ypm: np.ndarray, order: np.ndarray, epochs: int, intercept: bool
) -> tuple[np.ndarray, float, np.ndarray]:  # pragma: no cover - numba
    """Perceptron passes over ``order``; returns weights, intercept and the update count of each row."""
    p = X.shape[1]
    w = np.zeros(p)
    b = 0.0
    updates = np.zeros(X.shape[0], dtype=np.int64)
    for _ in range(epochs):
        for i in order:
            s = 0.0
            for f in range(p):
                s += w[f] * X[i, f]
            s = s * 1.0 + b
            if ypm[i] * s <= 0.0:
                for f in range(p):
                    w[f] += X[i, f] * ypm[i]
                if intercept:
                    b += ypm[i]
                updates[i] += 1
    return w, b, updates


def run_perceptron(
    X: np.ndarray, ypm: np.ndarray, order: np.ndarray, epochs: int, intercept: bool = True
) -> tuple[np.ndarray, float, np.ndarray]:
    """One binary perceptron (labels +-1) visiting the rows ``order`` in that order, ``epochs`` times.

    Returns the weights, the intercept and the number of updates each row caused (over all rows of X).
    """
    X = np.ascontiguousarray(X, dtype=np.float64)
    return _run(X, np.asarray(ypm, dtype=np.float64), np.asarray(order, dtype=np.int64), epochs, intercept)


@dataclass
class PerceptronRefitProblem:
    """The training problem: refit without a row by rerunning the classes the row updated."""

    X: np.ndarray
    y: np.ndarray
    n_classes: int
    epochs: int
    intercept: bool
    #: (K', p) weights and (K',) intercepts of the full fit (K' = 1 for two classes)
    W: np.ndarray
    b: np.ndarray
    #: (K', m) update counts of each row in each binary problem
    updates: np.ndarray
    full_prediction: np.ndarray
    full_decision: np.ndarray

    def _binary_targets(self, k: int) -> np.ndarray:
        positive = 1 if self.n_classes == 2 else k
        return np.where(self.y == positive, 1.0, -1.0)

    def fit_predict(self, keep: np.ndarray, row: int | None = None) -> tuple[np.ndarray, np.ndarray | None]:
        """Codes and decision values of every training row for a fit on ``keep`` (in order). With ``row``
        given, binary problems the row never updated keep their full-fit weights (the same run)."""
        m = len(self.y)
        present = np.unique(self.y[keep])
        if present.size < 2:
            return np.full(m, present[0], dtype=np.int64), None
        if present.size < self.n_classes and self.n_classes > 2:
            # a class is gone: one-vs-rest over the classes left (two left: one binary problem)
            return self._fit_subset(keep, present)
        W = self.W.copy()
        b = self.b.copy()
        for k in range(W.shape[0]):
            if row is not None and self.updates[k, row] == 0:
                continue
            W[k], b[k], _ = run_perceptron(self.X, self._binary_targets(k), keep, self.epochs, self.intercept)
        dec = self.X @ W.T + b
        if self.n_classes == 2:
            dec = dec[:, 0]
            return np.where(dec > 0, 1, 0).astype(np.int64), dec
        return np.argmax(dec, axis=1).astype(np.int64), dec

    def _fit_subset(self, keep: np.ndarray, present: np.ndarray) -> tuple[np.ndarray, None]:
        if present.size == 2:
            ypm = np.where(self.y == present[1], 1.0, -1.0)
            w, b, _ = run_perceptron(self.X, ypm, keep, self.epochs, self.intercept)
            dec = self.X @ w + b
            return np.where(dec > 0, present[1], present[0]).astype(np.int64), None
        cols = []
        for k in present:
            w, b, _ = run_perceptron(
                self.X, np.where(self.y == k, 1.0, -1.0), keep, self.epochs, self.intercept
            )
            cols.append(self.X @ w + b)
        return present[np.argmax(np.column_stack(cols), axis=1)].astype(np.int64), None

    def refit_without(self, row: int) -> RefitOutcome:
        """Rerun without training row ``row``; its LOO prediction, the flipped rows, the largest change."""
        m = len(self.y)
        keep = np.concatenate([np.arange(row), np.arange(row + 1, m)])
        pred, dec = self.fit_predict(keep, row=row)
        return refit_outcome(row, pred, dec, self.y, self.full_prediction, self.full_decision)


def novikoff_bound(
    X: np.ndarray, ypm: np.ndarray, w: np.ndarray, b: float, intercept: bool
) -> dict[str, Any]:
    """Novikoff's perceptron mistake bound (R / gamma)^2 with the final weights as the separator.

    Novikoff 1962, "On convergence proofs on perceptrons": if some unit vector u has y_i <u, x_i> >= gamma
    > 0 for all rows and ||x_i|| <= R, the perceptron makes at most (R / gamma)^2 updates. Here x_i carries
    a constant 1 for the intercept, u is the final (w, b) normalized and gamma its smallest margin; the
    bound applies only when gamma > 0 (the final weights separate the training rows).
    """
    Xa = np.column_stack([X, np.ones(len(X))]) if intercept else X
    u = np.append(w, b) if intercept else w
    norm = float(np.linalg.norm(u))
    R = float(np.sqrt((Xa * Xa).sum(axis=1).max()))
    gamma = float((ypm * (Xa @ u)).min() / norm) if norm > 0 else 0.0
    applies = gamma > 0
    return {"R": R, "gamma": gamma, "applies": applies, "bound": (R / gamma) ** 2 if applies else None}


class PerceptronLearner:
    """Perceptron with a fixed row order; parameters as in the spec (epochs, intercept)."""

    family = "perceptron"

    def __init__(self, epochs: int = 5, intercept: bool = True) -> None:
        self.epochs = epochs
        self.intercept = intercept

    def fit(self, X: np.ndarray, y: np.ndarray) -> FittedModel:
        """Run the perceptron; the update set is the support set (and the rows LOO refits)."""
        X = np.ascontiguousarray(X, dtype=np.float64)
        y = np.asarray(y, dtype=np.int64)
        m, p = X.shape
        n_classes = int(y.max()) + 1
        n_problems = 1 if n_classes == 2 else n_classes
        W = np.zeros((n_problems, p))
        b = np.zeros(n_problems)
        updates = np.zeros((n_problems, m), dtype=np.int64)
        order = np.arange(m)
        problem = PerceptronRefitProblem(
            X, y, n_classes, self.epochs, self.intercept, W, b, updates, np.empty(0), np.empty(0)
        )
        for k in range(n_problems):
            W[k], b[k], updates[k] = run_perceptron(
                X, problem._binary_targets(k), order, self.epochs, self.intercept
            )
        dec = X @ W.T + b
        if n_classes == 2:
            dec = dec[:, 0]
            pred = np.where(dec > 0, 1, 0).astype(np.int64)
        else:
            pred = np.argmax(dec, axis=1).astype(np.int64)
        problem.full_prediction = pred
        problem.full_decision = dec
        self.W_, self.b_, self.n_classes_, self.problem_ = W, b, n_classes, problem
        support = (updates > 0).any(axis=0)
        extras: dict[str, Any] = {
            "decision": dec,
            "weights": W,
            "intercepts": b,
            "updates": int(updates.sum()),
            "update_rows": updates,
        }
        if n_classes == 2:
            extras["novikoff"] = novikoff_bound(
                X, problem._binary_targets(0), W[0], float(b[0]), self.intercept
            )
            extras["novikoff"]["updates"] = int(updates.sum())
        return FittedModel(
            family="perceptron",
            params=self.resolved_params(),
            classes=np.arange(n_classes),
            y=y,
            prediction=pred,
            margin=signed_margins(dec, y),
            support=support,
            alpha=updates.sum(axis=0).astype(np.float64),
            bounded=np.zeros(m, dtype=bool),
            loo_exact=True,
            extras=extras,
        )

    def refit_problem(self) -> PerceptronRefitProblem:
        """The problem of the last fit, for exact LOO refits of the update rows."""
        return self.problem_

    def decision(self, X: np.ndarray) -> np.ndarray:
        """Decision values for new rows: (n,) for two classes, (n, K) otherwise."""
        dec = np.ascontiguousarray(X, dtype=np.float64) @ self.W_.T + self.b_
        return dec[:, 0] if self.n_classes_ == 2 else dec

    def predict(self, X: np.ndarray) -> np.ndarray:
        """Class codes for new rows."""
        dec = self.decision(X)
        if dec.ndim == 1:
            return np.where(dec > 0, 1, 0).astype(np.int64)
        return np.argmax(dec, axis=1).astype(np.int64)

    def resolved_params(self) -> dict[str, Any]:
        """The parameters as used."""
        return {"family": "perceptron", "epochs": self.epochs, "intercept": self.intercept}
