"""The screen says what is true (issue 10 item 1), through the real app at 80x24 with textual's Pilot.

Before: with the line dead the running viewer (and one opened later) showed ``LIVE · no alarms`` with frozen
values for 80 s and more while the recorder had logged a HIGH no-data alarm; after the recorder was stopped
(SIGTERM) it still said LIVE, and a note typed then was "sent" and logged only at the restart, stamped then.
Here a real simulator and a real recorder run as subprocesses over TCP on 127.0.0.1.
"""

from __future__ import annotations

import io
import shutil
from pathlib import Path

from rich.console import Console
from textual.widgets import Static

from firewatch.settings.profile import profiles_dir
from firewatch.store.reader import LogReader
from firewatch.store.writer import release_lock, take_lock
from firewatch.ui.app import FirewatchApp
from firewatch.ui.dashboard import DashboardScreen
from firewatch.ui.screens import NoteScreen
from firewatch.ui.widgets import AlarmList, EventList, ReadingsPanel
from tests.e2e.helpers import firewatch, samples, start_sim_tcp, stop, wait_for
from tests.ui.helpers import settle

NO_DATA_S = 8.0
"""The test site's no_data_s: short, so the line's death shows within seconds (the demo site says 30)."""


def _site(tmp_path: Path) -> Path:
    text = (profiles_dir() / "demo-site.toml").read_text()
    assert "no_data_s = 30" in text
    site = tmp_path / "site.toml"
    site.write_text(text.replace("no_data_s = 30", f"no_data_s = {NO_DATA_S:g}"))
    return site


def _header(app: FirewatchApp) -> str:
    return str(app.screen.query_one("#title", Static).content)


def _readings_text(app: FirewatchApp) -> str:
    console = Console(width=60, record=True, file=io.StringIO())
    console.print(app.screen.query_one(ReadingsPanel).render())
    return console.export_text()


def _dashboard(app: FirewatchApp) -> DashboardScreen:
    assert isinstance(app.screen, DashboardScreen)
    return app.screen


async def test_dead_line_then_stopped_recorder_then_a_note_written_at_once(tmp_path: Path) -> None:
    """Issue 10 item 1, end to end at 80x24: LIVE, then NO DATA with stale rows and the no-data alarm listed,
    then RECORDER STOPPED since its stop (signal), then a note and an acknowledgement written at once."""
    # the line stays connected but goes silent 10 s (wall) after the simulator starts: a dead serial line
    sim, port = start_sim_tcp("--speed", "30", "--fault", "dropout@5:seconds=1000000")
    log = tmp_path / "live.db"
    rec = firewatch("record", "--port", f"socket://127.0.0.1:{port}", "--log", str(log), "--clock", "device",
                    "--site", str(_site(tmp_path)))
    try:
        wait_for(lambda: samples(log) > 5)
        app = FirewatchApp(log, mode="live", show_cautions=False)
        async with app.run_test(size=(80, 24)) as pilot:
            screen = _dashboard(app)
            await settle(pilot, lambda: screen.headline.startswith("LIVE "), timeout=15)
            assert _header(app).startswith("LIVE ")
            # the line dies: within no_data_s (and a poll) the header says so, with the duration
            await settle(pilot, lambda: screen.headline.startswith("NO DATA for "), timeout=40)
            panel = app.screen.query_one(ReadingsPanel)
            await settle(pilot, lambda: panel.moment is not None and {"tc1", "tc2", "py1"} <= panel.moment.stale)
            assert "STALE" in _readings_text(app)
            # the recorder's HIGH no-data alarm, raised after the last sample, is listed as soon as it is logged
            await settle(pilot, lambda: any(a.kind == "no-data" and a.priority == "high" for a in app.screen.query_one(AlarmList).alarms),
                         timeout=15)
            assert "ALARMS" in _header(app) and "NO DATA for " in _header(app)
        # a viewer opened now says the same from its first read
        again = FirewatchApp(log, mode="live", show_cautions=False)
        async with again.run_test(size=(80, 24)) as pilot:
            screen = _dashboard(again)
            await settle(pilot, lambda: screen.headline != "")
            assert screen.headline.startswith("NO DATA for ")
            assert any(a.kind == "no-data" for a in again.screen.query_one(AlarmList).alarms)
            # the recorder is stopped (SIGTERM): the header says so, with the reason from its session
            _, err = stop(rec)
            assert rec.returncode == 0, err
            await settle(pilot, lambda: screen.headline.startswith("RECORDER STOPPED since "), timeout=10)
            assert screen.headline.endswith("(signal)")
            # a note now is written at once under the log's lock, by this viewer, and says so
            await pilot.press("o")
            assert isinstance(again.screen, NoteScreen)
            await pilot.press(*"door bricked up", "enter")
            await settle(pilot, lambda: screen.last_outcome is not None)
            assert screen.last_outcome.written and "no recorder is running" in screen.last_outcome.text
            # and acknowledging the no-data alarm, likewise
            alarms = again.screen.query_one(AlarmList)
            no_data = next(a for a in alarms.alarms if a.kind == "no-data")
            alarms.move_cursor(row=alarms.alarms.index(no_data))
            await settle(pilot, lambda: screen.selected_alarm == no_data.id)
            await pilot.press("a")
            await settle(pilot, lambda: any(a.id == no_data.id and a.state == "active-acknowledged" for a in alarms.alarms))
            assert screen.last_outcome.text.endswith(f"alarm {no_data.id} acknowledged")
    finally:
        stop(rec)
        stop(sim)
    with LogReader(log) as r:
        (note,) = r.events(["note"])
        stop_t = [e["t"] for e in r.events(["stop"])][-1]
    assert note["detail"].startswith("door bricked up (") and note["t"] > stop_t  # stamped when typed, not later


async def test_replay_notes_and_acknowledgements(fault_log: Path, tmp_path: Path) -> None:
    """Issue 14 item 3: in replay ``o`` and ``a`` work; written at once when no recorder holds the log, through the
    side channel when one does (and written by the viewer if that recorder stops first)."""
    log = tmp_path / "replay.db"
    shutil.copy(fault_log, log)  # the shared log stays as the snapshots expect it
    app = FirewatchApp(log, mode="replay", show_cautions=False)
    async with app.run_test(size=(80, 24)) as pilot:
        screen = _dashboard(app)
        await settle(pilot, lambda: app.screen.query_one(ReadingsPanel).moment is not None)
        screen.seek(screen.view.start_t + 80 * 60)  # tc2 open since 60 min
        await settle(pilot, lambda: bool(app.screen.query_one(AlarmList).alarms))
        moment = screen.cursor
        await pilot.press("o", *"glaze crawling at the top", "enter")
        await settle(pilot, lambda: screen.last_outcome is not None)
        assert screen.last_outcome.written, screen.last_outcome.text
        await settle(pilot, lambda: any(e["kind"] == "note" for e in app.screen.query_one(EventList).events))
        alarm = app.screen.query_one(AlarmList).alarms[0]
        await settle(pilot, lambda: screen.selected_alarm == alarm.id)
        await pilot.press("a")
        assert screen.last_outcome.written and "acknowledged" in screen.last_outcome.text
        # a recorder takes the log: the next note goes to it through the side channel
        fd = take_lock(log, "pid 999999 on test (a recorder)")
        try:
            await pilot.press("o", *"second look", "enter")
            await settle(pilot, lambda: "sent to the recorder" in screen.last_outcome.text)
        finally:
            release_lock(fd)  # it stops without applying it: the viewer writes it itself, and says so
        await settle(pilot, lambda: app.desk.waiting == [], timeout=10)
    with LogReader(log) as r:
        notes = r.events(["note"])
        states = [s for a in r.alarms() if a["id"] == alarm.id for s in a["states"]]
    assert [n["detail"].split(" (")[0] for n in notes] == ["glaze crawling at the top", "second look"]
    assert notes[0]["t"] == moment  # about the moment shown
    assert states[-1]["state"] == "active-acknowledged" and states[-1]["detail"].startswith("acknowledged by ")
