"""Suspicion score: one number per training row for ranking (higher = look first); flags say why.

Formula (placeholder weights, tuned below)::

    score_i = -clip(y_i f_{-i}(x_i), -MARGIN_CLIP, MARGIN_CLIP) + W_DISSENT * D_i

Ingredients:

* ``y_i f_{-i}(x_i)`` (column ``loo_margin``): the decision value for row i of the model refitted without
  row i, signed by its label (own class minus the best other class for more than two classes). Exact:
  the engine refits every support row (``holdfast.engine.loo``); outside the support set the model does
  not change, so it equals the training margin. Its sign is the LOO prediction; its size says how far
  the rest of the data pushes the row to the other side (Vapnik 1995, *The Nature of Statistical
  Learning Theory*, for the LOO argument; the LOO decision value is the quantity behind the span
  estimate of Vapnik & Chapelle 2000, *Neural Computation* 12(9)). SVM decision values are in margin
  units (free support rows sit at 1), so the clip at ``MARGIN_CLIP`` means the same on every data set.
* ``D_i`` (column ``neighbour_dissent_avg``): the share of the row's nearest training rows (Euclidean,
  prepared features, the row itself excluded) carrying another label, averaged over k/2, k and 2k
  neighbours (k = ``spec.insight.k``): the k-nearest-neighbour vote of Cover & Hart 1967, "Nearest
  neighbor pattern classification", IEEE Trans. Information Theory 13(1), at three scales.

Ties are broken by row position (lower first). Held-out rows get no score (NaN) and rank last.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

#: LOO margins beyond +-MARGIN_CLIP (in SVM margin units) count as that value
MARGIN_CLIP = 2.0
#: weight of the averaged neighbour dissent (a share in [0, 1])
W_DISSENT = 0.5
#: neighbour counts used for ``neighbour_dissent_avg``, as multiples of k
DISSENT_SCALES = (0.5, 1.0, 2.0)


def multiscale_dissent(X: np.ndarray, y: np.ndarray, k: int) -> np.ndarray:
    """Neighbour dissent averaged over ``DISSENT_SCALES`` times ``k`` nearest neighbours.

    Parameters
    ----------
    X : array of shape (m, p)
        Prepared training matrix.
    y : array of shape (m,)
        Class codes.
    k : int
        The spec's neighbour count.

    Returns
    -------
    ndarray of shape (m,), values in [0, 1].
    """
    from holdfast.insight.neighbours import neighbour_dissent

    m = len(y)
    widest = min(m - 1, max(1, round(max(DISSENT_SCALES) * k)))
    nb = neighbour_dissent(X, y, k=widest)
    other = np.asarray(y)[nb.indices] != np.asarray(y)[:, None]
    counts = sorted({min(widest, max(1, round(s * k))) for s in DISSENT_SCALES})
    return np.mean([other[:, :c].mean(axis=1) for c in counts], axis=0)


def suspicion_score(rows: pd.DataFrame) -> np.ndarray:
    """The score of every row of the per-row frame; held-out rows get NaN.

    Uses the columns ``loo_margin`` (falls back to +-1 by ``loo_miss`` where missing) and
    ``neighbour_dissent_avg`` (0 where missing).
    """
    n = len(rows)
    miss = rows["loo_miss"].to_numpy(dtype=bool)
    signed = np.where(miss, -1.0, 1.0)
    if "loo_margin" in rows:
        lm = rows["loo_margin"].to_numpy(dtype=float)
        lm = np.where(np.isnan(lm), signed, lm)
    else:
        lm = signed
    dissent = (
        np.nan_to_num(rows["neighbour_dissent_avg"].to_numpy(dtype=float))
        if "neighbour_dissent_avg" in rows
        else np.zeros(n)
    )
    score = -np.clip(lm, -MARGIN_CLIP, MARGIN_CLIP) + W_DISSENT * dissent
    score[rows["held_out"].to_numpy(dtype=bool)] = np.nan
    return score


def rank_rows(score: np.ndarray) -> np.ndarray:
    """1-based rank by score (descending), ties by row position; NaN scores rank last."""
    key = np.where(np.isnan(score), -np.inf, score)
    order = np.lexsort((np.arange(len(score)), -key))
    rank = np.empty(len(score), dtype=np.int64)
    rank[order] = np.arange(1, len(score) + 1)
    return rank
