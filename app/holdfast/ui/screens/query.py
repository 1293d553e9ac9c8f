"""The dialog that combines filters into one query: which rows, flagged/support/LOO miss, no decision yet,
a class, a decision, a score cut. It shows how many rows match as the user changes it."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import replace
from typing import ClassVar

from textual import on
from textual.app import ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import Horizontal, Vertical
from textual.screen import ModalScreen
from textual.widgets import Checkbox, Input, RadioButton, RadioSet, Select, Static

from holdfast.ui.navigation import KINDS, SCOPES, Query
from holdfast.ui.session import USER_DECISIONS
from holdfast.ui.textsafe import safe_text

_ANY = "(any)"


class QueryDialog(ModalScreen[Query | None]):
    """Edit a :class:`Query`; enter applies, escape cancels.

    Parameters
    ----------
    query
        Where the dialog starts.
    classes
        The classes of the data (for the class choice).
    count
        Rows a query shows (called as the user changes it).
    has_held_out
        Whether the data has held-out rows (else the "which rows" choice is left out).
    """

    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("escape", "cancel", "Cancel", id="dialog.cancel"),
        Binding("enter", "apply", "Apply", id="query.apply", priority=True),
    ]

    def __init__(
        self, query: Query, classes: list[str], count: Callable[[Query], int], *, has_held_out: bool
    ) -> None:
        super().__init__(id="query-dialog-screen", classes="dialog-screen")
        self.start = query
        self.class_names = classes
        self.count = count
        self.has_held_out = has_held_out

    def compose(self) -> ComposeResult:
        q = self.start
        with Vertical(classes="dialog", id="query-dialog"):
            yield Static("Show the rows that meet all of these:", classes="dialog-title")
            if self.has_held_out:
                with RadioSet(id="query-scope", classes="query-row"):
                    for key, title in SCOPES.items():
                        yield RadioButton(title, value=q.scope == key, id=f"scope-{key}")
            with RadioSet(id="query-kind", classes="query-row"):
                for key, title in KINDS.items():
                    if key != "held_out_miss" or self.has_held_out:
                        yield RadioButton(title or "any row", value=q.kind == key, id=f"kind-{key}")
            yield Checkbox("no decision yet", q.undecided, id="query-undecided")
            with Horizontal(classes="query-fields"):
                yield Select(
                    [(safe_text(c), c) for c in self.class_names],
                    prompt="class: any",
                    value=q.label if q.label is not None else Select.NULL,
                    id="query-label",
                )
                yield Select(
                    [(d, d) for d in USER_DECISIONS],
                    prompt="decision: any",
                    value=q.decision if q.decision is not None else Select.NULL,
                    id="query-decision",
                )
                yield Input(
                    value="" if q.min_score is None else f"{q.min_score:g}",
                    placeholder="score ≥ (empty: any)",
                    type="number",
                    id="query-score",
                )
            yield Static(id="query-count", classes="dialog-hint")

    def on_mount(self) -> None:
        self.query_one("#query-kind", RadioSet).focus()
        self._show_count()

    def _current(self) -> Query:
        q = Query(scope="review" if self.has_held_out else "all")
        if self.has_held_out:
            pressed = self.query_one("#query-scope", RadioSet).pressed_button
            q = replace(
                q, scope=(pressed.id or "scope-review").removeprefix("scope-") if pressed else "review"
            )
        pressed = self.query_one("#query-kind", RadioSet).pressed_button
        kind = (pressed.id or "kind-any").removeprefix("kind-") if pressed else "any"
        label = self.query_one("#query-label", Select).value
        decision = self.query_one("#query-decision", Select).value
        text = self.query_one("#query-score", Input).value.strip()
        try:
            cut = float(text) if text else None
        except ValueError:
            cut = None
        return replace(
            q,
            kind=kind,
            undecided=self.query_one("#query-undecided", Checkbox).value,
            label=None if label is Select.NULL else str(label),
            decision=None if decision is Select.NULL else str(decision),
            min_score=cut,
        )

    def _show_count(self) -> None:
        n = self.count(self._current())
        self.query_one("#query-count", Static).update(
            f"{n:,} rows match · tab moves · space ticks · enter applies · escape cancels"
        )

    @on(RadioSet.Changed)
    @on(Checkbox.Changed)
    @on(Select.Changed)
    @on(Input.Changed)
    def _changed(self, event: object) -> None:
        self._show_count()

    @on(Input.Submitted)
    def _submitted(self, event: Input.Submitted) -> None:
        event.stop()
        self.action_apply()

    def check_action(self, action: str, parameters: tuple[object, ...]) -> bool | None:
        """Enter applies wherever the focus is, except in an open class/decision list (it picks there)."""
        if action == "apply":
            return not any(select.expanded for select in self.query(Select))
        return True

    def action_apply(self) -> None:
        self.dismiss(self._current())

    def action_cancel(self) -> None:
        self.dismiss(None)
