"""The export dialog: what to write (decisions, cleaned data set, report) and where.

The dialog only asks; the inspect screen checks for an existing file (asking before it overwrites) and
writes in a worker with the engine's export functions, which write to a temporary file and rename it.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import ClassVar

from textual import on
from textual.app import ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import Horizontal, Vertical
from textual.screen import ModalScreen
from textual.widgets import Button, Input, RadioButton, RadioSet, Static

from holdfast.ui.screens.dialogs import plain

#: export kind -> (label in the dialog, default file suffix added to the data file's stem)
KINDS: dict[str, tuple[str, str]] = {
    "decisions": ("decisions: one row per decided row (.parquet or .csv)", ".decisions.parquet"),
    "cleaned": (
        "cleaned data set: relabels applied, excluded rows removed (.parquet or .csv)",
        ".cleaned.parquet",
    ),
    "report": ("report: Markdown with images beside it (.md)", ".report.md"),
}


@dataclass(frozen=True)
class ExportRequest:
    """What the user asked to export."""

    kind: str
    path: Path


def default_export_path(data_path: Path, kind: str) -> Path:
    """``DATA.decisions.parquet``, ``DATA.cleaned.parquet`` or ``DATA.report.md`` beside the data file."""
    stem = data_path.stem if data_path.suffix else data_path.name
    return data_path.with_name(stem + KINDS[kind][1])


class KindChoice(RadioSet):
    """The file types: up and down choose a type at once (no separate toggle key)."""

    def action_next_button(self) -> None:
        super().action_next_button()
        self._choose_selected()

    def action_previous_button(self) -> None:
        super().action_previous_button()
        self._choose_selected()

    def _choose_selected(self) -> None:
        if self._selected is not None:
            button = self._nodes[self._selected]
            if isinstance(button, RadioButton) and not button.value:
                button.value = True


class ExportDialog(ModalScreen[ExportRequest | None]):
    """Choose what to export and the path (default beside the data). Returns None when cancelled."""

    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("escape", "cancel", "Cancel", id="dialog.cancel"),
        Binding("enter", "export", "Export", id="export.export", priority=True),
    ]

    def __init__(
        self, data_path: Path, *, kind: str = "decisions", unavailable: dict[str, str] | None = None
    ) -> None:
        super().__init__(classes="dialog-screen")
        self.data_path = data_path
        self.unavailable = dict(unavailable or {})
        self.kind = kind if kind not in self.unavailable else "decisions"
        self._default = str(default_export_path(data_path, self.kind))

    def compose(self) -> ComposeResult:
        with Vertical(classes="dialog", id="export-dialog"):
            yield Static("Export", classes="dialog-title")
            with KindChoice(id="export-kind"):
                for key, (label, _) in KINDS.items():
                    reason = self.unavailable.get(key)
                    text = f"{label} - {reason}" if reason else label
                    yield RadioButton(
                        plain(text), value=key == self.kind, disabled=bool(reason), id=f"kind-{key}"
                    )
            yield Static("Path", classes="dialog-label")
            yield Input(value=self._default, id="export-path")
            yield Static(
                "↑↓ file type · tab path and buttons · enter exports · escape cancels\n"
                "Written to a temporary file, then renamed; a file is replaced only after you say yes.",
                classes="dialog-hint",
            )
            with Horizontal(classes="dialog-buttons"):
                yield Button("Export", variant="primary", id="export")
                yield Button("Cancel", id="cancel")

    def on_mount(self) -> None:
        self.query_one("#export-kind", RadioSet).focus()  # the file type first; ↓ changes it

    @on(RadioSet.Changed)
    def _kind_changed(self, event: RadioSet.Changed) -> None:
        event.stop()
        key = (event.pressed.id or "").removeprefix("kind-")
        if key not in KINDS:
            return
        self.kind = key
        path_input = self.query_one("#export-path", Input)
        if path_input.value == self._default or not path_input.value.strip():
            self._default = str(default_export_path(self.data_path, key))
            path_input.value = self._default

    def check_action(self, action: str, parameters: tuple[object, ...]) -> bool | None:
        """Enter exports from the file types and the path; on a button it presses that button."""
        if action == "export":
            return not isinstance(self.focused, Button)
        return True

    def action_export(self) -> None:
        self._finish()

    @on(Input.Submitted)
    def _submitted(self, event: Input.Submitted) -> None:
        event.stop()
        self._finish()

    @on(Button.Pressed)
    def _pressed(self, event: Button.Pressed) -> None:
        event.stop()
        if event.button.id == "export":
            self._finish()
        else:
            self.dismiss(None)

    def _finish(self) -> None:
        text = self.query_one("#export-path", Input).value.strip()
        if not text:
            self.notify("Type a path for the export.", severity="warning")
            return
        self.dismiss(ExportRequest(self.kind, Path(text).expanduser()))

    def action_cancel(self) -> None:
        self.dismiss(None)
