"""The time language people read, on every screen and in every report.

Durations always carry their units (``2 h 49 min``, ``12 min 46 s``,
``45 s``): a bare ``9:27`` is read as hours by most people. Clock times are
in the site's time zone (``[site] timezone``, an IANA name, Python's
``zoneinfo``), the computer's when the site names none, or UTC when asked
(``--utc``); the zone is named once (a screen's header, a report's header),
and every other clock time on the same screen or page is in that zone. The
firing log itself keeps UTC seconds.

The report (:mod:`firewatch.report`), the dashboard and the plant overview
(:mod:`firewatch.ui`) and the commands that print times (``inspect``,
``replay --headless``) all format times here, so they say the same thing the
same way.
"""

from __future__ import annotations

import datetime as dt
import math
import os
import zoneinfo
from dataclasses import dataclass
from pathlib import Path

__all__ = ["UTC_NAMES", "Clock", "TimeAxis", "duration", "local_zone", "time_axis"]

UTC_NAMES = frozenset({"UTC", "Etc/UTC", "Etc/UCT", "UCT", "Etc/Universal", "Universal", "Etc/Zulu", "Zulu", "Etc/GMT",
                       "GMT"})
"""Zone names that are UTC itself: shown as ``UTC``."""


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
        if name in UTC_NAMES:
            return cls(dt.UTC, "UTC", "computer")
        return cls(zone, name, "computer")

    def local(self, t: float) -> dt.datetime:
        return dt.datetime.fromtimestamp(t, self.zone)

    def abbreviation(self, t: float) -> str:
        """The zone's short name in force at ``t`` (``CET``, ``CEST``, ``UTC``)."""
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

    def time(self, t: float | None, seconds: bool = True) -> str:
        """``06:00:01``: the time of day, where the day is plain (the zone is in the header).

        Examples
        --------
        >>> Clock.for_site("Europe/Berlin").time(1773464401.0), Clock.for_site("UTC").time(1773464401.0, seconds=False)
        ('06:00:01', '05:00')
        """
        if t is None or not math.isfinite(t):
            return "—"
        return self.local(t).strftime("%H:%M:%S" if seconds else "%H:%M")

    def when(self, t: float | None, ref: float | None, seconds: bool = True) -> str:
        """The time of day when ``t`` falls on the same local day as ``ref``, else with its date too.

        Lists on a screen (alarms, events) use it with ``ref`` the moment the
        header shows, so a time from another day never passes for today's.

        Examples
        --------
        >>> c = Clock.for_site("UTC")
        >>> c.when(1773464401.0, 1773464401.0 + 3600), c.when(1773464401.0, 1773464401.0 + 86400)
        ('05:00:01', '14 Mar 05:00:01')
        """
        if t is None or not math.isfinite(t):
            return "—"
        if ref is None or not math.isfinite(ref) or self.local(t).date() != self.local(ref).date():
            return self.stamp(t, seconds)
        return self.time(t, seconds)

    def header(self, t: float | None, date: bool = True) -> str:
        """``14 Mar 06:00:01 CET``: a screen header's clock, the one place its zone is named.

        Examples
        --------
        >>> Clock.for_site("Europe/Berlin").header(1773464401.0), Clock.for_site("x", utc=True).header(1773464401.0, False)
        ('14 Mar 06:00:01 CET', '05:00:01 UTC')
        """
        if t is None or not math.isfinite(t):
            return f"— {self.name}"
        return f"{self.stamp(t) if date else self.time(t)} {self.abbreviation(t)}"

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


# -- a time axis ------------------------------------------------------------------------------
CLOCK_AXIS_MAX_S = 12 * 3600.0
"""A trend spanning at most this long is labelled in clock time; a longer one in time since the start."""
_CLOCK_STEPS_S = (60, 120, 300, 600, 900, 1800, 3600, 7200, 10800, 21600)
_ELAPSED_STEPS_S = (1800, 3600, 7200, 10800, 21600, 43200, 86400, 172800)


@dataclass(frozen=True)
class TimeAxis:
    """Ticks for a time axis: positions (UTC seconds), their labels, and what the labels mean."""

    ticks: list[float]
    labels: list[str]
    meaning: str
    """How the labels read, for the axis's legend: ``clock, CET`` or ``h:mm since start``."""


def time_axis(t0: float, t1: float, origin: float, clock: Clock, max_ticks: int = 8) -> TimeAxis:
    """Ticks between ``t0`` and ``t1`` labelled in clock time or in ``h:mm`` since ``origin``, chosen by the span.

    A span of up to 12 hours (a zoomed trend: "what happened at 14:20?") is
    labelled in the clock, ticks on round local times; a longer one (a whole
    firing, which the schedule plans in elapsed time, and which crosses
    midnight so that clock labels would repeat) in hours and minutes since
    the firing began, labelled as such.

    Examples
    --------
    >>> c = Clock.for_site("UTC")
    >>> a = time_axis(1773464401.0, 1773464401.0 + 3 * 3600, 1773464401.0, c)
    >>> a.labels, a.meaning
    (['05:30', '06:00', '06:30', '07:00', '07:30', '08:00'], 'clock, UTC')
    >>> a = time_axis(1773464401.0, 1773464401.0 + 24 * 3600, 1773464401.0, c)
    >>> a.labels, a.meaning
    (['0:00', '6:00', '12:00', '18:00', '24:00'], 'h:mm since start')
    """
    span = t1 - t0
    if not (math.isfinite(span) and span > 0):
        return TimeAxis([], [], "")
    max_ticks = max(int(max_ticks), 2)
    if span <= CLOCK_AXIS_MAX_S:
        step = next((s for s in _CLOCK_STEPS_S if span / s + 1 <= max_ticks), _CLOCK_STEPS_S[-1])
        offset = (clock.local(t0).utcoffset() or dt.timedelta(0)).total_seconds()
        first = math.ceil((t0 + offset) / step) * step - offset  # on a round local time
        ticks = _range(first, t1, step)
        labels = [clock.time(t, seconds=False) for t in ticks]
        return TimeAxis(ticks, labels, f"clock, {clock.abbreviation(t0)}")
    step = next((s for s in _ELAPSED_STEPS_S if span / s + 1 <= max_ticks), _ELAPSED_STEPS_S[-1])
    first = origin + math.ceil((t0 - origin) / step) * step
    ticks = _range(first, t1, step)
    labels = []
    for t in ticks:
        minutes = round((t - origin) / 60.0)
        labels.append(f"{'−' if minutes < 0 else ''}{abs(minutes) // 60}:{abs(minutes) % 60:02d}")
    return TimeAxis(ticks, labels, "h:mm since start")


def _range(first: float, last: float, step: float) -> list[float]:
    n = math.floor((last - first) / step + 1e-9) + 1
    return [first + i * step for i in range(max(n, 0))]
