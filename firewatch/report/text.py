"""The report's time language and number formats.

Durations always carry their units (``2 h 49 min``, ``12 min 46 s``,
``45 s``): a bare ``9:27`` is read as hours by most people. Clock times are
in the site's time zone (an IANA name, Python's ``zoneinfo``), or UTC when
asked, and the zone is named once in the report's header.
"""

from __future__ import annotations

import datetime as dt
import math
import os
import zoneinfo
from dataclasses import dataclass
from pathlib import Path

from firewatch.settings.units import delta_from_celsius, from_celsius, symbol

__all__ = ["Clock", "Units", "duration", "local_zone", "unbreakable"]

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


def duration(seconds: float | None, signed: bool = False) -> str:
    """A duration with its units, to the second below an hour and to the minute above.

    Examples
    --------
    >>> [duration(s) for s in (45, 766, 10140, 3600, 0)]
    ['45 s', '12 min 46 s', '2 h 49 min', '1 h', '0 s']
    >>> duration(-190, signed=True), duration(190, signed=True)
    ('−3 min 10 s', '+3 min 10 s')
    """
    if seconds is None or not math.isfinite(seconds):
        return "—"
    sign = ("−" if seconds < 0 else "+") if signed and round(seconds) != 0 else ("−" if seconds < 0 else "")
    s = round(abs(seconds))
    if s >= 3600:
        m = round(s / 60.0)
        h, m = divmod(m, 60)
        text = f"{h} h {m} min" if m else f"{h} h"
    elif s >= 60:
        m, sec = divmod(s, 60)
        text = f"{m} min {sec} s" if sec else f"{m} min"
    else:
        text = f"{s} s"
    return sign + text


def local_zone() -> tuple[dt.tzinfo, str]:
    """This computer's time zone and its IANA name where it can be found (``TZ``, ``/etc/localtime``)."""
    candidates = []
    tz = os.environ.get("TZ", "").lstrip(":")
    if tz:
        candidates.append(tz)
    try:
        target = os.path.realpath("/etc/localtime")
        if "zoneinfo" + os.sep in target:
            candidates.append(target.split("zoneinfo" + os.sep, 1)[1])
    except OSError:
        pass
    try:
        candidates.append(Path("/etc/timezone").read_text(encoding="utf-8").strip())
    except OSError:
        pass
    for name in candidates:
        try:
            return zoneinfo.ZoneInfo(name), name
        except (ValueError, zoneinfo.ZoneInfoNotFoundError):
            continue
    here = dt.datetime.now().astimezone().tzinfo or dt.UTC
    return here, dt.datetime.now(here).tzname() or "local time"


_UTC_NAMES = {"UTC", "Etc/UTC", "Etc/UCT", "UCT", "Etc/Universal", "Universal", "Etc/Zulu", "Zulu", "Etc/GMT", "GMT"}


@dataclass(frozen=True)
class Clock:
    """Clock times in one zone, for people."""

    zone: dt.tzinfo
    name: str
    """The zone's IANA name (or ``UTC``)."""
    source: str = "site"
    """Where the zone came from: ``site`` (``[site] timezone``), ``computer`` (the site names none) or ``utc`` (asked for)."""

    @classmethod
    def for_site(cls, timezone: str, utc: bool = False) -> Clock:
        """The site's zone; UTC when ``utc``; the computer's when the site names none."""
        if utc:
            return cls(dt.UTC, "UTC", "utc")
        if timezone:
            return cls(zoneinfo.ZoneInfo(timezone), timezone)
        zone, name = local_zone()
        if name in _UTC_NAMES:
            return cls(dt.UTC, "UTC", "computer")
        return cls(zone, name, "computer")

    def local(self, t: float) -> dt.datetime:
        return dt.datetime.fromtimestamp(t, self.zone)

    def abbreviation(self, t: float) -> str:
        return self.local(t).tzname() or self.name

    def stamp(self, t: float | None, seconds: bool = True) -> str:
        """``14 Mar 06:12:03``: the clock time in tables (the zone is in the header).

        Examples
        --------
        >>> Clock.for_site("Europe/Berlin").stamp(1773464401.0)
        '14 Mar 06:00:01'
        """
        if t is None or not math.isfinite(t):
            return "—"
        return self.local(t).strftime("%d %b %H:%M:%S" if seconds else "%d %b %H:%M")

    def full(self, t: float | None) -> str:
        """``Sat 14 Mar 2026, 06:00:01 CET``: a moment on its own, with its zone.

        Examples
        --------
        >>> Clock.for_site("Europe/Berlin").full(1773464401.0)
        'Sat 14 Mar 2026, 06:00:01 CET'
        """
        if t is None or not math.isfinite(t):
            return "—"
        return self.local(t).strftime("%a %d %b %Y, %H:%M:%S ") + self.abbreviation(t)

    def describe(self, t0: float | None, t1: float | None) -> str:
        """The zone as the header names it, with the offsets in force during the firing.

        Examples
        --------
        >>> Clock.for_site("Europe/Berlin").describe(1773464401.0, 1773550800.0)
        'Europe/Berlin (CET, UTC+01:00)'
        """
        whose = " (this computer's zone: the site profile names none)" if self.source == "computer" else ""
        if self.name == "UTC":
            return "UTC" + whose
        seen: list[str] = []
        for t in (t0, t1):
            if t is None or not math.isfinite(t):
                continue
            local = self.local(t)
            off = local.utcoffset() or dt.timedelta(0)
            minutes = int(off.total_seconds() // 60)
            text = f"{local.tzname()}, UTC{'+' if minutes >= 0 else '−'}{abs(minutes) // 60:02d}:{abs(minutes) % 60:02d}"
            if text not in seen:
                seen.append(text)
        return self.name + (f" ({'; from the change: '.join(seen)})" if seen else "") + whose


@dataclass(frozen=True)
class Units:
    """Temperatures, differences and rates in °C, °F or K (differences in °F are labelled as such)."""

    unit: str = "C"

    @property
    def symbol(self) -> str:
        return symbol(self.unit)

    @property
    def delta_symbol(self) -> str:
        return "°F" if self.unit == "F" else "K"

    def temperature(self, c: float | None, digits: int = 1) -> str:
        """
        Examples
        --------
        >>> Units("C").temperature(1220.0), Units("F").temperature(1220.0, 0)
        ('1220.0 °C', '2228 °F')
        """
        if c is None or not math.isfinite(c):
            return "—"
        return f"{float(from_celsius(c, self.unit)):.{digits}f} {self.symbol}"

    def delta(self, k: float | None, digits: int = 1, signed: bool = True) -> str:
        """
        Examples
        --------
        >>> Units("C").delta(-3.16), Units("F").delta(10.0, 0, signed=False)
        ('−3.2 K', '18 °F')
        """
        if k is None or not math.isfinite(k):
            return "—"
        v = float(delta_from_celsius(k, self.unit))
        text = f"{v:+.{digits}f}" if signed else f"{abs(v):.{digits}f}"
        return text.replace("-", "−") + " " + self.delta_symbol

    def rate(self, c_per_h: float | None, digits: int = 0) -> str:
        if c_per_h is None or not math.isfinite(c_per_h):
            return "—"
        return f"{float(delta_from_celsius(c_per_h, self.unit)):.{digits}f} {self.symbol}/h".replace("-", "−")
