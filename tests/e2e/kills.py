"""Kill the recorder again and again on one log: a line server on 127.0.0.1, the real ``firewatch record``, SIGKILL.

Shared by ``tests/e2e/test_recording.py`` (a few kills) and ``benchmarks/bench_kills.py`` (50, by hand), for
issue 15 item 4: commits at least every second, at most 1 s of lines lost on SIGKILL, integrity after every kill.

The log is read only through public routes, whatever its storage layout: ``PRAGMA integrity_check``, the documented
``readings`` view, the session's ``heartbeat_utc`` (docs/log-format.md) and ``firewatch inspect --json``.

The line server stamps each line with its own send time as the device time (``--clock device``), so a reading's ``t``
in the log is the moment its line was sent: the lines missing after a kill, and how long before the kill they were
sent, are read off exactly rather than estimated from counts.
"""

from __future__ import annotations

import random
import signal
import socket
import sqlite3
import statistics
import threading
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

from firewatch.transport.native import encode
from firewatch.transport.records import Value
from tests.e2e.helpers import firewatch, stop

CHANNEL = "tc1"
"""The channel whose readings are counted: every line carries it, and it is measured (stored in any layout)."""

LOSS_LIMIT_S = 1.0
"""Issue 15 item 4: lines sent more than this long before a SIGKILL must be in the log."""


class LineServer:
    """A device server on 127.0.0.1 sending native lines at ``rate_hz`` to whoever is connected, one client at a time.

    Each line's device time is its send time (wall clock, to the millisecond the format carries). ``connections``
    holds, for each client in turn, when it was accepted (wall clock) and the device times of every line whose
    ``sendall`` returned, in order. Lines are sent only while a client is connected, as a device server's buffer is
    not part of what the recorder is responsible for. A killed client's socket may still take a line or two before
    the server notices; they count for that client, not the next.
    """

    def __init__(self, rate_hz: float = 20.0) -> None:
        self.rate_hz = rate_hz
        self.connections: list[tuple[float, list[float]]] = []
        self._lock = threading.Lock()
        self._stop = threading.Event()
        self._server = socket.create_server(("127.0.0.1", 0))
        self._server.settimeout(0.2)
        self.port: int = self._server.getsockname()[1]
        self._thread = threading.Thread(target=self._run, name="line-server", daemon=True)

    def __enter__(self) -> LineServer:
        self._thread.start()
        return self

    def __exit__(self, *exc: object) -> None:
        self._stop.set()
        self._thread.join(5)
        self._server.close()

    def sent_since(self, accepted_after: float, until: float) -> list[float]:
        """Device times of the lines sent up to ``until`` to the clients accepted after ``accepted_after``."""
        with self._lock:
            return [t for accepted, sent in self.connections if accepted >= accepted_after for t in sent if t <= until]

    def _run(self) -> None:
        seq = 0
        last = 0.0
        while not self._stop.is_set():
            try:
                conn, _ = self._server.accept()
            except TimeoutError:
                continue
            with conn:
                sent: list[float] = []
                with self._lock:
                    self.connections.append((time.time(), sent))
                due = time.monotonic()
                while not self._stop.is_set():
                    # the device time carries milliseconds: keep it strictly increasing at that resolution
                    stamp = float(f"{max(time.time(), last + 0.001):.3f}")
                    try:
                        conn.sendall(encode(_values(seq), seq, stamp))
                    except OSError:  # the recorder was killed: wait for the next one
                        break
                    with self._lock:
                        sent.append(stamp)
                    last, seq = stamp, seq + 1
                    due += 1.0 / self.rate_hz
                    # pacing a line source, not waiting for a condition
                    self._stop.wait(max(0.0, due - time.monotonic()))


def _values(seq: int) -> list[Value]:
    """A kiln near 800 °C (the demo site's channels: tc1 type K, tc2 type S); small steps so rates stay quiet."""
    wobble = 0.001 * (seq % 20)
    return [
        Value("cj", 24.0, "C"),
        Value("tc1", 32.28 + wobble, "mV"),  # about 800 °C with the junction at 24 °C (type K), from memory
        Value("tc2", 7.20 + wobble, "mV"),  # about 800 °C (type S), from memory
        Value("py1", 800.0 + 10 * wobble, "C"),
        Value("py2", 800.0 + 10 * wobble, "C"),
    ]


@dataclass
class Kill:
    """What one SIGKILL left behind."""

    n: int
    start_s: float
    """From starting the recorder to its first new reading committed (the time to restart; the first one is a start)."""
    ran_s: float
    """From that first new reading to the kill (random)."""
    integrity: str
    """``PRAGMA integrity_check``'s first row, read right after the kill."""
    sent: int
    """Lines this run's recorder was sent before the kill."""
    kept: int
    """Of them, readings in the log (``SELECT count(*) FROM readings``)."""
    logged: int
    """Readings this run added to the log, with those of lines it read after a SIGTERM."""
    missing_old: int
    """Lines sent more than ``LOSS_LIMIT_S`` before the kill that are not in the log (must be 0)."""
    strangers: int
    """Readings in the log at times no line was sent (must be 0)."""
    loss_s: float
    """The kill's time less the send time of the oldest line that is not in the log; 0 when none is missing."""
    continued: bool
    """The recorder said it continued the firing (every start but the first)."""
    commit_gaps_s: list[float] = field(default_factory=list)
    """Successive changes of the session's heartbeat while it ran: the recorder rewrites it in every commit."""


@dataclass
class Campaign:
    kills: list[Kill]
    final: Kill
    """The run after the last kill, stopped with SIGTERM: the control, which should lose nothing."""
    seed: int

    def commit_gaps(self) -> list[float]:
        return [g for k in [*self.kills, self.final] for g in k.commit_gaps_s]


def _connect(log: Path) -> sqlite3.Connection | None:
    """A short read-only connection, as a viewer opens one; None while the log does not exist yet."""
    if not log.exists():
        return None
    return sqlite3.connect(f"file:{log}?mode=ro", uri=True, timeout=5.0)


def newest(log: Path) -> float | None:
    """The newest reading's time on :data:`CHANNEL`, or None while there is none (or no firing log yet)."""
    con = _connect(log)
    if con is None:
        return None
    try:
        return con.execute("SELECT max(t) FROM readings WHERE channel = ?", (CHANNEL,)).fetchone()[0]
    except sqlite3.Error:  # the recorder is still writing the schema
        return None
    finally:
        con.close()


def heartbeat(log: Path) -> float | None:
    """The latest session's heartbeat (docs/log-format.md: rewritten in every commit)."""
    con = _connect(log)
    if con is None:
        return None
    try:
        row = con.execute("SELECT heartbeat_utc FROM session ORDER BY started_utc DESC LIMIT 1").fetchone()
    except sqlite3.Error:
        return None
    finally:
        con.close()
    return None if row is None else row[0]


def _check(log: Path, server: LineServer, n: int, spawned: float, first: float, killed: float, err: str, gaps: list[float]) -> Kill:
    """Read the log after a run: integrity, and which of the lines sent since ``spawned`` it holds."""
    con = sqlite3.connect(f"file:{log}?mode=ro", uri=True)
    try:
        integrity = con.execute("PRAGMA integrity_check").fetchone()[0]
        count = "SELECT count(*) FROM readings WHERE channel = ? AND t BETWEEN ? AND ?"
        kept_n = con.execute(count, (CHANNEL, spawned, killed)).fetchone()[0]
        logged_n = con.execute(count, (CHANNEL, spawned, killed + 5.0)).fetchone()[0]
        kept = {row[0] for row in con.execute("SELECT t FROM readings WHERE channel = ? AND t BETWEEN ? AND ?", (CHANNEL, spawned, killed + 5.0))}
    finally:
        con.close()
    sent = server.sent_since(spawned, killed)
    missing = [t for t in sent if t not in kept]
    return Kill(
        n=n,
        start_s=first - spawned,
        ran_s=killed - first,
        integrity=integrity,
        sent=len(sent),
        kept=kept_n,
        logged=logged_n,
        missing_old=sum(1 for t in missing if t < killed - LOSS_LIMIT_S),
        strangers=len(kept - set(server.sent_since(spawned, killed + 5.0))),
        loss_s=max(0.0, killed - missing[0]) if missing else 0.0,
        continued="continuing the firing" in err,
        commit_gaps_s=gaps,
    )


def _run_once(log: Path, server: LineServer, n: int, run_s: float, sig: int, timeout_s: float) -> Kill:
    before = newest(log) or 0.0
    spawned = time.time()
    rec = firewatch("record", "--port", f"socket://127.0.0.1:{server.port}", "--log", str(log), "--clock", "device")
    try:
        deadline = time.monotonic() + timeout_s
        while (latest := newest(log)) is None or latest <= before:
            if rec.poll() is not None or time.monotonic() > deadline:
                _, err = stop(rec, signal.SIGKILL)
                raise AssertionError(f"run {n}: the recorder committed nothing new (exit {rec.returncode}): {err.strip()[-500:]}")
            time.sleep(0.02)
        first = time.time()
        # the random moment: watch the heartbeat meanwhile, a commit is a new value
        beats: list[float] = []
        until = first + run_s
        while time.time() < until:
            beat = heartbeat(log)
            if beat is not None and (not beats or beat != beats[-1]):
                beats.append(beat)
            time.sleep(0.02)
        killed = time.time()
        _, err = stop(rec, sig)
    except BaseException:
        stop(rec, signal.SIGKILL)
        raise
    if sig != signal.SIGKILL and rec.returncode != 0:
        raise AssertionError(f"run {n}: the recorder ended with {rec.returncode}: {err.strip()[-500:]}")
    gaps = [b - a for a, b in zip(beats, beats[1:])]
    return _check(log, server, n, spawned, first, killed, err, gaps)


def campaign(
    log: Path,
    server: LineServer,
    kills: int,
    seed: int,
    run_s: tuple[float, float] = (0.3, 3.0),
    on_kill: Callable[[Kill], None] | None = None,
    timeout_s: float = 60.0,
) -> Campaign:
    """Start the recorder on ``log``, SIGKILL it after a random ``run_s`` from its first new reading, ``kills`` times;
    then start it once more and stop it with SIGTERM (the control). Every start after the first continues the log."""
    rng = random.Random(seed)
    done = []
    for n in range(1, kills + 1):
        kill = _run_once(log, server, n, rng.uniform(*run_s), signal.SIGKILL, timeout_s)
        done.append(kill)
        if on_kill is not None:
            on_kill(kill)
    final = _run_once(log, server, kills + 1, rng.uniform(*run_s), signal.SIGTERM, timeout_s)
    return Campaign(done, final, seed)


def median(values: list[float]) -> float:
    return statistics.median(values) if values else float("nan")
