"""Benchmark: exact LOO by refitting only the support rows (precomputed kernel) vs naive LOO.

The baseline, measured in the same run, is scikit-learn's LeaveOneOut with cross_val_predict: one full
refit per training row, libsvm computing the kernel. Prints both times and the speed-up ratio; both must
give the same LOO predictions. Run: ``python tests/bench/bench_loo.py [--rows N]``.
"""

from __future__ import annotations

import argparse
import time

from sklearn.datasets import load_breast_cancer
from sklearn.model_selection import LeaveOneOut, cross_val_predict
from sklearn.preprocessing import StandardScaler
from sklearn.svm import SVC

from holdfast.engine.loo import exact_loo
from holdfast.learners.svm import SVMLearner


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--rows", type=int, default=569)
    args = parser.parse_args()
    X, y = load_breast_cancer(return_X_y=True)
    X, y = StandardScaler().fit_transform(X[: args.rows]), y[: args.rows]
    for kernel, C in (("rbf", 1.0), ("linear", 0.1)):
        t0 = time.perf_counter()
        learner = SVMLearner(kernel=kernel, C=C)
        model = learner.fit(X, y)
        result = exact_loo(model, learner.refit_problem())
        ours = time.perf_counter() - t0
        t0 = time.perf_counter()
        est = SVC(kernel=kernel, C=C, gamma=learner.gamma_, tol=learner.tol)
        naive = cross_val_predict(est, X, y, cv=LeaveOneOut())
        base = time.perf_counter() - t0
        same = int((naive == result.loo_code).sum())
        print(
            f"{kernel:6s} m={len(y)} d={int(model.support.sum())}: support-row refits {ours:.2f}s, "
            f"naive LOO {base:.2f}s, speed-up x{base / ours:.1f}, agreeing LOO predictions {same}/{len(y)}"
        )


if __name__ == "__main__":
    main()
