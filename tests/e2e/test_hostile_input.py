"""End to end over a real TCP socket on 127.0.0.1: no input ends the recorder (issue 10).

A plain server socket plays the serial device server and sends crafted lines to
``firewatch record --port socket://...``; the flood test runs the recorder in
this process so that its line queue can be made small.
"""

from __future__ import annotations

import logging
import signal
import socket
import sqlite3
import threading
from pathlib import Path

import pytest

from firewatch.services.recorder import ITEM_BYTES, Recorder
from firewatch.settings.profile import load_site, profiles_dir
from firewatch.settings.schedule import load_schedule
from firewatch.store._common import LogError
from firewatch.store.reader import LogReader
from firewatch.transport.native import crc16
from tests.e2e.helpers import RAW_LINES, firewatch, raw, stop, wait_for

T0 = 1_773_464_400.0


def native(seq: int | str, device_time: float | str, tc1: str = "4.096mV", py1: str = "UNDER") -> bytes:
    t = device_time if isinstance(device_time, str) else f"{device_time:.3f}"
    body = f"FW1 {seq} {t} cj=24.00C tc1={tc1} tc2=0.646mV py1={py1} py2=UNDER".encode()
    return body + b" *%04X\r\n" % crc16(body)


def query(log: Path, sql: str) -> list[tuple]:
    try:
        with LogReader(log) as r:
            return r.query(sql)
    except (LogError, sqlite3.Error):  # not yet created, or mid-creation: the caller waits
        return []


def serve_once(server: socket.socket, payload: bytes, ready) -> socket.socket:
    """Accept the recorder, wait until it has the port open, send everything at once."""
    client, _ = server.accept()
    wait_for(ready, timeout=30)
    client.sendall(payload)
    return client


def test_hostile_lines_over_a_socket_are_counted_and_recording_goes_on(tmp_path: Path) -> None:
    lines = []
    for i in range(60):  # control thermocouple OPEN in the first lines, then values, in one batch (issue 10)
        lines.append(native(i, T0 + i, "OPEN" if i < 3 else f"{4.096 + i * 0.001:.4f}mV"))
    lines.append(native(60, T0 + 60 + 86400))  # a valid line dated a day ahead (issue 10: 31,730 lines lost)
    lines += [native(i, T0 + i) for i in range(61, 100)]
    lines.append(native(2**63, T0 + 100))  # crashed the writer (issue 10)
    lines.append(native(101, T0 + 101, "1e309mV"))  # gave numpy warnings (issue 10)
    lines.append(native(102, T0 + 102, py1="1e10C"))
    lines.append(native(103, "1e309"))
    lines += [native(i, T0 + i) for i in range(104, 150)]
    lines += [native(i, 5.0 + i - 150) for i in range(150, 200)]  # the device restarts its clock at 5 s
    log = tmp_path / "hostile.db"
    with socket.create_server(("127.0.0.1", 0)) as server:
        port = server.getsockname()[1]
        rec = firewatch("record", "--port", f"socket://127.0.0.1:{port}", "--log", str(log), "--clock", "device")
        client = None
        try:
            client = serve_once(server, b"".join(lines), lambda: query(log, "SELECT 1 FROM event WHERE kind = 'open'"))
            wait_for(lambda: query(log, f"SELECT {RAW_LINES}") == [(200,)], timeout=30)
        finally:
            _, err = stop(rec, signal.SIGTERM)
            if client is not None:
                client.close()
    assert rec.returncode == 0, err
    assert "Traceback" not in err and "Warning" not in err, err
    assert query(log, "SELECT end_reason FROM session") == [("signal",)]
    assert query(log, "SELECT count(*) FROM sample") == [(195,)]  # everything but the five bad lines
    reasons = [r[2] for r in raw(log) if not r[1]]
    assert len(reasons) == 5
    assert "86401.000 s ahead of the line before" in reasons[0]  # one day and one line
    assert "bad sequence number" in reasons[1] and "not a finite number" in reasons[2]
    assert "beyond" in reasons[3] and "bad device time" in reasons[4]
    gaps = query(log, "SELECT reason FROM gap")
    assert len(gaps) == 1 and "device time went back" in gaps[0][0]
    assert query(log, "SELECT count(*) FROM event WHERE kind = 'error'") == [(0,)]
    stop_detail = query(log, "SELECT detail FROM event WHERE kind = 'stop'")[0][0]
    assert "200 lines, 5 malformed" in stop_detail
    # progress ran on the batch that opened with the open thermocouple: 4.096 mV of type K over a 24 degC
    # cold junction is about 124 degC (NIST Monograph 175), climbing, so past the 120 degC candling target
    segs = query(log, "SELECT r.value FROM reading r JOIN channel c ON c.id = r.channel_id WHERE c.name = 'plan.segment' AND r.value IS NOT NULL")
    assert segs and {s[0] for s in segs} == {1.0}


def test_a_flood_overflows_a_bounded_queue_and_every_line_is_accounted_for(tmp_path: Path, caplog: pytest.LogCaptureFixture) -> None:
    """Issue 10: under a flood the queue grew without bound; now what overflows is counted and logged."""
    sent = 40_000
    payload = b"".join(native(i, T0 + i * 0.01) for i in range(sent))  # about 4 MB at once
    log = tmp_path / "flood.db"
    caplog.set_level(logging.INFO, logger="firewatch")
    with socket.create_server(("127.0.0.1", 0)) as server:
        port = server.getsockname()[1]
        recorder = Recorder(f"socket://127.0.0.1:{port}", load_site(), load_schedule(profiles_dir() / "demo-glaze.toml"), log,
                            clock="device", queue_bytes=200 * (100 + ITEM_BYTES))
        thread = threading.Thread(target=recorder.run, kwargs={"install_signals": False}, daemon=True)
        thread.start()
        client = None
        try:
            client = serve_once(server, payload, lambda: query(log, "SELECT 1 FROM event WHERE kind = 'open'"))
            client.shutdown(socket.SHUT_WR)

            def settled() -> bool:
                got = query(log, f"SELECT {RAW_LINES}, (SELECT coalesce(sum(CAST(substr(detail, 1, instr(detail, ' ') - 1) AS INTEGER)), 0) FROM event WHERE kind = 'overflow')")
                return bool(got) and got[0][0] + got[0][1] == sent

            wait_for(settled, timeout=60)
        finally:
            recorder.stop_event.set()
            thread.join(30)
            if client is not None:
                client.close()
    assert not thread.is_alive()
    con = sqlite3.connect(log)
    kept = con.execute(f"SELECT {RAW_LINES}").fetchone()[0]
    overflow = [r[0] for r in con.execute("SELECT detail FROM event WHERE kind = 'overflow'")]
    end_reason = con.execute("SELECT end_reason FROM session").fetchone()[0]
    stop_detail = con.execute("SELECT detail FROM event WHERE kind = 'stop'").fetchone()[0]
    con.close()
    dropped = sum(int(d.split(" ", 1)[0]) for d in overflow)
    assert overflow and dropped > 0 and kept + dropped == sent  # never dropped silently
    assert recorder.ingest.dropped == dropped and f"{dropped} dropped (line queue full)" in stop_detail
    assert "line queue was full" in overflow[0] and "dropped" in caplog.text
    assert end_reason == "signal"  # the stop event, as SIGTERM sets it
