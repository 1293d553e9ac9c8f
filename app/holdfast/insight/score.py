"""Suspicion score: one number per training row for ranking (higher = look first); flags say why.

Formula::

    score_i = -clip(y_i f_{-i}(x_i), -MARGIN_CLIP, MARGIN_CLIP) + W_DISSENT * D_i
              - W_LINEAR * clip(L_i, -LINEAR_CLIP, LINEAR_CLIP)

with ``MARGIN_CLIP = 2``, ``W_DISSENT = 0.5``, ``W_LINEAR = 0.1`` and ``LINEAR_CLIP = 4``. Ingredients:

* ``y_i f_{-i}(x_i)`` (column ``loo_margin``): the decision value for row i of the model refitted without
  row i, signed by its label (own class minus the best other class for more than two classes). Exact:
  the engine refits every support row (``holdfast.engine.loo``); outside the support set the model does
  not change, so it equals the training margin. Its sign is the LOO prediction; its size says how far
  the rest of the data pushes the row to the other side (the LOO argument of Vapnik 1995, *The Nature
  of Statistical Learning Theory*; the LOO decision value is the quantity behind the span estimate of
  Vapnik & Chapelle 2000, *Neural Computation* 12(9)). SVM decision values are in margin units (free
  support rows sit at 1), so the clip means the same on every data set; it only keeps the score
  bounded (recall did not change for clips of 1, 2 or 3).
* ``D_i`` (column ``neighbour_dissent_avg``): the share of the row's nearest training rows (Euclidean,
  prepared features, the row itself excluded) carrying another label, averaged over k/2, k and 2k
  neighbours (k = ``spec.insight.k``, default 10): the k-nearest-neighbour vote of Cover & Hart 1967,
  "Nearest neighbor pattern classification", IEEE Trans. Information Theory 13(1), at three scales.
* ``L_i`` (column ``linear_logit``): the log-odds of the row's label against the best other class from a
  logistic regression fitted on the other folds (5-fold, out of fold; ``holdfast.insight.consensus``): the
  verdict of a second model family, as in the consensus filter of Brodley & Friedl 1999, "Identifying
  mislabeled training data", JAIR 11, here a small weighted term rather than a vote. It also splits most
  former ties (rows beyond the LOO clip with full dissent all scored 2.5); rows where all three
  ingredients saturate still tie, at 2.9.

Ties are broken by row position (lower first). Held-out rows get no score (NaN) and rank last.

How it was chosen and what it reaches (recall@k, k = number planted; protocol in
``tests/test_score.py``: 5% of the rows flipped at random, or at random among the 20% nearest the
boundary of the clean SVM; RBF, C=1, gamma="scale"). Weights were tuned on seeds 10-21, W_LINEAR was
then checked on the unseen seeds 22-33, and the test checks seeds 0-2; the baseline is the out-of-fold
probability of the given label from 5-fold logistic regression. "trusted" sets aside the natural
suspects, rows whose clean label the clean data already rejects (16 in breast cancer), so that finding a
natural error is not counted as a false alarm. Mean (min) over seeds 0-2:

==============================  ============  ============  ==============  ==============
case                            score         baseline      score trusted   base trusted
==============================  ============  ============  ==============  ==============
breast cancer, random           0.917 (0.89)  0.905 (0.89)  0.988 (0.96)    0.964 (0.96)
breast cancer, near-boundary    0.821 (0.82)  0.655 (0.61)  0.905 (0.89)    0.774 (0.68)
digits 3 vs 8, random           1.000 (1.00)  0.537 (0.44)  1.000 (1.00)    0.685 (0.61)
digits 3 vs 8, near-boundary    0.963 (0.94)  0.556 (0.44)  0.963 (0.94)    0.648 (0.56)
wine 0 vs rest, random          1.000 (1.00)  0.926 (0.89)  1.000 (1.00)    0.963 (0.89)
wine 0 vs rest, near-boundary   1.000 (1.00)  0.852 (0.78)  1.000 (1.00)    0.963 (0.89)
==============================  ============  ============  ==============  ==============

Over seeds 0-9 (``tests/bench/bench_score_recall.py``) breast cancer gives 0.914 against 0.882 (random)
and 0.807 against 0.704 (near-boundary); without the logistic term it gave 0.896 and 0.800. On the
unseen seeds 22-33 the logistic term raised plain recall (random 0.869 -> 0.890, near-boundary 0.812 ->
0.818) and lowered trusted recall a little (0.970 -> 0.961, 0.926 -> 0.917). On the demo data (77
planted slips among 2,550 training rows) the score reaches 0.688 (0.662 without the logistic term), the
baseline 0.442.

The plain near-boundary figure on breast cancer stays near 0.82, short of the 0.85 asked for: on seeds
0-2, 4, 6 and 5 natural suspects (e.g. rows 135, 297, 73, 40, 255: LOO margins -0.4 to -1.5, dissent
0.6-1.0) carry stronger evidence than the 24th-best planted row, and reaching 0.85 needs at most 4 rows
other than planted ones there. Rows the clean data already rejects rank above slips that moved a row
just across the boundary under every ranking tried; a learned non-linear ranker over all the per-row
evidence, cross-fitted so that it cannot memorize the recurring suspects, also stayed at 0.80-0.82.

Other learner families (``tests/bench/bench_score_recall.py --families``, seeds 0-2, the same protocol
with each family's own clean scan choosing the natural suspects and the near-boundary pool; LOO margins
divided by the family's margin unit, ``holdfast.engine.build.margin_unit``). Plain recall, score against
baseline:

==============================  ============  ============  ============
case                            k-NN (k=10)   perceptron    logistic
==============================  ============  ============  ============
breast cancer, random           0.845 / 0.845 0.845 / 0.857 0.881 / 0.869
breast cancer, near-boundary    0.667 / 0.726 0.607 / 0.762 0.714 / 0.714
digits 3 vs 8, random           0.981 / 0.444 0.759 / 0.519 0.889 / 0.519
wine 0 vs rest, random          0.889 / 0.926 0.815 / 0.926 0.926 / 0.889
demo data (77 planted slips)    0.481 / 0.442 0.325 / 0.442 0.455 / 0.442
==============================  ============  ============  ============

The perceptron's LOO margins carry little: leaving out one update row changes the whole update
sequence, so its LOO margins are noisy. On the demo data, ranking by its update count does no better
(0.42 at 10 epochs, measured for this module); the score there does worse than the baseline, and the SVM
or logistic family is the better choice for ranking.

Tried and left out (no gain on the tuning seeds): the binary LOO miss, bounded and training margin
(the first combination: 0.756 near-boundary on breast cancer where the LOO-margin formula gives 0.804),
alpha/C, the flip count, the row's self-influence y(f(x_i) - f_{-i}(x_i)), the hinge-loss change of the
other rows without the row (LOO data value), one k instead of three, larger dissent weights;
distance-weighted dissent, class-conditional distance and kernel-density ratios, the neighbours' LOO
margins; iterative filtering (set aside or flip the top 5-15 rows, refit, re-rank: 0.75-0.78
near-boundary, Brodley & Friedl 1999); LOO margins averaged over C and gamma; bagged out-of-bag margins
(Breiman 1996); rank averages and z-scored sums of several learners; the change of the SVM objective
when the row's label is flipped and the model refitted (Spearman -0.98 with this score among the top
rows: it repeats the row's own margin).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

#: LOO margins beyond +-MARGIN_CLIP (in SVM margin units) count as that value
MARGIN_CLIP = 2.0
#: weight of the averaged neighbour dissent (a share in [0, 1])
W_DISSENT = 0.5
#: weight of the out-of-fold logistic log-odds of the label, and its clip (log-odds units)
W_LINEAR = 0.1
LINEAR_CLIP = 4.0
#: neighbour counts used for ``neighbour_dissent_avg``, as multiples of k
DISSENT_SCALES = (0.5, 1.0, 2.0)


def dissent_width(m: int, k: int) -> int:
    """The most neighbours :func:`multiscale_dissent` looks at (the widest of ``DISSENT_SCALES``)."""
    return min(m - 1, max(1, round(max(DISSENT_SCALES) * k)))


def multiscale_dissent(
    X: np.ndarray, y: np.ndarray, k: int, neighbours: np.ndarray | None = None
) -> np.ndarray:
    """Neighbour dissent averaged over ``DISSENT_SCALES`` times ``k`` nearest neighbours.

    Parameters
    ----------
    X : array of shape (m, p)
        Prepared training matrix.
    y : array of shape (m,)
        Class codes.
    k : int
        The spec's neighbour count.
    neighbours : array of shape (m, dissent_width(m, k)), optional
        The rows' nearest neighbours, when already found (``NeighbourResult.indices``); else searched.

    Returns
    -------
    ndarray of shape (m,), values in [0, 1].
    """
    from holdfast.insight.neighbours import neighbour_dissent

    m = len(y)
    widest = dissent_width(m, k)
    if neighbours is None:
        neighbours = neighbour_dissent(X, y, k=widest).indices
    if neighbours.shape[1] < widest:
        raise ValueError(f"need {widest} neighbours per row, got {neighbours.shape[1]}")
    other = np.asarray(y)[neighbours[:, :widest]] != np.asarray(y)[:, None]
    counts = sorted({min(widest, max(1, round(s * k))) for s in DISSENT_SCALES})
    return np.mean([other[:, :c].mean(axis=1) for c in counts], axis=0)


def suspicion_score(rows: pd.DataFrame, margin_unit: float = 1.0) -> np.ndarray:
    """The score of every row of the per-row frame; held-out rows get NaN.

    Uses the columns ``loo_margin`` (falls back to +-1 by ``loo_miss`` where missing),
    ``neighbour_dissent_avg`` and ``linear_logit`` (each 0 where missing). ``margin_unit`` is the
    decision-value size that counts as one SVM margin unit for the learner family in use (1 for the SVM;
    see ``holdfast.engine.build.margin_unit``): LOO margins are divided by it before the clip.
    """
    n = len(rows)
    miss = rows["loo_miss"].to_numpy(dtype=bool)
    signed = np.where(miss, -1.0, 1.0)
    if "loo_margin" in rows:
        lm = rows["loo_margin"].to_numpy(dtype=float)
        lm = np.where(np.isnan(lm), signed, lm / margin_unit)
    else:
        lm = signed
    dissent = (
        np.nan_to_num(rows["neighbour_dissent_avg"].to_numpy(dtype=float))
        if "neighbour_dissent_avg" in rows
        else np.zeros(n)
    )
    linear = (
        np.nan_to_num(rows["linear_logit"].to_numpy(dtype=float)) if "linear_logit" in rows else np.zeros(n)
    )
    score = (
        -np.clip(lm, -MARGIN_CLIP, MARGIN_CLIP)
        + W_DISSENT * dissent
        - W_LINEAR * np.clip(linear, -LINEAR_CLIP, LINEAR_CLIP)
    )
    score[rows["held_out"].to_numpy(dtype=bool)] = np.nan
    return score


def rank_rows(score: np.ndarray) -> np.ndarray:
    """1-based rank by score (descending), ties by row position; NaN scores rank last."""
    key = np.where(np.isnan(score), -np.inf, score)
    order = np.lexsort((np.arange(len(score)), -key))
    rank = np.empty(len(score), dtype=np.int64)
    rank[order] = np.arange(1, len(score) + 1)
    return rank


#: the score's parts as :func:`score_parts` names them: (name, per-row column, weight)
SCORE_PARTS: tuple[tuple[str, str, float], ...] = (
    ("LOO margin", "loo_margin", -1.0),
    ("neighbour dissent", "neighbour_dissent_avg", W_DISSENT),
    ("logistic log-odds", "linear_logit", -W_LINEAR),
)


def score_parts(
    loo_margin: float, loo_miss: bool, dissent: float, linear_logit: float
) -> list[tuple[str, float, float, float, float]]:
    """One training row's score split into its parts, as :func:`suspicion_score` adds them up.

    Returns ``(name, weight, value, used, contribution)`` per part (see :data:`SCORE_PARTS`): ``value`` as
    given (NaN when missing), ``used`` after the clip (or the +-1 fallback of a missing LOO margin, 0 for
    missing dissent or log-odds), ``contribution = weight * used``. The contributions sum to the score.
    """
    lm = (-1.0 if loo_miss else 1.0) if np.isnan(loo_margin) else float(loo_margin)
    used = (
        float(np.clip(lm, -MARGIN_CLIP, MARGIN_CLIP)),
        0.0 if np.isnan(dissent) else float(dissent),
        0.0 if np.isnan(linear_logit) else float(np.clip(linear_logit, -LINEAR_CLIP, LINEAR_CLIP)),
    )
    values = (float(loo_margin), float(dissent), float(linear_logit))
    return [
        (name, weight, value, u, weight * u)
        for (name, _, weight), value, u in zip(SCORE_PARTS, values, used, strict=True)
    ]
