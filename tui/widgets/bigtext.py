"""A three-row block font for verdict words, readable from a metre away.

Only the glyphs the verdict board needs; each is a tuple of three equal-width rows.
"""

from __future__ import annotations

GLYPHS: dict[str, tuple[str, str, str]] = {
    "P": ("█▀▀█", "█▀▀▀", "▀   "),
    "A": ("▄▀▀▄", "█▀▀█", "▀  ▀"),
    "S": ("█▀▀▀", "▀▀▀█", "▀▀▀▀"),
    "W": ("█   █", "█ █ █", " ▀ ▀ "),
    "R": ("█▀▀█", "█▀█▀", "▀  ▀"),
    "N": ("█▄  █", "█ ▀▄█", "▀   ▀"),
    "F": ("█▀▀▀", "█▀▀ ", "▀   "),
    "E": ("█▀▀▀", "█▀▀ ", "▀▀▀▀"),
    "O": ("█▀▀█", "█  █", "▀▀▀▀"),
    "I": ("▀█▀", " █ ", "▀▀▀"),
    "L": ("█   ", "█   ", "▀▀▀▀"),
    "/": ("  █", " █ ", "█  "),
    " ": ("  ", "  ", "  "),
    # symbols: a tick, a cross, an exclamation mark, a dash
    "✔": ("    ▄▀", "▀▄ ▄▀ ", "  ▀   "),
    "✖": ("▀▄ ▄▀", "  █  ", "▄▀ ▀▄"),
    "!": ("█", "█", "▄"),
    "-": ("    ", "▀▀▀▀", "    "),
}


def render_big(text: str, gap: int = 1) -> list[str]:
    """Three text rows spelling ``text`` in block glyphs (unknown letters as blanks)."""
    rows = ["", "", ""]
    for i, ch in enumerate(text.upper()):
        glyph = GLYPHS.get(ch, GLYPHS[" "])
        for r in range(3):
            rows[r] += (" " * gap if i else "") + glyph[r]
    return rows
