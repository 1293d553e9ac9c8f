"""Benchmark: the whole inspector at 100,000 rows against the same at 1,000 rows, in one run.

Run from the repository root::

    python tests/bench/bench_inspector.py [--rows 100000] [--baseline-rows 1000] [--repeat 3]
                                          [--size 160x48] [--strict]

What is measured
----------------
* **First paint**: from constructing ``HoldfastApp`` with a finished scan (a synthetic ``Scan`` built
  directly: findings frame, summary, prepared matrix; no real scan runs) to the end of the first screen
  update in which every line of the row table has been drawn. It includes Textual's start-up, the
  stylesheet, lining the journal up with the rows, copying the columns into the table, the first sort
  (score, descending), the overview and the margin histogram. The row-detail precomputation runs in a
  worker thread and is timed separately ("detail ready", from the same start).
* **Keys**: each key goes through the app's binding lookup (``App._check_bindings``, where a real key
  press ends), then the messages it caused are handled (status line) and one screen update runs
  (layout, compositor, encoding to terminal bytes, which the headless driver normally skips and this
  script puts back). Decision keys include the journal commit (SQLite WAL, synchronous=FULL).
  The row-detail panel follows the cursor after a short delay; its update is timed on its own
  ("detail update": one ``row_detail`` call plus a screen update).

Clocks: wall (``perf_counter``) and the CPU time of the UI thread (``thread_time``), which leaves out
the worker threads and the neighbours on a shared machine. The verdict uses the UI-thread CPU medians;
the wall verdict is printed beside it. Ratios are large / baseline; near 1 means the cost does not grow
with the row count. Exits 0 whatever the timings unless ``--strict`` is given.
"""

from __future__ import annotations

import argparse
import asyncio
import os
import statistics
import sys
import tempfile
import time
from collections.abc import Awaitable, Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT / "app"))

from holdfast.data.prepare import Prepared  # noqa: E402
from holdfast.data.spec import spec_from_text  # noqa: E402
from holdfast.engine.findings import Findings  # noqa: E402
from holdfast.engine.scan import Scan  # noqa: E402
from holdfast.insight.flags import FLAG_REASONS  # noqa: E402
from holdfast.ui.app import HoldfastApp  # noqa: E402
from holdfast.ui.session import open_session  # noqa: E402

FIRST_PAINT_TARGET_MS = 1000.0
KEY_TARGET_MS = 50.0
GRADES = np.array(["class_1", "class_2"], dtype=object)
SPEC_TEXT = '[data]\nlabel = "grade"\nid = "crate"\n'


def synthetic_scan(n: int, folder: Path, seed: int = 0) -> Scan:
    """A finished scan of ``n`` packhouse rows built directly (no fit): data file, prepared, findings."""
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, 4))
    y = (X[:, 0] + 0.5 * X[:, 1] + 0.3 * rng.normal(size=n) > 0).astype(np.int64)
    labels = GRADES[y]
    ids = np.array([f"crate-{i:06d}" for i in range(n)], dtype=object)
    features = ["diameter_mm", "firmness", "blush", "weight_g"]
    frame = pd.DataFrame({"crate": ids, **{f: X[:, j] for j, f in enumerate(features)}, "grade": labels})
    data = folder / f"packhouse-{n}.parquet"
    frame.to_parquet(data, index=False)
    spec = spec_from_text(SPEC_TEXT, "bench")
    prepared = Prepared(
        frame=frame,
        X=X,
        feature_names=features,
        features=features,
        numeric=features,
        categorical=[],
        y=y,
        classes=list(GRADES),
        ids=ids,
        train=np.ones(n, dtype=bool),
        label_column="grade",
        id_column="crate",
        split_column=None,
    )
    support = rng.random(n) < 0.2
    bounded = support & (rng.random(n) < 0.5)
    margin = rng.normal(0.8, 0.9, n)
    prediction = np.where(margin > 0, y, 1 - y)
    loo = np.where(support & (rng.random(n) < 0.3), 1 - y, prediction)
    flip_count = np.where(support, rng.integers(0, 5, n), 0)
    flags_frame = {
        "loo_miss": loo != y,
        "wrong_side": prediction != y,
        "bounded": bounded,
        "neighbour_dissent": rng.random(n) < 0.05,
        "twin_conflict": np.zeros(n, dtype=bool),
        "heavy_flip": flip_count >= 3,
    }
    names = list(FLAG_REASONS)
    flags = [",".join(k for k in names if flags_frame[k][i]) for i in range(n)]
    score = np.round(rng.random(n) * 5, 3)
    rows = pd.DataFrame(
        {
            "row": np.arange(n, dtype=np.int64),
            "id": pd.Series(ids, dtype="string"),
            "label": labels,
            "prediction": GRADES[prediction],
            "loo_prediction": GRADES[loo],
            "loo_miss": loo != y,
            "support": support,
            "essential": support,
            "bounded": bounded,
            "alpha": np.where(support, rng.random(n), 0.0),
            "margin": margin,
            "flip_count": flip_count.astype(np.int64),
            "score": score,
            "rank": pd.Series(-score).rank(method="first").astype(np.int64).to_numpy(),
            "flag_names": flags,
            "held_out": np.zeros(n, dtype=bool),
            "neighbour_dissent": rng.random(n),
            "neighbour_majority": y,
            "twin_conflicts": np.zeros(n, dtype=np.int64),
            **{f"flag_{k}": v for k, v in flags_frame.items()},
        }
    )
    d = int(support.sum())
    summary: dict[str, Any] = {
        "data": {"path": str(data), "rows_total": n, "features": features, "fingerprint": ""},
        "spec": spec.to_dict(),
        "learner": {"family": "svm", "kernel": "rbf", "C": 1.0, "gamma": 0.25},
        "classes": list(GRADES),
        "class_counts": {g: int((labels == g).sum()) for g in GRADES},
        "m": n,
        "d": d,
        "bounded": int(bounded.sum()),
        "free": int(d - bounded.sum()),
        "essential": d,
        "training_errors": int((prediction != y).sum()),
        "loo_errors": int((loo != y).sum()),
        "loo_exact": True,
        "flags": {k: int(v.sum()) for k, v in flags_frame.items()},
        "bounds": {
            "support_fraction": {"name": "support fraction d/m", "value": d / n, "source": "synthetic"},
            "loo_error": {
                "name": "exact LOO error",
                "value": float((loo != y).mean()),
                "source": "synthetic",
            },
        },
    }
    findings = Findings(rows=rows, summary=summary, classes=list(GRADES))
    flips = {int(r): np.array([(r + 1) % n], dtype=np.int64) for r in np.flatnonzero(flip_count > 0)[:5000]}
    return Scan(findings=findings, prepared=prepared, data_path=data, spec=spec, flips=flips, from_cache=True)


def encode_like_a_terminal(app: Any) -> None:
    """Make the headless app turn each screen update into terminal bytes, as a real driver does."""

    def display(screen: Any, renderable: Any) -> None:
        if renderable is not None and hasattr(renderable, "render_segments"):
            renderable.render_segments(app.console)

    app._display = display


def paint(app: Any) -> None:
    """Run the screen update Textual's refresh timer would run: layout, compositor, encode."""
    app.screen._on_timer_update()


async def settle() -> None:
    """Let the messages a key caused be handled (a few turns of the event loop)."""
    for _ in range(4):
        await asyncio.sleep(0)


@dataclass
class Sample:
    """Timings of one operation in milliseconds."""

    wall: list[float] = field(default_factory=list)
    cpu: list[float] = field(default_factory=list)

    def add(self, wall: float, cpu: float) -> None:
        self.wall.append(wall)
        self.cpu.append(cpu)


def fresh_session(scan: Scan, folder: Path, tag: str) -> Any:
    path = folder / f"session-{tag}-{time.monotonic_ns()}.db"
    return open_session(scan.data_path, scan.spec, path)


async def first_paint(scan: Scan, folder: Path, size: tuple[int, int]) -> tuple[float, float, float]:
    """(wall ms, UI CPU ms) to the first full paint, and wall ms until the row detail is ready."""
    session = fresh_session(scan, folder, "paint")
    t0, c0 = time.perf_counter(), time.thread_time()
    app = HoldfastApp(scan.data_path, scan.spec, session, scan=scan)
    async with app.run_test(size=size) as pilot:
        encode_like_a_terminal(app)
        screen = app.inspect_screen
        paint(app)
        while screen.table.row_count == 0 or not screen.table.size.height:
            await asyncio.sleep(0)
            paint(app)
        wall = (time.perf_counter() - t0) * 1e3
        cpu = (time.thread_time() - c0) * 1e3
        while screen._detail_context is None:
            await pilot.pause(0.01)
        detail = (time.perf_counter() - t0) * 1e3
        await pilot.pause()
    session.journal.close()
    return wall, cpu, detail


async def key_costs(scan: Scan, folder: Path, size: tuple[int, int]) -> dict[str, Sample]:
    """Per-key timings on a mounted inspector."""
    session = fresh_session(scan, folder, "keys")
    app = HoldfastApp(scan.data_path, scan.spec, session, scan=scan)
    samples: dict[str, Sample] = {}
    async with app.run_test(size=size) as pilot:
        screen = app.inspect_screen
        while screen._detail_context is None:
            await pilot.pause(0.01)
        await pilot.pause()
        encode_like_a_terminal(app)

        async def run(name: str, times: int, action: Callable[[], Awaitable[Any] | Any]) -> None:
            sample = samples.setdefault(name, Sample())
            for _ in range(times):
                t0, c0 = time.perf_counter(), time.thread_time()
                result = action()
                if isinstance(result, Awaitable):
                    await result
                await settle()
                paint(app)
                sample.add((time.perf_counter() - t0) * 1e3, (time.thread_time() - c0) * 1e3)
                if screen._detail_timer is not None:  # the detail update runs outside the key's timing
                    screen._detail_timer.stop()
                    screen._detail_timer = None

        def key(name: str) -> Callable[[], Awaitable[Any]]:
            return lambda: app._check_bindings(name)

        await run("down x100", 100, key("down"))
        await run("pagedown x10", 10, key("pagedown"))
        await run("pageup x10", 10, key("pageup"))
        await run("end", 1, key("end"))
        await run("home", 1, key("home"))
        await run("detail update x20", 20, screen._update_detail_now)
        await run("sort: next column (s) x4", 4, key("s"))
        await run("sort: reverse (o) x4", 4, key("o"))
        await run("filter LOO misses", 1, lambda: screen._apply_filter("loo_miss"))
        await run("filter all rows", 1, lambda: screen._apply_filter("all"))
        await run("confirm (c) x10", 10, key("c"))
        await run("exclude (x) x10", 10, key("x"))
        await run("undo (u) x10", 10, key("u"))
        await run("redo (y) x10", 10, key("y"))
        await run("next undecided (space) x10", 10, key("space"))
        await run("filter review queue", 1, lambda: screen._apply_filter("queue"))
        await app._check_bindings("a")  # auto-advance on: each decision also moves to the next row
        await run("confirm + advance x10", 10, key("c"))
        await run("provisional re-rank", 3, lambda: screen._show_rows(provisional(scan), provisional=True))
        await run("down x100 (provisional)", 100, key("down"))
        await run("help screen (?)", 1, key("question_mark"))
        await pilot.press("escape")
    session.journal.close()
    return samples


def provisional(scan: Scan) -> Findings:
    """Findings shaped like the scan's provisional ones: a fifth of the support rows still waiting for
    their refit (``loo_pending``, LOO columns missing) and the scores moved a little (a new ranking)."""
    rows = scan.findings.rows.copy()
    rng = np.random.default_rng(len(rows))
    pending = rows["support"].to_numpy(dtype=bool) & (rng.random(len(rows)) < 0.2)
    rows["score"] = rows["score"] + rng.normal(0, 0.05, len(rows))
    rows["loo_prediction"] = rows["loo_prediction"].astype(object).where(~pending, None)
    rows["loo_pending"] = pending
    summary = dict(scan.findings.summary, provisional=True, loo_done=0, loo_total=int(pending.sum()))
    return Findings(rows=rows, summary=summary, classes=scan.findings.classes)


def row(name: str, big: float, base: float, target: float | None) -> tuple[str, bool]:
    ratio = big / base if base > 0 else float("inf")
    ok = target is None or big <= target
    verdict = "" if target is None else ("PASS" if ok else "FAIL")
    goal = "" if target is None else f"<= {target:.0f}"
    return f"{name:<28} {big:>10.2f} {base:>10.2f} {ratio:>7.2f}  {goal:>7} {verdict}", ok


async def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawTextHelpFormatter)
    parser.add_argument("--rows", type=int, default=100_000)
    parser.add_argument("--baseline-rows", type=int, default=1_000)
    parser.add_argument("--repeat", type=int, default=3, help="first-paint runs per size (median kept)")
    parser.add_argument("--size", default="160x48", help="terminal size WIDTHxHEIGHT")
    parser.add_argument("--strict", action="store_true", help="exit 1 if a target is missed")
    args = parser.parse_args(argv)
    size = tuple(int(v) for v in args.size.lower().split("x"))
    os.environ.setdefault("HOLDFAST_CACHE_DIR", tempfile.mkdtemp(prefix="holdfast-bench-cache-"))

    with tempfile.TemporaryDirectory(prefix="holdfast-bench-") as tmp:
        folder = Path(tmp)
        t = time.perf_counter()
        big, base = synthetic_scan(args.rows, folder), synthetic_scan(args.baseline_rows, folder)
        print(f"built synthetic scans in {time.perf_counter() - t:.1f} s (not timed below)")
        await first_paint(base, folder, size)  # warm-up: imports, stylesheet parsing
        paints: dict[int, list[tuple[float, float, float]]] = {args.rows: [], args.baseline_rows: []}
        for _ in range(args.repeat):  # interleave sizes so machine noise hits both alike
            for scan in (base, big):
                paints[len(scan.findings.rows)].append(await first_paint(scan, folder, size))
        base_keys = await key_costs(base, folder, size)
        big_keys = await key_costs(big, folder, size)

    print(
        f"\nInspector benchmark: {args.rows:,} rows vs baseline {args.baseline_rows:,} rows, "
        f"terminal {args.size}"
    )
    print("milliseconds, medians; ratio = large / baseline\n")
    failed_cpu = failed_wall = False
    for clock, idx in (("UI-thread CPU (verdict)", 1), ("wall clock", 0)):
        print(f"-- {clock}")
        print(f"{'operation':<28} {'large':>10} {'base':>10} {'ratio':>7}  {'target':>7}")
        line, ok = row(
            "first paint",
            statistics.median(p[idx] for p in paints[args.rows]),
            statistics.median(p[idx] for p in paints[args.baseline_rows]),
            FIRST_PAINT_TARGET_MS,
        )
        print(line)
        failed = not ok
        for name, sample in big_keys.items():
            values = sample.cpu if idx == 1 else sample.wall
            base_values = base_keys[name].cpu if idx == 1 else base_keys[name].wall
            single = ("help", "filter", "sort", "provisional")  # single actions (a re-rank: once a second)
            target = None if name.startswith(single) else KEY_TARGET_MS
            line, ok = row(name, statistics.median(values), statistics.median(base_values), target)
            failed |= not ok
            print(line)
        if idx == 1:
            failed_cpu = failed
        else:
            failed_wall = failed
        print()
    detail_big = statistics.median(p[2] for p in paints[args.rows])
    detail_base = statistics.median(p[2] for p in paints[args.baseline_rows])
    print(f"row detail ready (worker, wall) {detail_big:>10.1f} {detail_base:>10.1f}")
    print("sort, filter and the help screen are single actions, not keys held down: shown without a target")
    print("provisional re-rank: what a scan's provisional findings cost the UI (at most once a second)")
    print(f"load average {os.getloadavg()[0]:.2f} on {os.cpu_count()} cores")
    print("targets (UI-thread CPU):", "all met" if not failed_cpu else "MISSED (see FAIL above)")
    print("targets (wall clock):   ", "all met" if not failed_wall else "MISSED (see FAIL above)")
    return 1 if (failed_cpu and args.strict) else 0


if __name__ == "__main__":
    raise SystemExit(asyncio.run(main()))
