"""A recorder restarted mid-firing shows the schedule where the kiln is (issue 10 item 7).

A real restart: the simulator keeps firing over TCP on 127.0.0.1 while the recorder is
killed in the candling ramp and started again, on the same log, once the kiln has held,
climbed and entered the third segment (quartz inversion, 540 -> 620 degC).
"""

from __future__ import annotations

import math
import signal
import socket
import sqlite3
from pathlib import Path

from firewatch.physics.thermocouples import emf_to_temperature
from firewatch.settings.profile import profiles_dir
from firewatch.settings.schedule import load_schedule
from firewatch.store.view import FiringView
from firewatch.transport.framing import LineFramer
from firewatch.transport.native import NativeParser
from firewatch.transport.records import ReadingSet
from tests.e2e.helpers import firewatch, start_sim_tcp, stop, wait_for

SCHEDULE = load_schedule(profiles_dir() / "demo-glaze.toml")  # the recorder's default schedule
QUARTZ = 2  # 0-based: candling, early climb, quartz inversion


def latest(log: Path, name: str) -> tuple[float, float | None] | None:
    """The newest reading of a channel, None while the log has none (or is not yet made)."""
    try:
        con = sqlite3.connect(f"file:{log}?mode=ro", uri=True)
    except sqlite3.Error:
        return None
    try:
        return con.execute(
            "SELECT r.t, r.value FROM reading r JOIN channel c ON c.id = r.channel_id WHERE c.name = ? ORDER BY r.sample_id DESC LIMIT 1", (name,)
        ).fetchone()
    except sqlite3.Error:
        return None
    finally:
        con.close()


def watch_kiln_until(port: int, done) -> float:
    """Read the simulator's lines as a plain client until ``done(temperature)``; return that temperature.

    The demo site's control thermocouple tc1 is type K in mV against the cold-junction channel cj.
    """
    parser, framer = NativeParser(), LineFramer()
    with socket.create_connection(("127.0.0.1", port), timeout=5) as s:
        s.settimeout(60)
        while True:
            data = s.recv(65536)
            assert data, "the simulator closed the connection"
            lines, _ = framer.feed(data)
            for raw in lines:
                got = parser.parse(raw, 0.0)
                if not isinstance(got, ReadingSet) or got.get("tc1") is None or got.get("cj") is None:
                    continue
                temp = float(emf_to_temperature(got.get("tc1").value, "K", got.get("cj").value))
                if done(temp):
                    return temp


def test_restart_in_segment_three_resumes_there(tmp_path: Path) -> None:
    sim, port = start_sim_tcp("--speed", "600")
    log = tmp_path / "restart.db"
    rec = None
    try:
        rec = firewatch("record", "--port", f"socket://127.0.0.1:{port}", "--log", str(log), "--clock", "device")
        # killed in the candling ramp, before its one-hour hold
        wait_for(lambda: ((latest(log, "tc1") or (0, None))[1] or 0.0) > 95.0, timeout=120)
        assert latest(log, "plan.segment")[1] == 0.0 and latest(log, "plan.hold")[1] is None
        rec.send_signal(signal.SIGKILL)
        rec.wait(10)
        killed_t = latest(log, "tc1")[0]
        # the firing goes on without a recorder: hold, early climb, into quartz inversion
        temp = watch_kiln_until(port, lambda c: 555.0 < c < 600.0)
        assert SCHEDULE.segments[QUARTZ].name == "quartz inversion" and 540.0 < temp < 620.0
        rec = firewatch("record", "--port", f"socket://127.0.0.1:{port}", "--log", str(log), "--clock", "device")
        wait_for(lambda: (latest(log, "tc1") or (0.0, None))[0] > killed_t + 3600.0, timeout=60)
        con = sqlite3.connect(f"file:{log}?mode=ro", uri=True)
        first = con.execute("SELECT min(t) FROM sample WHERE t > ?", (killed_t,)).fetchone()[0]
        con.close()
        wait_for(lambda: latest(log, "tc1")[0] > first + 120.0, timeout=60)  # two minutes of data after the restart
    finally:
        if rec is not None:
            _, err = stop(rec)
        stop(sim)
    assert rec.returncode == 0, err
    con = sqlite3.connect(log)
    after = con.execute(
        "SELECT r.t, r.value, h.value FROM reading r JOIN channel c ON c.id = r.channel_id "
        "JOIN reading h ON h.sample_id = r.sample_id AND h.channel_id = (SELECT id FROM channel WHERE name = 'plan.hold') "
        "WHERE c.name = 'plan.segment' AND r.t >= ? ORDER BY r.sample_id", (first,)
    ).fetchall()
    con.close()
    placed = [(t, seg, hold) for t, seg, hold in after if seg is not None]
    # within a minute of data the plan shows segment 3, and never segment 1 holding (issue 10)
    assert placed and placed[0][0] - first <= 60.0
    assert {seg for _, seg, _ in placed} == {float(QUARTZ)} and all(hold is None for _, _, hold in placed)
    # and so does the schedule panel, drawn from the view of the log as the dashboard draws it
    from firewatch.ui.widgets import SchedulePanel

    view = FiringView(log)
    try:
        moment = view.moment()
        panel = SchedulePanel(view.schedule, "tc1")
        panel.moment = moment
        text = panel.render().plain
    finally:
        view.close()
    assert moment.value("plan.segment") == QUARTZ and math.isnan(moment.value("plan.hold"))
    assert "▶3/7 quartz inversi" in text and "holding" not in text, text
