"""Lines to a real firing log through ``Ingest``, and the bounded line queue (issue 10: no input ends the recorder)."""

from __future__ import annotations

import sqlite3
from pathlib import Path

import pytest

from firewatch.firing.pipeline import Pipeline, channel_table
from firewatch.services.recorder import ITEM_BYTES, Ingest, LineQueue, attach_alarms, make_parser
from firewatch.settings.profile import load_site, profiles_dir
from firewatch.settings.schedule import load_schedule
from firewatch.store.reader import LogReader
from firewatch.store.writer import LogWriter
from firewatch.transport.native import crc16
from firewatch.transport.ports import PortEvent
from tests.e2e.helpers import RAW_LINES, raw

SITE = load_site()
SCHEDULE = load_schedule(profiles_dir() / "demo-glaze.toml")
T0 = 1_773_464_400.0


def line(seq: int | str, device_time: float, tc1: str = "4.096mV") -> bytes:
    body = f"FW1 {seq} {device_time:.3f} cj=24.00C tc1={tc1} tc2=0.646mV py1=UNDER py2=UNDER".encode()
    return body + b" *%04X" % crc16(body)


def open_log(path: Path) -> tuple[Ingest, LogWriter]:
    writer = LogWriter(path, channel_table(SITE, SCHEDULE), site_text=SITE.text, schedule_text=SCHEDULE.text, clock="device")
    ingest = Ingest(Pipeline(SITE, SCHEDULE, "device"), writer, make_parser(SITE))
    attach_alarms(ingest, SITE, SCHEDULE)
    return ingest, writer


def rows(path: Path, sql: str) -> list[tuple]:
    con = sqlite3.connect(path)
    try:
        return con.execute(sql).fetchall()
    finally:
        con.close()


def test_sequence_number_beyond_sqlite_is_a_malformed_line(tmp_path: Path) -> None:
    """Issue 10: a sequence number of 2^63 raised OverflowError in the writer and ended the recorder."""
    log = tmp_path / "seq.db"
    ingest, writer = open_log(log)
    lines = [(T0 + i, line(i, T0 + i)) for i in range(10)]
    lines[4] = (T0 + 4, line(2**63, T0 + 4))
    lines[5] = (T0 + 5, line(10**40, T0 + 5))
    ingest.feed(lines)
    writer.close()
    assert ingest.malformed == 2 and ingest.failed_batches == 0
    assert rows(log, "SELECT count(*) FROM sample") == [(8,)]
    reasons = [r[2] for r in raw(log) if not r[1]]
    assert len(reasons) == 2 and all("bad sequence number" in r for r in reasons)
    assert rows(log, "SELECT count(*) FROM event WHERE kind = 'malformed'") == [(2,)]


def test_a_failing_batch_is_kept_raw_logged_and_recording_goes_on(tmp_path: Path) -> None:
    log = tmp_path / "fail.db"
    ingest, writer = open_log(log)
    calls = []

    def hook(batch) -> None:
        calls.append(len(batch.samples))
        if len(calls) == 2:
            raise RuntimeError("a fault in a hook")

    ingest.hooks.insert(0, hook)
    first = [(T0 + i, line(i, T0 + i)) for i in range(10)] + [(T0 + 10, line(10, T0 + 10 + 86400))]  # ends with an outlier, held
    ingest.feed(first)
    ingest.feed([(T0 + i, line(i, T0 + i)) for i in range(11, 20)])
    ingest.feed([(T0 + i, line(i, T0 + i)) for i in range(20, 30)])
    writer.close()
    assert ingest.failed_batches == 1 and ingest.lines == 30
    # nothing of the failed batch half-written, every line kept raw in order
    # each line's device time is T0 + its sequence number; the log keeps the time of a sample, not its number
    assert [round(r[0] - T0) for r in rows(log, "SELECT t FROM sample ORDER BY id")] == list(range(10)) + list(range(20, 30))
    raw = [(r[2], r[3], r[4]) for part in LogReader(log).raw_rows() for r in part]
    assert [int(r[0].split(b" ")[1]) for r in raw] == list(range(30))
    failed = [r for r in raw if r[2] and r[2].startswith("not processed")]
    assert len(failed) == 10 and "RuntimeError: a fault in a hook at test_ingest.py:" in failed[0][2]
    events = rows(log, "SELECT detail FROM event WHERE kind = 'error'")
    assert len(events) == 1 and "10 lines could not be processed" in events[0][0] and "recording goes on" in events[0][0]
    assert rows(log, "SELECT count(*) FROM session WHERE end_reason IS NOT NULL") == [(1,)]


def test_the_same_failure_is_reported_once_a_minute(tmp_path: Path) -> None:
    log = tmp_path / "again.db"
    ingest, writer = open_log(log)

    def hook(batch) -> None:
        raise ValueError("always")

    ingest.hooks.insert(0, hook)
    for k in range(10):  # 10 batches 10 s apart
        ingest.feed([(T0 + 10 * k + i, line(10 * k + i, T0 + 10 * k + i)) for i in range(10)])
    writer.close()
    details = [r[0] for r in rows(log, "SELECT detail FROM event WHERE kind = 'error' ORDER BY id")]
    assert ingest.failed_batches == 10 and len(details) == 2
    assert "5 more failed batches since the last report" in details[1]
    assert rows(log, f"SELECT {RAW_LINES}") == [(100,)]


def test_database_errors_roll_the_batch_back_and_go_to_the_caller(tmp_path: Path) -> None:
    """A full disk or an I/O error is the commit loop's to handle: the batch leaves nothing half-written."""
    log = tmp_path / "disk.db"
    ingest, writer = open_log(log)
    ingest.feed([(T0 + i, line(i, T0 + i)) for i in range(10)])

    def hook(batch) -> None:
        raise sqlite3.OperationalError("database or disk is full")

    ingest.hooks.append(hook)
    with pytest.raises(sqlite3.OperationalError):
        ingest.feed([(T0 + i, line(i, T0 + i)) for i in range(10, 20)])
    writer.close()
    assert rows(log, f"SELECT {RAW_LINES}") == [(10,)]


def test_flush_writes_the_lines_held_at_a_stop(tmp_path: Path) -> None:
    log = tmp_path / "flush.db"
    ingest, writer = open_log(log)
    ingest.feed([(T0 + i, line(i, T0 + i)) for i in range(10)] + [(T0 + 10, line(10, T0 + 3600))])
    assert len(ingest.pipeline.held_raw()) == 1  # the jump waits for the lines after it
    ingest.flush()
    writer.close()
    raw_rows = [(r[1], r[2]) for r in raw(log)]
    assert len(raw_rows) == 11 and raw_rows[-1][0] == 0 and "not confirmed" in raw_rows[-1][1]
    assert ingest.malformed == 1


def test_line_queue_is_bounded_and_counts_what_it_refuses() -> None:
    """Issue 10: under a flood the line queue grew without bound (about 545 MB)."""
    q = LineQueue(max_bytes=10 * (100 + ITEM_BYTES))
    for i in range(25):
        q.put_line(1000.0 + i, b"x" * 100)
        if i == 12:
            q.put_event(PortEvent(1000.0 + i, "disconnect", "gone"))  # port events are never refused
    items, overflow = q.drain()
    assert len([x for x in items if not isinstance(x, PortEvent)]) == 10 and any(isinstance(x, PortEvent) for x in items)
    assert overflow is not None and (overflow.lines, overflow.bytes, overflow.first, overflow.last) == (15, 1500, 1010.0, 1024.0)
    assert q.drain() == ([], None)  # counted once
    q.put_line(2000.0, b"y")
    assert q.drain() == ([(2000.0, b"y")], None)  # room again after the drain
