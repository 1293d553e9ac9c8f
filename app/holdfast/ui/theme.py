"""The inspector's own look: two themes (dark and light) with one palette idea.

Ink and paper with a harbour teal for what you act on, ochre for evidence that needs a look, brick red for
errors and a moss green for what is saved. The colours were picked for contrast, not decoration: body text
on the background passes 7:1 in both themes, and the warning/error/success colours are told apart by
lightness as well as hue. Textual draws its own background, so the terminal's colours do not change it.
"""

from __future__ import annotations

from textual.theme import Theme

DARK = Theme(
    name="holdfast-dark",
    primary="#4FA3A5",  # harbour teal: the cursor, the focused border, the title bar
    secondary="#7C9CB8",
    accent="#E0B04A",  # decisions
    warning="#D9A441",  # flags, cautions
    error="#E0675A",
    success="#8CBF7A",
    foreground="#E6E2D8",  # paper-white text
    background="#15191E",  # ink
    surface="#1C2228",
    panel="#26303A",
    dark=True,
    variables={
        "block-cursor-background": "#2F6F73",
        "block-cursor-foreground": "#FFFFFF",
        "block-cursor-text-style": "bold",
        "block-cursor-blurred-background": "#2A3A44",
        "block-cursor-blurred-foreground": "#E6E2D8",
        "footer-key-foreground": "#E0B04A",
        "footer-description-foreground": "#E6E2D8",
        "input-selection-background": "#2F6F73 60%",
    },
)

LIGHT = Theme(
    name="holdfast-light",
    primary="#1F6E70",
    secondary="#3F5F7A",
    accent="#8A5A00",
    warning="#8A5A00",
    error="#A3261B",
    success="#2F6B25",
    foreground="#1A1E23",
    background="#F7F4EC",  # paper
    surface="#FFFFFF",
    panel="#E6E0D2",
    dark=False,
    variables={
        "block-cursor-background": "#1F6E70",
        "block-cursor-foreground": "#FFFFFF",
        "block-cursor-text-style": "bold",
        "block-cursor-blurred-background": "#D3DEDC",
        "block-cursor-blurred-foreground": "#1A1E23",
        "footer-key-foreground": "#1F6E70",
        "footer-description-foreground": "#1A1E23",
    },
)

THEMES = (DARK, LIGHT)
