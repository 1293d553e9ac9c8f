"""Flags: named pieces of evidence that a row deserves a look. Evidence, not verdicts.

Each flag is a boolean column ``flag_<name>`` of the per-row frame; ``flags`` joins the raised names.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

#: flag name -> short reason the faces show
FLAG_REASONS: dict[str, str] = {
    "loo_miss": "the model trained without this row predicts another class",
    "wrong_side": "the model trained on all rows predicts another class",
    "bounded": "support row with its dual weight at the limit C (the model strains to fit it)",
    "neighbour_dissent": "most of its nearest neighbours carry another label",
    "twin_conflict": "an identical or near-identical row carries another label",
    "heavy_flip": "leaving it out changes the predictions of several other rows",
}

#: a row flips "many" others when its flip count is at least this (common practice: a handful)
HEAVY_FLIP_MIN = 3
#: neighbour dissent is raised when more than this share of the k neighbours carry another label
DISSENT_SHARE = 0.5


def compute_flags(rows: pd.DataFrame) -> pd.DataFrame:
    """Add ``flag_<name>`` columns and the ``flags`` text column to the per-row frame (training rows only)."""
    train = ~rows["held_out"].to_numpy(dtype=bool)
    out = rows.copy()
    out["flag_loo_miss"] = rows["loo_miss"].to_numpy(dtype=bool) & train
    out["flag_wrong_side"] = (rows["prediction"] != rows["label"]).to_numpy() & train
    out["flag_bounded"] = rows["bounded"].to_numpy(dtype=bool) & train
    dissent = rows["neighbour_dissent"].to_numpy(dtype=float) if "neighbour_dissent" in rows else np.zeros(len(rows))
    out["flag_neighbour_dissent"] = (np.nan_to_num(dissent) > DISSENT_SHARE) & train
    twins = rows["twin_conflicts"].to_numpy() if "twin_conflicts" in rows else np.zeros(len(rows))
    out["flag_twin_conflict"] = (twins > 0) & train
    out["flag_heavy_flip"] = (rows["flip_count"].to_numpy() >= HEAVY_FLIP_MIN) & train
    names = list(FLAG_REASONS)
    matrix = np.column_stack([out[f"flag_{n}"].to_numpy(dtype=bool) for n in names])
    out["flags"] = [",".join(n for n, on in zip(names, r, strict=True) if on) for r in matrix]
    return out
