"""triage's own look: a dark slate ground with amber for what needs a person and teal for structure.

Every meaning also has a mark or a text style (▼ ! ⚠ ✓, bold, reverse, underline), so the screens read in a
16-colour terminal, where Textual maps these to the nearest basic colours, and with NO_COLOR.
"""

from __future__ import annotations

from textual.theme import Theme

LEDGER = Theme(
    name="triage-ledger",
    primary="#3FA7A0",  # teal: panel titles, borders, the cursor
    secondary="#6C8EA4",
    accent="#E0A33A",  # amber: what needs a person
    warning="#E0A33A",
    error="#E25C4B",
    success="#7FB069",
    foreground="#E4DFD3",
    background="#15191C",
    surface="#1C2226",
    panel="#26303A",
    dark=True,
)
