"""The dashboard driven by textual's Pilot: keys, screens and actions (an acknowledge reaches the firing log)."""

from __future__ import annotations

from pathlib import Path

import pytest

from firewatch.store.actions import ActionQueue
from firewatch.store.reader import LogReader
from firewatch.ui.app import FirewatchApp, cautions_marker
from firewatch.ui.dashboard import DashboardScreen
from firewatch.ui.screens import CautionsScreen, HelpScreen, NoteScreen, ShelveScreen
from firewatch.ui.widgets import AlarmList, ReadingsPanel
from tests.e2e.helpers import firewatch, samples, start_sim_tcp, stop, wait_for
from tests.ui.helpers import settle


def dashboard(app: FirewatchApp) -> DashboardScreen:
    screen = app.screen
    assert isinstance(screen, DashboardScreen)
    return screen


@pytest.mark.parametrize("size", [(80, 24), (160, 48)])
async def test_replay_seek_and_alarm_jumps(fault_log: Path, size) -> None:
    app = FirewatchApp(fault_log, mode="replay", show_cautions=False)
    async with app.run_test(size=size) as pilot:
        screen = dashboard(app)
        view = screen.view
        start, end = view.start_t, view.end_t
        await settle(pilot, lambda: app.screen.query_one(ReadingsPanel).moment is not None)
        assert screen.cursor == start
        await pilot.press("pagedown")
        assert screen.cursor == pytest.approx(start + 3600)
        await pilot.press("right_square_bracket")  # next alarm: tc2 open at 60 min (the fault's time)
        alarms = view.alarm_times()
        assert screen.cursor == pytest.approx(alarms[1][0] if alarms[0][0] <= start + 3600 else alarms[0][0])
        await pilot.press("home", "right_square_bracket")
        assert screen.cursor == pytest.approx(alarms[0][0])
        await settle(pilot, lambda: any(a.kind == "sensor-fault" for a in app.screen.query_one(AlarmList).alarms))
        await pilot.press("right_square_bracket")
        assert screen.cursor == pytest.approx(alarms[1][0])  # the no-data of the dropout
        await pilot.press("left_square_bracket")
        assert screen.cursor == pytest.approx(alarms[0][0])
        await pilot.press("end")
        assert screen.cursor == pytest.approx(end)
        await pilot.press("shift+left", "left")
        assert screen.cursor == pytest.approx(end - 660)
        # replay takes notes and acknowledgements (issue 14 item 3) but not shelves: nothing is still to come
        assert screen.check_action("shelve", ()) is False
        assert screen.check_action("note", ()) is True
        assert screen.check_action("play", ()) is True


async def test_replay_plays_at_speed(fault_log: Path) -> None:
    app = FirewatchApp(fault_log, mode="replay", speed=600, show_cautions=False)
    async with app.run_test(size=(100, 30)) as pilot:
        screen = dashboard(app)
        t0 = screen.cursor
        await pilot.press("space")
        assert screen.playing
        await pilot.pause(1.2)
        await pilot.press("space")
        moved = screen.cursor - t0
        assert 600 <= moved <= 2400  # two or three ticks of 0.5 s at 600x
        await pilot.press("plus")
        assert screen.speed == 1000
        await pilot.press("minus", "minus")
        assert screen.speed == 300


async def test_units_help_and_cautions(fault_log: Path, tmp_path: Path) -> None:
    assert not cautions_marker().exists()
    app = FirewatchApp(fault_log, mode="replay")
    async with app.run_test(size=(100, 30)) as pilot:
        assert isinstance(app.screen, CautionsScreen)  # the first start on this account
        await pilot.press("enter")
        assert isinstance(app.screen, DashboardScreen)
        await pilot.press("u")
        assert app.unit == "F"
        await settle(pilot, lambda: app.screen.query_one(ReadingsPanel).unit == "F")
        await pilot.press("question_mark")
        assert isinstance(app.screen, HelpScreen)
        await pilot.press("escape")
        assert isinstance(app.screen, DashboardScreen)
    assert cautions_marker().exists()
    again = FirewatchApp(fault_log, mode="replay")
    async with again.run_test(size=(100, 30)) as pilot:
        assert isinstance(again.screen, DashboardScreen)  # not shown twice


async def test_live_acknowledge_reaches_the_log(tmp_path: Path) -> None:
    sim, port = start_sim_tcp("--speed", "60", "--fault", "tc-open@1:channel=tc2")
    log = tmp_path / "live.db"
    rec = firewatch("record", "--port", f"socket://127.0.0.1:{port}", "--log", str(log), "--clock", "device")
    try:
        wait_for(lambda: samples(log) > 5)
        app = FirewatchApp(log, mode="live", show_cautions=False)
        async with app.run_test(size=(120, 36)) as pilot:
            screen = dashboard(app)
            await settle(pilot, lambda: bool(app.screen.query_one(AlarmList).alarms), timeout=30)
            table = app.screen.query_one(AlarmList)
            alarm = table.alarms[0]
            assert (alarm.kind, alarm.channel, alarm.state) == ("sensor-fault", "tc2", "active-unacknowledged")
            await settle(pilot, lambda: screen.selected_alarm == alarm.id)
            await pilot.press("a")
            await settle(pilot, lambda: any(a.state == "active-acknowledged" for a in app.screen.query_one(AlarmList).alarms), timeout=20)
            # shelve with a reason, and a note
            await pilot.press("s")
            assert isinstance(app.screen, ShelveScreen)
            await pilot.press(*"replacing tc2")
            await pilot.press("enter")
            await pilot.press("o")
            assert isinstance(app.screen, NoteScreen)
            await pilot.press(*"cones down")
            await pilot.press("enter")
            await settle(pilot, lambda: any(a.state == "shelved" for a in app.screen.query_one(AlarmList).alarms), timeout=20)
        def applied() -> bool:
            with LogReader(log) as r:
                states = [s["state"] for a in r.alarms() for s in a["states"]]
                notes = [e for e in r.events(["note"])]
                return "active-acknowledged" in states and "shelved" in states and bool(notes)

        wait_for(applied, timeout=20)
        with LogReader(log) as r:
            actions = [e["detail"] for e in r.events(["action"])]
            assert any(d.startswith("acknowledge from") and "acknowledged" in d for d in actions)
            assert any(d.startswith("shelve from") for d in actions)
            note = r.events(["note"])[0]["detail"]
            assert note.startswith("cones down (")
        results = ActionQueue(log).results()
        assert [k for _, k, _ in results] == ["acknowledge", "shelve", "note"] and all(r for _, _, r in results)
    finally:
        stop(rec)
        stop(sim)
