"""The decision actions of the inspector as a plain class: what a key does to the journal, and what to say.

:class:`DecisionActions` takes row positions and returns an :class:`Outcome` (positions to redraw, one
line for the status bar, where the cursor goes); it never draws. The screen asks the user (dialogs)
and shows the outcome. Every change goes through :class:`holdfast.ui.session.DecisionBook`, which
commits to the journal before it returns.
"""

from __future__ import annotations

import sqlite3
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np

from holdfast.errors import UserError
from holdfast.ui.messages import error_line
from holdfast.ui.session import DecisionBook, decision_text

#: Said wherever decisions are made or exported.
CAUTION = (
    "Flags are evidence, not proof of a wrong label. In regulated data (medical, credit, safety) "
    "label changes follow the domain's own review."
)
#: The same in one line of 80 cells (narrow terminals; the help screen has the whole text).
CAUTION_SHORT = "Flags are evidence, not proof. Regulated data: follow the domain's own review."
#: What can go wrong while writing the journal; shown as one line, the app goes on.
SAVE_ERRORS = (UserError, sqlite3.Error, OSError)


@dataclass
class Outcome:
    """What a decision action did.

    Attributes
    ----------
    changed
        Row positions whose decision text changed (redraw them).
    message
        One line for the status bar.
    error
        True when nothing was saved (the message says why).
    move_to
        Row position to put the cursor on (undo/redo go to the row they changed), or None.
    """

    changed: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.intp))
    message: str = ""
    error: bool = False
    move_to: int | None = None

    @property
    def saved(self) -> bool:
        """True when the journal took the change."""
        return not self.error


@dataclass
class BulkPlan:
    """One decision for many rows, waiting for the user's yes: the rows it reaches and the question."""

    decision: str
    new_label: str | None
    targets: np.ndarray
    question: str


def bulk_question(
    decision: str, new_label: str, count: int, skipped: int, replaced: int, held_out: int = 0
) -> str:
    """The confirmation asked before one decision is applied to many rows."""
    verb = {
        "relabel": f"Relabel {count:,} rows to {new_label}",
        "clear": f"Clear the decision of {count:,} rows",
    }.get(decision, f"{decision.capitalize()} {count:,} rows")
    lines = [f"{verb} (every row in this view)?"]
    if skipped:
        lines.append(f"{skipped:,} rows already labelled {new_label} are left as they are.")
    if replaced and decision != "clear":
        lines.append(f"{replaced:,} of them have another decision now; it will be replaced.")
    if held_out:
        lines.append(f"{held_out:,} held-out rows in this view are left out: they are not review rows.")
    lines.append("One undo (u) takes the whole change back.")
    return "\n".join(lines)


class DecisionActions:
    """Decide, note, undo, redo and bulk-decide on rows of a scan, through a :class:`DecisionBook`.

    Parameters
    ----------
    book
        The journal lined up with the rows.
    labels
        Each row's label as text (position ``p`` is ``labels[p]``).
    classes
        The classes of the data, as text, in the scan's order.
    """

    def __init__(self, book: DecisionBook, labels: np.ndarray, classes: Sequence[str]) -> None:
        self.book = book
        self.labels = labels
        self.classes = list(classes)

    def row_id(self, position: int) -> str:
        """The id of the row at ``position``."""
        return self.book.ids[position]

    def relabel_targets(self, position: int) -> list[str]:
        """Classes the row at ``position`` can be relabelled to (every class but its own)."""
        return [c for c in self.classes if c != self.labels[position]]

    def decide(
        self, positions: Sequence[int] | np.ndarray, decision: str, new_label: str | None = None
    ) -> Outcome:
        """Commit ``decision`` for ``positions`` (one action, one undo); say what was saved."""
        try:
            changed = self.book.record(positions, decision, new_label)
        except SAVE_ERRORS as exc:
            return Outcome(message=f"Not saved: {error_line(exc)}", error=True)
        if len(positions) == 1:
            p = int(positions[0])
            what = decision_text(self.book.state(p)) or "decision cleared"
            return Outcome(changed, f"Saved: {self.row_id(p)} {what}")
        return Outcome(changed, f"Saved: {decision} for {len(changed):,} rows")

    def set_note(self, position: int, text: str) -> Outcome:
        """Replace the note of one row (empty text removes it)."""
        text = text.strip()
        try:
            changed = self.book.set_note(position, text)
        except SAVE_ERRORS as exc:
            return Outcome(message=f"Note not saved: {error_line(exc)}", error=True)
        rid = self.row_id(position)
        return Outcome(changed, f"Saved note for {rid}" if text else f"Removed the note of {rid}")

    def undo(self) -> Outcome:
        """Take back the last action (it may have touched many rows)."""
        return self._undo_redo("undo")

    def redo(self) -> Outcome:
        """Redo what the last undo took back."""
        return self._undo_redo("redo")

    def _undo_redo(self, which: str) -> Outcome:
        try:
            changed, count = self.book.undo() if which == "undo" else self.book.redo()
        except SAVE_ERRORS as exc:
            return Outcome(message=f"{which.capitalize()} not saved: {error_line(exc)}", error=True)
        if count == 0:
            return Outcome(message=f"Nothing to {which}.")
        done = "Undone" if which == "undo" else "Redone"
        missing = count - len(changed)
        message = f"{done}: {count:,} row(s)" + (f" ({missing:,} not in this data)" if missing else "")
        return Outcome(changed, message, move_to=int(changed[0]) if len(changed) else None)

    def bulk_choices(self) -> list[tuple[str, str]]:
        """The decisions one bulk action can apply: ``(key, label)`` pairs for a choice dialog."""
        choices = [(d, d) for d in ("confirm", "exclude", "defer")]
        choices += [(f"relabel:{c}", f"relabel → {c}") for c in self.classes]
        choices.append(("clear", "clear the decision"))
        return choices

    def bulk_plan(self, positions: np.ndarray, key: str, review: np.ndarray | None = None) -> BulkPlan | str:
        """What the bulk choice ``key`` would do to ``positions``; a message when it would do nothing.

        ``review`` marks the review rows (per position); held-out rows are left out of bulk decisions.
        A relabel leaves out rows that already carry the new label.
        """
        decision, _, new_label = key.partition(":")
        targets = np.asarray(positions, dtype=np.intp)
        held_out = 0
        if review is not None:
            keep = review[targets]
            held_out = int(len(targets) - keep.sum())
            targets = targets[keep]
            if len(targets) == 0:
                return "Every row in this view is held out: bulk decisions reach review rows only."
        skipped = 0
        if decision == "relabel":
            keep = self.labels[targets] != new_label
            skipped = int(len(targets) - keep.sum())
            targets = targets[keep]
        if len(targets) == 0:
            if decision == "relabel":
                return f"Every row in this view is already labelled {new_label}."
            return "No rows in this view."
        kinds = self.book.kind[targets]
        replaced = int(np.count_nonzero((kinds != "") & (kinds != decision)))
        question = bulk_question(decision, new_label, len(targets), skipped, replaced, held_out)
        return BulkPlan(decision, new_label or None, targets, question)
