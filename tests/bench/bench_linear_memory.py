"""Benchmark: linear kernel above the precompute limit, without an m x m matrix: time and peak memory.

Data: ``make_classification(n_samples=m, n_features=20, n_informative=10, flip_y=0.05, random_state=0)``,
standardised; ``SVMLearner(kernel="linear", C=1.0)`` (tol 1e-6). Above ``PRECOMPUTE_MAX_ROWS`` our solver
computes kernel rows from X on demand (``holdfast.learners.smo.Kernel`` with X; a row cache of
``LINEAR_CACHE_ROWS`` rows per solve) and sums of kernel rows through the primal vector, so memory grows
with m, not m^2. Each size runs in a fresh process; the peak RSS (``getrusage``, threads included) is
that size's own. Printed: the fit, the support rows d, ``--sample`` evenly spaced refits timed on all
cores and the LOO time extrapolated to d refits (``est``), one full SVC fit on the same data when
``--svc`` (the baseline), and the peak memory. The script checks that no kernel matrix was kept
(``problem.K`` and ``problem.KW`` are None) and that the refit's LOO predictions for the sampled rows
equal SVC refits when ``--check N`` (N of the sampled rows).

Refits run on :mod:`holdfast.learners.smo_linear` (SMO from the primal vector, face steps). A refit whose
decision values come within ``svm_refit.tie_tolerance`` of 0 goes to a cold libsvm fit of the whole
problem (the reference's own computation); at these sizes that allowance (2 tol + 2e-9 sum(alpha) max K)
is 2e-3 to 1e-2 and nearly every refit meets it, so each would cost one SVC fit. ``--solver-only`` counts
those refits (``tie``) but times our solve for them instead, so the table shows the solver's own cost;
the check then compares our refit with the SVC refit: LOO prediction, flip count and the largest
difference of a training decision value (``dmax``).

Run: ``PYTHONPATH=app python tests/bench/bench_linear_memory.py [--sizes 20000,100000] [--sample 16]``.
Exits 0 whatever the times; 1 if the memory goal (2 GB) is missed or a checked prediction differs.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import time
from typing import Any

import numpy as np

GOAL_MB = 2048


def run_case(m: int, sample: int, svc: bool, check: int, solver_only: bool) -> dict[str, Any]:
    from sklearn.datasets import make_classification
    from sklearn.preprocessing import StandardScaler
    from sklearn.svm import SVC

    from holdfast.engine.parallel import run_refits
    from holdfast.learners import smo_linear
    from holdfast.learners.svm import SVMLearner

    X, y = make_classification(n_samples=m, n_features=20, n_informative=10, flip_y=0.05, random_state=0)
    X = StandardScaler().fit_transform(X)
    t0 = time.perf_counter()
    learner = SVMLearner(kernel="linear", C=1.0)
    model = learner.fit(X, y)
    t_fit = time.perf_counter() - t0
    problem = learner.refit_problem()
    assert problem.K is None and problem.KW is None, "a kernel matrix was kept"
    ties = [0]
    if solver_only:
        near_zero = problem._near_zero

        def counted(dec: np.ndarray, alpha: np.ndarray) -> bool:
            ties[0] += int(near_zero(dec, alpha))
            return False

        problem._near_zero = counted  # type: ignore[method-assign]
    sv = np.flatnonzero(model.support)
    rows = sv[np.unique(np.linspace(0, len(sv) - 1, min(sample, len(sv))).round().astype(np.int64))]
    outcomes: list[Any] = []
    t0 = time.perf_counter()
    run_refits(problem, rows, jobs=-1, on_results=outcomes.extend)
    t_sample = time.perf_counter() - t0
    out: dict[str, Any] = {
        "m": m,
        "d": len(sv),
        "fit": t_fit,
        "sampled": len(rows),
        "loo_est": t_sample / len(rows) * len(sv),
        "ms_refit": 1000 * t_sample / len(rows),
        "ties": ties[0],
        "svc_on_X": bool(learner.svc_on_X_),
    }
    if svc:
        t0 = time.perf_counter()
        SVC(kernel="linear", C=1.0, tol=learner.tol).fit(X, y)
        out["svc_fit"] = time.perf_counter() - t0
    bad = 0
    flips_bad = 0
    dmax = 0.0
    by_row = {o.row: o for o in outcomes}
    full = model.prediction
    for r in rows[:check]:
        keep = np.delete(np.arange(m), r)
        ref = SVC(kernel="linear", C=1.0, tol=learner.tol).fit(X[keep], y[keep])
        ref_pred = ref.predict(X)
        bad += int(ref_pred[r] != by_row[int(r)].loo_code)
        ref_flips = int(np.sum(np.delete(ref_pred != full, r)))
        flips_bad += int(ref_flips != len(by_row[int(r)].flipped))
        if solver_only:  # our refit's decision values again, to compare them with SVC's
            ypm = np.where(y == 1, 1.0, -1.0)
            alpha, grad, c = problem.alpha.copy(), problem.grad.copy(), problem.c_row.copy()
            rho, _ = smo_linear.refit_without(problem.solver, ypm, c, alpha, grad, int(r), 1e-9, problem.qd)
            ours = ypm * (grad + 1.0) - rho
            dmax = max(dmax, float(np.max(np.abs(ours - ref.decision_function(X)))))
    out["checked"] = min(check, len(rows))
    out["mismatches"] = bad
    out["flip_mismatches"] = flips_bad
    out["dmax"] = dmax
    out["peak_mb"] = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    return out


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--case", nargs=5, help=argparse.SUPPRESS)
    parser.add_argument("--sizes", default="20000,100000")
    parser.add_argument("--sample", type=int, default=16)
    parser.add_argument("--svc", action="store_true", help="also time one full SVC fit (slow at 100,000)")
    parser.add_argument("--check", type=int, default=0, help="sampled rows checked against SVC refits")
    parser.add_argument(
        "--solver-only", action="store_true", help="count tie fallbacks, time our solve for them instead"
    )
    args = parser.parse_args()
    if args.case:
        m, sample, svc, check, only = args.case
        print(json.dumps(run_case(int(m), int(sample), svc == "1", int(check), only == "1")))
        return
    print("| m | d | fit s | ms/refit | LOO s (est) | tie | SVC fit s | checked | dmax | peak MB |")
    print("|---:|---:|---:|---:|---:|---:|---:|---:|---:|---:|")
    failed = False
    for size in (int(s) for s in args.sizes.split(",") if s):
        flags = [str(size), str(args.sample), str(int(args.svc)), str(args.check), str(int(args.solver_only))]
        cmd = [sys.executable, __file__, "--case", *flags]
        proc = subprocess.run(cmd, capture_output=True, text=True, check=False)
        if proc.returncode != 0:
            sys.stderr.write(proc.stderr)
            raise SystemExit(1)
        r = json.loads(proc.stdout.strip().splitlines()[-1])
        svc_fit = f"{r['svc_fit']:.1f}" if "svc_fit" in r else "-"
        print(
            f"| {r['m']:,} | {r['d']:,} | {r['fit']:.1f} | {r['ms_refit']:.0f} | {r['loo_est']:.0f} est | "
            f"{r['ties']} of {r['sampled']} | {svc_fit} | {r['mismatches']} LOO, {r['flip_mismatches']} flip "
            f"counts of {r['checked']} differ | {r['dmax']:.1e} | {r['peak_mb']:.0f} |",
            flush=True,
        )
        failed |= r["peak_mb"] > GOAL_MB or r["mismatches"] > 0 or r["flip_mismatches"] > 0
    print(f"load average {os.getloadavg()[0]:.1f}; LOO extrapolated from {args.sample} timed refits (est)")
    if args.solver_only:
        print(
            "tie: refits that would go to a cold libsvm fit; with --solver-only they are timed as our solve"
        )
    raise SystemExit(1 if failed else 0)


if __name__ == "__main__":
    main()
