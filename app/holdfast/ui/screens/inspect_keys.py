"""The inspect screen's keys: one table of (key, action, words), and which actions need rows.

The footer, the help screen and the command palette all read these bindings (see
:mod:`holdfast.ui.commands`), so a key is described once, here.
"""

from __future__ import annotations

from typing import ClassVar

from textual.binding import Binding, BindingType

from holdfast.ui.widgets.row_table import RowTable, movement_bindings

#: (keys, action, footer word, shown in the footer, footer group), in footer order
_KEYS: tuple[tuple[str, str, str, bool, str | None], ...] = (
    ("question_mark", "help", "Help", True, None),
    ("r", "relabel", "Relabel", True, None),
    ("c", "confirm", "Confirm", True, None),
    ("x", "exclude", "Exclude", True, None),
    ("d", "defer", "Defer", True, None),
    ("n", "note", "Note", True, None),
    ("space", "next", "Next", True, None),
    ("a", "auto_advance", "Auto-advance", False, None),
    ("backspace,delete", "clear", "Clear", False, None),
    ("u", "undo", "Undo", True, "Undo/redo"),
    ("y", "redo", "Redo", True, "Undo/redo"),
    ("b", "bulk", "Bulk", True, None),
    ("f", "filter", "Filter", True, None),
    ("s", "sort", "Sort", True, "Sort"),
    ("o", "reverse", "Reverse", True, "Sort"),
    ("g", "goto", "Go to id", False, None),
    ("i", "toggle_detail", "Detail", False, None),
    ("v", "overview", "Overview", False, None),
    ("e", "export", "Export", True, None),
    ("w", "what_if", "What-if", True, None),
    ("escape", "cancel", "Cancel", True, None),
    ("ctrl+r", "rescan", "Resume scan", True, None),
    ("enter", "restore", "Back to the rows", False, None),
)
#: What each action does (the help screen and the command palette show it).
HELP: dict[str, str] = {
    "help": "All keys, what the columns and flags mean",
    "relabel": "Give the row another label (the other class; with more classes, pick one)",
    "confirm": "The label is right",
    "exclude": "Leave the row out of the cleaned data set",
    "defer": "Decide later",
    "note": "Add or change the row's note",
    "next": "Go to the next row without a decision, by score (highest first), in this view",
    "auto_advance": "Turn on/off: after a decision, go to the next row without a decision by score",
    "clear": "Remove the row's decision (its note stays)",
    "undo": "Undo the last decision (also across sessions)",
    "redo": "Redo what undo took back",
    "bulk": "One decision for every row in the current view, after a confirmation",
    "filter": "The review queue, held-out rows, flagged, LOO misses, a class, a decision; or combine them",
    "sort": "Sort by the next column (or click a column title)",
    "reverse": "Reverse the sort order",
    "goto": "Jump to the row with a given id",
    "toggle_detail": "Hide or show the row detail (hidden: the table uses the whole width)",
    "overview": "Show the whole overview (bounds with sources, classes, margins); escape returns",
    "export": "Write the decisions, the cleaned data set or a report",
    "what_if": "Refit with the decisions applied and compare the bounds and LOO errors",
    "cancel": "Stop the running scan or what-if refit (finished refits are kept)",
    "rescan": "Start the scan again; it resumes from the refits already finished",
    "restore": "Leave the whole-screen detail or overview (escape does too)",
}
#: Binding ids that differ from ``holdfast.<action>`` (kept: users' keymaps refer to them).
_IDS = {"export": "holdfast.review.decisions"}
_DISPLAY = {"question_mark": "?"}


def screen_bindings() -> list[BindingType]:
    """The inspect screen's bindings, built from the key table."""
    groups: dict[str, Binding.Group] = {}
    out: list[BindingType] = []
    for keys, action, word, show, group in _KEYS:
        if group is not None:
            groups.setdefault(group, Binding.Group(group))
        out.append(
            Binding(
                keys,
                action,
                word,
                id=_IDS.get(action, f"holdfast.{action}"),
                show=show,
                key_display=_DISPLAY.get(keys),
                group=groups.get(group) if group else None,
                tooltip=HELP[action],
            )
        )
    return out


#: Actions that need a finished scan (hidden from the footer until there are rows).
NEEDS_ROWS = frozenset(
    {
        "relabel",
        "confirm",
        "exclude",
        "defer",
        "note",
        "clear",
        "undo",
        "redo",
        "bulk",
        "next",
        "auto_advance",
    }
    | {"filter", "sort", "reverse", "goto", "export", "what_if"}
)


class InspectTable(RowTable):
    """The row table with its movement keys kept out of the footer (the help screen lists them)."""

    BINDINGS: ClassVar[list[BindingType]] = movement_bindings(
        "row_table",
        show=False,
        choose="Enlarge detail",
        choose_help="Show the row detail full screen (escape returns)",
    )
