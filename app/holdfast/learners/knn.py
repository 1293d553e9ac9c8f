"""k-nearest neighbours with exact leave-one-out for every row, critical rows and exact flip counts.

The k-NN rule (Cover & Hart 1967, "Nearest neighbor pattern classification", IEEE Trans. Information
Theory 13(1)) keeps all training rows, so there is no small set outside which a row leaves the model
unchanged: a training row is its own nearest neighbour. Instead, every answer comes from one neighbour
list per row of its k + 1 nearest training rows (itself included), ordered by (distance, row position):

* the training prediction of row j votes over the first k entries of its list (itself included, as
  scikit-learn's ``KNeighborsClassifier.fit(X, y).predict(X)`` does);
* the LOO prediction of row i votes over its list with row i removed *by position* (not by zero
  distance: an exact duplicate of row i stays a neighbour);
* removing row r changes the prediction of row j only if r is among j's first k entries (r is in j's
  reverse neighbour list); j then votes over its list without r. A row is *critical* when that flips at
  least one other training row's predicted class; the flip count is the number of such rows. Exact.

Ties: equal distances are ordered by row position (earlier rows first), as scikit-learn's search keeps the
earlier row when two distances tie (its own rounding of |a|^2 - 2ab + |b|^2 can break exact ties, e.g.
between duplicates, either way); equal votes go to the lowest class code, and with
``weights = "distance"`` a query at distance 0 of some neighbours gets its vote from those neighbours only
(weight 1 each); otherwise weights are 1 / distance.

Bounds: k-NN has no compression set of its own. The sample compression bound applies to a consistent
subset such as Hart's condensed set (Hart 1968, "The condensed nearest neighbor rule", IEEE Trans.
Information Theory 14(3)): the 1-NN rule on that subset classifies the training rows, and it is reported as
a figure of its own (the condensed 1-NN classifier), with the subset's size.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numba
import numpy as np

from holdfast.errors import DataError, SpecError
from holdfast.learners.base import DirectLoo, FittedModel, RefitOutcome

METRICS = ("euclidean", "manhattan", "cosine")
WEIGHTS = ("uniform", "distance")
DEFAULTS: dict[str, Any] = {"k": 5, "weights": "uniform", "metric": "euclidean"}
#: Query rows per block when computing distance rows (block x m float64 scratch).
_BLOCK_BYTES = 64 * 2**20


def validate_knn_params(table: dict[str, Any], source: str) -> dict[str, Any]:
    """Validate the ``[learner]`` table of the knn family and fill in defaults."""
    out = {"family": "knn", **DEFAULTS, **{k: v for k, v in table.items() if k != "family"}}
    k = out["k"]
    if isinstance(k, bool) or not isinstance(k, int) or k < 1:
        raise SpecError(f"{source}: 'learner.k' must be a positive integer, got {k!r}")
    if out["weights"] not in WEIGHTS:
        raise SpecError(
            f"{source}: 'learner.weights' must be one of {' | '.join(WEIGHTS)}, got {out['weights']!r}"
        )
    if out["metric"] not in METRICS:
        raise SpecError(
            f"{source}: 'learner.metric' must be one of {' | '.join(METRICS)}, got {out['metric']!r}"
        )
    return out


_METRIC_CODE = {"euclidean": 0, "manhattan": 1, "cosine": 2}


@numba.njit(cache=True, nogil=True)
def _distance_block(Q: np.ndarray, X: np.ndarray, metric: int) -> np.ndarray:  # pragma: no cover - numba
    """Distances from each row of Q to each row of X, summed feature by feature (exact duplicates at 0).
    For cosine, Q and X are already normalized to unit length (zero rows stay zero)."""
    nq, m, p = Q.shape[0], X.shape[0], X.shape[1]
    out = np.empty((nq, m))
    for a in range(nq):
        for b in range(m):
            s = 0.0
            if metric == 0:
                for f in range(p):
                    d = Q[a, f] - X[b, f]
                    s += d * d
                out[a, b] = np.sqrt(s)
            elif metric == 1:
                for f in range(p):
                    s += abs(Q[a, f] - X[b, f])
                out[a, b] = s
            else:
                for f in range(p):
                    s += Q[a, f] * X[b, f]
                v = 1.0 - s
                out[a, b] = min(max(v, 0.0), 2.0)
    return out


def _prepare_rows(X: np.ndarray, metric: str) -> np.ndarray:
    X = np.ascontiguousarray(X, dtype=np.float64) + 0.0
    if metric == "cosine":
        norms = np.sqrt((X * X).sum(axis=1))
        norms[norms == 0] = 1.0  # zero rows stay zero (distance 1 to everything), as sklearn's normalize
        X = np.ascontiguousarray(X / norms[:, None])
    return X


def nearest(
    Q: np.ndarray, X: np.ndarray, width: int, metric: str, self_rows: np.ndarray | None = None
) -> tuple[np.ndarray, np.ndarray]:
    """The ``width`` nearest rows of X for each row of Q, ordered by (distance, row position).

    ``Q`` and ``X`` must already be prepared by :func:`_prepare_rows`. ``self_rows[a]``, when given, is
    the position of query a inside X: its distance to itself is set to exactly 0.
    """
    m = X.shape[0]
    width = min(width, m)
    nq = Q.shape[0]
    idx = np.empty((nq, width), dtype=np.int64)
    dist = np.empty((nq, width))
    block = max(1, _BLOCK_BYTES // (8 * max(m, 1)))
    code = _METRIC_CODE[metric]
    for start in range(0, nq, block):
        D = _distance_block(Q[start : start + block], X, code)
        if self_rows is not None:
            rows = np.arange(D.shape[0])
            D[rows, self_rows[start : start + block]] = 0.0
        if width < m:
            part = np.argpartition(D, width - 1, axis=1)[:, :width]
            thr = np.take_along_axis(D, part, axis=1).max(axis=1)
        else:
            thr = D.max(axis=1)
        for a in range(D.shape[0]):
            cand = np.flatnonzero(D[a] <= thr[a])  # ties at the boundary all included, then cut by position
            order = np.lexsort((cand, D[a, cand]))[:width]
            idx[start + a] = cand[order]
            dist[start + a] = D[a, cand[order]]
    return idx, dist


@numba.njit(cache=True, nogil=True)
def _votes(
    idx: np.ndarray, dist: np.ndarray, skip: int, k: int, y: np.ndarray, n_classes: int, by_distance: bool
) -> np.ndarray:  # pragma: no cover - numba
    """Class votes from the first k entries of one neighbour list, leaving out row ``skip`` (-1: none).

    Uniform: 1 per neighbour. Distance (as scikit-learn): 1 / d, or, when some taken neighbour is at
    distance 0, 1 for each of those and 0 for the others. Summed in neighbour order."""
    votes = np.zeros(n_classes)
    taken = np.empty(k, dtype=np.int64)
    n = 0
    zero = False
    for t in range(idx.shape[0]):
        if idx[t] == skip:
            continue
        if n == k:
            break
        taken[n] = t
        if dist[t] == 0.0:
            zero = True
        n += 1
    for s in range(n):
        t = taken[s]
        if not by_distance:
            w = 1.0
        elif zero:
            w = 1.0 if dist[t] == 0.0 else 0.0
        else:
            w = 1.0 / dist[t]
        votes[y[idx[t]]] += w
    return votes


@numba.njit(cache=True, nogil=True)
def _vote_all(
    idx: np.ndarray,
    dist: np.ndarray,
    skip: np.ndarray,
    k: int,
    y: np.ndarray,
    n_classes: int,
    by_distance: bool,
) -> tuple[np.ndarray, np.ndarray]:  # pragma: no cover - numba
    """Predicted codes (argmax, lowest class on ties) and vote shares for every list."""
    nq = idx.shape[0]
    pred = np.empty(nq, dtype=np.int64)
    shares = np.empty((nq, n_classes))
    for a in range(nq):
        v = _votes(idx[a], dist[a], skip[a], k, y, n_classes, by_distance)
        pred[a] = np.argmax(v)
        total = v.sum()
        shares[a] = v / total if total > 0 else v
    return pred, shares


@numba.njit(cache=True, nogil=True)
def _removal_effects(
    idx: np.ndarray,
    dist: np.ndarray,
    k: int,
    y: np.ndarray,
    n_classes: int,
    by_distance: bool,
    pred: np.ndarray,
) -> tuple[np.ndarray, np.ndarray]:  # pragma: no cover - numba
    """For every pair (r, j) with r among j's first k neighbours (r != j): does removing r flip j?

    Returns the pairs (r, j) that flip, as two arrays. This walks the reverse neighbour lists: row r's
    removal can only change the rows j whose first k entries hold r.
    """
    m = idx.shape[0]
    out_r = np.empty(m * k, dtype=np.int64)
    out_j = np.empty(m * k, dtype=np.int64)
    n = 0
    for j in range(m):
        kk = min(k, idx.shape[1])
        for t in range(kk):
            r = idx[j, t]
            if r == j:
                continue
            v = _votes(idx[j], dist[j], r, k, y, n_classes, by_distance)
            if np.argmax(v) != pred[j]:
                out_r[n] = r
                out_j[n] = j
                n += 1
    return out_r[:n], out_j[:n]


def condensed_set(X: np.ndarray, y: np.ndarray, metric: str) -> np.ndarray:
    """Hart's condensed subset: rows in a store such that the 1-NN rule on the store classifies every row
    outside it correctly.

    Hart 1968, "The condensed nearest neighbor rule", IEEE Trans. Information Theory 14(3): start with the
    first row; pass over the rows in order, adding each row the store's 1-NN rule misclassifies; repeat
    until a pass adds none. Ties: the store row with the lower position wins. Returns the store's rows.
    """
    m = X.shape[0]
    Xp = _prepare_rows(X, metric)
    code = _METRIC_CODE[metric]
    store = [0]
    in_store = np.zeros(m, dtype=bool)
    in_store[0] = True
    changed = True
    while changed:
        changed = False
        for i in range(m):
            if in_store[i]:
                continue
            S = np.array(store, dtype=np.int64)
            d = _distance_block(Xp[i : i + 1], Xp[S], code)[0]
            best = S[np.lexsort((S, d))[0]]
            if y[best] != y[i]:
                store.append(i)
                in_store[i] = True
                changed = True
    return np.sort(np.array(store, dtype=np.int64))


def condensed_errors(X: np.ndarray, y: np.ndarray, store: np.ndarray, metric: str) -> int:
    """Training rows outside ``store`` that the 1-NN rule on ``store`` misclassifies (0 after Hart's
    algorithm; counted, not assumed)."""
    Xp = _prepare_rows(X, metric)
    outside = np.setdiff1d(np.arange(len(y)), store)
    if not len(outside):
        return 0
    idx, _ = nearest(Xp[outside], Xp[store], 1, metric)
    return int((y[store[idx[:, 0]]] != y[outside]).sum())


@dataclass
class KNNRefitProblem:
    """k-NN needs no refits (every LOO answer comes from the neighbour lists); this answers a refit
    request exactly from the lists anyway, e.g. for a check or a resumed run."""

    idx: np.ndarray
    dist: np.ndarray
    y: np.ndarray
    k: int
    n_classes: int
    by_distance: bool
    prediction: np.ndarray

    def refit_without(self, row: int) -> RefitOutcome:
        """Predictions of every training row by the k-NN rule on all rows but ``row``."""
        m = len(self.y)
        skip = np.full(m, row, dtype=np.int64)
        pred, shares = _vote_all(self.idx, self.dist, skip, self.k, self.y, self.n_classes, self.by_distance)
        changed = pred != self.prediction
        changed[row] = False
        own = shares[row, self.y[row]]
        other = np.delete(shares[row], self.y[row]).max() if self.n_classes > 1 else 0.0
        return RefitOutcome(
            row=row,
            loo_code=int(pred[row]),
            flipped=np.flatnonzero(changed).astype(np.int64),
            max_change=float("nan"),
            loo_margin=float(own - other),
        )


def _margins(shares: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Own class's vote share minus the largest other class's share, in [-1, 1]."""
    own = shares[np.arange(len(y)), y]
    other = np.where(np.eye(shares.shape[1], dtype=bool)[y], -np.inf, shares).max(axis=1)
    return own - other


class KNNLearner:
    """k-nearest neighbours; parameters as in the spec (k, weights, metric)."""

    family = "knn"

    def __init__(self, k: int = 5, weights: str = "uniform", metric: str = "euclidean") -> None:
        self.k = k
        self.weights = weights
        self.metric = metric

    def fit(self, X: np.ndarray, y: np.ndarray) -> FittedModel:
        """Neighbour lists, training and LOO predictions, critical rows and flip counts (all exact)."""
        y = np.asarray(y, dtype=np.int64)
        m = len(y)
        if self.k > m - 1:
            raise DataError(
                f"learner.k = {self.k} needs at least {self.k + 1} training rows for leave-one-out, got {m}"
            )
        n_classes = int(y.max()) + 1
        Xp = _prepare_rows(X, self.metric)
        idx, dist = nearest(Xp, Xp, self.k + 1, self.metric, self_rows=np.arange(m))
        by_distance = self.weights == "distance"
        none = np.full(m, -1, dtype=np.int64)
        pred, shares = _vote_all(idx, dist, none, self.k, y, n_classes, by_distance)
        loo_code, loo_shares = _vote_all(idx, dist, np.arange(m), self.k, y, n_classes, by_distance)
        flip_r, flip_j = _removal_effects(idx, dist, self.k, y, n_classes, by_distance, pred)
        flip_count = np.bincount(flip_r, minlength=m).astype(np.int64)
        order = np.argsort(flip_r, kind="stable")
        flipped: dict[int, np.ndarray] = {}
        for r, js in zip(*np.unique(flip_r[order], return_index=True), strict=True):
            end = np.searchsorted(flip_r[order], r, side="right")
            flipped[int(r)] = np.sort(flip_j[order][js:end])
        critical = flip_count > 0
        store = condensed_set(X, y, self.metric)
        self.X_train_ = Xp
        self.y_ = y
        self.n_classes_ = n_classes
        self.problem_ = KNNRefitProblem(idx, dist, y, self.k, n_classes, by_distance, pred)
        direct = DirectLoo(
            code=loo_code,
            margin=_margins(loo_shares, y),
            exact=np.ones(m, dtype=bool),
            flip_count=flip_count,
            essential=critical | (loo_code != pred),
            flipped=flipped,
        )
        return FittedModel(
            family="knn",
            params=self.resolved_params(),
            classes=np.arange(n_classes),
            y=y,
            prediction=pred,
            margin=_margins(shares, y),
            support=critical,
            alpha=np.zeros(m),
            bounded=np.zeros(m, dtype=bool),
            loo_exact=True,
            extras={
                "decision": shares,
                "condensed": store,
                "condensed_errors": condensed_errors(X, y, store, self.metric),
            },
            direct_loo=direct,
            refit_rows=np.empty(0, dtype=np.int64),
        )

    def refit_problem(self) -> KNNRefitProblem:
        """Answers refit requests from the neighbour lists (the engine makes none for k-NN)."""
        return self.problem_

    def _shares(self, X: np.ndarray) -> np.ndarray:
        Q = _prepare_rows(X, self.metric)
        idx, dist = nearest(Q, self.X_train_, self.k, self.metric)
        none = np.full(len(Q), -1, dtype=np.int64)
        _, shares = _vote_all(idx, dist, none, self.k, self.y_, self.n_classes_, self.weights == "distance")
        return shares

    def decision(self, X: np.ndarray) -> np.ndarray:
        """Vote shares of new rows: class 1 minus class 0 for two classes, else one column per class."""
        shares = self._shares(X)
        return shares[:, 1] - shares[:, 0] if self.n_classes_ == 2 else shares

    def predict(self, X: np.ndarray) -> np.ndarray:
        """Class codes for new rows (lowest class on equal votes)."""
        return np.argmax(self._shares(X), axis=1).astype(np.int64)

    def resolved_params(self) -> dict[str, Any]:
        """The parameters as used."""
        return {"family": "knn", "k": self.k, "weights": self.weights, "metric": self.metric}
