"""Words for the screens, and fitting them into a width without cutting what matters.

Durations and clock times come from :mod:`firewatch.settings.timefmt`,
temperatures, differences and rates from :class:`firewatch.settings.units.Units`
(the same words as the report). Every state reads without colour (ISA-101):
colour only repeats what the words and symbols already say.
"""

from __future__ import annotations

from rich.text import Text

__all__ = ["PRIORITY_WORDS", "STATE_WORDS", "clip", "fit_parts"]

STATE_WORDS = {
    "active-unacknowledged": "ACTIVE UNACK",
    "active-acknowledged": "active ack",
    "returned-unacknowledged": "RTN UNACK",
    "latched": "LATCHED",
    "shelved": "shelved",
    "normal": "normal",
}
PRIORITY_WORDS = {"high": "▲ HIGH", "medium": "◆ MED", "low": "● LOW"}


def clip(text: str, width: int) -> str:
    """``text`` cut to ``width`` cells with an ellipsis; used only for what may be cut (names, messages, notes).

    Examples
    --------
    >>> clip("quartz inversion", 20), clip("quartz inversion", 8), clip("abc", 0)
    ('quartz inversion', 'quartz…', '')
    """
    if width <= 0:
        return ""
    if len(text) <= width:
        return text
    return text[: width - 1].rstrip() + "…"


def fit_parts(parts: list[str | Text], width: int, sep: str = " · ", indent: int = 0) -> list[Text]:
    """Lines of at most ``width`` cells, each whole part kept on one line: a part that does not fit starts the next.

    Parts are never split, so a value stays with its unit and a verdict is
    never cut; only a part longer than a whole line is clipped.

    Examples
    --------
    >>> [t.plain for t in fit_parts(["end in 9 h 34 min", "at 00:34", "6 min 22 s ahead"], 30)]
    ['end in 9 h 34 min · at 00:34', '6 min 22 s ahead']
    """
    lines: list[Text] = []
    current: Text | None = None
    for part in parts:
        piece = part if isinstance(part, Text) else Text(part)
        if not piece.plain:
            continue
        if current is not None and current.cell_len + len(sep) + piece.cell_len <= width:
            current.append(sep)
            current.append_text(piece)
            continue
        if current is not None:
            lines.append(current)
        pad = indent if lines else 0
        if piece.cell_len > width - pad:
            piece = piece.copy()
            piece.truncate(max(width - pad, 1), overflow="ellipsis")
        current = Text(" " * pad)
        current.append_text(piece)
    if current is not None:
        lines.append(current)
    return lines
