"""What the row detail shows beside the engine's RowDetail: the score of one row split into its parts.

The parts come from the engine (:func:`holdfast.insight.score.score_parts`); this module only picks the
row's values out of the per-row frame.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from holdfast.insight.score import score_parts
from holdfast.ui.widgets.row_detail import ScorePart


def row_score_parts(rows: pd.DataFrame | None, position: int) -> tuple[list[ScorePart] | None, bool]:
    """The score of the row at ``position`` split into its parts (engine function), and whether its
    LOO refit is still pending (provisional findings)."""
    if rows is None or bool(rows["held_out"].iat[position]):
        return None, False

    def number(column: str) -> float:
        value = rows[column].iat[position] if column in rows else np.nan
        return float("nan") if pd.isna(value) else float(value)

    pending = bool(rows["loo_pending"].iat[position]) if "loo_pending" in rows else False
    miss = rows["loo_miss"].iat[position]
    # a row still waiting for its refit is scored with its full-fit margin (as the engine scores it)
    margin = number("margin") if pending else number("loo_margin")
    miss = False if pending or pd.isna(miss) else bool(miss)
    parts = score_parts(margin, miss, number("neighbour_dissent_avg"), number("linear_logit"))
    return parts, pending
