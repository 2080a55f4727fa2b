"""End to end: a recorder whose log cannot be written (issue 10, item 3) and a WAL under a flood (item 8).

Real subprocesses, a real simulator over TCP on 127.0.0.1, and a real small
filesystem: a tmpfs mounted for the test when it runs as root, else the same
story told by a file-size limit (RLIMIT_FSIZE, set in the recorder's process
only), which needs no privilege.
"""

from __future__ import annotations

import errno
import os
import re
import resource
import signal
import socket
import sqlite3
import subprocess
import threading
import time
from pathlib import Path

import pytest

from firewatch.simulator.run import Simulation
from firewatch.simulator.scenario import load_scenario
from tests.e2e.helpers import RAW_LINES, firewatch, raw, run, samples, start_sim_tcp, stop, wait_for


class Stderr:
    """A child's stderr, read by a thread as it comes."""

    def __init__(self, proc: subprocess.Popen) -> None:
        self.lines: list[str] = []
        self._thread = threading.Thread(target=self._read, args=(proc,), daemon=True)
        self._thread.start()

    def _read(self, proc: subprocess.Popen) -> None:
        for line in proc.stderr:
            self.lines.append(line)

    def has(self, text: str) -> bool:
        return any(text in line for line in self.lines)

    def text(self, proc: subprocess.Popen) -> str:
        proc.wait(30)
        self._thread.join(10)
        return "".join(self.lines)


def halt(proc: subprocess.Popen, timeout: float = 60.0) -> None:
    """SIGTERM, as an operator's stop; the stderr stays with its reader thread."""
    if proc.poll() is None:
        proc.send_signal(signal.SIGTERM)
    try:
        proc.wait(timeout)
    except subprocess.TimeoutExpired:
        proc.kill()
        proc.wait()


@pytest.fixture
def small_fs(tmp_path: Path):
    """A 16 MiB tmpfs, unmounted afterwards."""
    if os.geteuid() != 0:
        pytest.skip("mounting a tmpfs needs root; the RLIMIT_FSIZE tests below cover the same without it")
    mnt = tmp_path / "fs"
    mnt.mkdir()
    done = subprocess.run(["mount", "-t", "tmpfs", "-o", "size=16m", "tmpfs", str(mnt)], capture_output=True, text=True, check=False)
    if done.returncode != 0:
        pytest.skip(f"cannot mount a tmpfs here: {done.stderr.strip()}")
    try:
        yield mnt
    finally:
        subprocess.run(["umount", "-l", str(mnt)], check=False)


def fill(directory: Path) -> Path:
    """A filler file that takes every free byte of the filesystem (called again, it takes what was freed since)."""
    filler = directory / "filler"
    fd = os.open(filler, os.O_WRONLY | os.O_CREAT | os.O_APPEND, 0o600)
    try:
        for size in (1 << 20, 1 << 16, 1 << 12, 1):
            block = b"\0" * size
            try:
                while os.write(fd, block):
                    pass
            except OSError as exc:
                assert exc.errno == errno.ENOSPC, exc
    finally:
        os.close(fd)
    return filler


def stop_line(err: str) -> tuple[int, int]:
    """Lines and malformed lines from the recorder's closing line."""
    m = re.search(r"stopped: \w+; (\d+) lines, (\d+) malformed", err)
    assert m, err
    return int(m.group(1)), int(m.group(2))


def _seq_range(log: Path) -> tuple[int, int]:
    """The first and last sequence number of the good lines (the log keeps the lines, not the numbers apart)."""
    seqs = [int(line.split()[1]) for line, ok, _ in raw(log) if ok]
    return min(seqs), max(seqs)


def check_nothing_lost(log: Path, err: str) -> None:
    """Every line the recorder received is in the log, and the sequence numbers have no hole."""
    received, malformed = stop_line(err)
    con = sqlite3.connect(log)
    try:
        raw, good, first, last, gaps, kinds, session = (
            con.execute(f"SELECT {RAW_LINES}").fetchone()[0],
            con.execute("SELECT count(*) FROM sample").fetchone()[0],
            *_seq_range(log),
            con.execute("SELECT reason FROM gap").fetchall(),
            [k for (k,) in con.execute("SELECT kind FROM event WHERE kind LIKE 'write-%' ORDER BY id")],
            con.execute("SELECT ended_utc, end_reason FROM session").fetchall(),
        )
        assert con.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
    finally:
        con.close()
    assert raw == received and good == received - malformed
    assert last - first + 1 == good  # the simulator numbers its lines one by one
    assert gaps == []
    assert kinds == ["write-error", "write-resumed"]
    assert session[-1][0] is not None and session[-1][1] == "signal"


def test_full_disk_then_space_comes_back_loses_nothing(small_fs: Path) -> None:
    """Issue 10: a full disk ended the recorder with a traceback; now it holds, says so once, and loses nothing."""
    sim, port = start_sim_tcp("--speed", "50")
    log = small_fs / "k.db"
    rec = firewatch("record", "--port", f"socket://127.0.0.1:{port}", "--log", str(log), "--clock", "device")
    err = Stderr(rec)
    try:
        wait_for(lambda: samples(log) > 100)
        filler = fill(small_fs)
        wait_for(lambda: err.has("cannot write"), timeout=30)
        fill(small_fs)  # whatever a checkpoint freed meanwhile
        before = samples(log)
        time.sleep(4.0)  # readings keep arriving while the disk is full
        assert rec.poll() is None
        assert samples(log) == before  # held in memory, not written
        filler.unlink()
        wait_for(lambda: err.has("again after"), timeout=30)
        wait_for(lambda: samples(log) > before + 400)
    finally:
        halt(rec)
        stop(sim)
    text = err.text(rec)
    assert rec.returncode == 0, text
    assert "Traceback" not in text
    (said,) = [line for line in text.splitlines() if "cannot write" in line]  # once, in one line
    # one log record (time, level, source: issue 11's journald-ready lines) naming the log and what is wrong
    assert " WARNING firewatch.services.recorder: " in said
    assert said.split(" WARNING firewatch.services.recorder: ", 1)[1].startswith(f"cannot write to {log}: the disk is full")
    assert "holding readings in memory (up to 60,000 lines" in said
    (again,) = [line for line in text.splitlines() if "again after" in line]
    assert again.endswith(", none lost")
    check_nothing_lost(log, text)
    assert not Path(f"{log}.reserve").exists()


def test_stop_during_a_full_disk_closes_the_session(small_fs: Path) -> None:
    """Issue 10: a stop during the outage still closes the session with its reason (the reserve gives the room)."""
    sim, port = start_sim_tcp("--speed", "50")
    log = small_fs / "k.db"
    rec = firewatch("record", "--port", f"socket://127.0.0.1:{port}", "--log", str(log), "--clock", "device")
    err = Stderr(rec)
    try:
        wait_for(lambda: samples(log) > 50)
        fill(small_fs)
        wait_for(lambda: err.has("cannot write"), timeout=30)
        time.sleep(2.0)
    finally:
        halt(rec)
        stop(sim)
    text = err.text(rec)
    assert rec.returncode == 0 and "Traceback" not in text, text
    # the held seconds fit in the reserve given back: written, then the session closed
    check_nothing_lost(log, text)
    con = sqlite3.connect(log)
    kinds = [k for (k,) in con.execute("SELECT kind FROM event")]
    con.close()
    assert kinds[-1] == "write-resumed" and "stop" in kinds


def test_starting_on_a_full_disk_is_one_line(small_fs: Path) -> None:
    """Issue 10: restarting on the full disk gave another traceback; now one line and exit status 2."""
    log = small_fs / "k.db"
    first = run("record", "--port", "loop://", "--log", str(log), "--for", "1", timeout=60)
    assert first.returncode == 0, first.stderr
    fill(small_fs)
    for target in (log, small_fs / "new.db"):  # continuing a firing, and a new one
        out = run("record", "--port", "loop://", "--log", str(target), "--for", "1", timeout=60)
        assert out.returncode == 2, out.stderr
        assert out.stderr.count("\n") == 1 and "Traceback" not in out.stderr
        assert out.stderr.startswith(f"firewatch record: --log: {target}: cannot write: the disk is full")


def _limit_file_size(limit: int):
    def apply() -> None:
        resource.setrlimit(resource.RLIMIT_FSIZE, (limit, resource.RLIM_INFINITY))

    return apply


def test_file_size_limit_then_raised_loses_nothing(tmp_path: Path) -> None:
    """Issue 10, without root: the log meets a file-size limit (ulimit -f), which is raised later; nothing is lost."""
    # the compact log grows about 80 bytes a line: at 600 lines a second it meets 1.5 MiB in about half a minute
    sim, port = start_sim_tcp("--speed", "600")
    log = tmp_path / "k.db"
    rec = firewatch("record", "--port", f"socket://127.0.0.1:{port}", "--log", str(log), "--clock", "device",
                    preexec_fn=_limit_file_size(3 << 19))
    err = Stderr(rec)
    try:
        wait_for(lambda: err.has("cannot write"), timeout=90)
        time.sleep(3.0)
        assert rec.poll() is None
        before = samples(log)
        resource.prlimit(rec.pid, resource.RLIMIT_FSIZE, (resource.RLIM_INFINITY, resource.RLIM_INFINITY))
        wait_for(lambda: err.has("again after"), timeout=30)
        wait_for(lambda: samples(log) > before + 1000)
    finally:
        halt(rec)
        stop(sim)
    text = err.text(rec)
    assert rec.returncode == 0 and "Traceback" not in text, text
    (said,) = [line for line in text.splitlines() if "cannot write" in line]
    assert said.split(" WARNING firewatch.services.recorder: ", 1)[1].startswith(
        f"cannot write to {log}: the file size limit (ulimit -f) of 1.5 MiB is reached")
    check_nothing_lost(log, text)


def test_starting_under_a_small_file_size_limit_is_one_line(tmp_path: Path) -> None:
    """Issue 10, without root: a recorder that cannot keep its reserve says so in one line, exit status 2."""
    log = tmp_path / "k.db"
    proc = firewatch("record", "--port", "loop://", "--log", str(log), "--for", "1", preexec_fn=_limit_file_size(256 << 10))
    _, err = proc.communicate(timeout=60)
    assert proc.returncode == 2, err
    assert err.count("\n") == 1 and "Traceback" not in err
    assert err.startswith(f"firewatch record: --log: {log}: cannot write: the file size limit (ulimit -f) of 256.0 KiB is reached")


WAL_BOUND = 8 << 20
"""The stated bound: 4 MiB, the truncating checkpoint's threshold, plus one transaction of at most 2,000 lines
(about 2 MB for the demo kiln's 15 channels)."""


def test_wal_stays_bounded_under_a_flood_with_a_reader(tmp_path: Path) -> None:
    """Issue 10 item 8: under a flood the WAL reached 153 MB and stayed there; now it stays under WAL_BOUND."""
    sc = load_scenario()
    lines = []
    for chunk in Simulation(sc).chunks():
        lines.extend(line.data for line in chunk if not line.dropped)
        if len(lines) >= 40_000:
            break
    flood = b"".join(lines[:40_000])
    server = socket.create_server(("127.0.0.1", 0))
    port = server.getsockname()[1]

    def opened() -> bool:
        try:
            con = sqlite3.connect(f"file:{log}?mode=ro", uri=True)
            try:
                return con.execute("SELECT count(*) FROM event WHERE kind = 'open'").fetchone()[0] > 0
            finally:
                con.close()
        except sqlite3.Error:
            return False

    def serve() -> None:  # a device server that sends 40,000 lines at once, then stays connected
        client, _ = server.accept()
        with client:
            wait_for(opened)  # pyserial discards what arrives while it opens the port
            client.sendall(flood)
            while not done.is_set():
                done.wait(0.2)

    done = threading.Event()
    threading.Thread(target=serve, daemon=True).start()
    log = tmp_path / "flood.db"
    wal = Path(f"{log}-wal")
    rec = firewatch("record", "--port", f"socket://127.0.0.1:{port}", "--log", str(log), "--clock", "device")
    sizes: list[int] = []
    polls = 0

    def reader() -> None:  # a viewer: short read-only transactions, several a second
        nonlocal polls
        while not done.is_set():
            try:
                con = sqlite3.connect(f"file:{log}?mode=ro", uri=True)
                con.execute("SELECT max(t), max(id) FROM sample").fetchone()
                con.execute("SELECT t, kind, detail FROM event ORDER BY id DESC LIMIT 30").fetchall()
                con.close()
                polls += 1
            except sqlite3.Error:
                pass
            done.wait(0.2)

    threading.Thread(target=reader, daemon=True).start()
    try:
        deadline = time.monotonic() + 180
        while samples(log) < 39_000 and time.monotonic() < deadline:
            if wal.exists():
                sizes.append(wal.stat().st_size)
            time.sleep(0.05)
        time.sleep(2.0)
        settled = wal.stat().st_size if wal.exists() else 0
    finally:
        done.set()
        _, err = stop(rec, timeout=120)
        server.close()
    assert rec.returncode == 0, err
    assert samples(log) >= 39_000 and polls > 10, err
    assert max(sizes) < WAL_BOUND, f"WAL reached {max(sizes) / 1e6:.1f} MB"
    assert settled <= 4 << 20  # and it does not stay at its largest
