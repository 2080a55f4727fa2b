"""The one time language (issue 14 item 1): durations with units, clock times in the site's zone, the trend's axis.

Zone offsets are the IANA tz database's (Python's zoneinfo): Europe/London is GMT (UTC+00:00) in winter and BST
(UTC+01:00) from 01:00 UTC on the last Sunday of March (29 Mar 2026), the EU summer-time rule (Directive
2000/84/EC) that the United Kingdom also follows. Other expected values are arithmetic on those, or the formats
issue 14 asks for.
"""

from __future__ import annotations

import datetime as dt
import re

import pytest

from firewatch.settings.timefmt import Clock, duration, time_axis
from firewatch.settings.units import Units

T0 = dt.datetime(2026, 3, 14, 5, 0, 1, tzinfo=dt.UTC).timestamp()  # the demo firing's start, a Saturday


def test_the_forms_the_issue_asks_for() -> None:
    """Issue 14: '2 h 49 min', '12 min 46 s', '45 s'; never '9:27'."""
    assert [duration(s) for s in (10140, 766, 45)] == ["2 h 49 min", "12 min 46 s", "45 s"]
    for seconds in (0, 1, 59, 60, 61, 599, 3599, 3600, 3661, 86399, 259200):
        assert re.fullmatch(r"−?\d+ (h|min|s)( \d+ (min|s))?", duration(seconds)), seconds
        assert ":" not in duration(seconds)


def test_clock_times_in_the_sites_zone_with_the_zone_named_once() -> None:
    london = Clock.for_site("Europe/London")
    summer = dt.datetime(2026, 3, 29, 1, 30, tzinfo=dt.UTC).timestamp()  # 30 min after the change to BST
    assert london.header(T0) == "14 Mar 05:00:01 GMT"
    assert london.header(summer) == "29 Mar 02:30:00 BST"  # UTC+01:00 after the change
    assert london.time(summer) == "02:30:00" and london.time(summer, seconds=False) == "02:30"
    # the header names the zone; lists give the time alone on the same local day, the date too on another
    assert london.when(T0 + 3600, T0) == "06:00:01"
    assert london.when(T0 + 20 * 3600, T0) == "15 Mar 01:00:01"
    assert london.when(T0 - 6 * 3600, T0) == "13 Mar 23:00:01"
    assert Clock.for_site("Europe/London", utc=True).header(summer) == "29 Mar 01:30:00 UTC"
    assert london.when(None, T0) == "—" and london.header(float("nan")) == "— Europe/London"


def test_the_computers_zone_when_the_site_names_none(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("TZ", "Asia/Kolkata")  # IST, UTC+05:30 all year (IANA tz database)
    clock = Clock.for_site("")
    assert clock.source == "computer" and clock.header(T0) == "14 Mar 10:30:01 IST"
    monkeypatch.setenv("TZ", "Etc/UTC")
    assert Clock.for_site("").name == "UTC"


def test_time_axis_in_clock_time_up_to_twelve_hours() -> None:
    london = Clock.for_site("Europe/London")
    axis = time_axis(T0 + 7 * 60, T0 + 100 * 60, T0, london, max_ticks=8)
    assert axis.meaning == "clock, GMT"
    assert axis.labels == ["05:15", "05:30", "05:45", "06:00", "06:15", "06:30"]  # round quarter hours, local time
    # on round local times where the zone is not a whole hour from UTC (IST, UTC+05:30)
    kolkata = Clock.for_site("Asia/Kolkata")
    axis = time_axis(T0, T0 + 12 * 3600, T0, kolkata, max_ticks=8)
    assert axis.labels[:3] == ["12:00", "14:00", "16:00"] and axis.meaning == "clock, IST"
    assert all(t0 < t1 for t0, t1 in zip(axis.ticks, axis.ticks[1:]))


def test_time_axis_since_the_start_beyond_twelve_hours() -> None:
    """A whole firing: h:mm since the start (the schedule's own time), never decimal hours (issue 14)."""
    utc = Clock.for_site("UTC")
    axis = time_axis(T0, T0 + 72 * 3600, T0, utc, max_ticks=8)
    assert axis.meaning == "h:mm since start"
    assert axis.labels == ["0:00", "12:00", "24:00", "36:00", "48:00", "60:00", "72:00"]
    axis = time_axis(T0 + 5400, T0 + 14 * 3600, T0, utc, max_ticks=8)
    assert axis.labels == ["2:00", "4:00", "6:00", "8:00", "10:00", "12:00", "14:00"]
    assert not any(re.fullmatch(r"\d+\.\d+", label) for label in axis.labels)
    assert time_axis(T0, T0, T0, utc).ticks == []


@pytest.mark.parametrize(("span_h", "most"), [(0.25, 4), (3, 8), (13, 8), (72, 5)])
def test_time_axis_keeps_to_the_room_it_has(span_h: float, most: int) -> None:
    axis = time_axis(T0, T0 + span_h * 3600, T0, Clock.for_site("UTC"), max_ticks=most)
    assert 2 <= len(axis.ticks) <= most
    assert all(T0 <= t <= T0 + span_h * 3600 for t in axis.ticks)


def test_fahrenheit_differences_are_labelled_and_logged_figures_restated() -> None:
    # degF = degC x 9/5 + 32, differences x 9/5 (the Fahrenheit scale's definition; arithmetic)
    f = Units("F")
    assert f.delta(-11.5) == "−20.7 °F" and f.rate(150.0, signed=True) == "+270 °F/h" and f.temperature(1220.0, 0) == "2228 °F"
    assert Units("C").delta(-11.5) == "−11.5 K"
    # the alarm engine's own wording, as logged (firewatch/firing/alarms)
    assert f.restate("py1 -11.5 K from tc2 (allowed ±5.9 K)") == "py1 −20.7 °F from tc2 (allowed ±10.6 °F)"
    assert f.restate("segment 'to peak': +12 K off the plan") == "segment 'to peak': +22 °F off the plan"
    assert f.restate("above 1250 °C (tc1)") == "above 2282 °F (tc1)"
    assert f.restate("faster than 120 °C/h through quartz inversion (550-600 °C)") == \
        "faster than 216 °F/h through quartz inversion (1022-1112 °F)"
    assert f.restate("tc2 departs from tc1 at +6.5 K/h") == "tc2 departs from tc1 at +11.7 °F/h"
    assert f.restate("type K thermocouple, 3 Kiln") == "type K thermocouple, 3 Kiln"  # no figure, nothing to change
