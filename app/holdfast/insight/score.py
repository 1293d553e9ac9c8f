"""Suspicion score: one number per row for ranking (higher = look first); flags say why.

Placeholder formula (to be tuned): score = 2*[LOO miss] + [bounded] + dissent share + sigmoid(-margin).
Ties are broken by row position (lower first).
"""

from __future__ import annotations

import numpy as np
import pandas as pd


def suspicion_score(rows: pd.DataFrame) -> np.ndarray:
    """The score of every row; held-out rows get NaN (they are not trained on)."""
    margin = rows["margin"].to_numpy(dtype=float)
    dissent = np.nan_to_num(rows["neighbour_dissent"].to_numpy(dtype=float)) if "neighbour_dissent" in rows else 0.0
    score = (
        2.0 * rows["loo_miss"].to_numpy(dtype=float)
        + rows["bounded"].to_numpy(dtype=float)
        + dissent
        + 1.0 / (1.0 + np.exp(np.clip(margin, -50, 50)))
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
