"""Benchmark: what a whole scan costs as the data grows, and where the time goes.

Data: the fruit-packhouse demo (``holdfast.data.demo.write_packhouse``) at several sizes, scanned with its
own spec (RBF, C=10, jobs=-1) through :func:`holdfast.engine.scan.run_scan` with the cache off. Each size
runs in
a fresh Python process (so the peak RSS is that size's own); the first size is the baseline of the ratios.

Phases are timed from the outside by wrapping the functions the scan calls (no app code changes):
read+prepare (``read_table``, ``fingerprint_file``, ``prepare``), the first fit (``SVMLearner.fit``, of
which the kernel matrix), exact LOO (``exact_loo``), held-out predictions (``SVMLearner.decision``), and the
findings: neighbour evidence (``neighbour_evidence``), out-of-fold logistic evidence
(``linear_label_logit``) and the rest of ``build_findings`` (flags, score, rank, bounds, explanation).

Before the LOO refits, a probe of a few evenly spaced support rows is refitted to project the LOO time. If
the projection exceeds ``--budget-min`` minutes, only ``--sample`` evenly spaced support rows are refitted
(the findings are then built on that partial LOO) and the LOO time is extrapolated linearly in d; such rows
are marked ``*``. Otherwise the probe is thrown away and the real ``exact_loo`` runs over all support rows.

Run: ``PYTHONPATH=app python tests/bench/bench_scan_scale.py [--sizes 1500,3000,...] [--quick]``.
Exits 0 whatever the timings.
"""

from __future__ import annotations

import argparse
import copy
import json
import os
import resource
import subprocess
import sys
import tempfile
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np

DEFAULT_SIZES = (1_500, 3_000, 6_000, 12_000, 15_000)
QUICK_SIZES = (400, 800, 1_600)
PHASES = ("prepare", "fit", "loo", "held", "neighbours", "logit", "rest")
PHASE_TITLES = {
    "prepare": "read+prep",
    "fit": "fit",
    "loo": "LOO",
    "held": "held-out",
    "neighbours": "nbrs",
    "logit": "logit",
    "rest": "flags/score/bounds",
}


def _spread(rows: np.ndarray, k: int) -> np.ndarray:
    """``k`` evenly spaced entries of ``rows`` (all of them when k >= len(rows))."""
    if k >= len(rows):
        return rows
    return rows[np.unique(np.linspace(0, len(rows) - 1, k).round().astype(np.int64))]


def _capped(model: Any, rows: np.ndarray) -> Any:
    """A shallow copy of ``model`` whose LOO candidates are ``rows`` only."""
    out = copy.copy(model)
    out.loo_candidates = lambda: rows
    return out


def _merge(into: Any, part: Any, rows: np.ndarray) -> None:
    """Copy the refitted ``rows`` of LooResult ``part`` into ``into`` (both partial)."""
    for name in ("loo_code", "flip_count", "essential", "max_change", "loo_margin"):
        getattr(into, name)[rows] = getattr(part, name)[rows]
    into.flipped.update({r: v for r, v in part.flipped.items() if r in set(rows.tolist())})


def _cpu() -> float:
    ru = resource.getrusage(resource.RUSAGE_SELF)
    return ru.ru_utime + ru.ru_stime


def measure(
    n_rows: int,
    seed: int,
    probe: int,
    sample: int,
    budget_s: float,
    work: Path,
    precompute_max_rows: int | None = None,
) -> dict[str, Any]:
    """Scan the demo data at ``n_rows`` once; return the phase times and sizes (see the module docstring).

    ``precompute_max_rows`` (what-if) overrides ``SVMLearner.precompute_max_rows`` of the scan's learner.
    """
    import holdfast.engine.build as build_mod
    import holdfast.engine.loo as loo_mod
    import holdfast.engine.scan as scan_mod
    import holdfast.insight.explain as explain_mod
    import holdfast.learners.svm as svm_mod
    from holdfast.data.demo import write_packhouse
    from holdfast.data.spec import load_spec

    paths = write_packhouse(work, n_rows=n_rows, seed=seed)
    spec = load_spec(paths["spec"])
    acc: dict[str, float] = {}
    info: dict[str, Any] = {"n_rows": n_rows, "sampled": False}

    def timed(fn: Callable[..., Any], key: str) -> Callable[..., Any]:
        def wrapper(*args: Any, **kwargs: Any) -> Any:
            t0 = time.perf_counter()
            try:
                return fn(*args, **kwargs)
            finally:
                acc[key] = acc.get(key, 0.0) + time.perf_counter() - t0

        return wrapper

    orig_fit = svm_mod.SVMLearner.fit

    def fit(self: Any, X: np.ndarray, y: np.ndarray) -> Any:
        k0, t0 = acc.get("kernel", 0.0), time.perf_counter()
        model = orig_fit(self, X, y)
        acc["fit"] = acc.get("fit", 0.0) + time.perf_counter() - t0
        acc["fit_kernel"] = acc.get("fit_kernel", 0.0) + acc.get("kernel", 0.0) - k0
        info["m"] = int(X.shape[0])
        info["precomputed"] = self.problem_.K is not None
        info["working_set"] = None if self.problem_.working is None else len(self.problem_.working)
        return model

    orig_loo = loo_mod.exact_loo

    def exact_loo(model: Any, problem: Any, **kwargs: Any) -> Any:
        cand = np.asarray(model.loo_candidates())
        d = len(cand)
        info["d"] = d
        probe_rows = _spread(cand, min(probe, d))
        t0, c0 = time.perf_counter(), _cpu()
        res = orig_loo(_capped(model, probe_rows), problem, **kwargs)
        t_probe = time.perf_counter() - t0
        acc["probe"] = t_probe
        projected = t_probe / max(1, len(probe_rows)) * d
        info["projected_loo"] = projected
        if projected <= budget_s or len(probe_rows) == d:
            t0, c0 = time.perf_counter(), _cpu()
            res = orig_loo(model, problem, **kwargs)
            acc["loo"] = time.perf_counter() - t0
            acc["loo_cpu"] = _cpu() - c0
            info["refitted"] = d
            return res
        more = _spread(np.setdiff1d(cand, probe_rows), max(0, sample - len(probe_rows)))
        t1 = time.perf_counter()
        part = orig_loo(_capped(model, more), problem, **kwargs)
        spent = time.perf_counter() - t0
        acc["loo_cpu"] = (_cpu() - c0) * d / (len(probe_rows) + len(more))
        acc["loo_sampled"] = time.perf_counter() - t1 + t_probe
        _merge(res, part, more)
        res.refits = len(probe_rows) + len(more)
        info.update(sampled=True, refitted=int(res.refits))
        acc["loo"] = spent / res.refits * d
        acc["probe"] = 0.0  # part of the sample, not thrown away
        return res

    orig_make = scan_mod.make_learner

    def make_learner(params: dict[str, Any]) -> Any:
        learner = orig_make(params)
        if precompute_max_rows is not None:
            learner.precompute_max_rows = precompute_max_rows
        return learner

    patches = [
        (scan_mod, "make_learner", make_learner),
        (scan_mod, "read_table", timed(scan_mod.read_table, "read")),
        (scan_mod, "fingerprint_file", timed(scan_mod.fingerprint_file, "fingerprint")),
        (scan_mod, "prepare", timed(scan_mod.prepare, "prep")),
        (scan_mod, "exact_loo", exact_loo),
        (svm_mod, "kernel_matrix", timed(svm_mod.kernel_matrix, "kernel")),
        (svm_mod.SVMLearner, "fit", fit),
        (svm_mod.SVMLearner, "decision", timed(svm_mod.SVMLearner.decision, "held")),
        (build_mod, "build_findings", timed(build_mod.build_findings, "findings")),
        (build_mod, "neighbour_evidence", timed(build_mod.neighbour_evidence, "neighbours")),
        (build_mod, "linear_label_logit", timed(build_mod.linear_label_logit, "logit")),
        (build_mod, "bounds_summary", timed(build_mod.bounds_summary, "bounds")),
        (explain_mod, "explain", timed(explain_mod.explain, "explain")),
    ]
    for owner, name, fn in patches:
        setattr(owner, name, fn)

    t0 = time.perf_counter()
    scan = scan_mod.run_scan(paths["data"], spec, use_cache=False)
    wall = time.perf_counter() - t0
    measured_loo = acc.get("loo_sampled", acc["loo"])
    out = dict(info)
    out.update(
        total=wall - acc.get("probe", 0.0) - measured_loo + acc["loo"],
        prepare=acc["read"] + acc["fingerprint"] + acc["prep"],
        fit=acc["fit"],
        fit_kernel=acc.get("fit_kernel", 0.0),
        loo=acc["loo"],
        loo_cpu=acc.get("loo_cpu", float("nan")),
        held=acc.get("held", 0.0),
        neighbours=acc["neighbours"],
        logit=acc["logit"],
        rest=acc["findings"] - acc["neighbours"] - acc["logit"],
        bounds=acc.get("bounds", 0.0),
        explain=acc.get("explain", 0.0),
        probe=acc.get("probe", 0.0),
        jobs=spec.run.jobs,
        summary_d=int(scan.findings.summary["d"]),
        peak_rss_mb=resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0,
    )
    return out


def _run_child(n_rows: int, args: argparse.Namespace, cache: Path) -> dict[str, Any] | None:
    cmd = [sys.executable, __file__, "--one", str(n_rows), "--seed", str(args.seed)]
    cmd += ["--probe", str(args.probe), "--sample", str(args.sample), "--budget-min", str(args.budget_min)]
    if args.precompute_max_rows is not None:
        cmd += ["--precompute-max-rows", str(args.precompute_max_rows)]
    env = dict(os.environ, HOLDFAST_CACHE_DIR=str(cache))
    proc = subprocess.run(cmd, env=env, capture_output=True, text=True, check=False)
    lines = [ln for ln in proc.stdout.splitlines() if ln.startswith("{")]
    if proc.returncode != 0 or not lines:
        print(f"n_rows={n_rows}: failed (exit {proc.returncode})\n{proc.stderr[-2000:]}", file=sys.stderr)
        return None
    return json.loads(lines[-1])


def _fmt(x: float) -> str:
    return f"{x:.3f}" if x < 10 else f"{x:.1f}"


def report(results: list[dict[str, Any]]) -> None:
    """Print the phase table, the ratios to the first size and the details."""
    base = results[0]
    head = ["n_rows", "m", "d", "total s"] + [PHASE_TITLES[p] for p in PHASES] + ["refits/s", "ms/refit"]
    head += ["peak MB"]
    rows = []
    for r in results:
        mark = "*" if r["sampled"] else ""
        rate = r["d"] / r["loo"] if r["loo"] > 0 else float("nan")
        cells = [str(r["n_rows"]), str(r["m"]), str(r["d"]), _fmt(r["total"]) + mark]
        cells += [_fmt(r[p]) + (mark if p == "loo" else "") for p in PHASES]
        cells += [f"{rate:.1f}{mark}", f"{1000 / rate:.1f}{mark}", f"{r['peak_rss_mb']:.0f}"]
        rows.append(cells)
    _table("Seconds per phase (wall clock)", head, rows)

    head = ["n_rows", "m/m0", "d/d0", "total"] + [PHASE_TITLES[p] for p in PHASES] + ["ms/refit", "peak"]
    rows = []
    for r in results:
        ratio = [r["m"] / base["m"], r["d"] / base["d"], r["total"] / base["total"]]
        ratio += [r[p] / base[p] if base[p] > 0 else float("nan") for p in PHASES]
        ratio += [(r["loo"] / r["d"]) / (base["loo"] / base["d"]), r["peak_rss_mb"] / base["peak_rss_mb"]]
        rows.append([str(r["n_rows"])] + [f"x{v:.1f}" for v in ratio])
    _table(f"Ratio to the baseline (n_rows={base['n_rows']})", head, rows)

    head = ["n_rows", "share LOO", "kernel in fit", "bounds", "explain", "LOO cpu/wall", "precomputed K"]
    head += ["working set", "refitted", "probe s (discarded)"]
    rows = []
    for r in results:
        rows.append(
            [
                str(r["n_rows"]),
                f"{100 * r['loo'] / r['total']:.0f}%",
                _fmt(r["fit_kernel"]),
                _fmt(r["bounds"]),
                _fmt(r["explain"]),
                f"{r['loo_cpu'] / r['loo']:.2f}",
                "yes" if r["precomputed"] else "no",
                "-" if r["working_set"] is None else str(r["working_set"]),
                f"{r['refitted']}/{r['d']}",
                _fmt(r["probe"]),
            ]
        )
    _table("Details", head, rows)
    if any(r["sampled"] for r in results):
        print(
            "* extrapolated: only the 'refitted' support rows (evenly spaced) were refitted; the LOO time is "
            "(time of those refits) / (their number) x d, and the total uses that figure. The findings at "
            "that size were built on the partial LOO."
        )
    load = ", ".join(f"{v:.2f}" for v in os.getloadavg())
    print(f"load average at the end: {load} ({os.cpu_count()} cores)")


def _table(title: str, head: list[str], rows: list[list[str]]) -> None:
    widths = [max(len(h), *(len(r[i]) for r in rows)) for i, h in enumerate(head)]
    print(f"\n{title}")
    print("  ".join(h.rjust(w) for h, w in zip(head, widths, strict=True)))
    for r in rows:
        print("  ".join(c.rjust(w) for c, w in zip(r, widths, strict=True)))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--sizes", default=",".join(map(str, DEFAULT_SIZES)), help="n_rows, comma-separated")
    parser.add_argument("--quick", action="store_true", help=f"smoke run at n_rows {QUICK_SIZES}")
    parser.add_argument("--seed", type=int, default=None, help="demo seed (default: the demo's own)")
    parser.add_argument("--probe", type=int, default=16, help="support rows refitted to project LOO time")
    parser.add_argument("--sample", type=int, default=200, help="support rows refitted when over budget")
    parser.add_argument("--budget-min", type=float, default=25.0, help="LOO minutes before sampling")
    parser.add_argument(
        "--precompute-max-rows",
        type=int,
        default=None,
        help="what-if: precompute the kernel matrix up to this many training rows (app default 12,000)",
    )
    parser.add_argument("--one", type=int, default=None, help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.seed is None:
        from holdfast.data.demo import SEED

        args.seed = SEED
    if args.one is not None:
        with tempfile.TemporaryDirectory(prefix="holdfast-bench-") as tmp:
            budget_s = 60.0 * args.budget_min
            out = measure(
                args.one, args.seed, args.probe, args.sample, budget_s, Path(tmp), args.precompute_max_rows
            )
        print(json.dumps(out))
        return
    sizes = list(QUICK_SIZES) if args.quick else [int(s) for s in args.sizes.split(",") if s.strip()]
    results = []
    with tempfile.TemporaryDirectory(prefix="holdfast-bench-cache-") as cache:
        for n in sizes:
            t0 = time.perf_counter()
            r = _run_child(n, args, Path(cache))
            if r is not None:
                results.append(r)
                print(
                    f"n_rows={n}: m={r['m']} d={r['d']} total {r['total']:.1f}s "
                    f"({'extrapolated, ' if r['sampled'] else ''}ran {time.perf_counter() - t0:.0f}s)",
                    flush=True,
                )
        leftovers = list(Path(cache).iterdir())
    if leftovers:
        print(f"note: the cache folder was written to ({len(leftovers)} entries) although use_cache=False")
    if results:
        report(results)


if __name__ == "__main__":
    main()
