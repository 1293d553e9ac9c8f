"""Benchmark: warm refits of the linear-kernel solver at 100,000 rows without libsvm's cold fit.

``bench_linear_memory.py`` starts from the learner's fit, which is libsvm's cold fit above the limit; at
100,000 rows that fit alone ran for more than 35 minutes on the shared machine. This benchmark measures the
refits of ``holdfast.learners.smo_linear`` on the same data without it: the full solution is our own
(``smo_linear.fit_dual`` to 1e-9, started from a solve on the first tenth of the rows; the rows that
solution leaves with y f(x) < 1 start at C, one class scaled so that y'a = 0), then ``--sample`` evenly
spaced support rows are refitted on one thread (``smo_linear.refit_without``). The baseline, measured in
the same run, is one pass over X (``X @ w``, the O(m p) step a refit cannot avoid): the refit's cost is
printed as a multiple of it. Also printed: the tie rule's allowance (``svm_refit.tie_tolerance``) and how
many training rows lie within it (each refit with such a row goes to a cold libsvm fit in the scan), and the
peak RSS. The refits' exactness is checked by tests/test_smo_linear.py, not here.

Run: ``PYTHONPATH=app python tests/bench/bench_linear_refits.py [--m 100000] [--sample 16]``. Exits 0.
"""

from __future__ import annotations

import argparse
import os
import resource
import time

import numpy as np


def main() -> None:
    from sklearn.datasets import make_classification
    from sklearn.preprocessing import StandardScaler

    from holdfast.learners import smo, smo_linear
    from holdfast.learners.svm_refit import tie_tolerance

    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--m", type=int, default=100_000)
    parser.add_argument("--sample", type=int, default=16)
    args = parser.parse_args()
    m = args.m
    X, y = make_classification(n_samples=m, n_features=20, n_informative=10, flip_y=0.05, random_state=0)
    X = StandardScaler().fit_transform(X)
    ypm = np.where(y == 1, 1.0, -1.0)
    C = np.ones(m)
    kernel = smo.Kernel(X=X, kind="linear")
    QD = kernel.diag(np.arange(m))
    small = smo.Kernel(X=X[:50], kind="linear")
    smo_linear.fit_dual(small, ypm[:50], C[:50], 1e-9)  # compile outside the timings
    t0 = time.perf_counter()
    s = m // 10
    a_s, _, r_s = smo_linear.fit_dual(smo.Kernel(X=X[:s], kind="linear"), ypm[:s], C[:s], 1e-9)
    start = np.zeros(m)
    start[:s] = a_s
    f = X @ (X[:s].T @ (a_s * ypm[:s])) - r_s
    viol = (np.arange(m) >= s) & (ypm * f < 1.0)
    pos, neg = viol & (ypm > 0), viol & (ypm < 0)
    low = min(C[pos].sum(), C[neg].sum())
    start[pos] = C[pos] * (low / C[pos].sum())
    start[neg] = C[neg] * (low / C[neg].sum())
    alpha, G, rho = smo_linear.fit_dual(kernel, ypm, C, 1e-9, start)
    t_fit = time.perf_counter() - t0
    dec = ypm * (G + 1.0) - rho
    near = smo_linear.near_rows(ypm, dec)
    sv = np.flatnonzero(alpha > 0)
    allowance = tie_tolerance(1e-6, float(alpha.sum()), float(QD.max()))
    w = X.T @ (alpha * ypm)
    t0 = time.perf_counter()
    for _ in range(20):
        X @ w
    t_pass = (time.perf_counter() - t0) / 20
    rows = sv[np.unique(np.linspace(0, len(sv) - 1, min(args.sample, len(sv))).round().astype(np.int64))]
    times = []
    for row in rows:
        a, g, c = alpha.copy(), G.copy(), C.copy()
        t0 = time.perf_counter()
        smo_linear.refit_without(kernel, ypm, c, a, g, int(row), 1e-9, QD, near)
        times.append(time.perf_counter() - t0)
    ms = 1000 * float(np.mean(times))
    head = ["m", "d", "own fit s", "ms/refit", "x one pass over X", "LOO s one thread (est)"]
    print("| " + " | ".join([*head, "tie allowance", "rows within", "peak MB"]) + " |")
    print("|---:|---:|---:|---:|---:|---:|---:|---:|---:|")
    print(
        f"| {m:,} | {len(sv):,} | {t_fit:.0f} | {ms:.0f} | {ms / (1000 * t_pass):.0f} | "
        f"{ms / 1000 * len(sv):.0f} est | {allowance:.1e} | {int(np.sum(np.abs(dec) < allowance))} | "
        f"{resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024:.0f} |"
    )
    print(f"load average {os.getloadavg()[0]:.1f}; LOO extrapolated from {len(rows)} timed refits (est)")


if __name__ == "__main__":
    main()
