"""Benchmark: recall@k of planted label flips, suspicion score against the notebook baseline.

The longer run behind the figures in ``holdfast.insight.score``: the protocol of ``tests/test_score.py``
(5% flips, random or near the boundary, natural suspects never planted on) over more seeds, plus the
demo data set (``sample_data/packhouse.parquet`` with its spec; its planted slips are in
``packhouse_planted.csv``, recall counted over the training rows). The baseline, measured in the same
run: out-of-fold probability of the given label from 5-fold logistic regression (scikit-learn
defaults, standardized features), lowest first.

Per learner family (``--families``): the same protocol with the scan's learner set to each family (its
own clean scan picks the natural suspects and the near-boundary pool; the score reads each family's own
LOO margins, see ``holdfast.engine.build.margin_unit``), and the demo data with each family.

Run: ``python tests/bench/bench_score_recall.py [--seeds N] [--no-demo] [--families svm,knn,...]``.
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


#: learner table per family for the per-family runs (the SVM's is the protocol's default)
FAMILY_PARAMS = {
    "svm": "",
    "knn": "k = 10",
    "perceptron": "epochs = 10",
    "logistic": "C = 1.0",
}


def _family_scan(X: np.ndarray, y: np.ndarray, family: str) -> pd.DataFrame:
    from holdfast.data.prepare import prepare
    from holdfast.data.spec import spec_from_text
    from holdfast.engine.scan import analyse

    text = f'[data]\nlabel = "label"\n[learner]\nfamily = "{family}"\n{FAMILY_PARAMS[family]}\n'
    spec = spec_from_text(text)
    findings, _, _ = analyse(prepare(T._frame(X, y), spec), spec)
    return findings.rows


def family_table(seeds: int, family: str) -> pd.DataFrame:
    """``tests/test_score.py``'s planting protocol with the scan's learner set to ``family``."""
    out = []
    for name in ("breast_cancer", "wine_0_vs_rest", "digits_3_vs_8"):
        X, y = T._dataset(name)
        clean = _family_scan(X, y, family)
        m = len(y)
        natural = np.flatnonzero(clean["loo_miss"].to_numpy() | (T._oof_proba_of_label(X, y) < 0.5))
        trusted = np.setdiff1d(np.arange(m), natural)
        near = trusted[np.argsort(np.abs(clean["margin"].to_numpy())[trusted], kind="stable")]
        near = near[: round(T.BOUNDARY_POOL * m)]
        n = round(T.FLIP_SHARE * m)
        for kind, pool in (("random", trusted), ("near-boundary", near)):
            for seed in range(seeds):
                planted = np.sort(np.random.default_rng(seed).choice(pool, size=n, replace=False))
                noisy = y.copy()
                noisy[planted] = 1 - noisy[planted]
                rows = _family_scan(X, noisy, family)
                ours = np.argsort(rows["rank"].to_numpy(), kind="stable")
                p = T._oof_proba_of_label(X, noisy)
                base = np.lexsort((np.arange(m), p))
                none = np.empty(0, int)
                out.append(
                    {
                        "family": family,
                        "dataset": name,
                        "kind": kind,
                        "score_all": T._recall(ours, planted, none),
                        "base_all": T._recall(base, planted, none),
                        "score_trusted": T._recall(ours, planted, natural),
                        "base_trusted": T._recall(base, planted, natural),
                    }
                )
    return pd.DataFrame(out)


def demo_recall(family: str | None = None) -> tuple[int, float, float]:
    """Planted slips among the training rows, recall@k of the score and of the baseline (the demo spec,
    with its learner replaced by ``family`` when given)."""
    import os

    from holdfast.data.spec import load_spec, spec_from_text
    from holdfast.engine.scan import run_scan

    data = ROOT / "sample_data"
    os.environ.setdefault("HOLDFAST_CACHE_DIR", tempfile.mkdtemp(prefix="holdfast-bench-"))
    spec = load_spec(data / "packhouse.toml")
    if family is not None and family != "svm":
        text = spec.to_toml().split("[learner]")[0]
        text += f'[learner]\nfamily = "{family}"\n{FAMILY_PARAMS[family]}\n'
        spec = spec_from_text(text)
    scan = run_scan(data / "packhouse.parquet", spec)
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
    parser.add_argument("--families", default="", help="comma-separated, e.g. knn,perceptron,logistic")
    args = parser.parse_args()
    if args.families:
        for family in args.families.split(","):
            t0 = time.perf_counter()
            table = family_table(args.seeds, family)
            cols = ["score_all", "base_all", "score_trusted", "base_trusted"]
            grouped = table.groupby(["dataset", "kind"])[cols]
            mean, low = grouped.mean(), grouped.min()
            print(f"family {family}: recall@k, mean (min) over seeds 0-{args.seeds - 1}")
            print((mean.round(3).astype(str) + " (" + low.round(2).astype(str) + ")").to_string())
            if not args.no_demo:
                k, ours, base = demo_recall(family)
                print(f"  demo data ({family}): recall@{k} score {ours:.3f}, baseline {base:.3f}")
            print(f"[{time.perf_counter() - t0:.0f} s]")
        return
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
