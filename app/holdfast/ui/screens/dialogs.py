"""Small modal dialogs: pick one of a list, confirm, type a line of text.

Every text that may come from the data set (labels, ids, notes) is passed in as a ``rich.text.Text`` made
by :func:`holdfast.ui.textsafe.literal` or as plain strings that these dialogs wrap the same way, so
nothing is read as markup.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import ClassVar, TypeVar

from rich.text import Text
from textual import on
from textual.app import ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import Horizontal, Vertical
from textual.screen import ModalScreen
from textual.widgets import Button, Input, OptionList, Static
from textual.widgets.option_list import Option

from holdfast.ui.textsafe import safe_text

ResultT = TypeVar("ResultT")


def plain(value: str | Text) -> Text:
    """``value`` as a Text that is never parsed as markup (control characters made visible)."""
    if isinstance(value, Text):
        return value
    return Text(safe_text(value))


def wrapped(value: str | Text) -> Text:
    """Like :func:`plain`, but keeps line breaks of a multi-line message made by the UI itself."""
    if isinstance(value, Text):
        return value
    return Text("\n".join(safe_text(line) for line in value.split("\n")))


class _Dialog(ModalScreen[ResultT]):
    """A dialog with a title line above its body and a hint below; escape dismisses it with None."""

    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("escape", "cancel", "Cancel", id="dialog.cancel"),
    ]

    def __init__(self, title: str | Text, hint: str | Text, id: str | None) -> None:
        super().__init__(id=id, classes="dialog-screen")
        self.title_text = title
        self.hint = hint

    def body(self) -> ComposeResult:
        """The widgets between the title and the hint."""
        yield from ()

    def compose(self) -> ComposeResult:
        with Vertical(classes="dialog"):
            yield Static(wrapped(self.title_text), classes="dialog-title")
            yield from self.body()
            yield Static(wrapped(self.hint), classes="dialog-hint")

    def action_cancel(self) -> None:
        self.dismiss(None)


class ChoiceDialog(_Dialog[str | None]):
    """Pick one entry of a list. Returns the chosen entry's key, or None when dismissed with escape.

    Parameters
    ----------
    title
        One line above the list.
    choices
        ``(key, label)`` pairs; labels are shown literally.
    hint
        Optional line below the list.
    """

    def __init__(
        self,
        title: str | Text,
        choices: Sequence[tuple[str, str | Text]],
        *,
        hint: str | Text = "enter chooses · escape cancels",
        highlighted: str | None = None,
        id: str | None = None,
    ) -> None:
        super().__init__(title, hint, id)
        self.choices = list(choices)
        self.highlighted_key = highlighted

    def body(self) -> ComposeResult:
        yield OptionList(*(Option(plain(label)) for _, label in self.choices), id="choices")

    def on_mount(self) -> None:
        options = self.query_one(OptionList)
        # title, hint, margins, paddings and borders take 13 lines: the list gets the rest
        options.styles.max_height = max(3, min(24, self.app.size.height - 13))
        keys = [k for k, _ in self.choices]
        if self.highlighted_key in keys:
            options.highlighted = keys.index(self.highlighted_key)
        elif keys:
            options.highlighted = 0
        options.focus()

    @on(OptionList.OptionSelected)
    def _chosen(self, event: OptionList.OptionSelected) -> None:
        event.stop()
        self.dismiss(self.choices[event.option_index][0])


class ConfirmDialog(ModalScreen[bool]):
    """Ask a yes/no question; returns True for yes. ``y``/``n``/escape answer from the keyboard."""

    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("y", "answer(True)", "Yes", id="dialog.yes"),
        Binding("n,escape", "answer(False)", "No", id="dialog.no"),
    ]

    def __init__(
        self, question: str | Text, *, yes: str = "Yes", no: str = "No", id: str | None = None
    ) -> None:
        super().__init__(id=id, classes="dialog-screen")
        self.question = question
        self.yes = yes
        self.no = no

    def compose(self) -> ComposeResult:
        with Vertical(classes="dialog"):
            yield Static(wrapped(self.question), classes="dialog-title")
            with Horizontal(classes="dialog-buttons"):
                yield Button(f"{self.yes} (y)", variant="primary", id="yes")
                yield Button(f"{self.no} (n)", id="no")

    def on_mount(self) -> None:
        self.query_one("#no", Button).focus()

    @on(Button.Pressed)
    def _pressed(self, event: Button.Pressed) -> None:
        event.stop()
        self.dismiss(event.button.id == "yes")

    def action_answer(self, answer: bool) -> None:
        self.dismiss(answer)


class TextDialog(_Dialog[str | None]):
    """Type one line of text. Returns the text (possibly empty) on enter, None on escape."""

    def __init__(
        self,
        title: str | Text,
        *,
        value: str = "",
        placeholder: str = "",
        hint: str | Text = "enter saves · escape cancels",
        id: str | None = None,
    ) -> None:
        super().__init__(title, hint, id)
        self.value = value
        self.placeholder = placeholder

    def body(self) -> ComposeResult:
        yield Input(value=self.value, placeholder=self.placeholder, id="text")

    def on_mount(self) -> None:
        self.query_one(Input).focus()

    @on(Input.Submitted)
    def _submitted(self, event: Input.Submitted) -> None:
        event.stop()
        self.dismiss(event.value)
