"""Messages the inspector's background workers post to the UI, and a throttle for progress messages.

Scan messages carry the ``generation`` of the scan that sent them, so that a restarted scan ignores what
an earlier, cancelled one still posts while it winds down.

Workers are thin wrappers over engine calls: they post these dataclass messages and the handlers on the
screen own every piece of UI state (DESIGN.md, "Background work").
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from textual.message import Message


@dataclass
class ScanProgress(Message):
    """``done`` of ``total`` refits finished; ``eta`` seconds left (None when unknown)."""

    done: int
    total: int
    eta: float | None
    generation: int = 0


@dataclass
class ScanPartial(Message):
    """Provisional findings while the LOO refits run (``findings.summary["provisional"]`` is True, a
    ``loo_pending`` column marks rows whose refit has not arrived; see the engine's ``on_partial``)."""

    findings: Any
    generation: int = 0


@dataclass
class ScanFinished(Message):
    """The scan finished (or came from the cache); ``scan`` is a ``holdfast.engine.scan.Scan``."""

    scan: Any
    generation: int = 0


@dataclass
class ScanFailed(Message):
    """The scan stopped with an error; ``text`` is one line for the user."""

    text: str
    generation: int = 0


@dataclass
class ScanCancelled(Message):
    """The scan was cancelled; finished refits stay in the cache and a restart resumes from them."""

    generation: int = 0


@dataclass
class DetailReady(Message):
    """The row-detail precomputation finished (``context`` None when it failed: ``text`` says why),
    with the margin histogram for the overview (None when it could not be made)."""

    context: Any
    text: str = ""
    generation: int = 0
    margin_hist: Any = None


@dataclass
class WhatIfProgress(Message):
    """Progress of the what-if refit."""

    done: int
    total: int
    eta: float | None


@dataclass
class WhatIfFinished(Message):
    """The what-if refit finished; ``result`` is a ``holdfast.review.whatif.WhatIf``."""

    result: Any


@dataclass
class WhatIfFailed(Message):
    """The what-if refit stopped with an error (or was cancelled: ``cancelled``)."""

    text: str
    cancelled: bool = False


@dataclass
class ExportFinished(Message):
    """An export was written: ``paths`` and a one-line summary ``text``."""

    paths: list[Path]
    text: str


@dataclass
class ExportFailed(Message):
    """An export failed; nothing was written. ``text`` is one line for the user."""

    text: str


@dataclass
class Throttle:
    """Let a call through at most every ``interval`` seconds, and always the last one (done == total).

    Textual's ``post_message`` from a thread wakes the UI each time; about ten progress updates a second
    keep the bar smooth without flooding the message queue.
    """

    interval: float = 0.1
    clock: Callable[[], float] = time.monotonic
    _last: float = field(default=float("-inf"), init=False)

    def ready(self, done: int, total: int) -> bool:
        """True when this progress update should be posted."""
        now = self.clock()
        if done >= total or now - self._last >= self.interval:
            self._last = now
            return True
        return False


def error_line(exc: BaseException) -> str:
    """One line describing ``exc`` for the status area: user errors as they are, others with their type."""
    from holdfast.errors import UserError

    text = str(exc).strip().splitlines()[0] if str(exc).strip() else ""
    if isinstance(exc, UserError):
        return text or type(exc).__name__
    return f"{type(exc).__name__}: {text}" if text else type(exc).__name__
