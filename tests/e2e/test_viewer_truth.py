"""End to end over a real socket: the recorder's heartbeat and what a viewer concludes from it (issue 10 item 1);
the SQLite note kept off the terminal (issue 10 item 9)."""

from __future__ import annotations

import signal
import socket
import sqlite3
import threading
from pathlib import Path

import pytest

from firewatch.services.desk import ActionDesk
from firewatch.store.reader import LogReader
from firewatch.store.view import (
    HEARTBEAT_STALE_S,
    LIVE,
    NO_DATA,
    RECORDER_STOPPED,
    FiringView,
)
from firewatch.transport.native import encode
from firewatch.transport.records import Value
from tests.e2e.helpers import firewatch, inspect, run, samples, stop, wait_for

SITE = """\
[site]
name = "Test bench"
[alarms]
no_data_s = 3
[[cold_junction]]
name = "cj"
[[thermocouple]]
name = "tc1"
type = "K"
cold_junction = "cj"
"""


class LineThenSilence:
    """A device server on 127.0.0.1 that sends ``n`` lines to each client, then keeps the connection open and
    says nothing: a serial line that died without a disconnect."""

    def __init__(self, n: int = 30) -> None:
        self.server = socket.create_server(("127.0.0.1", 0))
        self.port = self.server.getsockname()[1]
        self.n = n
        self.clients: list[socket.socket] = []
        self._seq = 0
        threading.Thread(target=self._serve, daemon=True).start()

    def _serve(self) -> None:
        while True:
            try:
                client, _ = self.server.accept()
            except OSError:
                return
            self.clients.append(client)
            # paced like a device (pyserial's socket:// may drop what arrives before its open completes)
            for _ in range(self.n):
                threading.Event().wait(0.05)
                try:
                    client.sendall(encode([Value("tc1", 4.096, "mV"), Value("cj", 22.0, "C")], self._seq))
                except OSError:
                    break
                self._seq += 1

    def close(self) -> None:
        for c in self.clients:
            c.close()
        self.server.close()


def _heartbeat(log: Path) -> float:
    with sqlite3.connect(f"file:{log}?mode=ro", uri=True) as con:
        return con.execute("SELECT heartbeat_utc FROM session ORDER BY id DESC LIMIT 1").fetchone()[0]


def _state(log: Path):
    view = FiringView(log)
    try:
        return view.live().state
    finally:
        view.close()


def test_heartbeat_no_data_killed_recorder_and_a_note_not_stamped_later(tmp_path: Path) -> None:
    site = tmp_path / "site.toml"
    site.write_text(SITE)
    log = tmp_path / "hb.db"
    device = LineThenSilence()
    rec = firewatch("record", "--port", f"socket://127.0.0.1:{device.port}", "--site", str(site), "--log", str(log))
    try:
        wait_for(lambda: samples(log) >= 20)
        # the view says NO DATA (the site's 3 s), with the recorder running, and lists the no-data alarm
        state = wait_for(lambda: (s := _state(log)).kind == NO_DATA and s, timeout=15)
        assert state.recorder == "running" and state.silent_s > 3.0
        # no line arrives any more, and the heartbeat goes on, at least once a second
        first = _heartbeat(log)
        assert first > state.since_utc + 2.0  # beats while the line is silent
        wait_for(lambda: _heartbeat(log) >= first + 2.0, timeout=4)
        view = FiringView(log)
        wait_for(lambda: [a.kind for a in view.alarms_now()] == ["no-data"], timeout=5)  # as soon as it is logged
        view.close()
        # SIGKILL: the session stays open, the heartbeat stops; within a few seconds the view says so
        rec.send_signal(signal.SIGKILL)
        rec.wait(10)
        killed = _heartbeat(log)
        state = wait_for(lambda: (s := _state(log)).kind == RECORDER_STOPPED and s, timeout=HEARTBEAT_STALE_S + 10)
        assert state.since_utc == killed and "no heartbeat" in state.reason
        # a note now is written at once by the viewer (before: accepted, then logged and stamped at the restart)
        view = FiringView(log)
        desk = ActionDesk(log, view.site, view.schedule)
        outcome = desk.submit("note", text="line checked, connector loose")
        desk.close()
        view.close()
        assert outcome.written, outcome.text
        # a restarted recorder beats again and does not log the note a second time
        rec = firewatch("record", "--port", f"socket://127.0.0.1:{device.port}", "--site", str(site), "--log", str(log))
        wait_for(lambda: _state(log).kind in (LIVE, NO_DATA) and _heartbeat(log) > killed + HEARTBEAT_STALE_S, timeout=15)
        _, err = stop(rec)
        assert rec.returncode == 0, err
        state = _state(log)
        assert state.kind == RECORDER_STOPPED and state.reason == "signal"
    finally:
        stop(rec)
        device.close()
    with LogReader(log) as r:
        notes = r.events(["note"])
        starts = [e["t"] for e in r.events(["start"])]
    assert len(notes) == 1 and starts[0] < notes[0]["t"] < starts[1]


def test_the_sqlite_note_is_in_the_session_and_inspect_not_on_the_terminal(tmp_path: Path) -> None:
    """Issue 10 item 9: the SQLite version note went to the operator's terminal at every start."""
    log = tmp_path / "note.db"
    quiet = run("record", "--port", "loop://", "--log", str(log), "--for", "1")
    assert quiet.returncode == 0, quiet.stderr
    assert "SQLite" not in quiet.stderr and "recording loop://" in quiet.stderr
    loud = run("record", "--port", "loop://", "--log", str(log), "--for", "1", "-v")
    assert loud.returncode == 0 and f"SQLite {sqlite3.sqlite_version}" in loud.stderr
    sessions = inspect(log)["recorder_sessions"]
    assert [s["sqlite_version"] for s in sessions] == [sqlite3.sqlite_version] * 2
    old = tuple(int(x) for x in sqlite3.sqlite_version.split(".")) < (3, 51, 3)  # SQLite's release notes, 3.51.3
    assert all(bool(s["sqlite_note"]) == old for s in sessions)
    assert all(s["end_reason"] == "--for 1 s elapsed" for s in sessions)
    text = run("inspect", str(log))
    assert text.returncode == 0 and text.stdout.count(f"SQLite {sqlite3.sqlite_version}") == 2


@pytest.mark.parametrize("bad", ["link", "fifo"])
def test_the_recorder_refuses_an_unsafe_action_file_and_goes_on(tmp_path: Path, bad: str) -> None:
    """Issue 10 item 4: the recorder never reads actions through a link; it says so once and records on."""
    log = tmp_path / "k.db"
    victim = tmp_path / "victim"
    victim.write_text("mine\n")
    side = Path(f"{log}.actions")
    if bad == "link":
        side.symlink_to(victim)
    else:
        import os

        os.mkfifo(side)
    out = run("record", "--port", "loop://", "--log", str(log), "--for", "1")
    assert out.returncode == 0, out.stderr
    assert "operator actions unavailable" in out.stderr and ("symbolic link" in out.stderr or "not a regular file" in out.stderr)
    assert victim.read_text() == "mine\n"
