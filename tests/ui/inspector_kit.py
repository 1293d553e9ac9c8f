"""Shared pieces for the inspector tests: a small packhouse data set on disk, and pilot helpers."""

from __future__ import annotations

import asyncio
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
from textual.app import App
from textual.pilot import Pilot

from holdfast.data.spec import Spec, load_spec
from holdfast.ui.app import HoldfastApp
from holdfast.ui.screens.dialogs import ChoiceDialog
from holdfast.ui.screens.inspect import InspectScreen
from holdfast.ui.session import open_session

SIZE = (160, 48)
MARKUP_ID = "[bold red]x[/]"
ANSI_ID = "\x1b[31mred\x1b[0m"


@dataclass
class DataSet:
    """A data file, its spec file and the frame that was written."""

    data: Path
    spec_path: Path
    frame: pd.DataFrame

    @property
    def spec(self) -> Spec:
        return load_spec(self.spec_path)


def write_dataset(folder: Path, n: int = 160, seed: int = 3) -> DataSet:
    """Two fruit grades from two sensor readings with a few labels swapped; crate ids as the id column.

    Row 5 has the id ``[bold red]x[/]`` and row 6 an id holding an ANSI colour escape, to check that
    data text is shown literally.
    """
    rng = np.random.default_rng(seed)
    diameter = rng.normal(70, 6, n)
    firmness = rng.normal(8, 1.5, n)
    score = (diameter - 70) / 6 + (firmness - 8) / 1.5 + 0.4 * rng.normal(size=n)
    grade = np.where(score > 0, "premium", "processing").astype(object)
    swapped = rng.choice(n, 8, replace=False)
    grade[swapped] = np.where(grade[swapped] == "premium", "processing", "premium")
    ids = np.array([f"crate-{i:04d}" for i in range(n)], dtype=object)
    ids[5] = MARKUP_ID
    ids[6] = ANSI_ID
    frame = pd.DataFrame({"crate": ids, "diameter_mm": diameter, "firmness": firmness, "grade": grade})
    folder.mkdir(parents=True, exist_ok=True)
    data = folder / "packhouse.parquet"
    frame.to_parquet(data, index=False)
    spec_path = folder / "packhouse.toml"
    spec_path.write_text('[data]\nlabel = "grade"\nid = "crate"\n\n[learner]\nC = 1.0\n')
    return DataSet(data, spec_path, frame)


def make_app(ds: DataSet, session: Path | None = None, spec: Spec | None = None) -> HoldfastApp:
    """An inspector on ``ds`` with the session at ``session`` (default beside the data)."""
    spec = spec or ds.spec
    return HoldfastApp(ds.data, spec, open_session(ds.data, spec, session))


def inspect(app: App) -> InspectScreen:
    """The app's main screen."""
    return app.screen_stack[0]  # type: ignore[return-value]


async def until(pilot: Pilot, condition, timeout: float = 120.0) -> None:  # type: ignore[no-untyped-def]
    """Let the app run until ``condition()`` holds (fails the test after ``timeout`` seconds)."""
    loop = asyncio.get_running_loop()
    end = loop.time() + timeout
    while not condition():
        if loop.time() > end:
            raise AssertionError("timed out waiting for the app")
        await pilot.pause(0.05)


async def scanned(pilot: Pilot) -> InspectScreen:
    """Wait until the scan has finished (or failed) and return the main screen."""
    screen = inspect(pilot.app)
    await until(pilot, lambda: screen._scan_state in ("done", "failed", "cancelled"))
    await pilot.pause()
    return screen


async def choose(pilot: Pilot, key: str) -> None:
    """In the open ChoiceDialog, highlight the entry ``key`` with the arrow keys and press enter."""
    dialog = pilot.app.screen
    assert isinstance(dialog, ChoiceDialog), f"expected a choice dialog, got {dialog!r}"
    keys = [k for k, _ in dialog.choices]
    target = keys.index(key)
    await pilot.press("home")
    for _ in range(target):
        await pilot.press("down")
    await pilot.press("enter")
    await pilot.pause()


def screen_text(app: App) -> str:
    """Everything on screen as one string (lines joined by newlines)."""
    return "\n".join(strip.text for strip in app.screen._compositor.render_strips())


def region_text(app: App, selector: str) -> str:
    """The screen text inside the region of the widget matching ``selector`` (what the user sees there)."""
    region = app.screen.query_one(selector).region
    lines = [strip.text for strip in app.screen._compositor.render_strips()]
    return "\n".join(line[region.x : region.right] for line in lines[region.y : region.bottom])
