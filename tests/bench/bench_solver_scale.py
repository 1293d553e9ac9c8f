"""Benchmark: exact LOO with our warm-started solver against scikit-learn's LeaveOneOut, and how it scales.

Two parts, each case in a fresh Python process (so the peak memory is that case's own: the process's peak
RSS, or the sampled PSS of it and its forked refit workers when larger, see ``_PeakMemory``):

1. ``--naive`` (the default first case): m = 2,000 rows of ``make_classification(n_features=10,
   n_informative=6, flip_y=0.05, random_state=0)``, standardised, RBF, C=1, gamma "scale", tol 1e-6.
   Ours = ``SVMLearner.fit`` + ``exact_loo`` (what ``holdfast scan`` does for the LOO, all cores);
   naive = scikit-learn's ``cross_val_predict(SVC(same frozen settings), cv=LeaveOneOut(), n_jobs=-1)``,
   timed in full. The script asserts that both give the same LOO prediction for every row, and that the
   flip counts of ``--flip-sample`` support rows equal those of independent full SVC refits. The whole
   ``holdfast scan`` command is also timed on the same data (a fresh process: start-up, reading Parquet,
   fit, LOO, findings and outputs; cache off), and its ratio to the naive LOO printed below the table.
2. The scaling table (``--sizes``): for each m, the same data kind plus an imbalanced set
   (``weights=[0.97]``) and an overlapping set (``class_sep=0.5``) at ``--side-size`` rows. Printed: the
   support rows d, the fit, the LOO, ms per refit, how many refits fell back to a cold libsvm solve
   (three classes: "+ N machines", one-vs-one machines at a tie solved by libsvm alone),
   the time of one full SVC fit on the same data (ratio = fit+LOO over it) and naive LOO *estimated*
   from ``--naive-sample`` timed SVC refits (times m; marked ``est``), and the peak memory.
   ``--linear-sizes`` adds linear-kernel cases (20 features, 10 informative; ``--linear-naive-sample``
   timed refits for the naive estimate, since one SVC fit there takes minutes). ``--multi-sizes`` adds
   three-class RBF cases (``n_classes=3``; our one-vs-one machines, a refit re-solving only those the row
   is in; ``--multi-flip-sample`` flip counts checked against full SVC refits). ``--scan-sizes`` (RBF)
   also times the whole ``holdfast scan`` command at those sizes, against one SVC fit.

Run: ``PYTHONPATH=app python tests/bench/bench_solver_scale.py [--sizes 2000,5000,10000] [--quick]``.
Exits 1 if the LOO predictions differ from LeaveOneOut (exactness is the point), else 0 whatever the times.
"""

from __future__ import annotations

import argparse
import json
import multiprocessing
import os
import resource
import subprocess
import sys
import threading
import time
from pathlib import Path
from typing import Any

import numpy as np


def _tree(pid: int) -> list[int]:
    """``pid`` and its descendants (Linux /proc; just ``pid`` elsewhere)."""
    found, todo = [], [pid]
    while todo:
        p = todo.pop()
        found.append(p)
        try:
            for task in Path(f"/proc/{p}/task").iterdir():
                todo += [int(c) for c in (task / "children").read_text().split()]
        except OSError:
            pass
    return found


def _pss_mb(pid: int) -> float:
    """Proportional set size of ``pid`` and its descendants in MB: pages shared between them (the kernel
    rows forked refit workers read) count once in total, not once per process as in RSS (Linux
    ``/proc/PID/smaps_rollup``; 0 where it is missing)."""
    total = 0.0
    for p in _tree(pid):
        try:
            for line in Path(f"/proc/{p}/smaps_rollup").read_text().splitlines():
                if line.startswith("Pss:"):
                    total += int(line.split()[1]) / 1024
        except OSError:
            pass
    return total


class _PeakMemory:
    """Peak memory of a process and its workers: the largest PSS sum sampled every 0.2 s, or the process's
    own peak RSS (``getrusage``) when that is larger (a peak between samples)."""

    def __init__(self, pid: int | None = None) -> None:
        self.pid = pid or os.getpid()
        self.peak = 0.0
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run, daemon=True)

    def _run(self) -> None:
        while not self._stop.wait(0.2):
            self.peak = max(self.peak, _pss_mb(self.pid))

    def __enter__(self) -> _PeakMemory:
        self._thread.start()
        return self

    def __exit__(self, *exc: object) -> None:
        self._stop.set()
        self._thread.join()

    def mb(self) -> float:
        own = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024 if self.pid == os.getpid() else 0.0
        return max(self.peak, own)


def _data(m: int, kind: str) -> tuple[np.ndarray, np.ndarray]:
    """The benchmark's data: RBF cases 10 features (6 informative), linear cases 20 (10 informative)."""
    from sklearn.datasets import make_classification
    from sklearn.preprocessing import StandardScaler

    extra: dict[str, Any] = {}
    if kind.startswith("imbalanced"):
        extra["weights"] = [0.97]
    elif kind.startswith("overlapping"):
        extra["class_sep"] = 0.5
    elif kind.startswith("three-class"):
        extra["n_classes"] = 3
    p, informative = (20, 10) if kind.endswith("linear") else (10, 6)
    X, y = make_classification(
        n_samples=m, n_features=p, n_informative=informative, flip_y=0.05, random_state=0, **extra
    )
    return StandardScaler().fit_transform(X), y.astype(np.int64)


def _kernel(kind: str) -> str:
    return "linear" if kind.endswith("linear") else "rbf"


def _whole_scan(X: np.ndarray, y: np.ndarray, kernel: str) -> tuple[float, float]:
    """Seconds and peak memory (MB, :class:`_PeakMemory`) of the whole ``holdfast scan`` command (a fresh
    process: start-up, reading the Parquet file, fit, exact LOO, findings, writing the outputs; cache off,
    all cores) on the same data and settings."""
    import tempfile
    from pathlib import Path

    import pandas as pd

    with tempfile.TemporaryDirectory() as tmp:
        frame = pd.DataFrame(X, columns=[f"f{k}" for k in range(X.shape[1])])
        frame["label"] = y
        frame.to_parquet(Path(tmp) / "data.parquet")
        (Path(tmp) / "spec.toml").write_text(
            '[data]\nlabel = "label"\n\n[prepare]\nscale = "none"\n\n'
            f'[learner]\nfamily = "svm"\nkernel = "{kernel}"\nC = 1.0\ngamma = "scale"\n\n[run]\njobs = -1\n'
        )
        cmd = [sys.executable, "-m", "holdfast.cli", "scan", "data.parquet", "--spec", "spec.toml"]
        cmd += ["--out", "out", "--no-cache"]
        t0 = time.perf_counter()
        with open(Path(tmp) / "err.txt", "w+") as err:
            proc = subprocess.Popen(cmd, cwd=tmp, stdout=subprocess.DEVNULL, stderr=err)
            with _PeakMemory(proc.pid) as memory:
                proc.wait()
            took = time.perf_counter() - t0
            if proc.returncode != 0:
                err.seek(0)
                raise SystemExit(f"holdfast scan failed: {err.read()[-2000:]}")
    return took, memory.mb()


def _svc(learner: Any) -> Any:
    from sklearn.svm import SVC

    return SVC(
        kernel=learner.kernel,
        C=learner.C,
        gamma=learner.gamma_,
        tol=learner.tol,
        class_weight=learner.class_weight_,
        cache_size=500,
    )


def _own_cold_check(X: np.ndarray, y: np.ndarray, result: Any, model: Any, n: int) -> tuple[int, int]:
    """Where no libsvm fit can serve as the reference (linear kernel above ``--svc-max-rows``: one fit runs
    for more than 45 minutes at 100,000 rows), ``n`` sampled support rows are checked against our own
    whole-problem solve without the row (``smo_linear.fit_staged`` to the same tolerance, cold): LOO
    prediction and flip count. Returns (rows checked, rows that differ)."""
    from holdfast.learners import smo, smo_linear
    from holdfast.learners.svm_refit import WARM_TOL

    sv = np.flatnonzero(model.support)
    rows = np.random.default_rng(2).choice(sv, size=min(n, len(sv)), replace=False)
    ypm = np.where(y == 1, 1.0, -1.0)
    bad = 0
    for r in rows:
        keep = np.delete(np.arange(len(y)), r)
        Xk = np.ascontiguousarray(X[keep])
        kernel = smo.Kernel(X=Xk, kind="linear")
        a, _, rho = smo_linear.fit_staged(kernel, ypm[keep], np.ones(len(keep)), WARM_TOL)
        pred = np.where(X @ (Xk.T @ (a * ypm[keep])) - rho > 0, 1, 0)
        changed = pred != model.prediction
        changed[r] = False
        bad += int(pred[r] != result.loo_code[r] or changed.sum() != result.flip_count[r])
    return len(rows), bad


def run_case(
    m: int,
    kind: str,
    naive_full: bool,
    naive_sample: int,
    flip_sample: int,
    svc_max_rows: int = 10**9,
    scan: bool = False,
) -> dict[str, Any]:
    """One case in this process; returns the figures (``scan``: also time the whole command)."""
    import holdfast.learners.svm_refit as refit_mod
    from holdfast.engine.loo import exact_loo
    from holdfast.learners.svm import SVMLearner

    X, y = _data(m, kind)
    cold = multiprocessing.Value("i", 0)  # shared memory: forked refit workers count into it too
    original = refit_mod.SVMRefitProblem._fit_without

    def counted(self: Any, row: int) -> Any:
        with cold.get_lock():
            cold.value += 1
        return original(self, row)

    refit_mod.SVMRefitProblem._fit_without = counted  # type: ignore[method-assign]
    machines = multiprocessing.Value("i", 0)  # one-vs-one machines solved by libsvm alone (at a tie)
    pair_original = refit_mod.libsvm_pair_decision

    def counted_pair(*args: Any, **kwargs: Any) -> Any:
        with machines.get_lock():
            machines.value += 1
        return pair_original(*args, **kwargs)

    refit_mod.libsvm_pair_decision = counted_pair  # type: ignore[assignment]
    with _PeakMemory() as memory:  # the refit workers' memory counts too
        t0 = time.perf_counter()
        learner = SVMLearner(kernel=_kernel(kind), C=1.0, gamma="scale")
        model = learner.fit(X, y)
        t_fit = time.perf_counter() - t0
        t0 = time.perf_counter()
        result = exact_loo(model, learner.refit_problem(), jobs=-1)
        t_loo = time.perf_counter() - t0
    d = int(model.support.sum())
    out: dict[str, Any] = {
        "m": m,
        "kind": kind,
        "d": d,
        "fit": t_fit,
        "loo": t_loo,
        "ms_refit": 1000 * t_loo / max(d, 1),
        "cold": cold.value,
        "machines": machines.value,
        "precomputed": learner.refit_problem().K is not None,
    }
    if _kernel(kind) == "linear" and m > svc_max_rows:  # no libsvm fit: our own cold solves are the check
        out["svc_fit"] = out["naive"] = float("nan")
        out["naive_estimated"] = True
        out["naive_checked"], out["mismatches"] = _own_cold_check(X, y, result, model, naive_sample)
        out["own_check"] = True
        out["peak_mb"] = memory.mb()
        return out
    t0 = time.perf_counter()
    full = _svc(learner).fit(X, y)
    out["svc_fit"] = time.perf_counter() - t0
    out["svc_sv"] = len(full.support_)
    if naive_full:
        from sklearn.model_selection import LeaveOneOut, cross_val_predict

        out["scan"], out["scan_mb"] = _whole_scan(X, y, _kernel(kind))

        t0 = time.perf_counter()
        naive = cross_val_predict(_svc(learner), X, y, cv=LeaveOneOut(), n_jobs=-1)
        out["naive"] = time.perf_counter() - t0
        out["naive_estimated"] = False
        out["mismatches"] = int((naive != result.loo_code).sum())
    else:
        rng = np.random.default_rng(1)
        rows = rng.choice(m, size=min(naive_sample, m), replace=False)
        t0 = time.perf_counter()
        mismatches = 0
        for r in rows:
            keep = np.delete(np.arange(m), r)
            pred = _svc(learner).fit(X[keep], y[keep]).predict(X[r : r + 1])[0]
            mismatches += int(pred != result.loo_code[r])
        # one core per naive refit; cross_val_predict would run two at a time on two cores
        per = (time.perf_counter() - t0) / len(rows)
        out["naive"] = per * m / min(2, os.cpu_count() or 1)
        out["naive_estimated"] = True
        out["mismatches"] = mismatches
        out["naive_checked"] = len(rows)
    if flip_sample:
        sv = np.flatnonzero(model.support)
        rows = np.random.default_rng(2).choice(sv, size=min(flip_sample, len(sv)), replace=False)
        bad = 0
        for r in rows:
            keep = np.delete(np.arange(m), r)
            pred = _svc(learner).fit(X[keep], y[keep]).predict(X)
            changed = pred != model.prediction
            changed[r] = False
            bad += int(changed.sum() != result.flip_count[r])
        out["flip_checked"] = len(rows)
        out["flip_mismatches"] = bad
    out["peak_mb"] = memory.mb()
    if scan and "scan" not in out:
        out["scan"], out["scan_mb"] = _whole_scan(X, y, _kernel(kind))
    return out


def _in_subprocess(args: list[str]) -> dict[str, Any]:
    env = dict(os.environ)
    proc = subprocess.run(
        [sys.executable, __file__, "--case", *args], capture_output=True, text=True, env=env, check=False
    )
    if proc.returncode != 0:
        sys.stderr.write(proc.stderr)
        raise SystemExit(f"case {args} failed")
    return json.loads(proc.stdout.strip().splitlines()[-1])


def _row(r: dict[str, Any]) -> str:
    total = r["fit"] + r["loo"]
    est = " est" if r["naive_estimated"] else ""
    checked = r.get("naive_checked", r["m"])
    flips = f"{r['flip_mismatches']}/{r['flip_checked']}" if "flip_checked" in r else "-"
    cold_machines = f" + {r['machines']} machines" if r.get("machines") else ""
    if r.get("own_check"):  # no libsvm figures: see _own_cold_check
        svc = ratio = naive = x_naive = "n/a"
        flips = f"{r['mismatches']}/{checked} own"
    else:
        svc, ratio = f"{r['svc_fit']:.2f}", f"{total / r['svc_fit']:.1f}"
        naive, x_naive = f"{r['naive']:.1f}{est}", f"{r['naive'] / total:.1f}"
    return (
        f"| {r['kind']} | {r['m']:,} | {r['d']:,} | {r['fit']:.2f} | {r['loo']:.2f} | {r['ms_refit']:.2f} | "
        f"{r['cold']}{cold_machines} | {svc} | {ratio} | {naive} | {x_naive} | {r['mismatches']}/{checked} | "
        f"{flips} | "
        f"{r['peak_mb']:.0f} |"
    )


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--case", nargs=7, help=argparse.SUPPRESS)
    parser.add_argument("--sizes", default="5000,10000")
    parser.add_argument(
        "--side-size", type=int, default=5000, help="rows of the imbalanced/overlapping sets (0: none)"
    )
    parser.add_argument("--naive-rows", type=int, default=2000, help="rows of the fully timed naive case")
    parser.add_argument("--naive-sample", type=int, default=30)
    parser.add_argument("--flip-sample", type=int, default=40)
    parser.add_argument(
        "--large-sizes", default="", help="RBF sizes whose naive LOO is estimated from --large-naive-sample"
    )
    parser.add_argument("--large-naive-sample", type=int, default=3, help="timed SVC refits per large case")
    parser.add_argument("--linear-sizes", default="", help="sizes of linear-kernel cases (20 features)")
    parser.add_argument("--linear-naive-sample", type=int, default=3, help="timed SVC refits per linear case")
    parser.add_argument(
        "--multi-sizes", default="", help="sizes of three-class RBF cases (one-vs-one machines of our own)"
    )
    parser.add_argument(
        "--multi-flip-sample", type=int, default=5, help="flip counts checked per three-class case"
    )
    parser.add_argument(
        "--svc-max-rows",
        type=int,
        default=20_000,
        help="linear cases above this: no libsvm fit (over 45 minutes at 100,000 rows); sampled refits are "
        "checked against our own cold solves instead (--linear-naive-sample of them)",
    )
    parser.add_argument(
        "--scan-sizes", default="20000", help="RBF sizes whose whole `holdfast scan` is also timed"
    )
    parser.add_argument("--quick", action="store_true", help="small sizes, for a smoke run")
    parser.add_argument("--naive-only", action="store_true", help="only the fully timed naive case")
    parser.add_argument("--scale-only", action="store_true", help="skip the fully timed naive case")
    args = parser.parse_args()
    if args.case:
        m, kind, full, sample, flips, svc_max, scan = args.case
        out = run_case(int(m), kind, full == "1", int(sample), int(flips), int(svc_max), scan == "1")
        print(json.dumps(out))
        return
    if args.quick:
        args.sizes, args.side_size, args.naive_rows, args.scan_sizes = "600,1200", 800, 400, "1200"
    cases = [] if args.scale_only else [(args.naive_rows, "base", "1", "0", str(args.flip_sample))]
    if not args.naive_only:
        cases += [(int(s), "base", "0", str(args.naive_sample), "0") for s in args.sizes.split(",") if s]
        large = str(args.large_naive_sample)
        cases += [(int(s), "base", "0", large, "0") for s in args.large_sizes.split(",") if s]
        side = ("imbalanced", "overlapping")
        cases += [(args.side_size, k, "0", str(args.naive_sample), "0") for k in side if args.side_size > 0]
        sample = str(args.linear_naive_sample)
        cases += [(int(s), "base-linear", "0", sample, "0") for s in args.linear_sizes.split(",") if s]
        multi = (str(args.naive_sample), str(args.multi_flip_sample))
        cases += [(int(s), "three-class", "0", *multi) for s in args.multi_sizes.split(",") if s]
    print(
        "| data | m | d | fit s | LOO s | ms/refit | cold | SVC fit s | x fit | naive s | x naive | "
        "LOO mismatches | flip mismatches | peak MB |"
    )
    print("|---|---:|---:|---:|---:|---:|---:|---:|---:|---:|---:|---:|---:|---:|")
    failed = False
    rows = []
    for m, kind, full, sample, flips in cases:
        scan = "1" if kind == "base" and str(m) in args.scan_sizes.split(",") else "0"
        r = _in_subprocess([str(m), kind, full, sample, flips, str(args.svc_max_rows), scan])
        rows.append(r)
        print(_row(r), flush=True)
        failed |= r["mismatches"] > 0 or r.get("flip_mismatches", 0) > 0
    for r in rows:
        if "scan" in r:
            est = " (estimated)" if r["naive_estimated"] else ""
            print(
                f"whole `holdfast scan` at {r['m']:,} rows (fresh process, cache off): {r['scan']:.1f} s, "
                f"peak {r['scan_mb']:.0f} MB; {r['scan'] / r['svc_fit']:.1f}x one SVC fit; "
                f"naive LeaveOneOut{est} {r['naive']:.1f} s: {r['naive'] / r['scan']:.1f}x"
            )
    print(f"load average {os.getloadavg()[0]:.1f}; 'est' = naive LOO estimated from a timed sample of refits")
    if any(r.get("own_check") for r in rows):
        print(
            "n/a: linear cases above --svc-max-rows have no libsvm fit (over 45 minutes at 100,000 rows); "
            "'own' = sampled refits checked against our own cold solve without the row (LOO prediction and "
            "flip count)"
        )
    if failed:
        print("LOO predictions or flip counts differ from scikit-learn's full refits")
        raise SystemExit(1)


if __name__ == "__main__":
    main()
