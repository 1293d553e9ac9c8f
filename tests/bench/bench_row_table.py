"""Benchmark: RowTable at 100,000 rows against the same operations at 1,000 rows, in one run.

Run from the repository root (the script puts ``app/`` on the import path itself)::

    python tests/bench/bench_row_table.py [--rows 100000] [--baseline-rows 1000] [--repeat 3]
                                          [--size 120x40] [--gc-freeze] [--strict]

Prints, for each operation, wall-clock and CPU milliseconds at both sizes and their ratio (near 1 means
the cost does not grow with the row count), then PASS/FAIL against the targets at the large size:
first paint <= 1 s, <= 50 ms per key. The verdict that counts uses CPU time (the machine is shared, so
wall time also measures the neighbours); the wall-clock verdict is printed beside it. Exits 0 whatever
the timings unless ``--strict`` is given. The method is described in tests/bench/README.md.
"""

from __future__ import annotations

import argparse
import asyncio
import gc
import os
import statistics
import sys
import time
from collections.abc import Awaitable, Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from textual.app import App, ComposeResult
from textual.containers import Container

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT / "app"))

from holdfast.ui.widgets.columns import default_columns  # noqa: E402
from holdfast.ui.widgets.row_table import RowTable  # noqa: E402

FIRST_PAINT_TARGET_MS = 1000.0
KEY_TARGET_MS = 50.0


def findings_frame(n: int, seed: int = 0) -> pd.DataFrame:
    """A frame with every findings column plus ``decision`` (packhouse grades, crate ids)."""
    rng = np.random.default_rng(seed)
    grades = np.array(["class_1", "class_2", "juice"], dtype=object)
    label = grades[rng.integers(0, 3, n)]
    prediction = grades[rng.integers(0, 3, n)]
    support = rng.random(n) < 0.2
    score = rng.random(n)
    score[rng.random(n) < 0.02] = np.nan
    return pd.DataFrame(
        {
            "row": np.arange(n),
            "id": np.array([f"crate-{i:06d}" for i in range(n)], dtype=object),
            "label": label,
            "prediction": prediction,
            "loo_prediction": np.where(rng.random(n) < 0.9, prediction, label),
            "loo_miss": rng.random(n) < 0.1,
            "support": support,
            "essential": support & (rng.random(n) < 0.5),
            "bounded": support & (rng.random(n) < 0.3),
            "alpha": np.where(support, rng.random(n), 0.0),
            "margin": rng.normal(size=n),
            "flip_count": rng.integers(0, 6, n),
            "score": score,
            "rank": np.arange(1, n + 1),
            "flag_names": np.where(rng.random(n) < 0.1, "loo_miss,bounded", "").astype(object),
            "held_out": rng.random(n) < 0.1,
            "decision": np.full(n, "", dtype=object),
        }
    )


class CountingTable(RowTable):
    """RowTable that records which screen lines it has drawn."""

    def __init__(self, *args: Any, **kwargs: Any) -> None:
        super().__init__(*args, **kwargs)
        self.drawn: set[int] = set()

    def render_line(self, y: int):  # type: ignore[no-untyped-def]
        self.drawn.add(y)
        return super().render_line(y)


class Host(App):
    """Empty app; the table is mounted inside the measurement."""

    def compose(self) -> ComposeResult:
        yield Container(id="slot")


def encode_like_a_terminal(app: App) -> None:
    """Make the headless app turn each screen update into terminal bytes, as a real driver does.

    The headless driver skips this step (``App._display`` returns early), so without it the figures
    would leave out the cost of encoding the update; the bytes are thrown away instead of written.
    """

    def display(screen: Any, renderable: Any) -> None:
        if renderable is not None and hasattr(renderable, "render_segments"):
            renderable.render_segments(app.console)

    app._display = display  # type: ignore[method-assign]


def paint(app: App) -> None:
    """Run the screen update Textual's refresh timer would run: layout, compositor, encode."""
    app.screen._on_timer_update()


@dataclass
class Sample:
    """Timings of one operation, in milliseconds."""

    name: str
    wall: list[float] = field(default_factory=list)
    cpu: list[float] = field(default_factory=list)

    def median(self) -> float:
        return statistics.median(self.wall)

    def p95(self) -> float:
        ordered = sorted(self.wall)
        return ordered[min(len(ordered) - 1, round(0.95 * (len(ordered) - 1)))]


async def timed(sample: Sample, action: Callable[[], Awaitable[None] | None], app: App) -> None:
    """Time ``action`` followed by one full screen update."""
    t0, c0 = time.perf_counter(), time.process_time()
    result = action()
    if result is not None:
        await result
    paint(app)
    sample.wall.append((time.perf_counter() - t0) * 1e3)
    sample.cpu.append((time.process_time() - c0) * 1e3)
    await asyncio.sleep(0)  # let queued messages (CursorMoved, ...) be handled outside the timing


async def first_paint(frame: pd.DataFrame, size: tuple[int, int]) -> tuple[float, float, int]:
    """Milliseconds (wall, cpu) from creating the table to all its visible lines drawn once."""
    app = Host()
    async with app.run_test(size=size) as pilot:
        await pilot.pause()
        encode_like_a_terminal(app)
        slot = app.query_one("#slot")
        t0, c0 = time.perf_counter(), time.process_time()
        table = CountingTable(frame, default_columns(frame))
        await slot.mount(table)
        paint(app)
        height = table.size.height
        while len(table.drawn) < height:  # the compositor may need a second pass after layout
            await asyncio.sleep(0)
            paint(app)
        wall = (time.perf_counter() - t0) * 1e3
        cpu = (time.process_time() - c0) * 1e3
        return wall, cpu, len(table.drawn)


async def key_costs(frame: pd.DataFrame, size: tuple[int, int]) -> dict[str, Sample]:
    """Per-operation timings on a mounted table (key dispatch through the app's bindings)."""
    app = Host()
    samples: dict[str, Sample] = {}
    async with app.run_test(size=size) as pilot:
        table = RowTable(frame, default_columns(frame))
        await app.query_one("#slot").mount(table)
        table.focus()
        await pilot.pause()
        encode_like_a_terminal(app)
        n = len(frame)

        def key(name: str) -> Callable[[], Awaitable[Any]]:
            return lambda: app._check_bindings(name)

        async def run(name: str, times: int, action: Callable[[], Awaitable[Any] | None]) -> None:
            sample = samples.setdefault(name, Sample(name))
            for _ in range(times):
                await timed(sample, action, app)

        await run("down x200", 200, key("down"))
        await run("pagedown x20", 20, key("pagedown"))
        await run("pageup x20", 20, key("pageup"))
        await run("end", 1, key("end"))
        await run("home", 1, key("home"))
        await run("sort score (first)", 1, lambda: table.sort_by("score", descending=True))
        await run("sort score (toggle)", 4, lambda: table.sort_by("score"))
        await run("sort label (text)", 1, lambda: table.sort_by("label"))
        await run("sort id (unique text)", 1, lambda: table.sort_by("id", descending=True))
        await run("sort by rank", 1, lambda: table.sort_by("rank"))
        mask = frame["support"].to_numpy()
        await run("filter support", 1, lambda: table.set_filter(mask))
        await run("filter clear", 1, lambda: table.set_filter(None))
        rng = np.random.default_rng(1)
        await run(
            "jump to id",
            10,
            lambda: table.jump_to_id(f"crate-{int(rng.integers(0, n)):06d}") and None,
        )
        await run(
            "decision update",
            10,
            lambda: table.update_values("decision", [table.cursor_row], ["relabel:juice"]),
        )
    return samples


async def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawTextHelpFormatter)
    parser.add_argument("--rows", type=int, default=100_000)
    parser.add_argument("--baseline-rows", type=int, default=1_000)
    parser.add_argument("--repeat", type=int, default=3, help="rounds per size (medians over all rounds)")
    parser.add_argument("--size", default="120x40", help="terminal size WIDTHxHEIGHT")
    parser.add_argument("--strict", action="store_true", help="exit 1 if a target is missed")
    parser.add_argument(
        "--gc-freeze",
        action="store_true",
        help="call gc.freeze() after the warm-up, so that full garbage collections (which walk every\n"
        "object the imports created) stop adding ~50 ms pauses to random operations",
    )
    args = parser.parse_args(argv)
    width, height = (int(v) for v in args.size.lower().split("x"))
    size = (width, height)

    big_frame = findings_frame(args.rows)
    base_frame = findings_frame(args.baseline_rows)

    # Warm-up (imports, CSS parsing, numpy first calls), not reported.
    await first_paint(findings_frame(100), size)
    await key_costs(findings_frame(100), size)
    if args.gc_freeze:
        gc.collect()
        gc.freeze()

    results: dict[int, dict[str, Sample]] = {args.rows: {}, args.baseline_rows: {}}
    lines_drawn = 0
    for _ in range(args.repeat):  # interleave sizes so machine noise hits both alike
        for frame in (base_frame, big_frame):
            got = results[len(frame)]
            wall, cpu, lines_drawn = await first_paint(frame, size)
            paint_sample = got.setdefault("first paint", Sample("first paint"))
            paint_sample.wall.append(wall)
            paint_sample.cpu.append(cpu)
            for name, sample in (await key_costs(frame, size)).items():
                merged = got.setdefault(name, Sample(name))
                merged.wall += sample.wall
                merged.cpu += sample.cpu
    failed = report(results[args.rows], results[args.baseline_rows], args)
    print(f"\nfirst paint drew {lines_drawn} screen lines (the table's height) at {args.rows:,} rows")
    load = " ".join(f"{x:.2f}" for x in os.getloadavg())
    frozen = "gc frozen after warm-up" if args.gc_freeze else "gc as usual"
    print(f"{args.repeat} rounds on {os.cpu_count()} cores, {frozen}; load average at the end: {load}")
    print("targets (CPU medians):", "all met" if not failed else "MISSED (see FAIL above)")
    return 1 if (failed and args.strict) else 0


def report(big: dict[str, Sample], base: dict[str, Sample], args: argparse.Namespace) -> bool:
    """Print the tables; return whether a target was missed (judged on CPU-time medians)."""
    print(f"RowTable: {args.rows:,} rows (large) vs {args.baseline_rows:,} rows (base), terminal {args.size}")
    print("milliseconds, median per operation; ratio = large / base; target applies to the large size\n")
    wall_head = f"{'wall large':>10} {'base':>7} {'ratio':>6}"
    cpu_head = f"{'cpu large':>10} {'base':>7} {'ratio':>6}"
    print(f"{'operation':<22} {wall_head} {cpu_head} {'target':>8}  cpu  wall")
    failed = False
    for name, b in big.items():
        a = base[name]
        target = FIRST_PAINT_TARGET_MS if name == "first paint" else KEY_TARGET_MS
        wall_big, wall_base = b.median(), a.median()
        cpu_big, cpu_base = statistics.median(b.cpu), statistics.median(a.cpu)
        cpu_ok, wall_ok = cpu_big <= target, wall_big <= target
        failed |= not cpu_ok
        print(
            f"{name:<22} {wall_big:>10.1f} {wall_base:>7.1f} {wall_big / wall_base:>6.2f} "
            f"{cpu_big:>10.1f} {cpu_base:>7.1f} {cpu_big / cpu_base:>6.2f} {'<= ' + format(target, '.0f'):>8}"
            f"  {'PASS' if cpu_ok else 'FAIL'} {'PASS' if wall_ok else 'FAIL'}"
        )
    spread_head = f"{'wall p95':>9} {'base':>7} {'wall max':>9} {'base':>7} {'cpu max':>8} {'base':>7}"
    print(f"\n{'operation':<22} {'samples':>8} {spread_head}   (large, base)")
    for name, b in big.items():
        a = base[name]
        spread = (
            f"{b.p95():>9.1f} {a.p95():>7.1f} {max(b.wall):>9.1f} {max(a.wall):>7.1f}"
            f" {max(b.cpu):>8.1f} {max(a.cpu):>7.1f}"
        )
        print(f"{name:<22} {len(b.wall):>8} {spread}")
    return failed


if __name__ == "__main__":
    raise SystemExit(asyncio.run(main()))
