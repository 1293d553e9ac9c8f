"""One list of the inspector's keys for the help screen and the command palette.

The footer reads the same ``BINDINGS`` through Textual; :func:`key_entries` reads them here, so the three
places always show the same actions with the same descriptions.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass
from functools import partial
from typing import TYPE_CHECKING

from textual.binding import Binding, BindingType
from textual.command import DiscoveryHit, Hit, Hits, Provider

if TYPE_CHECKING:
    from textual.app import App
    from textual.dom import DOMNode

#: Section of the help screen for each action name.
SECTIONS: dict[str, str] = {
    "relabel": "Decide",
    "confirm": "Decide",
    "exclude": "Decide",
    "defer": "Decide",
    "note": "Decide",
    "next": "Move",
    "auto_advance": "Decide",
    "clear": "Decide",
    "undo": "Decide",
    "redo": "Decide",
    "bulk": "Decide",
    "cursor_up": "Move",
    "cursor_down": "Move",
    "cursor_page_up": "Move",
    "cursor_page_down": "Move",
    "cursor_first": "Move",
    "cursor_last": "Move",
    "choose_row": "Move",
    "goto": "Move",
    "focus_next": "Move",
    "sort": "View",
    "reverse": "View",
    "filter": "View",
    "overview": "View",
    "toggle_detail": "View",
    "restore": "View",
    "export": "Session",
    "what_if": "Session",
    "cancel": "Scan",
    "rescan": "Scan",
    "help": "Help",
    "command_palette": "Help",
    "quit": "Help",
    "switch_theme": "Help",
}
SECTION_ORDER = ("Decide", "Move", "View", "Session", "Scan", "Help")


@dataclass(frozen=True)
class KeyEntry:
    """One key of the inspector: where it acts, its keys as shown, what it does."""

    section: str
    keys: str
    description: str
    help: str
    action: str
    node: DOMNode


def _bindings(node: DOMNode) -> Iterable[Binding]:
    """The bindings a node's class declares (in order; a subclass's own list replaces its parent's)."""
    declared: list[BindingType] = list(getattr(type(node), "BINDINGS", []))
    yield from Binding.make_bindings(declared)


def key_entries(app: App, nodes: Iterable[DOMNode]) -> list[KeyEntry]:
    """Entries for every binding with a description on ``nodes`` (e.g. the table, the screen, the app).

    Keys bound to the same action on several keys are joined (``backspace/delete``). The command palette
    binding of the app is included. Order: by section, then as declared.
    """
    entries: dict[tuple[int, str], KeyEntry] = {}
    for node in nodes:
        for binding in _bindings(node):
            if not binding.description or binding.system:
                continue
            action = binding.action.split(".")[-1].split("(")[0]
            key_display = app.get_key_display(binding)
            slot = (id(node), binding.action)
            if slot in entries:
                old = entries[slot]
                entries[slot] = KeyEntry(
                    old.section, f"{old.keys}/{key_display}", old.description, old.help, old.action, node
                )
                continue
            entries[slot] = KeyEntry(
                SECTIONS.get(action, "Help"),
                key_display,
                binding.description,
                binding.tooltip,
                binding.action,
                node,
            )
    palette_key = app.get_key_display(Binding(app.COMMAND_PALETTE_BINDING, "command_palette"))
    entries[(id(app), "command_palette")] = KeyEntry(
        "Help",
        palette_key,
        "Actions",
        "Find an action by name and run it",
        "command_palette",
        app,
    )
    order = {name: i for i, name in enumerate(SECTION_ORDER)}
    return sorted(entries.values(), key=lambda e: order.get(e.section, len(order)))


def enabled(entry: KeyEntry) -> bool:
    """True when the entry's action can run now (its node's ``check_action`` allows it)."""
    check = getattr(entry.node, "check_action", None)
    if check is None:
        return True
    name = entry.action.split("(")[0]
    return bool(check(name, ()))


class InspectorCommands(Provider):
    """Command palette entries: the inspector's actions, with their keys, for the screen it was opened on."""

    def _entries(self) -> list[KeyEntry]:
        screen = self.screen
        nodes_of = getattr(screen, "command_nodes", None)
        if nodes_of is None:
            return []
        return [
            e
            for e in key_entries(self.app, nodes_of())
            if e.action not in ("command_palette",) and enabled(e)
        ]

    @staticmethod
    def _run(entry: KeyEntry) -> None:
        entry.node.call_later(entry.node.run_action, entry.action)

    async def discover(self) -> Hits:
        for entry in self._entries():
            yield DiscoveryHit(
                f"{entry.description}  ({entry.keys})",
                partial(self._run, entry),
                help=entry.help or None,
            )

    async def search(self, query: str) -> Hits:
        matcher = self.matcher(query)
        for entry in self._entries():
            text = f"{entry.description}  ({entry.keys})"
            score = matcher.match(f"{entry.description} {entry.section} {entry.help}")
            if score > 0:
                yield Hit(
                    score,
                    matcher.highlight(text),
                    partial(self._run, entry),
                    text=text,
                    help=entry.help or None,
                )
