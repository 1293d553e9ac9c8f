"""Neighbour checks on the prepared feature matrix: neighbour dissent, twin conflicts, class z-scores.

Distances are Euclidean on the prepared (scaled, one-hot) matrix. The neighbour search is scikit-learn's
``NearestNeighbors``; distances of the candidates it returns are recomputed exactly as
``sqrt(sum((x_i - x_j) ** 2))`` so that exact duplicates are at distance 0 and ties are broken the same
way on every run: neighbours are ordered by (distance, row position), the row itself excluded.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import sparse
from sklearn.neighbors import NearestNeighbors

__all__ = [
    "NeighbourResult",
    "class_zscore_matrix",
    "class_zscores",
    "neighbour_dissent",
    "neighbour_dissents",
    "twin_conflicts",
]

# Bytes of float64 scratch space for recomputing candidate distances, per chunk of query rows.
_SCRATCH_BYTES = 64 * 2**20
# Relative slack on squared distances for the search's own rounding (brute force uses |x|^2 - 2xy + |y|^2).
_SEARCH_RTOL = 1e-9


def _as_matrix(X: np.ndarray) -> np.ndarray:
    """Float64 C-contiguous copy with -0.0 turned into 0.0 (so equal rows compare equal bytewise too)."""
    X = np.asarray(X, dtype=np.float64)
    if X.ndim != 2:
        raise ValueError(f"X must be 2-D, got shape {X.shape}")
    if not np.isfinite(X).all():
        raise ValueError("X contains NaN or infinite values")
    return np.ascontiguousarray(X + 0.0)


def _codes(y: np.ndarray | pd.Series, n: int) -> tuple[np.ndarray, np.ndarray]:
    """Integer codes (sorted class order) and the classes; labels must not be missing."""
    y = np.asarray(y)
    if y.shape != (n,):
        raise ValueError(f"y must have shape ({n},), got {y.shape}")
    codes, classes = pd.factorize(y, sort=True)
    if (codes < 0).any():
        raise ValueError("y contains missing labels")
    return codes.astype(np.int64), np.asarray(classes)


def _exact_distances(X: np.ndarray, rows: np.ndarray, cand: np.ndarray) -> np.ndarray:
    """``sqrt(sum((X[rows, None] - X[cand]) ** 2, -1))`` for a candidate matrix of shape (len(rows), w)."""
    diff = X[cand] - X[rows][:, None, :]
    diff *= diff
    return np.sqrt(diff.sum(axis=-1))


def _pair_distances(X: np.ndarray, i: np.ndarray, j: np.ndarray) -> np.ndarray:
    """``sqrt(sum((X[i] - X[j]) ** 2))`` row by row, the same formula as :func:`_exact_distances`."""
    diff = X[j] - X[i]
    diff *= diff
    return np.sqrt(diff.sum(axis=-1))


@dataclass(frozen=True)
class NeighbourResult:
    """Result of :func:`neighbour_dissent`.

    ``indices`` (int32) and ``distances`` (float32) have shape (n, k), nearest first; ``dissent`` is the
    share of the k neighbours whose label differs from the row's own; ``majority`` is the most common
    label among them (ties go to the label of the nearer neighbour) and ``majority_share`` its share.
    """

    indices: np.ndarray
    distances: np.ndarray
    dissent: np.ndarray
    majority: np.ndarray
    majority_share: np.ndarray
    k: int


def _search(X: np.ndarray, k: int, n_jobs: int | None, algorithm: str) -> tuple[np.ndarray, np.ndarray]:
    """k nearest other rows of every row, ordered by (exact distance, row position)."""
    n = X.shape[0]
    index = NearestNeighbors(algorithm=algorithm, n_jobs=n_jobs).fit(X)
    sq_norm = np.einsum("ij,ij->i", X, X)
    slack = _SEARCH_RTOL * (sq_norm + sq_norm.max()) + 1e-300
    out_idx = np.empty((n, k), dtype=np.int64)
    out_dist = np.empty((n, k), dtype=np.float64)
    pending = np.arange(n)
    window = min(n, k + 1 + max(2, k // 2))
    while pending.size:
        chunk = max(1, _SCRATCH_BYTES // (8 * window * max(1, X.shape[1])))
        unresolved = []
        for start in range(0, pending.size, chunk):
            rows = pending[start : start + chunk]
            found, cand = index.kneighbors(X[rows], n_neighbors=window)
            dist = _exact_distances(X, rows, cand)
            is_self = cand == rows[:, None]
            # Sort by (self last, distance, position): lexsort's last key is the primary one.
            order = np.lexsort((cand, dist, is_self), axis=-1)
            cand = np.take_along_axis(cand, order, axis=-1)[:, :k]
            dist = np.take_along_axis(dist, order, axis=-1)[:, :k]
            out_idx[rows], out_dist[rows] = cand, dist
            if window < n:
                # Rows not returned by the search lie at least as far (up to rounding) as the farthest
                # returned one; if the k-th distance comes that close, a tie may lie outside the window.
                kth_sq, far_sq = dist[:, -1] ** 2, found[:, -1] ** 2
                unresolved.append(rows[kth_sq >= far_sq - slack[rows]])
        pending = np.concatenate(unresolved) if unresolved else pending[:0]
        window = min(n, window * 4)
    return out_idx, out_dist


def _majority(nb_codes: np.ndarray, n_classes: int) -> tuple[np.ndarray, np.ndarray]:
    """Most common code per row; ties go to the code whose first occurrence comes first."""
    n, k = nb_codes.shape
    counts = np.zeros((n, n_classes), dtype=np.int64)
    rows = np.repeat(np.arange(n), k)
    np.add.at(counts, (rows, nb_codes.ravel()), 1)
    first = np.full((n, n_classes), k, dtype=np.int64)
    for j in range(k - 1, -1, -1):
        first[np.arange(n), nb_codes[:, j]] = j
    best = np.argmax(counts * (k + 1) - first, axis=1)
    return best, counts[np.arange(n), best]


def neighbour_dissent(
    X: np.ndarray,
    y: np.ndarray | pd.Series,
    k: int = 10,
    *,
    n_jobs: int | None = None,
    algorithm: str = "auto",
) -> NeighbourResult:
    """For each row, its k nearest other rows and the share of them carrying a different label.

    A row whose neighbours mostly carry another label is evidence (not proof) of a wrong label: the
    k-nearest-neighbour vote (Cover, T. & Hart, P. (1967). Nearest neighbor pattern classification. IEEE
    Transactions on Information Theory 13(1):21-27) computed without the row itself.

    Parameters
    ----------
    X : array of shape (n, p)
        Prepared feature matrix (finite values).
    y : array of shape (n,)
        Labels, any hashable values.
    k : int
        Neighbours per row; clipped to ``n - 1``.
    n_jobs, algorithm
        Passed to :class:`sklearn.neighbors.NearestNeighbors`.

    Notes
    -----
    Neighbours are ordered by (distance, row position) with the row itself excluded, also among exact
    duplicates. Where the k-th distance ties with rows the search did not return, the search is repeated
    for those rows with a 4-fold larger window until the tie is settled, so the result does not depend on
    the search algorithm. Heavily tied data (many duplicates) costs more time, not more memory than a
    chunk of the widened window.
    """
    return neighbour_dissents(X, y, (k,), n_jobs=n_jobs, algorithm=algorithm)[k]


def neighbour_dissents(
    X: np.ndarray,
    y: np.ndarray | pd.Series,
    ks: Sequence[int],
    *,
    n_jobs: int | None = None,
    algorithm: str = "auto",
) -> dict[int, NeighbourResult]:
    """:func:`neighbour_dissent` for each k in ``ks`` (keys as given) from one search for the largest: the
    order (distance, row position) is total, so the k nearest are the first k of the wider list, the same
    as a search for k alone."""
    X = _as_matrix(X)
    n = X.shape[0]
    codes, classes = _codes(y, n)
    if n < 2:
        raise ValueError("neighbour_dissent needs at least 2 rows")
    if not ks or min(ks) < 1:
        raise ValueError(f"k must be at least 1, got {min(ks) if ks else 'none'}")
    widest = min(max(ks), n - 1)
    idx, dist = _search(X, widest, n_jobs, algorithm)
    out = {}
    for asked in ks:
        k = min(asked, n - 1)
        nb_codes = codes[idx[:, :k]]
        best, best_count = _majority(nb_codes, classes.size)
        out[asked] = NeighbourResult(
            indices=idx[:, :k].astype(np.int32),
            distances=dist[:, :k].astype(np.float32),
            dissent=(nb_codes != codes[:, None]).mean(axis=1),
            majority=classes[best],
            majority_share=best_count / k,
            k=k,
        )
    return out


def twin_conflicts(
    X: np.ndarray, y: np.ndarray | pd.Series, tol: float = 0.0, *, n_jobs: int | None = None
) -> np.ndarray:
    """Per row, the number of other rows with (near-)identical features and a different label.

    Two rows are twins when their Euclidean distance is at most ``tol * scale``, where ``scale`` is the
    root-mean-square distance of the rows to their centroid (``sqrt`` of the summed column variances; on
    a standardized matrix with p columns it is ``sqrt(p)``). ``tol=0`` means exact duplicates only.
    Contradicting twins cannot both be right: no classifier separates them.

    Rows are first grouped into exact duplicates (``np.unique``), so memory grows with the number of
    distinct rows and of near pairs between them, never with n^2. Near pairs (``tol > 0``) are searched
    with a k-d tree and their distances recomputed exactly before they count.

    Returns
    -------
    ndarray of int64, shape (n,)
    """
    X = _as_matrix(X)
    n = X.shape[0]
    codes, classes = _codes(y, n)
    if tol < 0:
        raise ValueError(f"tol must be >= 0, got {tol}")
    if n == 0:
        return np.zeros(0, dtype=np.int64)
    uniq, group = np.unique(X, axis=0, return_inverse=True)
    group = group.reshape(-1)
    u = uniq.shape[0]
    # Rows per (distinct point, class).
    per_class = sparse.csr_matrix((np.ones(n, dtype=np.int64), (group, codes)), shape=(u, classes.size))
    near = sparse.identity(u, dtype=np.int64, format="csr")
    radius = tol * float(np.sqrt(X.var(axis=0).sum()))
    if radius > 0 and u > 1:
        search = NearestNeighbors(radius=radius * (1 + 1e-6), algorithm="kd_tree", n_jobs=n_jobs).fit(uniq)
        graph = search.radius_neighbors_graph(uniq, mode="connectivity").tocoo()
        i, j = graph.row, graph.col
        keep = (i != j) & (_pair_distances(uniq, i, j) <= radius)
        near = near + sparse.csr_matrix(
            (np.ones(int(keep.sum()), dtype=np.int64), (i[keep], j[keep])), shape=(u, u)
        )
    around = (near @ per_class).tocsr()
    total = np.asarray(around.sum(axis=1)).ravel()
    same = np.asarray(around[group, codes]).ravel()
    return (total[group] - same).astype(np.int64)


def _split_kinds(frame: pd.DataFrame) -> tuple[list[str], list[str]]:
    numeric = [
        c
        for c in frame.columns
        if pd.api.types.is_numeric_dtype(frame[c]) and not pd.api.types.is_bool_dtype(frame[c])
    ]
    return numeric, [c for c in frame.columns if c not in numeric]


def class_zscores(
    frame: pd.DataFrame, labels: np.ndarray | pd.Series, row: int, *, exclude_self: bool = True
) -> pd.DataFrame:
    """How unusual each feature value of one row is among the rows carrying the same label.

    Parameters
    ----------
    frame : DataFrame
        Raw (unprepared) feature columns, one row per training row.
    labels : array of shape (n,)
        Labels of the rows of ``frame``.
    row : int
        Position of the row in ``frame``.
    exclude_self : bool
        Leave the row out of its class statistics (default).

    Returns
    -------
    DataFrame indexed by feature, with columns ``kind`` ("numeric"/"categorical"), ``value``,
    ``class_mean``, ``class_std`` (sample standard deviation, ddof=1), ``z`` = (value - mean) / std,
    ``same_share`` (categorical: share of the class rows with the same value) and ``class_rows`` (class
    rows with a value for the feature). Missing values are skipped. ``z`` is NaN when fewer than two
    class rows have a value; when their std is 0 it is 0 for the same value and +/-inf otherwise.
    """
    labels = np.asarray(labels)
    n = len(frame)
    if labels.shape != (n,):
        raise ValueError(f"labels must have shape ({n},), got {labels.shape}")
    if not 0 <= row < n:
        raise IndexError(f"row {row} out of range for {n} rows")
    in_class = labels == labels[row]
    if exclude_self:
        in_class[row] = False
    peers = frame.iloc[np.flatnonzero(in_class)]
    numeric, _ = _split_kinds(frame)
    records = []
    for col in frame.columns:
        value = frame[col].iloc[row]
        values = peers[col].dropna()
        rec = {"feature": col, "value": value, "class_rows": int(values.size)}
        if col in numeric:
            mean = float(values.mean()) if values.size else np.nan
            std = float(values.std(ddof=1)) if values.size > 1 else np.nan
            rec.update(kind="numeric", class_mean=mean, class_std=std, z=_z(value, mean, std))
            rec["same_share"] = np.nan
        else:
            share = float((values == value).mean()) if values.size and not pd.isna(value) else np.nan
            rec.update(kind="categorical", class_mean=np.nan, class_std=np.nan, z=np.nan, same_share=share)
        records.append(rec)
    columns = ["kind", "value", "class_mean", "class_std", "z", "same_share", "class_rows"]
    return pd.DataFrame.from_records(records, index="feature")[columns]


def _z(value: object, mean: float, std: float) -> float:
    if pd.isna(value) or np.isnan(std):
        return np.nan
    diff = float(value) - mean
    if std == 0:
        return 0.0 if diff == 0 else float(np.copysign(np.inf, diff))
    return diff / std


def class_zscore_matrix(
    frame: pd.DataFrame, labels: np.ndarray | pd.Series, *, exclude_self: bool = True
) -> pd.DataFrame:
    """Vectorised :func:`class_zscores` for every row and numeric feature: a frame of z-scores.

    Class means and sums of squared deviations are computed once per class; leaving row i out uses the
    downdate ``mean' = (n mean - x) / (n - 1)``, ``M2' = M2 - n / (n - 1) (x - mean)^2`` (Welford, B. P.
    (1962). Note on a method for calculating corrected sums of squares and products. Technometrics
    4(3):419-420, run backwards). A leave-one-out spread below 1e-10 of the class's spread counts as 0
    (rounding); z is then 0 or +/-inf as in :func:`class_zscores`. Non-numeric columns are left out.
    """
    labels = np.asarray(labels)
    n = len(frame)
    if labels.shape != (n,):
        raise ValueError(f"labels must have shape ({n},), got {labels.shape}")
    numeric, _ = _split_kinds(frame)
    x = frame[numeric].to_numpy(dtype=np.float64, na_value=np.nan)
    codes, classes = pd.factorize(labels, sort=True)
    present = ~np.isnan(x)
    xz = np.where(present, x, 0.0)
    cnt = np.zeros((classes.size, x.shape[1]))
    total = np.zeros_like(cnt)
    np.add.at(cnt, codes, present)
    np.add.at(total, codes, xz)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = total / cnt
        dev = np.where(present, x - mean[codes], 0.0)
        m2 = np.zeros_like(cnt)
        np.add.at(m2, codes, dev**2)
        c, mu, s2 = cnt[codes], mean[codes], m2[codes]
        if exclude_self:
            drop = present  # a missing value was never counted
            c_out = np.where(drop, c - 1, c)
            mu_out = np.where(drop, (c * mu - xz) / c_out, mu)
            s2_out = np.where(drop, s2 - c / c_out * dev**2, s2)
            s2_out = np.where(s2_out <= 1e-10 * s2, 0.0, s2_out)
            c, mu, s2 = c_out, mu_out, s2_out
        std = np.where(c > 1, np.sqrt(np.maximum(s2, 0.0) / (c - 1)), np.nan)
        diff = x - mu
        z = np.where(std > 0, diff / std, np.where(diff == 0, 0.0, np.copysign(np.inf, diff)))
        z = np.where(np.isnan(std) | ~present, np.nan, z)
    return pd.DataFrame(z, index=frame.index, columns=numeric)
