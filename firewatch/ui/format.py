"""Text for the screens: temperatures in the chosen unit, durations, states as words and symbols.

Every state reads without colour (ISA-101): colour only repeats what the
words and symbols already say.
"""

from __future__ import annotations

import datetime as dt
import math

from firewatch.settings.units import delta_from_celsius, from_celsius, symbol

__all__ = ["temp", "delta", "rate", "duration", "duration_units", "clock", "clock_short", "STATE_WORDS", "PRIORITY_WORDS",
           "delta_from_celsius"]

STATE_WORDS = {
    "active-unacknowledged": "ACTIVE UNACK",
    "active-acknowledged": "active ack",
    "returned-unacknowledged": "RTN UNACK",
    "latched": "LATCHED",
    "shelved": "shelved",
    "normal": "normal",
}
PRIORITY_WORDS = {"high": "▲ HIGH", "medium": "◆ MED", "low": "● LOW"}


def temp(value_c: float, unit: str, digits: int = 1) -> str:
    if value_c is None or not math.isfinite(value_c):
        return "—"
    return f"{float(from_celsius(value_c, unit)):.{digits}f}"


def delta(value_k: float, unit: str, digits: int = 1, sign: bool = True) -> str:
    if value_k is None or not math.isfinite(value_k):
        return "—"
    v = float(delta_from_celsius(value_k, unit))
    return f"{v:+.{digits}f}" if sign else f"{v:.{digits}f}"


def rate(value_c_per_h: float, unit: str) -> str:
    if value_c_per_h is None or not math.isfinite(value_c_per_h):
        return "—"
    return f"{float(delta_from_celsius(value_c_per_h, unit)):+.0f} {symbol(unit)}/h"


def duration(seconds: float | None) -> str:
    if seconds is None or not math.isfinite(seconds):
        return "—"
    sign = "-" if seconds < 0 else ""
    s = int(round(abs(seconds)))
    h, rem = divmod(s, 3600)
    m, sec = divmod(rem, 60)
    return f"{sign}{h}:{m:02d}:{sec:02d}" if h else f"{sign}{m}:{sec:02d}"


def clock(t: float | None) -> str:
    if t is None or not math.isfinite(t):
        return "—"
    return dt.datetime.fromtimestamp(t, dt.timezone.utc).strftime("%Y-%m-%d %H:%M:%SZ")


def duration_units(seconds: float | None) -> str:
    """A duration with its units, never read as a clock: ``45 s``, ``12 min 46 s``, ``2 h 49 min``."""
    if seconds is None or not math.isfinite(seconds):
        return "—"
    s = int(round(abs(seconds)))
    sign = "-" if seconds < 0 and s else ""
    h, rem = divmod(s, 3600)
    m, sec = divmod(rem, 60)
    if h:
        return f"{sign}{h} h {m} min"
    if m:
        return f"{sign}{m} min {sec} s"
    return f"{sign}{sec} s"


def clock_short(t: float | None, now: float | None = None) -> str:
    """A clock time: ``14:02:11Z``, with the date when it is not within the last day."""
    if t is None or not math.isfinite(t):
        return "—"
    full = clock(t)
    if now is not None and abs(now - t) > 20 * 3600:
        return full
    return full[11:]
