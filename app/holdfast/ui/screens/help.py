"""The help screen: every key (the same list the footer and the command palette use), what the columns
and flags mean, how decisions are saved, and the caution that flags are evidence, not proof."""

from __future__ import annotations

from collections.abc import Sequence
from typing import ClassVar

from rich.table import Table
from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import VerticalScroll
from textual.screen import ModalScreen
from textual.widgets import Static

from holdfast.engine.findings import ROW_COLUMNS
from holdfast.insight.flags import FLAG_REASONS
from holdfast.ui.commands import SECTION_ORDER, KeyEntry
from holdfast.ui.textsafe import safe_text

#: Table column title -> findings column, for the column glossary (in table order).
COLUMN_TITLES: dict[str, str] = {
    "id": "id",
    "label": "label",
    "LOO pred": "loo_prediction",
    "decision": "decision",
    "score": "score",
    "flags": "flag_names",
    "flips": "flip_count",
    "margin": "margin",
    "alpha": "alpha",
    "supp": "support",
    "pred": "prediction",
}
TIPS = (
    "Rows start with the review rows (held-out rows have their own filter), most suspicious first. "
    'f then "review queue" keeps the flagged rows without a decision; space goes to the next row without a '
    "decision by score; a turns on auto-advance (after a decision the cursor moves on by itself). "
    "Click a column title to sort by it. ← and → scroll the table sideways; i hides the row detail so that "
    "every column fits; enter shows the row detail full screen and v the whole overview (escape returns). "
    "ctrl+t switches between the dark and the light look."
)
DECISION_MEANING = (
    "your decision: relabel → new label, confirm (the label is right), exclude (leave the row out of the "
    "cleaned data), defer (decide later); ✎ = the row has a note"
)


class HelpScreen(ModalScreen[None]):
    """Keys, columns, flags and cautions. Escape, q or ? closes it."""

    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("escape,q,question_mark", "close", "Close help", id="help.close"),
    ]

    def __init__(self, entries: Sequence[KeyEntry], *, caution: str, session_path: str = "") -> None:
        super().__init__(id="help")
        self.entries = list(entries)
        self.caution = caution
        self.session_path = session_path

    def compose(self) -> ComposeResult:
        with VerticalScroll(id="help-body"):
            yield Static("holdfast inspector: keys and what the screen shows", classes="help-title")
            yield Static(Text(safe_text(self.caution)), id="help-caution", classes="caution")
            yield Static(Text(TIPS), id="help-tips")
            yield Static(self._keys(), id="help-keys")
            yield Static("Columns", classes="help-heading")
            yield Static(self._columns(), id="help-columns")
            yield Static("Flags (evidence, not verdicts)", classes="help-heading")
            yield Static(self._flags(), id="help-flags")
            yield Static("Saving", classes="help-heading")
            yield Static(Text(self._saving()), id="help-saving")
            yield Static("escape, q or ? closes this help", classes="dialog-hint")

    def _keys(self) -> Table:
        table = Table.grid(padding=(0, 2))
        table.add_column(style="bold", no_wrap=True)
        table.add_column(no_wrap=True)
        table.add_column(style="dim")
        for section in SECTION_ORDER:
            rows = [e for e in self.entries if e.section == section]
            if not rows:
                continue
            table.add_row(Text(section, style="bold underline"), "", "")
            for e in rows:
                table.add_row(Text(e.keys), Text(e.description), Text(e.help))
        return table

    def _columns(self) -> Table:
        table = Table.grid(padding=(0, 2))
        table.add_column(style="bold", no_wrap=True)
        table.add_column()
        for title, key in COLUMN_TITLES.items():
            meaning = DECISION_MEANING if key == "decision" else ROW_COLUMNS.get(key, "")
            table.add_row(Text(title), Text(meaning))
        return table

    @staticmethod
    def _flags() -> Table:
        table = Table.grid(padding=(0, 2))
        table.add_column(style="bold", no_wrap=True)
        table.add_column()
        for name, reason in FLAG_REASONS.items():
            table.add_row(Text(name), Text(reason))
        return table

    def _saving(self) -> str:
        where = f" ({safe_text(self.session_path)})" if self.session_path else ""
        return (
            f"Every decision and note is written to the session file{where} before the table shows it. "
            "Undo and redo add new entries; nothing is ever deleted, so closing the app (ctrl+q) or a "
            "crash loses nothing. The cursor stays on the row you decided on; ↓ moves on."
        )

    def action_close(self) -> None:
        self.dismiss(None)
