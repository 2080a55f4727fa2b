"""Where the report's lines may break: a number stays with its unit, a date with its time.

The words themselves (durations with units, clock times in the site's zone,
temperatures, differences and rates) come from the shared time language,
:mod:`firewatch.settings.timefmt`, and :class:`firewatch.settings.units.Units`.
"""

from __future__ import annotations

__all__ = ["unbreakable"]

_MONTHS = {"Jan", "Feb", "Mar", "Apr", "May", "Jun", "Jul", "Aug", "Sep", "Oct", "Nov", "Dec"}
_UNITS = {"h", "min", "s", "K", "°C", "°F", "°C/h", "°F/h", "K/h"} | _MONTHS


def _glued(prev: str, word: str) -> bool:
    """Whether ``word`` must stay on the same line as the word before it."""
    if not prev or not word:
        return False
    if prev[-1].isdigit() and word.rstrip(",;:.)") in _UNITS:
        return True  # 760 °C, 2 h, 14 Mar
    return word[0].isdigit() and (prev in _MONTHS or prev in ("h", "min"))  # Mar 08:04:39, 1 h 27 min


def unbreakable(text: str) -> list[str]:
    """``text`` cut into the pieces a line may break between: a number stays with its unit, a date with its time.

    Examples
    --------
    >>> unbreakable("outside 1 h 27 min of 2 h, largest −30.3 K at 14 Mar 08:04:39; ok")
    ['outside', '1 h 27 min', 'of', '2 h,', 'largest', '−30.3 K', 'at', '14 Mar 08:04:39;', 'ok']
    """
    pieces: list[str] = []
    for word in text.split(" "):
        if pieces and _glued(pieces[-1].rsplit(" ", 1)[-1], word):
            pieces[-1] += " " + word
        else:
            pieces.append(word)
    return pieces
