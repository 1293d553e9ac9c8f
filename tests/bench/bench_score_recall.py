"""Benchmark: recall@k of planted label flips, suspicion score against the notebook baseline.

The longer run behind the figures in ``holdfast.insight.score``: the protocol of ``tests/test_score.py``
(5% flips, random or near the boundary, natural suspects never planted on) over more seeds, plus the
demo data set (``sample_data/packhouse.parquet`` with its spec; its planted slips are in
``packhouse_planted.csv``, recall counted over the training rows). The baseline, measured in the same
run: out-of-fold probability of the given label from 5-fold logistic regression (scikit-learn
defaults, standardized features), lowest first.

Run: ``python tests/bench/bench_score_recall.py [--seeds N] [--no-demo]``.
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT / "tests"))

import test_score as T  # noqa: E402  (the protocol lives beside the test that asserts it)


def planted_table(seeds: int) -> pd.DataFrame:
    T.SEEDS = tuple(range(seeds))
    cases = []
    for name in ("breast_cancer", "wine_0_vs_rest", "digits_3_vs_8"):
        X, y = T._dataset(name)
        for case in T._plant(X, y):
            case.dataset = name
            cases.append(case)
    return pd.DataFrame([c.__dict__ for c in cases])


def demo_recall() -> tuple[int, float, float]:
    """Planted slips among the training rows, recall@k of the score and of the baseline."""
    import os

    from holdfast.data.spec import load_spec
    from holdfast.engine.scan import run_scan

    data = ROOT / "sample_data"
    os.environ.setdefault("HOLDFAST_CACHE_DIR", tempfile.mkdtemp(prefix="holdfast-bench-"))
    scan = run_scan(data / "packhouse.parquet", load_spec(data / "packhouse.toml"))
    rows = scan.findings.rows
    truth = pd.read_csv(data / "packhouse_planted.csv")
    planted = truth.loc[~truth["holdout"], "row"].to_numpy()
    k = len(planted)
    ours = rows.loc[~rows["held_out"]].sort_values("rank")["row"].to_numpy()[:k]
    train = scan.prepared.train_index
    p = T._oof_proba_of_label(scan.prepared.X[train], scan.prepared.y[train])
    base = train[np.lexsort((np.arange(len(p)), p))][:k]
    return k, float(np.isin(ours, planted).mean()), float(np.isin(base, planted).mean())


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--seeds", type=int, default=10)
    parser.add_argument("--no-demo", action="store_true")
    args = parser.parse_args()
    t0 = time.perf_counter()
    table = planted_table(args.seeds)
    cols = ["score_all", "base_all", "score_trusted", "base_trusted"]
    grouped = table.groupby(["dataset", "kind"])[cols]
    mean, low = grouped.mean(), grouped.min()
    print(f"recall@k, mean (min) over seeds 0-{args.seeds - 1}")
    print((mean.round(3).astype(str) + " (" + low.round(2).astype(str) + ")").to_string())
    print(f"[{time.perf_counter() - t0:.0f} s]")
    if not args.no_demo:
        t0 = time.perf_counter()
        k, ours, base = demo_recall()
        print(
            f"demo data: {k} planted slips in training rows; recall@{k} score {ours:.3f}, baseline {base:.3f}"
        )
        print(f"[{time.perf_counter() - t0:.0f} s]")


if __name__ == "__main__":
    main()
