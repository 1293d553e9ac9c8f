"""The learner protocol: fit once, name the support rows, refit without given rows.

A learner family provides a :class:`Learner` (parameters in the constructor) whose ``fit`` returns a
:class:`FittedModel` (fitted state in attributes). The engine only talks to these two shapes, so adding a
family means adding one module under ``holdfast.learners``.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Protocol

import numpy as np


def signed_margins(decision: np.ndarray, y: np.ndarray) -> np.ndarray:
    """y * f(x) for many rows: two-class decision values signed by the label (+1 for class code 1), or
    for more classes each row's own class's decision value minus the largest other one."""
    if decision.ndim == 1:
        return np.where(y == 1, 1.0, -1.0) * decision
    own = decision[np.arange(len(y)), y]
    other = np.where(np.eye(decision.shape[1], dtype=bool)[y], -np.inf, decision).max(axis=1)
    return own - other


@dataclass
class RefitOutcome:
    """What one refit without one row tells about that row.

    ``row`` is the left-out training row (0-based among training rows); ``loo_code`` its predicted class
    code under the refit; ``flipped`` the other training rows whose predicted class changed;
    ``max_change`` the largest absolute change of a training decision value; ``loo_margin`` the LOO
    decision value of the left-out row signed by its label, y * f_{-i}(x_i) (own minus best other class
    for more than two classes; NaN when the refit has no decision value for every class).
    """

    row: int
    loo_code: int
    flipped: np.ndarray
    max_change: float
    loo_margin: float = float("nan")


@dataclass
class FittedModel:
    """Fitted state shared by all learner families (arrays over the m training rows)."""

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

    def loo_candidates(self) -> np.ndarray:
        """Training rows whose removal can change the model: exact LOO refits exactly these."""
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
