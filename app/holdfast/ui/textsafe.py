"""Show text from the data set literally in the UI: no markup, no terminal control codes.

``safe_text`` (from :mod:`holdfast.textsafe`) escapes control characters; ``literal`` wraps the result in a
``rich.text.Text``, which is never parsed as markup (values may hold ``[bold]``-style markup).
"""

from __future__ import annotations

from typing import Any

from rich.style import Style
from rich.text import Text

from holdfast.textsafe import safe_text

__all__ = ["literal", "safe_text"]


def literal(value: Any, style: Style | str = "") -> Text:
    """Return ``value`` as a ``rich.text.Text`` holding the characters of ``safe_text(value)``.

    ``Text(...)`` takes its string as it is (unlike ``Text.from_markup``), so the result can be given
    to any Textual widget (``Static``, ``Label``) without its content being read as markup.
    """
    return Text(safe_text(value), style=style, no_wrap=True, end="")
