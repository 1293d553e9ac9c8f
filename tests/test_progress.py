"""Progress on stderr with a fake clock: plain lines often enough when stderr is not a terminal, an ETA
that settles, and a terminal bar that leaves no characters behind when it ends."""

from __future__ import annotations

import io
import itertools
import re

import numpy as np
import pytest

from holdfast.output import progress as P
from holdfast.output.progress import ProgressBar, RateMeter, end_open_lines


class Clock:
    def __init__(self) -> None:
        self.t = 0.0

    def __call__(self) -> float:
        return self.t


class TimedStream(io.StringIO):
    """A captured stream that notes the fake time of every line written."""

    def __init__(self, clock: Clock) -> None:
        super().__init__()
        self.clock = clock
        self.times: list[float] = []

    def write(self, s: str) -> int:
        self.times.extend([self.clock.t] * s.count("\n"))
        return super().write(s)


def _run(bar: ProgressBar, clock: Clock, total: int, steps: list[tuple[float, int]]) -> None:
    """Feed (seconds since the last batch, refits in the batch) to the bar."""
    done = 0
    bar(done, total, None)
    for dt, n in steps:
        clock.t += dt
        done = min(total, done + n)
        bar(done, total, None)


def _eta_seconds(text: str) -> float:
    m = re.fullmatch(r"(?:(\d+)h)?(?:(\d+)m)?(?:(\d+)s)?", text)
    assert m, text
    h, mi, s = (int(g) if g else 0 for g in m.groups())
    return 3600 * h + 60 * mi + s


def test_headless_writes_a_line_at_least_every_few_seconds():
    clock = Clock()
    stream = TimedStream(clock)
    bar = ProgressBar(stream=stream, clock=clock, tty=False)
    # 600 refits, one every 0.8 s: 10% takes 48 s, far longer than the headless interval
    _run(bar, clock, 600, [(0.8, 1)] * 600)
    lines = stream.getvalue().splitlines()
    assert lines[-1] == "refits: 600/600 (100%)"
    assert lines[0] == "refits: 0/600 (0%)"
    gaps = np.diff(stream.times)
    assert gaps.max() <= P.HEADLESS_EVERY + 0.8  # the next refit after the interval
    assert len(lines) >= 480 / (P.HEADLESS_EVERY + 0.8)
    assert len(lines) <= 480 / P.HEADLESS_EVERY + 12  # not a line per refit
    # every 10% step has its line
    pcts = [int(re.search(r"\((\d+)%", line).group(1)) for line in lines]
    for step in range(0, 100, 10):
        assert any(step <= p < step + 10 for p in pcts), step


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_eta_settles_on_bursty_batches(seed):
    """Batches of 1-15 refits at uneven times (each batch's duration 0.3-1.7 times its share), 2 refits
    per second on average: the ETA shown tracks the expected time left (refits left / 2 per second) within
    25% after the first tenth and within 12% after half, and from one line to the next it moves by about
    the time that passed (no jumps with each batch)."""
    rng = np.random.default_rng(seed)
    clock = Clock()
    stream = TimedStream(clock)
    bar = ProgressBar(stream=stream, clock=clock, tty=False)
    total, steps, done = 2000, [], 0
    while done < total:
        n = int(rng.integers(1, 16))
        steps.append((n / 2.0 * rng.uniform(0.3, 1.7), n))
        done += n
    _run(bar, clock, total, steps)
    rows = []
    for line, t in zip(stream.getvalue().splitlines(), stream.times, strict=True):
        m = re.search(r"([\d,]+)/2,000 .*ETA ([\dhms]+)", line)
        if m:
            rows.append((t, int(m.group(1).replace(",", "")), _eta_seconds(m.group(2))))
    assert len(rows) > 50
    late = [(t, d, e) for t, d, e in rows if d >= total / 10]
    for _t, d, e in late:
        expected = (total - d) / 2.0
        share = 0.25 if d < total / 2 else 0.12
        assert abs(e - expected) <= share * expected + 5, (d, e, expected)
    for (t0, _, e0), (t1, _, e1) in itertools.pairwise(late):
        assert abs((e0 - e1) - (t1 - t0)) <= 0.1 * e0 + 6, (t0, e0, t1, e1)


def test_a_slow_start_does_not_dominate_a_short_runs_eta():
    """817 refits: the first 88 take 3 s (each worker's first refits are slower), then 80 per second, a
    run of 12.1 s (a model of the 10-class digits scan, whose ETA read 38 s at 30% with about 10 s left).
    From a third of the way on, the ETA is within 50% of the time actually left; the 30 s moving average
    alone said 15.8 s where 6.6 s were left."""
    clock = Clock()
    meter = RateMeter()
    meter.update(clock.t, 0)
    clock.t, done = 3.0, 88
    meter.update(clock.t, done)
    while done < 817:
        clock.t += 0.5
        done = min(817, done + 40)
        meter.update(clock.t, done)
        if done >= 817 / 3 and done < 817:
            left = (817 - done) / 80.0
            eta = meter.eta(817 - done)
            assert eta is not None and abs(eta - left) <= 0.5 * left + 1.0, (done, eta, left)


def test_no_eta_before_enough_was_measured():
    meter = RateMeter()
    meter.update(0.0, 0)
    meter.update(0.5, 3)
    assert meter.eta(100) is None  # half a second measured: too little
    meter.update(3.0, 10)
    assert meter.eta(100) is not None


def _render(raw: str) -> list[str]:
    """What a terminal shows: carriage return goes back to the start of the line and overwrites."""
    screen: list[str] = []
    line: list[str] = []
    col = 0
    for ch in raw:
        if ch == "\r":
            col = 0
        elif ch == "\n":
            screen.append("".join(line))
            line, col = [], 0
        else:
            if col < len(line):
                line[col] = ch
            else:
                line.append(ch)
            col += 1
    if line:
        screen.append("".join(line))
    return screen


def test_terminal_bar_leaves_no_stray_characters():
    clock = Clock()
    stream = io.StringIO()
    bar = ProgressBar(stream=stream, clock=clock, tty=True)
    _run(bar, clock, 120, [(1.0, 1)] * 120)  # long enough for an ETA to show while it runs
    raw = stream.getvalue()
    assert "ETA" in raw
    shown = _render(raw)
    assert len(shown) == 1 and raw.endswith("\n")
    assert shown[0].rstrip() == f"refits [{'#' * P.BAR_WIDTH}] 120/120"
    assert "ETA" not in shown[0] and not re.search(r"\S\s+\S+s\s*$", shown[0].replace("120/120", ""))


def test_interrupted_terminal_bar_line_is_ended_before_a_message():
    clock = Clock()
    stream = io.StringIO()
    bar = ProgressBar(stream=stream, clock=clock, tty=True)
    _run(bar, clock, 100, [(1.0, 1)] * 40)
    assert not stream.getvalue().endswith("\n")
    end_open_lines()
    assert stream.getvalue().endswith("\n")
    end_open_lines()
    assert not stream.getvalue().endswith("\n\n")


def test_settle_and_format():
    assert P.fmt_seconds(P.settle(42.2)) == "43s"
    assert P.fmt_seconds(P.settle(181)) == "3m05s"
    assert P.fmt_seconds(P.settle(3725)) == "1h02m"
