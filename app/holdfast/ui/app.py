"""The inspector app: composes the inspect screen; every key is a binding with an id and a description."""

from __future__ import annotations

from pathlib import Path
from typing import Any, ClassVar

import pandas as pd
from textual.app import App
from textual.binding import Binding, BindingType
from textual.screen import Screen

from holdfast.data.spec import Spec
from holdfast.ui.commands import InspectorCommands
from holdfast.ui.screens.inspect import InspectContext, InspectScreen
from holdfast.ui.session import OpenedSession


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
    COMMANDS = App.COMMANDS | {InspectorCommands}
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
        self.context = InspectContext(Path(data_path), spec, session, scan, frame)

    def get_default_screen(self) -> Screen:
        return InspectScreen(self.context)

    @property
    def inspect_screen(self) -> InspectScreen:
        """The main screen (the bottom of the screen stack)."""
        return self.screen_stack[0]  # type: ignore[return-value]
