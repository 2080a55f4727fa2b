"""The firing record's pieces on synthetic arrays, and the report's time language (issue 14, item 4).

Expected values are worked out by hand from the synthetic series (arithmetic,
no source) unless a source is named beside them.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import math
import struct

import numpy as np
import pytest

from firewatch.firing.alarms import AlarmEngine
from firewatch.firing.record import (
    FiringInputs,
    _parse_step,
    _split_note,
    build_record,
    envelope,
    passages,
    readings_digest,
    time_above,
)
from firewatch.settings.profile import load_site
from firewatch.settings.schedule import CriticalRange, Schedule, Segment
from firewatch.settings.timefmt import Clock, duration
from firewatch.settings.units import Units

QUARTZ = CriticalRange("quartz inversion", 550.0, 600.0, 120.0, "both")


# -- time above ----------------------------------------------------------------------------
def test_time_above_interpolates_crossings_and_skips_gaps() -> None:
    t = np.array([0.0, 1.0, 2.0, 3.0, 4.0, 20.0, 21.0])
    v = np.array([0.0, 10.0, 10.0, 0.0, 10.0, 10.0, 10.0])
    # above 5: 0.5 s rising (0->10 over 1 s), 1 s flat, 0.5 s falling, 0.5 s rising; 4 -> 20 is a gap
    # (16 s > 5 s) and counts as unknown; 20 -> 21 counts 1 s. 0.5 + 1 + 0.5 + 0.5 + 1 = 3.5 s (arithmetic)
    assert time_above(t, v, 5.0) == pytest.approx(3.5)
    assert time_above(t, np.where(t == 2.0, np.nan, v), 5.0) == pytest.approx(3.5 - 1.0 - 0.5)  # both intervals touching 2 s unknown


# -- passages through a critical range -------------------------------------------------------
def test_heating_and_cooling_passages_with_their_rates() -> None:
    t = np.arange(0.0, 7201.0)
    up = 500.0 + 100.0 * t[:3601] / 3600.0  # 500 -> 600 degC in an hour: 100 degC/h
    down = 600.0 - 200.0 * (t[3601:] - 3600.0) / 3600.0  # 200 degC/h down
    v = np.concatenate([up, down])
    found = passages(t, v, QUARTZ, rate_window_s=300.0)
    assert [p.direction for p in found] == ["heating", "cooling"]
    heat, cool = found
    # 550 -> 600 at 100 degC/h takes 1800 s, from t = 1800 s (arithmetic)
    assert heat.enter_t == pytest.approx(1800.0) and heat.leave_t == pytest.approx(3600.0)
    assert heat.mean_rate_c_per_h == pytest.approx(100.0) and heat.fastest_c_per_h == pytest.approx(100.0, rel=1e-6)
    assert heat.within and not heat.gap
    # 600 -> 550 at 200 degC/h takes 900 s: over the 120 degC/h limit
    assert cool.mean_rate_c_per_h == pytest.approx(200.0) and not cool.within
    assert [p.direction for p in passages(t, v, CriticalRange("q", 550.0, 600.0, 120.0, "heating"))] == ["heating"]


def test_chatter_at_the_edge_counts_from_the_last_entry_and_a_gap_is_flagged() -> None:
    t = np.arange(0.0, 40.0)
    v = np.array([540, 551, 549, 552, 548, 551, 560, 570, 580, 590, 601] + [605] * 29, dtype=float)
    (p,) = passages(t, v, QUARTZ, rate_window_s=5.0)
    # the last upward crossing of 550 is between t = 4 (548) and 5 (551): 548 + 2/3 x 3 = 550 at t = 4 2/3
    assert p.enter_t == pytest.approx(4.0 + 2.0 / 3.0)
    # leaves at 600, between t = 9 (590) and 10 (601): t = 9 + 10/11
    assert p.leave_t == pytest.approx(9.0 + 10.0 / 11.0)
    gappy = np.delete(np.arange(0.0, 40.0), [7, 8])  # two readings lost inside the passage
    (q,) = passages(np.where(gappy > 6, gappy + 10.0, gappy), np.delete(v, [7, 8]), QUARTZ, rate_window_s=5.0)
    assert q.gap


# -- chart envelope ----------------------------------------------------------------------
def test_envelope_keeps_spikes_and_breaks_at_missing_minutes() -> None:
    minutes = np.arange(0, 300) * 60.0 + 30.0
    lo = np.linspace(20.0, 1000.0, 300)
    hi = lo + 1.0
    hi[150] = 1500.0  # a spike must survive the decimation
    keep = np.ones(300, dtype=bool)
    keep[200:210] = False  # ten minutes without data
    tt, vv = envelope(minutes[keep], lo[keep], hi[keep], buckets=30)
    assert np.nanmax(vv) == 1500.0 and np.nanmin(vv) == 20.0
    assert np.isnan(vv).sum() == 1
    gap_at = tt[np.flatnonzero(np.isnan(vv))[0]]
    assert minutes[199] <= gap_at <= minutes[210]
    assert len(vv) <= 2 * 30 + 2


# -- the digest ---------------------------------------------------------------------------
def test_digest_is_canonical_and_matches_the_definition_by_hand() -> None:
    tc = ("tc1", np.array([2.0, 1.0]), np.array([-0.0, np.nan]), np.array([0, 6]))
    py = ("py1", np.array([1.0]), np.array([1200.5]), np.array([0]))
    # the definition in docs/log-format.md, written out with struct (channels by name, readings by time)
    h = hashlib.sha256(b"firewatch-readings-v1\n")
    h.update(b"py1\n" + struct.pack(">Q", 1) + struct.pack(">ddB", 1.0, 1200.5, 0))
    h.update(b"tc1\n" + struct.pack(">Q", 2) + struct.pack(">ddB", 1.0, float("nan"), 6) + struct.pack(">ddB", 2.0, 0.0, 0))
    assert readings_digest([tc, py]) == readings_digest([py, tc]) == h.hexdigest()
    changed = ("py1", np.array([1.0]), np.array([1200.5000001]), np.array([0]))
    assert readings_digest([tc, changed]) != h.hexdigest()


# -- alarm texts and notes ----------------------------------------------------------------
def test_who_acted_and_why_from_the_alarm_engines_own_texts() -> None:
    """Guards the parsing against the engine's wording (issue 14: who acknowledged, shelves with reasons)."""
    engine = AlarmEngine(load_site())
    engine._raise("no-data", None, 100.0, "no readings from the line for 30 s", "high")
    alarm_id = next(iter(engine.alarms))
    engine.shelve(alarm_id, 160.0, "bridge being replaced", 160.0 + 1800.0, by="Mara Quill@kiln-room (viewer pid 1)")
    engine.unshelve(alarm_id, 200.0, by="Mara Quill@kiln-room (viewer pid 1)")
    engine.acknowledge(alarm_id, 220.0, by="Tobin Ashgrove@office (viewer pid 2)")
    steps = [_parse_step(tr.t, tr.state, tr.detail) for tr in engine.transitions]
    shelf, unshelf, ack = steps[1], steps[2], steps[3]
    assert (shelf.by, shelf.reason, shelf.until_t) == ("Mara Quill@kiln-room (viewer pid 1)", "bridge being replaced", 1960.0)
    assert unshelf.by == "Mara Quill@kiln-room (viewer pid 1)"
    assert ack.by == "Tobin Ashgrove@office (viewer pid 2)"


def test_note_text_and_source_with_parentheses() -> None:
    assert _split_note("Cones (6 and 7) down (Mara Quill@kiln-room (viewer pid 4242))") == (
        "Cones (6 and 7) down", "Mara Quill@kiln-room (viewer pid 4242)")
    assert _split_note("no source given") == ("no source given", "")


# -- a whole record from arrays ----------------------------------------------------------------
def test_hold_and_peak_from_arrays() -> None:
    site = load_site()
    schedule = Schedule("hold test", (Segment("up", 600.0, 1000.0, 0.0), Segment("soak", 100.0, 1050.0, 600.0)), start_c=20.0)
    t = np.arange(0.0, 3000.0)
    ref = np.interp(t, [0, 1000, 1500, 2200, 3000], [20, 1040, 1048, 1052, 900])
    seg = np.where(t < 1000, 0.0, np.where(t < 2200, 1.0, 2.0))
    inputs = FiringInputs(site=site, schedule=schedule, times=t, values={"tc2": ref, "plan.segment": seg},
                          start_t=0.0, end_t=2999.0)
    rec = build_record(inputs)
    assert rec.reference == "tc2" and rec.peak.value_c == pytest.approx(1052.0) and rec.peak.t == 2200.0
    (hold,) = rec.holds
    # within 1045..1055 from 1045 on the way up (t = 1312.5, first reading 1313) to 1045 on the way down
    # (t = 2200 + 7/152 x 800 = 2236.8, last reading 2236): 923 s (arithmetic)
    assert hold.achieved_s == pytest.approx(2236.0 - 1313.0) and hold.planned_s == 600.0 and hold.reached
    assert rec.time_above_s == pytest.approx(time_above(t, ref, 1040.0))
    assert rec.segments[1].entered_t == 1000.0 and rec.segments[1].left_t == 2200.0 and rec.schedule_done_t == 2200.0


# -- the time language (issue 14: "durations always with units", clock times in the site's zone) ----
@pytest.mark.parametrize(("seconds", "text"), [
    (45, "45 s"), (766, "12 min 46 s"), (10140, "2 h 49 min"), (7200, "2 h"), (60, "1 min"), (3599.6, "1 h"),
    (259200, "72 h"),
])
def test_durations_carry_their_units(seconds: float, text: str) -> None:
    """The forms issue 14 asks for: '2 h 49 min', '12 min 46 s', '45 s'."""
    assert duration(seconds) == text


def test_clock_times_in_the_sites_zone_across_a_summer_time_change() -> None:
    # Europe/Berlin: CET (UTC+01:00) until 01:00 UTC on the last Sunday of March (29 Mar 2026), then CEST
    # (UTC+02:00): the EU summer-time rule (Directive 2000/84/EC) as the IANA tz database encodes it.
    clock = Clock.for_site("Europe/Berlin")
    before = dt.datetime(2026, 3, 29, 0, 30, tzinfo=dt.UTC).timestamp()
    after = dt.datetime(2026, 3, 29, 1, 30, tzinfo=dt.UTC).timestamp()
    assert clock.full(before) == "Sun 29 Mar 2026, 01:30:00 CET"
    assert clock.full(after) == "Sun 29 Mar 2026, 03:30:00 CEST"
    assert clock.describe(before, after) == "Europe/Berlin (CET, UTC+01:00; from the change: CEST, UTC+02:00)"
    assert Clock.for_site("Europe/Berlin", utc=True).full(before) == "Sun 29 Mar 2026, 00:30:00 UTC"


def test_local_zone_when_the_site_names_none(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("TZ", "America/Chicago")
    assert Clock.for_site("").name == "America/Chicago"


def test_units_for_differences_and_rates() -> None:
    # degF differences: 9/5 of a kelvin (ITS-90 and the Fahrenheit scale's definition; arithmetic)
    assert Units("F").delta(10.0) == "+18.0 °F" and Units("F").rate(100.0) == "180 °F/h"
    assert Units("C").temperature(math.nan) == "—"


def test_without_a_schedule_or_without_recorded_progress() -> None:
    from firewatch.report.document import build_document

    site = load_site()
    t = np.arange(0.0, 2000.0)
    ref = np.interp(t, [0, 1000, 2000], [20, 1050, 1050])
    rec = build_record(FiringInputs(site=site, schedule=None, times=t, values={"tc2": ref}, start_t=0.0, end_t=1999.0))
    assert rec.holds == () and rec.time_above_s is None and rec.segments == () and rec.peak.value_c == 1050.0
    doc = build_document(rec, Clock.for_site("UTC"), Units("C"), now=0.0)
    assert ("Schedule", "none recorded") in doc.header.items
    # a schedule but no plan.* channels (progress not recorded): the hold is looked for over the whole firing
    schedule = Schedule("s", (Segment("up", 600.0, 1050.0, 600.0),), start_c=20.0)
    (hold,) = build_record(FiringInputs(site=site, schedule=schedule, times=t, values={"tc2": ref}, start_t=0.0, end_t=1999.0)).holds
    # within 5 K of 1050 from 1045 (t = 1025/1030 x 1000 = 995.1, first reading 996) to the end, 1999: 1003 s (arithmetic)
    assert hold.reached and hold.achieved_s == pytest.approx(1999.0 - 996.0)
