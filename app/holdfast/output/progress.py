"""Progress of the refits on stderr: a bar that redraws in place on a terminal, plain lines otherwise.

Plain lines (stderr is a file, a pipe or a CI log) come at every 10% and at least every
``HEADLESS_EVERY`` seconds, so a long scan never looks stuck. The ETA comes from the refit rate smoothed
over time (an exponentially weighted average with time constant ``RATE_TAU`` seconds, growing to half the
time measured, and the plain average of all that was measured while that is shorter: common practice for
rate meters), not from the last batch alone, so it settles instead of
jumping with each batch; it is shown once ``ETA_AFTER`` seconds of refits have been measured, rounded more
coarsely as it grows.
"""

from __future__ import annotations

import math
import sys
import time
from collections.abc import Callable
from typing import TextIO

#: a plain line at least this often (seconds) when stderr is not a terminal ...
HEADLESS_EVERY = 5.0
#: ... and at every this many percent
HEADLESS_STEP = 10
#: the terminal bar redraws at most this often (seconds)
TTY_EVERY = 0.1
#: time constant of the smoothed refit rate (seconds)
RATE_TAU = 30.0
#: no ETA before this many seconds of refits were measured
ETA_AFTER = 2.0
#: width of the terminal bar in characters
BAR_WIDTH = 30


def fmt_seconds(s: float) -> str:
    """``42s``, ``3m05s``, ``1h02m``."""
    s = max(0, round(s))
    if s >= 3600:
        return f"{s // 3600}h{s % 3600 // 60:02d}m"
    return f"{s // 60}m{s % 60:02d}s" if s >= 60 else f"{s}s"


def settle(seconds: float) -> float:
    """Round an ETA to steps that suit its size (1 s below a minute, 5 s below 10 minutes, then 30 s)."""
    step = 1.0 if seconds < 60 else 5.0 if seconds < 600 else 30.0
    return step * math.ceil(seconds / step)


class RateMeter:
    """Refits per second, exponentially smoothed over time; the ETA of what is left."""

    def __init__(self, tau: float = RATE_TAU) -> None:
        self.tau = tau
        self.rate: float | None = None
        self.last: tuple[float, int] | None = None
        self.measured = 0.0

    def update(self, now: float, done: int) -> None:
        """Record that ``done`` refits are finished at time ``now``."""
        if self.last is None:
            self.last = (now, done)
            return
        t0, d0 = self.last
        dt = now - t0
        if dt <= 0 or done < d0:
            return
        inst = (done - d0) / dt
        self.last = (now, done)
        self.measured += dt
        if self.rate is None:
            self.rate = inst
        else:
            # weight of the new interval: 1 - exp(-dt / tau), so the average spans about tau seconds
            # whatever the spacing of the updates; tau grows to half the time measured, so the estimate
            # steadies as the run goes on and still follows a change of pace. Before tau seconds are
            # measured, at least dt / measured: the plain average over all of it, so a slow start (the
            # workers' first refits) weighs no more than its share of the time
            tau = max(self.tau, 0.5 * self.measured)
            weight = max(1.0 - math.exp(-dt / tau), dt / self.measured)
            self.rate += weight * (inst - self.rate)

    def eta(self, left: int) -> float | None:
        """Seconds until ``left`` more refits are done; None while too little was measured."""
        if self.rate is None or self.rate <= 0 or self.measured < ETA_AFTER:
            return None
        return left / self.rate


class ProgressBar:
    """``progress(done, total, eta)`` for the engine, written to ``stream`` (stderr by default).

    On a terminal: one line redrawn in place, padded so a shorter line leaves no characters of the
    longer one behind, ended by a newline when all is done. Otherwise: plain lines (see the module
    docstring). The engine's own ``eta`` argument is not used: the smoothed rate replaces it.
    """

    def __init__(
        self,
        label: str = "refits",
        stream: TextIO | None = None,
        *,
        clock: Callable[[], float] = time.monotonic,
        tty: bool | None = None,
    ) -> None:
        self.label = label
        self.stream = stream or sys.stderr
        self.tty = self.stream.isatty() if tty is None else tty
        self.clock = clock
        self.meter = RateMeter()
        self.last_write: float | None = None
        self.last_pct = -HEADLESS_STEP
        self.drawn = 0  # length of the terminal line drawn so far
        self.ended = False

    def __call__(self, done: int, total: int, eta: float | None = None) -> None:
        now = self.clock()
        self.meter.update(now, done)
        finished = done >= total
        if self.ended:
            return
        left = self.meter.eta(total - done)
        eta_text = fmt_seconds(settle(left)) if left is not None and not finished else None
        if self.tty:
            self._draw(now, done, total, eta_text, finished)
        else:
            self._line(now, done, total, eta_text, finished)

    def _draw(self, now: float, done: int, total: int, eta: str | None, finished: bool) -> None:
        if not finished and self.last_write is not None and now - self.last_write < TTY_EVERY:
            return
        self.last_write = now
        frac = done / total if total else 1.0
        fill = int(frac * BAR_WIDTH)
        text = f"{self.label} [{'#' * fill}{'-' * (BAR_WIDTH - fill)}] {done:,}/{total:,}"
        if eta:
            text += f"  ETA {eta}"
        pad = max(0, self.drawn - len(text))
        self.stream.write("\r" + text + " " * pad)
        self.drawn = len(text)
        if finished:
            self.stream.write("\n")
            self.ended = True
            _OPEN.discard(self)
        else:
            _OPEN.add(self)
        self.stream.flush()

    def _line(self, now: float, done: int, total: int, eta: str | None, finished: bool) -> None:
        pct = int(100 * done / total) if total else 100
        due = self.last_write is None or now - self.last_write >= HEADLESS_EVERY
        if not (finished or due or pct >= self.last_pct + HEADLESS_STEP):
            return
        self.last_write = now
        self.last_pct = pct - pct % HEADLESS_STEP
        tail = f", ETA {eta}" if eta else ""
        self.stream.write(f"{self.label}: {done:,}/{total:,} ({pct}%{tail})\n")
        self.stream.flush()
        self.ended = finished

    def note(self, text: str) -> None:
        """A stage of a long scan before the refits (the fit, the neighbour evidence), on its own line."""
        self.end_line()
        self.stream.write(f"{text}\n")
        self.stream.flush()

    def end_line(self) -> None:
        """End a terminal line left open (an interrupted scan), so the next message starts on its own."""
        if self.tty and self in _OPEN:
            self.stream.write("\n")
            self.stream.flush()
            _OPEN.discard(self)


#: terminal bars with a line in progress
_OPEN: set[ProgressBar] = set()


def end_open_lines() -> None:
    """End every terminal progress line left open (before an error or cancel message)."""
    for bar in list(_OPEN):
        bar.end_line()
