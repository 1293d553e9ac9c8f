"""The inspector app: composes the inspect screen; every key is a binding with an id and a description."""

from __future__ import annotations

import asyncio
from pathlib import Path
from typing import Any, ClassVar

import pandas as pd
from textual.app import App
from textual.binding import Binding, BindingType
from textual.command import CommandPalette
from textual.screen import Screen

from holdfast.data.spec import Spec
from holdfast.ui.commands import InspectorCommands
from holdfast.ui.quitting import PromptExecutor
from holdfast.ui.screens.inspect import InspectContext, InspectScreen
from holdfast.ui.session import OpenedSession
from holdfast.ui.theme import DARK, LIGHT, THEMES


class HoldfastApp(App[int]):
    """The inspector for one data set + spec + session.

    Parameters
    ----------
    data_path, spec
        The data file and the spec the scan runs with.
    session
        The open session (see :func:`holdfast.ui.session.open_session`); the app does not close it.
    scan
        A finished ``holdfast.engine.scan.Scan`` to show at once instead of running the scan (tests,
        benchmarks).
    """

    CSS_PATH = "holdfast.tcss"
    TITLE = "holdfast"
    #: the command palette lists the inspector's own actions only (no framework system commands)
    COMMANDS: ClassVar[set[Any]] = {InspectorCommands}
    BINDINGS: ClassVar[list[BindingType]] = [
        Binding(
            "ctrl+q",
            "quit",
            "Quit",
            id="holdfast.quit",
            priority=True,
            tooltip="Quit; every decision is already saved",
        ),
        Binding("ctrl+c", "help_quit", show=False, system=True),
        Binding(
            "ctrl+p",
            "command_palette",
            "Actions",
            id="holdfast.actions",
            priority=True,
            tooltip="Find an action by name: filters, sorts, go to, export, what-if",
        ),
        Binding(
            "ctrl+t",
            "switch_theme",
            "Light/dark",
            id="holdfast.theme",
            show=False,
            tooltip="Switch between the dark and the light look",
        ),
    ]

    def __init__(
        self,
        data_path: Path,
        spec: Spec,
        session: OpenedSession,
        *,
        scan: Any = None,
        frame: pd.DataFrame | None = None,
    ) -> None:
        super().__init__()
        #: the event loop's default executor once mounted (thread workers run there; see ui/quitting.py)
        self.work_executor: PromptExecutor | None = None
        self.context = InspectContext(Path(data_path), spec, session, scan, frame)
        for theme in THEMES:
            self.register_theme(theme)
        self.theme = DARK.name

    def on_load(self) -> None:
        # before any screen mounts: thread workers run on the loop's default executor, and quitting must
        # never wait for a refit in flight (ui/quitting.py)
        self.work_executor = PromptExecutor(thread_name_prefix="holdfast-work")
        asyncio.get_running_loop().set_default_executor(self.work_executor)

    def action_switch_theme(self) -> None:
        """Dark to light and back."""
        self.theme = LIGHT.name if self.theme == DARK.name else DARK.name

    def action_command_palette(self) -> None:
        """Open the palette of the inspector's actions (our wording, our entries)."""
        if self.use_command_palette and not CommandPalette.is_open(self):
            self.push_screen(
                CommandPalette(
                    id="--command-palette", placeholder="Type an action: filter, sort, go to, export…"
                )
            )

    def get_default_screen(self) -> Screen:
        return InspectScreen(self.context)

    @property
    def inspect_screen(self) -> InspectScreen:
        """The main screen (the bottom of the screen stack)."""
        return self.screen_stack[0]  # type: ignore[return-value]
