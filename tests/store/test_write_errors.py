"""The writer when the log cannot be written (issue 10, item 3) and its WAL checkpoints (issue 10, item 8).

A real SQLite file runs out of room through ``PRAGMA max_page_count``, SQLite's own
limit, which fails the next page allocation with SQLITE_FULL just as a full disk
does; raising the limit again is space coming back. Clocks are injected. The
subprocess tests on a real small filesystem and under a file-size limit are in
tests/e2e/test_disk_full.py.
"""

from __future__ import annotations

import os
import sqlite3
from pathlib import Path

import pytest

from firewatch.firing.pipeline import Pipeline, channel_table
from firewatch.services.recorder import Ingest, attach_alarms
from firewatch.settings.profile import load_site, profiles_dir
from firewatch.settings.schedule import load_schedule
from firewatch.simulator.run import Simulation
from firewatch.simulator.scenario import load_scenario
from firewatch.store.writer import RETRY_S, LogWriter
from firewatch.transport.native import NativeParser

BATCH = 25
"""Lines per recorder cycle in these tests (a 50 Hz line at 0.5 s cycles)."""


class Clock:
    """An injected monotonic clock."""

    def __init__(self) -> None:
        self.t = 1000.0

    def __call__(self) -> float:
        return self.t


@pytest.fixture(scope="module")
def lines() -> list[tuple[float, bytes]]:
    """The first 1200 lines of the seeded demo firing (one a simulated second)."""
    sc = load_scenario()
    out: list[tuple[float, bytes]] = []
    for chunk in Simulation(sc).chunks():
        out.extend((sc.start_utc + line.sim_s, line.data) for line in chunk if not line.dropped)
        if len(out) >= 1200:
            break
    return out[:1200]


def open_log(path: Path, clock: Clock, hold_lines: int | None = 60_000) -> tuple[LogWriter, Ingest]:
    site = load_site(None)
    schedule = load_schedule(profiles_dir() / "demo-glaze.toml")
    writer = LogWriter(path, channel_table(site, schedule), clock="device", hold_lines=hold_lines, monotonic_fn=clock, clock_fn=lambda: 1.7e9 + clock.t)
    ingest = Ingest(Pipeline(site, schedule, "device"), writer, NativeParser())
    attach_alarms(ingest, site, schedule)
    return writer, ingest


def fill(writer: LogWriter, slack: int = 0) -> None:
    """``slack`` pages more, then allocations fail with SQLITE_FULL, as on a full disk."""
    pages = writer.con.execute("PRAGMA page_count").fetchone()[0]
    writer.con.execute(f"PRAGMA max_page_count = {pages + slack}")


def free(writer: LogWriter) -> None:
    writer.con.execute("PRAGMA max_page_count = 1073741823")


def feed(writer: LogWriter, ingest: Ingest, clock: Clock, part: list[tuple[float, bytes]]) -> list[str]:
    """One recorder cycle per BATCH lines, half a second apart; what the writer said."""
    told: list[str] = []
    for i in range(0, len(part), BATCH):
        ingest.feed(part[i : i + BATCH])
        clock.t += 0.5
        told += writer.commit(part[min(i + BATCH, len(part)) - 1][0])
    return told


def rows(path: Path, sql: str) -> list[tuple]:
    con = sqlite3.connect(path)
    try:
        return con.execute(sql).fetchall()
    finally:
        con.close()


def reference(tmp_path: Path, lines: list[tuple[float, bytes]]) -> Path:
    """The same lines written with no fault."""
    clock = Clock()
    writer, ingest = open_log(tmp_path / "reference.db", clock)
    feed(writer, ingest, clock, lines)
    writer.close("stopped")
    return tmp_path / "reference.db"


SAME = [
    "SELECT channel_id, sample_id, t, value, status FROM reading ORDER BY channel_id, sample_id",
    "SELECT * FROM sample ORDER BY id",
    "SELECT * FROM flag ORDER BY channel_id, first_id",
    "SELECT * FROM step ORDER BY sample_id",
    "SELECT * FROM latest ORDER BY channel_id",
    "SELECT id, last_id, n, bad, received, ok, lengths, size, lines, reasons FROM raw_block ORDER BY id",
    "SELECT id, received_utc, line, ok FROM raw_line ORDER BY id",
    "SELECT channel_id, minute, lo, hi, n FROM trend_minute ORDER BY channel_id, minute",
    "SELECT id, kind, channel, raised_t, state FROM alarm ORDER BY id",
    "SELECT started_t, ended_t FROM firing",
]


def test_full_log_holds_and_rewrites_everything_when_space_returns(tmp_path: Path, lines) -> None:
    """Issue 10: a full disk ended the recorder; now the writes are held and re-applied, none lost, none twice."""
    clock = Clock()
    log = tmp_path / "k.db"
    writer, ingest = open_log(log, clock)
    assert feed(writer, ingest, clock, lines[:200]) == []
    fill(writer)
    told = feed(writer, ingest, clock, lines[200:800])  # 5 minutes of cycles without room
    assert len(told) == 1, told  # said once, not at every retry
    assert told[0].startswith(f"cannot write to {log}: the disk is full") and "holding readings in memory (up to 60,000 lines" in told[0]
    assert writer.outage is not None
    free(writer)
    clock.t += RETRY_S
    told = feed(writer, ingest, clock, lines[800:])
    assert len(told) == 1 and told[0].startswith(f"writing to {log} again after ") and told[0].endswith(", none lost"), told
    assert writer.outage is None
    assert writer.close("stopped") == []

    ref = reference(tmp_path, lines)
    for sql in SAME:
        assert rows(log, sql) == rows(ref, sql), sql
    kinds = [k for (k,) in rows(log, "SELECT kind FROM event WHERE kind LIKE 'write-%' ORDER BY id")]
    assert kinds == ["write-error", "write-resumed"]
    assert rows(log, "SELECT count(*) FROM gap") == [(0,)]
    assert rows(log, "SELECT end_reason FROM session") == [("stopped",)]
    assert rows(log, "PRAGMA integrity_check") == [("ok",)]


def test_past_the_bound_the_oldest_are_dropped_and_recorded_as_a_gap(tmp_path: Path, lines) -> None:
    """Issue 10: past the stated bound the writer drops the oldest held readings and says how many."""
    clock = Clock()
    log = tmp_path / "k.db"
    writer, ingest = open_log(log, clock, hold_lines=150)
    feed(writer, ingest, clock, lines[:200])
    last_durable = rows(log, "SELECT max(t) FROM sample")[0][0]
    fill(writer)
    told = feed(writer, ingest, clock, lines[200:600])
    assert len(told) == 2 and told[0].startswith("cannot write") and "up to 150 lines" in told[0]
    assert "more than 150 lines held in memory; dropping the oldest" in told[1]
    free(writer)
    clock.t += RETRY_S
    told = feed(writer, ingest, clock, lines[600:700])
    assert len(told) == 1 and "lines dropped, oldest first, recorded as a gap" in told[0], told
    dropped = int(told[0].split("; ")[-1].split(" lines dropped")[0].replace(",", ""))
    writer.close("stopped")

    # a sample's number in the simulated stream, from its time (one line a simulated second; the log keeps no sequence numbers)
    seqs = [round(t - lines[0][0]) for (t,) in rows(log, "SELECT t FROM sample ORDER BY id")]
    assert len(seqs) == 700 - dropped  # every line is a good sample in the simulated stream
    missing = sorted(set(range(seqs[0], seqs[-1] + 1)) - set(seqs))
    # the oldest held ones went: one run right after what was on disk, the newest kept
    assert len(missing) == dropped and missing == list(range(missing[0], missing[0] + dropped))
    assert missing[0] == seqs[199] + 1
    # held when space came back (the first batch after it was still held): whole batches up to the bound
    held_at_resume = len(seqs) - 200 - (100 - BATCH)
    assert 150 - 2 * BATCH < held_at_resume <= 150
    (gap,) = rows(log, "SELECT start_t, end_t, reason FROM gap")
    first_kept = rows(log, f"SELECT min(t) FROM sample WHERE t > {lines[0][0] + missing[-1]}")[0][0]
    assert gap == (last_durable, first_kept, "write error")
    # events and alarm transitions are not dropped while readings are left to drop
    assert [k for (k,) in rows(log, "SELECT kind FROM event WHERE kind LIKE 'write-%'")] == ["write-error", "write-resumed"]


def test_stop_while_full_still_closes_the_session(tmp_path: Path, lines) -> None:
    """Issue 10: a stop during the outage closes the session with its reason; what cannot be written is a gap."""
    clock = Clock()
    log = tmp_path / "k.db"
    writer, ingest = open_log(log, clock)
    feed(writer, ingest, clock, lines[:100])
    fill(writer)
    feed(writer, ingest, clock, lines[100:400])
    writer.event(lines[399][0], "stop", "signal")
    fill(writer, slack=3)  # room for a few pages (on a disk the reserve gives it back), not for 300 lines
    told = writer.close("signal", lines[399][0])
    (resumed,) = [t for t in told if "lines dropped, oldest first, recorded as a gap" in t]
    dropped = int(resumed.split("; ")[-1].split(" lines dropped")[0].replace(",", ""))
    assert not (tmp_path / "k.db.reserve").exists()
    ((ended, reason),) = rows(log, "SELECT ended_utc, end_reason FROM session")
    assert ended is not None and reason == "signal"
    (gap,) = rows(log, "SELECT reason FROM gap")
    assert gap == ("write error",)
    ((kept,),) = rows(log, "SELECT count(*) FROM sample")
    assert kept == 100 and dropped == 300  # every line is either in the log or counted in the gap
    # the readings went first; the events about the outage and the stop were kept
    kinds = [k for (k,) in rows(log, "SELECT kind FROM event")]
    assert sorted(kinds) == ["gap", "stop", "write-error", "write-resumed"], kinds
    assert rows(log, "PRAGMA integrity_check") == [("ok",)]


def test_a_held_write_that_can_never_succeed_does_not_block_the_rest(tmp_path: Path, lines) -> None:
    """Issue 10 (the recorder never dies): a held statement that fails for its own reason is dropped, not retried forever."""
    clock = Clock()
    log = tmp_path / "k.db"
    writer, ingest = open_log(log, clock)
    feed(writer, ingest, clock, lines[:50])
    fill(writer)
    feed(writer, ingest, clock, lines[50:100])
    writer.execute("INSERT INTO no_such_table VALUES (1)")  # held while the log cannot be written
    feed(writer, ingest, clock, lines[100:150])
    free(writer)
    clock.t += RETRY_S
    told = feed(writer, ingest, clock, lines[150:200])
    assert len(told) == 1 and told[0].endswith("lines held in memory written; 1 other records dropped"), told
    writer.close()
    assert rows(log, "SELECT count(*) FROM sample") == [(200,)]


def test_batch_writer_raises_one_clear_error(tmp_path: Path, lines) -> None:
    """``sim --to-log`` holds nothing: a full log is a LogWriteError naming the file."""
    from firewatch.store._common import LogWriteError

    clock = Clock()
    writer, ingest = open_log(tmp_path / "batch.db", clock, hold_lines=None)
    assert not (tmp_path / "batch.db.reserve").exists()
    ingest.feed(lines[:50])
    writer.commit()
    fill(writer)
    with pytest.raises(LogWriteError, match=r"batch\.db: cannot write: the disk is full"):
        for i in range(50, 1200, BATCH):
            ingest.feed(lines[i : i + BATCH])
            writer.commit()


def test_reserve_is_kept_beside_the_log_and_never_follows_a_link(tmp_path: Path) -> None:
    """The reserve that closes a session on a full disk: 1 MiB, replaced (not followed) if it is a link."""
    victim = tmp_path / "victim"
    victim.write_text("keep me")
    (tmp_path / "k.db.reserve").symlink_to(victim)
    writer, _ = open_log(tmp_path / "k.db", Clock())
    reserve = tmp_path / "k.db.reserve"
    assert not reserve.is_symlink() and reserve.stat().st_blocks * 512 >= 1 << 20
    assert victim.read_text() == "keep me"
    writer.close()
    assert not reserve.exists()


def test_wal_is_truncated_after_readers_finish(tmp_path: Path, lines) -> None:
    """Issue 10 item 8: the WAL stayed at its largest; now it is checkpointed and truncated, waiting for readers."""
    clock = Clock()
    log = tmp_path / "k.db"
    writer, ingest = open_log(log, clock)
    writer._wal_checkpoint_bytes = 256 << 10  # a small threshold, so that a few cycles pass it
    wal = Path(f"{log}-wal")
    sizes = []
    for i in range(0, 400, BATCH):
        ingest.feed(lines[i : i + BATCH])
        writer.commit()
        sizes.append(wal.stat().st_size)
    assert 0 in sizes  # truncated, not merely rewound
    # a reader in a long transaction: the checkpoint cannot finish, so the WAL grows meanwhile ...
    reader = sqlite3.connect(f"file:{log}?mode=ro", uri=True, isolation_level=None)
    reader.execute("BEGIN")
    reader.execute("SELECT count(*) FROM sample").fetchone()
    grown = []
    for i in range(400, 800, BATCH):
        ingest.feed(lines[i : i + BATCH])
        clock.t += 0.5
        writer.commit()
        grown.append(wal.stat().st_size)
    assert grown[-1] > 256 << 10 and 0 not in grown
    # ... and once it has finished, the next checkpoint truncates it
    reader.execute("COMMIT")
    reader.close()
    clock.t += 1.0
    ingest.feed(lines[800:825])
    writer.commit()
    assert wal.stat().st_size == 0
    writer.close()
    assert rows(log, "SELECT count(*) FROM sample") == [(825,)]
    assert os.path.getsize(log) > 0
