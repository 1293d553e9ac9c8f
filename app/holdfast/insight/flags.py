"""Flags: named pieces of evidence that a training row deserves a look. Evidence, not verdicts.

Each flag is a boolean column ``flag_<name>`` of the per-row frame; ``flag_names`` joins the names raised, in
the order of ``FLAG_REASONS``. Held-out rows are never trained on and get no flags.

========================  =========================================================================
flag                      raised when (columns of the per-row frame)
========================  =========================================================================
``loo_miss``              the LOO prediction differs from the label (``loo_miss``)
``wrong_side``            the training prediction differs from the label (``prediction != label``)
``bounded``               support row with dual weight alpha at its limit C (``bounded``)
``neighbour_dissent``     more than ``DISSENT_SHARE`` of the k nearest training rows carry another
                          label (``neighbour_dissent``; k = ``spec.insight.k``, default 10)
``twin_conflict``         at least one other training row with identical or near-identical features
                          (distance <= ``TWIN_TOL`` times the data's RMS spread) carries another label
                          (``twin_conflicts``)
``heavy_flip``            leaving the row out changes the predicted class of at least
                          ``HEAVY_FLIP_MIN`` other training rows and of ``HEAVY_FLIP_TIMES`` times as
                          many as the median support row (``flip_count``; :func:`heavy_flip_threshold`)
========================  =========================================================================
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

#: flag name -> short reason the faces show (never "names": ``flag_names`` is the text column)
FLAG_REASONS: dict[str, str] = {
    "loo_miss": "the model trained without this row predicts another class",
    "wrong_side": "the model trained on all rows predicts another class",
    "bounded": "support row with its dual weight at the limit C (the model strains to fit it)",
    "neighbour_dissent": "most of its nearest neighbours carry another label",
    "twin_conflict": "an identical or near-identical row carries another label",
    "heavy_flip": "leaving it out changes the predictions of unusually many other rows",
}

#: ``heavy_flip`` threshold on the flip count. Leaving one row out moves an SVM boundary only near that
#: row, so flips are rare: on scikit-learn's breast-cancer set with 5% planted label flips (RBF, C=1;
#: 24 runs) 84-99% of the rows flip no other row and 0-2.6% flip 3 or more; on the demo data (C=10)
#: 88% flip none and 2.3% (58 rows, 20 of them planted slips) flip 3 or more (measured for this
#: module). Three or more flips marks the rare rows that hold up a part of the boundary by themselves.
HEAVY_FLIP_MIN = 3
#: ... but where the boundary region is dense, every support row flips several rows: at 100,000 rows of
#: overlapping classes (linear kernel, 21% LOO error) the median support row flips 5, and 45% of all rows
#: flipped 3 or more. So the threshold is also HEAVY_FLIP_TIMES the median flip count of the support rows
#: (our rule, measured for this module): there 15 flips, 6 rows. Where the median support row flips 0 or
#: 1 (the sets above; 2,000 and 20,000 rows of make_classification with 5% flipped labels, RBF) the
#: threshold stays HEAVY_FLIP_MIN.
HEAVY_FLIP_TIMES = 3
#: ``neighbour_dissent`` is raised when more than this share of the k neighbours carry another label
#: ("most of"), i.e. the k-nearest-neighbour vote without the row goes against its label
DISSENT_SHARE = 0.5
#: rows closer than this times the RMS distance of the rows to their centroid count as twins (1e-3:
#: equal up to rounding of the recorded values; see ``holdfast.insight.neighbours.twin_conflicts``)
TWIN_TOL = 1e-3


def _column(rows: pd.DataFrame, name: str, fill: float) -> np.ndarray:
    if name not in rows:
        return np.full(len(rows), fill)
    return np.nan_to_num(rows[name].to_numpy(dtype=float), nan=fill)


def heavy_flip_threshold(flip_counts: np.ndarray) -> int:
    """The least flip count raising ``heavy_flip``, from the flip counts of the support rows: at least
    ``HEAVY_FLIP_MIN`` and ``HEAVY_FLIP_TIMES`` times their median."""
    counts = np.asarray(flip_counts, dtype=float)
    if counts.size == 0:
        return HEAVY_FLIP_MIN
    return max(HEAVY_FLIP_MIN, math.ceil(HEAVY_FLIP_TIMES * float(np.median(counts))))


def flip_reference(rows: pd.DataFrame) -> np.ndarray:
    """The known flip counts of the training rows that are support rows (none when the frame has no
    ``support`` column): what :func:`heavy_flip_threshold` takes the median of."""
    if "support" not in rows:
        return np.empty(0)
    use = rows["support"].to_numpy(dtype=bool) & ~rows["held_out"].to_numpy(dtype=bool)
    counts = rows["flip_count"].to_numpy(dtype=float, na_value=np.nan)
    return counts[use & ~np.isnan(counts)]


def compute_flags(rows: pd.DataFrame, heavy_flip_min: int | None = None) -> pd.DataFrame:
    """Return a copy of the per-row frame with ``flag_<name>`` columns and the ``flag_names`` text column.

    Needs the columns ``held_out``, ``loo_miss``, ``prediction``, ``label``, ``bounded`` and
    ``flip_count``; ``neighbour_dissent`` and ``twin_conflicts`` count as 0 where missing.
    ``heavy_flip_min``: the ``heavy_flip`` threshold; by default :func:`heavy_flip_threshold` of
    :func:`flip_reference`.
    """
    if heavy_flip_min is None:
        heavy_flip_min = heavy_flip_threshold(flip_reference(rows))
    train = ~rows["held_out"].to_numpy(dtype=bool)
    out = rows.copy()
    out["flag_loo_miss"] = rows["loo_miss"].to_numpy(dtype=bool) & train
    out["flag_wrong_side"] = (rows["prediction"] != rows["label"]).to_numpy(dtype=bool) & train
    out["flag_bounded"] = rows["bounded"].to_numpy(dtype=bool) & train
    out["flag_neighbour_dissent"] = (_column(rows, "neighbour_dissent", 0.0) > DISSENT_SHARE) & train
    out["flag_twin_conflict"] = (_column(rows, "twin_conflicts", 0.0) > 0) & train
    out["flag_heavy_flip"] = (rows["flip_count"].to_numpy() >= heavy_flip_min) & train
    names = list(FLAG_REASONS)
    matrix = np.column_stack([out[f"flag_{n}"].to_numpy(dtype=bool) for n in names])
    out["flag_names"] = [",".join(n for n, on in zip(names, r, strict=True) if on) for r in matrix]
    return out


def raised(rows: pd.DataFrame, position: int) -> list[tuple[str, str]]:
    """The flags raised for one row of the per-row frame, as (name, reason) pairs in display order."""
    row = rows.iloc[position]
    return [(n, FLAG_REASONS[n]) for n in FLAG_REASONS if bool(row.get(f"flag_{n}", False))]
