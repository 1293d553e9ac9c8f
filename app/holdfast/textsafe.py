"""Show text from the data set literally in a terminal: no terminal control codes.

Values from a user's data set (ids, labels, notes, column names) may contain raw terminal control codes
such as ANSI escape sequences, or line breaks. Every face (the CLI's stdout and stderr, the inspector) shows
them as the characters they are and never sends a control code to the terminal: ``safe_text`` replaces every
control character with a visible backslash escape, so the result is also always one line.

CSV files written for the user are opened in spreadsheets, which run a cell that starts with ``=``, ``+``,
``-`` or ``@`` as a formula: :func:`csv_cell` neutralises such cells (:func:`csv_cell_back` reverses it).
"""

from __future__ import annotations

import re
from typing import Any

_NAMED = {0x09: "\\t", 0x0A: "\\n", 0x0D: "\\r"}


def _escape_table() -> dict[int, str]:
    """Code point -> visible escape for C0/C1 controls, DEL, line separators and bidi controls.

    C0 (U+0000-U+001F), DEL (U+007F) and C1 (U+0080-U+009F) are the control sets of ECMA-48 (5th ed.,
    1991), the standard that defines the terminal escape sequences. The bidirectional formatting
    characters (U+061C, U+200E-U+200F, U+202A-U+202E, U+2066-U+2069) are listed in Unicode Standard
    Annex #9; they can reorder how a line is displayed, so they are escaped too, as are U+2028/U+2029
    (line and paragraph separators), which can break a line.
    """
    table: dict[int, str] = {}
    for cp in (*range(0x00, 0x20), 0x7F, *range(0x80, 0xA0)):
        table[cp] = _NAMED.get(cp, f"\\x{cp:02x}")
    for cp in (0x061C, 0x200E, 0x200F, 0x2028, 0x2029, *range(0x202A, 0x202F), *range(0x2066, 0x206A)):
        table[cp] = f"\\u{cp:04x}"
    return table


_ESCAPES = _escape_table()


def safe_text(value: Any) -> str:
    """Return ``value`` as a one-line string that is safe to draw literally in a terminal.

    Parameters
    ----------
    value
        Any value; ``None`` gives ``""``, anything else goes through ``str``.

    Returns
    -------
    str
        The text with every control character replaced by a visible escape: ``"\\x1b"`` becomes the
        four characters ``\\x1b``, a newline becomes ``\\n``, a tab ``\\t``. Markup such as ``[b]`` is
        left as it is: it only becomes markup if someone parses it, and the UI never does.
    """
    if value is None:
        return ""
    text = value if isinstance(value, str) else str(value)
    if text.isprintable():
        return text
    return text.translate(_ESCAPES)


#: Longest piece of data text (a name, an id) quoted whole in a message.
CLIP = 200


def clip(value: Any, limit: int = CLIP) -> str:
    """``value`` as text, cut in the middle when longer than ``limit`` characters.

    A message quoting a 100,000-character column name stays short: ``"abc...(99,900 characters)...xyz"``.
    """
    text = "" if value is None else (value if isinstance(value, str) else str(value))
    if len(text) <= limit:
        return text
    keep = max(8, limit // 2 - 20)
    return f"{text[:keep]}...({len(text) - 2 * keep:,} characters)...{text[-keep:]}"


#: First characters that make a spreadsheet treat a cell as a formula (OWASP, "CSV Injection": =, +, -, @,
#: tab and carriage return), plus the apostrophe itself so that escaping can be reversed exactly.
FORMULA_START = frozenset("=+-@\t\r'")
_PLAIN_NUMBER = re.compile(r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?")


def csv_cell(text: str) -> str:
    """A text cell made safe for a CSV file that a spreadsheet may open.

    A cell starting with ``=``, ``+``, ``-``, ``@``, tab or carriage return gets a leading apostrophe,
    which spreadsheets take as "this is text" (the guard recommended by OWASP, "CSV Injection"; common
    practice). A plain number such as ``-1.5`` is no formula and stays as it is. A cell that starts with
    an apostrophe gets a second one, so :func:`csv_cell_back` restores it exactly. Control characters
    (terminal escapes, carriage returns, bidi controls) are then written as visible escapes
    (:func:`safe_text`); line feeds and tabs inside a note are kept, in a quoted cell (RFC 4180).
    """
    if text and text[0] in FORMULA_START and not _PLAIN_NUMBER.fullmatch(text):
        text = "'" + text
    if text.isprintable():
        return text
    return "\n".join("\t".join(safe_text(part) for part in line.split("\t")) for line in text.split("\n"))


def csv_cell_back(text: str) -> str:
    """Undo the apostrophe of :func:`csv_cell` (control-character escapes stay as written)."""
    return text[1:] if text.startswith("'") else text
