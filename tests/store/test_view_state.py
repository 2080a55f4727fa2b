"""What the view says is true (issue 10 item 1), decided from facts in real logs written with a fake clock.

Before: the viewer showed ``LIVE · no alarms`` with frozen values for 80 s and more after the line died, and
still LIVE after the recorder was stopped; alarms raised after the last sample (no-data) were hidden.
"""

from __future__ import annotations

import sqlite3
from pathlib import Path

import pytest

from firewatch.store.view import (
    FIRING_ENDED,
    HEARTBEAT_STALE_S,
    LIVE,
    NO_DATA,
    RECORDER_STOPPED,
    FiringView,
)
from tests.store.conftest import T0, Bench, Clock


def _view(bench: Bench) -> FiringView:
    return FiringView(bench.path)


def test_fresh_data_from_a_beating_recorder_is_live(tmp_path: Path) -> None:
    clock = Clock()
    bench = Bench(tmp_path / "live.db", clock)
    bench.lines([T0 + i for i in range(10)])
    clock.t = T0 + 10
    bench.cycle()
    m = _view(bench).live(now_utc=clock.t)
    assert m.state.kind == LIVE and m.state.recorder == "running"
    assert m.state.data_age_s == pytest.approx(1.0)  # newest line received at T0 + 9
    assert m.stale == frozenset()


def test_a_silent_line_reads_no_data_with_its_duration_and_every_row_stale(tmp_path: Path) -> None:
    """Issue 10: the line died, the recorder kept beating; the view says NO DATA, each row says STALE."""
    clock = Clock()
    bench = Bench(tmp_path / "silent.db", clock, no_data_s=12.0)  # the site's setting, not a fixed 30 s
    bench.lines([T0 + i for i in range(10)])
    view = _view(bench)
    for step in range(1, 45):  # the recorder keeps cycling with no line: heartbeats go on
        clock.t = T0 + 9 + step
        bench.cycle()
        m = view.live(now_utc=clock.t)
        age = step
        if age > 12.0:
            assert m.state.kind == NO_DATA, step
            assert m.state.silent_s == pytest.approx(age)
            assert m.state.since_utc == pytest.approx(T0 + 9)
            assert {"tc1", "cj", "tc1.rate"} <= m.stale
        else:
            assert m.state.kind == LIVE, step
            assert "tc1" not in m.stale
    # the no-data alarm the recorder raised after the last sample is listed at once (before: hidden)
    kinds = [(a.kind, a.state, a.priority) for a in m.alarms]
    assert ("no-data", "active-unacknowledged", "high") in kinds
    assert m.alarms[0].raised_t == pytest.approx(T0 + 9 + 12.0)  # last sample + no_data_s
    # replay at the newest sample shows the alarms as they stood then: the no-data came later
    assert "no-data" not in [a.kind for a in view.moment(view.end_t).alarms]


def test_each_row_is_stale_on_its_own_against_the_site_setting(tmp_path: Path) -> None:
    clock = Clock()
    bench = Bench(tmp_path / "rows.db", clock, no_data_s=20.0)
    bench.lines([T0 + i for i in range(5)])
    view = _view(bench)
    clock.t = T0 + 4 + 19.0
    bench.cycle()
    assert "tc1" not in view.live(now_utc=clock.t).stale  # 19 s < the site's 20 s
    clock.t = T0 + 4 + 21.0
    bench.cycle()
    m = view.live(now_utc=clock.t)
    assert "tc1" in m.stale and m.age_s["tc1"] == pytest.approx(21.0)
    # in replay, a moment inside a gap is judged the same way
    bench.lines([T0 + 100 + i for i in range(3)])
    bench.cycle()
    view.refresh_bounds()
    assert "tc1" in view.moment(T0 + 50).stale  # 46 s after the reading at T0 + 4
    assert "tc1" not in view.moment(T0 + 101).stale


def test_a_recorder_stopped_by_signal_reads_stopped_with_its_reason(tmp_path: Path) -> None:
    """Issue 10: after SIGTERM the viewer still said LIVE."""
    clock = Clock()
    bench = Bench(tmp_path / "stopped.db", clock)
    bench.lines([T0 + i for i in range(10)])
    clock.t = T0 + 10
    bench.cycle()
    clock.t = T0 + 11
    bench.stop("signal")
    m = FiringView(bench.path).live(now_utc=T0 + 12)  # data only 3 s old: the stop alone decides
    assert m.state.kind == RECORDER_STOPPED
    assert m.state.since_utc == pytest.approx(T0 + 11)
    assert m.state.reason == "signal"
    assert m.state.recorder == "stopped"


def test_a_killed_recorder_reads_stopped_from_its_old_heartbeat(tmp_path: Path) -> None:
    """SIGKILL leaves the session open: the heartbeat's age tells."""
    clock = Clock()
    bench = Bench(tmp_path / "killed.db", clock)
    bench.lines([T0 + i for i in range(10)])
    clock.t = T0 + 10
    bench.cycle()
    view = FiringView(bench.path)
    assert view.live(now_utc=T0 + 10 + HEARTBEAT_STALE_S - 0.5).state.kind == LIVE
    m = view.live(now_utc=T0 + 10 + HEARTBEAT_STALE_S + 0.5)
    assert m.state.kind == RECORDER_STOPPED
    assert m.state.since_utc == pytest.approx(T0 + 10)
    assert "no heartbeat" in m.state.reason


def test_a_stopped_recorder_after_the_schedule_ran_out_reads_firing_ended(tmp_path: Path) -> None:
    clock = Clock()
    bench = Bench(tmp_path / "ended.db", clock, schedule=True)
    bench.lines([T0 + i for i in range(10)])  # about 122 °C: past the one ramp's 100 °C target
    clock.t = T0 + 10
    bench.cycle()
    view = FiringView(bench.path)
    m = view.live(now_utc=clock.t)
    assert m.value("plan.segment") == 1.0 and m.state.kind == LIVE  # complete, but still recorded: live
    bench.stop("--for 10 s elapsed")
    m = view.live(now_utc=clock.t + 1)
    assert m.state.kind == FIRING_ENDED and m.state.reason == "--for 10 s elapsed"


def test_a_recorder_without_any_line_reads_no_data_since_it_started(tmp_path: Path) -> None:
    clock = Clock()
    bench = Bench(tmp_path / "empty.db", clock, no_data_s=10.0)
    view = FiringView(bench.path)
    clock.t = T0 + 5
    bench.cycle()
    assert view.live(now_utc=clock.t).state.kind == LIVE
    clock.t = T0 + 11
    bench.cycle()
    st = view.live(now_utc=clock.t).state
    assert st.kind == NO_DATA and st.data_age_s is None and st.silent_s == pytest.approx(11.0)


def test_heartbeats_go_on_without_lines(tmp_path: Path) -> None:
    """The heartbeat is in the session row, written every cycle (a log from before it: tests/store/test_schema1_log.py)."""
    clock = Clock()
    bench = Bench(tmp_path / "beat.db", clock)
    for step in range(3):
        clock.t = T0 + step
        bench.cycle()
        with sqlite3.connect(bench.path) as con:
            assert con.execute("SELECT heartbeat_utc FROM session").fetchone()[0] == T0 + step
    bench.stop()
