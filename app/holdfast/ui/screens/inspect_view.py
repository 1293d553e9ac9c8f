"""The inspect screen's view actions: which rows (filters, the queue), in what order, where the cursor
goes (next undecided, go to id), and what fills the screen (detail, overview); focus comes back to the
table after each.

:class:`ViewActions` is a part of :class:`holdfast.ui.screens.inspect.InspectScreen` (a mixin): it works
on the screen's table and :class:`holdfast.ui.navigation.RowFilters` and changes when navigation does.
"""

from __future__ import annotations

from typing import Any

from holdfast.ui.commands import key_entries
from holdfast.ui.decisions import CAUTION
from holdfast.ui.navigation import Query, RowFilters, next_sort
from holdfast.ui.screens.dialogs import ChoiceDialog, TextDialog
from holdfast.ui.screens.query import QueryDialog
from holdfast.ui.widgets.overview import OverviewPanel
from holdfast.ui.widgets.row_detail import RowDetailPanel


class ViewActions:
    """Filter, sort, next, go to, detail and overview; mixed into the inspect screen.

    The screen provides ``table``, ``filters``, ``book``, ``view_query``, ``auto_advance``, ``context``,
    ``maximized`` and the helpers ``_set_message``, ``_update_status``, ``_schedule_detail``,
    ``_update_detail_now`` and ``command_nodes``.
    """

    filters: RowFilters | None
    book: Any
    view_query: Query
    auto_advance: bool
    context: Any

    def _toggle_maximized(self, widget: Any) -> None:
        if self.maximized is widget:
            self.minimize()
        else:
            self.maximize(widget, container=False)

    # ------------------------------------------------------------------ actions: view
    def _apply_filter(self, key: str) -> None:
        """Show the rows of the preset ``key`` (see ``RowFilters.presets``)."""
        assert self.filters is not None
        self._apply_query(self.filters.presets()[key])

    def _apply_query(self, query: Query) -> None:
        assert self.filters is not None
        self.view_query = query
        self.table.set_filter(self.filters.mask(query))
        self._update_status()
        self._schedule_detail()

    def action_filter(self) -> None:
        assert self.filters is not None
        filters = self.filters

        def combined(query: Query | None) -> None:
            if query is not None:
                self._apply_query(query)

        def chosen(key: str | None) -> None:
            if key == "custom":
                dialog = QueryDialog(
                    self.view_query, filters.classes, filters.count, has_held_out=filters.has_held_out
                )
                self.app.push_screen(dialog, combined)
            elif key is not None:
                self._apply_filter(key)

        dialog = ChoiceDialog("Show:", filters.choices(), highlighted=self.filter_key, id="filter-dialog")
        self.app.push_screen(dialog, chosen)

    def action_next(self) -> None:
        """Move to the next row without a decision, by score (highest first), in this view."""
        assert self.filters is not None and self.book is not None
        wanted = (self.book.kind == "") & self.filters.review
        index = self.table.model.next_by("score", True, wanted)
        if index is None:
            self._set_message("No row without a decision is left in this view.")
            return
        self.table.move_cursor(index)

    def action_auto_advance(self) -> None:
        self.auto_advance = not self.auto_advance
        self._set_message(
            "Auto-advance on: after a decision the cursor goes to the next undecided row by score."
            if self.auto_advance
            else "Auto-advance off: the cursor stays on the row you decided on."
        )
        self._update_status()

    def action_sort(self) -> None:
        key, descending = next_sort(self.table.columns, self.table.sort_key)
        self.table.sort_by(key, descending=descending)

    def action_reverse(self) -> None:
        key = self.table.sort_key
        if key is None:
            self._set_message("Rows are in file order; press s to sort first.")
            return
        self.table.sort_by(key, descending=not self.table.sort_descending)

    def action_goto(self) -> None:
        def chosen(text: str | None) -> None:
            if not text or self.book is None:
                return
            row_id = text.strip()
            if self.table.jump_to_id(row_id):
                return
            if row_id in self.book.position:
                self._apply_query(Query(scope="all"))
                self.table.jump_to_id(row_id)
                self._set_message(f"Showing all rows: {row_id} was hidden by the filter.")
            else:
                self._set_message(f"No row with id {row_id}.", error=True)

        dialog = TextDialog("Go to the row with id:", hint="enter jumps · escape cancels", id="goto-dialog")
        self.app.push_screen(dialog, chosen)

    def action_toggle_detail(self) -> None:
        panel = self.query_one(RowDetailPanel)
        if self.maximized is panel:
            self.minimize()
        panel.display = not panel.display
        if panel.display:
            self._update_detail_now()
        self.focus_table()

    def action_overview(self) -> None:
        self._toggle_maximized(self.query_one(OverviewPanel))

    def watch_maximized(self, maximized: Any) -> None:
        """The whole-screen overview shows each bound's full source; the compact one a short citation.

        Back from a whole-screen view, the keys go to the table again (up/down move the highlighted row).
        """
        self.query_one(OverviewPanel).set_full(maximized is self.query_one(OverviewPanel))
        if maximized is None:
            self.focus_table()

    def focus_table(self) -> None:
        """Give the keys back to the row table, whose highlighted row every decision key acts on."""
        if self.maximized is None and self.is_attached:
            self.table.focus(scroll_visible=False)

    def on_screen_resume(self) -> None:
        """A dialog or another screen closed: the keys go back to the table."""
        self.focus_table()

    def action_restore(self) -> None:
        """Leave the whole-screen detail or overview."""
        self.minimize()

    def action_help(self) -> None:
        from holdfast.ui.screens.help import HelpScreen

        entries = key_entries(self.app, self.command_nodes())
        self.app.push_screen(
            HelpScreen(entries, caution=CAUTION, session_path=str(self.context.session.path))
        )
