"""The learner protocol: fit once, name the support rows, refit without given rows.

A learner family provides a :class:`Learner` (parameters in the constructor) whose ``fit`` returns a
:class:`FittedModel` (fitted state in attributes). The engine only talks to these two shapes, so adding a
family means adding one module under ``holdfast.learners``.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Protocol

import numpy as np

#: What "support rows" means for each family, in the words the faces show.
SUPPORT_MEANING: dict[str, dict[str, str]] = {
    "svm": {
        "name": "support vectors",
        "meaning": "rows with a non-zero dual weight: the model is determined by them alone",
    },
    "knn": {
        "name": "critical neighbours",
        "meaning": "rows whose removal changes the predicted class of at least one other training row",
    },
    "perceptron": {
        "name": "update set",
        "meaning": (
            "rows that caused a weight update: rerunning on them alone, in order, gives the same weights"
        ),
    },
    "logistic": {
        "name": "influential rows",
        "meaning": "rows with the largest influence on the fit (Cook's distance above its threshold)",
    },
}


def signed_margins(decision: np.ndarray, y: np.ndarray) -> np.ndarray:
    """y * f(x) for many rows: two-class decision values signed by the label (+1 for class code 1), or
    for more classes each row's own class's decision value minus the largest other one."""
    if decision.ndim == 1:
        return np.where(y == 1, 1.0, -1.0) * decision
    own = decision[np.arange(len(y)), y]
    other = np.where(np.eye(decision.shape[1], dtype=bool)[y], -np.inf, decision).max(axis=1)
    return own - other


#: A refit whose decision values move by more than this somewhere changes the model (the row is
#: "essential"); holdfast's own threshold.
ESSENTIAL_CHANGE = 1e-4


@dataclass
class RefitOutcome:
    """What one refit without one row tells about that row.

    ``row`` is the left-out training row (0-based among training rows); ``loo_code`` its predicted class
    code under the refit; ``flipped`` the other training rows whose predicted class changed;
    ``max_change`` the largest absolute change of a training decision value (of the rows the refit brought
    up to date, see :func:`refit_outcome`; always more than ``ESSENTIAL_CHANGE`` when any row moved that
    far); ``loo_margin`` the LOO
    decision value of the left-out row signed by its label, y * f_{-i}(x_i) (own minus best other class
    for more than two classes; NaN when the refit has no decision value for every class).
    """

    row: int
    loo_code: int
    flipped: np.ndarray
    max_change: float
    loo_margin: float = float("nan")


@dataclass
class DirectLoo:
    """LOO results a learner computed itself, without refits through the engine (arrays over m rows).

    The engine starts from these and overwrites the rows it refits (``FittedModel.loo_candidates``).
    ``exact`` says per row whether ``code``/``margin`` are exact (k-NN: every row; logistic regression:
    an approximation for the rows not refitted); ``flip_count``/``flipped`` are the other training rows
    whose predicted class changes without the row, ``essential`` whether the row's removal changes the
    model's predictions at all.
    """

    code: np.ndarray
    margin: np.ndarray
    exact: np.ndarray
    flip_count: np.ndarray
    essential: np.ndarray
    flipped: dict[int, np.ndarray] = field(default_factory=dict)


def refit_outcome(
    row: int,
    pred: np.ndarray,
    dec: np.ndarray | None,
    y: np.ndarray,
    full_prediction: np.ndarray,
    full_decision: np.ndarray,
    stale: np.ndarray | None = None,
) -> RefitOutcome:
    """What a refit without ``row`` tells, from its predicted codes ``pred`` and decision values ``dec`` for
    every training row (``dec`` None when the refit has no decision value for every class). ``stale``:
    rows whose sign is certified but whose decision value was not brought up to date (an SVM refit's
    rows far from the margin); ``max_change`` is then the largest change among the other rows."""
    changed = pred != full_prediction
    changed[row] = False
    if dec is None:
        max_change, loo_margin = float("inf"), float("nan")
    else:
        moved = np.abs(dec - full_decision)
        max_change = float(np.max(moved if stale is None else moved[~stale]))
        loo_margin = float(signed_margins(dec[row : row + 1], y[row : row + 1])[0])
    return RefitOutcome(
        row=row,
        loo_code=int(pred[row]),
        flipped=np.flatnonzero(changed).astype(np.int64),
        max_change=max_change,
        loo_margin=loo_margin,
    )


@dataclass
class FittedModel:
    """Fitted state shared by all learner families (arrays over the m training rows).

    ``support`` marks the family's support rows (see ``SUPPORT_MEANING``); ``alpha`` and ``bounded`` are
    dual weights and their limit, meaningful for the SVM only (zeros/False elsewhere). ``direct_loo``
    holds LOO results the learner computed directly (None: a row outside ``loo_candidates()`` keeps its
    training prediction); ``refit_rows``, when set, are the rows the engine refits instead of the
    support rows.
    """

    family: str
    params: dict[str, Any]
    classes: np.ndarray
    y: np.ndarray
    prediction: np.ndarray
    margin: np.ndarray
    support: np.ndarray
    alpha: np.ndarray
    bounded: np.ndarray
    loo_exact: bool = True
    extras: dict[str, Any] = field(default_factory=dict)
    direct_loo: DirectLoo | None = None
    refit_rows: np.ndarray | None = None

    def loo_candidates(self) -> np.ndarray:
        """The rows the engine refits: ``refit_rows`` when the learner set them, else the support rows
        (the rows whose removal can change the model)."""
        if self.refit_rows is not None:
            return np.asarray(self.refit_rows, dtype=np.int64)
        return np.flatnonzero(self.support)


class RefitProblem(Protocol):
    """A picklable, self-contained description of the training problem, for parallel refits."""

    def refit_without(self, row: int) -> RefitOutcome:
        """Refit without training row ``row`` and report its LOO prediction and the flips."""
        ...


class Learner(Protocol):
    """A learner family: constructed from the spec's ``[learner]`` table."""

    family: str

    def fit(self, X: np.ndarray, y: np.ndarray) -> FittedModel:
        """Fit on the prepared training matrix ``X`` and class codes ``y``."""
        ...

    def refit_problem(self) -> RefitProblem:
        """The problem of the last ``fit``, for refits without rows."""
        ...

    def predict(self, X: np.ndarray) -> np.ndarray:
        """Class codes for new rows (held-out rows) under the model of the last ``fit``."""
        ...

    def decision(self, X: np.ndarray) -> np.ndarray:
        """Decision values for new rows: shape (n,) for two classes, (n, K) otherwise."""
        ...
