"""The findings object both faces (CLI and UI) consume: a per-row frame plus a summary dict.

The per-row frame has one row per input row, in input order, with at least the columns in
``ROW_COLUMNS``. Labels and predictions are shown in the data set's own label values.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

#: Column name -> meaning. The order is the order of ``rows.parquet``.
ROW_COLUMNS: dict[str, str] = {
    "row": "0-based position of the row in the input file",
    "id": "stable row id (the spec's id column, else the row position), as text",
    "label": "the label given in the data",
    "prediction": "prediction of the model trained on all training rows",
    "loo_prediction": (
        "prediction of the model trained without this row (see loo_exact); held-out rows: the trained model's"
    ),
    "loo_miss": "LOO prediction differs from the label (held-out rows: the trained model's error)",
    "support": (
        "row is one of the family's support rows (summary family.support_name: support vectors, critical"
        " neighbours, update set, influential rows)"
    ),
    "essential": "removing the row changes the model",
    "bounded": "SVM: dual weight alpha at its upper limit C (False for other families)",
    "alpha": (
        "SVM: dual weight (0 outside the support set); perceptron: updates the row caused; 0 for k-NN and"
        " logistic regression (summary family.columns lists where it means something)"
    ),
    "margin": "y * f(x): positive when the training prediction agrees with the label",
    "loo_margin": "y * f(x) under the model trained without this row: negative for a LOO miss",
    "loo_exact": "the LOO prediction and margin are exact (False: a one-step approximation, logistic only)",
    "flip_count": "how many other training rows change predicted class when this row is left out",
    "score": (
        "suspicion score, higher = look first: -clip(LOO margin, -2, 2) + 0.5 x neighbour dissent"
        " - 0.1 x clip(logit, -4, 4), logit = out-of-fold logistic log-odds of the label"
        " (holdfast.insight.score)"
    ),
    "rank": "1 = most suspicious training row; held-out rows rank after all training rows",
    "flag_names": "comma-separated names of the flags raised for this row",
    "held_out": "row is in the held-out split: never trained on",
}


@dataclass
class Findings:
    """Result of a scan: ``rows`` (per-row frame) and ``summary`` (JSON-ready dict)."""

    rows: pd.DataFrame
    summary: dict[str, Any]
    classes: list[str] = field(default_factory=list)

    def write(self, out_dir: str | Path) -> tuple[Path, Path]:
        """Write ``rows.parquet`` and ``summary.json`` into ``out_dir`` atomically (temp file + rename)."""
        from holdfast.atomic import atomic_write_bytes, atomic_write_parquet

        out = Path(out_dir)
        out.mkdir(parents=True, exist_ok=True)
        rows_path = out / "rows.parquet"
        summary_path = out / "summary.json"
        atomic_write_parquet(self.rows, rows_path)
        atomic_write_bytes(summary_path, (json.dumps(to_jsonable(self.summary), indent=2) + "\n").encode())
        return rows_path, summary_path


def to_jsonable(obj: Any) -> Any:
    """Turn numpy scalars/arrays and paths inside nested dicts/lists into plain JSON types."""
    if isinstance(obj, dict):
        return {str(k): to_jsonable(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [to_jsonable(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return [to_jsonable(v) for v in obj.tolist()]
    if isinstance(obj, np.bool_):
        return bool(obj)
    if isinstance(obj, np.integer):
        return int(obj)
    if isinstance(obj, np.floating):
        v = float(obj)
        return v if np.isfinite(v) else None
    if isinstance(obj, float):
        return obj if np.isfinite(obj) else None
    if isinstance(obj, Path):
        return str(obj)
    return obj
