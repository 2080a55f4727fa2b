"""The one writer of a firing log (the recorder, or ``sim --to-log``).

A lock file beside the log (``FILE.db.lock``, held with ``flock``, released by
the kernel even on SIGKILL) refuses a second writer. Durability: the recorder
commits at least once a second with ``synchronous=FULL``, so a crash or power
cut loses at most what was not yet committed; SQLite's WAL keeps the file
intact through SIGKILL.
"""

from __future__ import annotations

import errno
import fcntl
import os
import socket
import sqlite3
import threading
import stat
import time
from collections.abc import Iterable
from pathlib import Path
from typing import Any

import numpy as np

from firewatch import __version__
from firewatch.firing.pipeline import Batch, ChannelInfo
from firewatch.store._common import SCHEMA_VERSION, LogError, LogLocked, _connect, schema_sql

__all__ = ["LogWriter", "BriefWrite", "take_lock", "release_lock", "BRIEF_HOLDER", "BRIEF_WAIT_S"]

BRIEF_HOLDER = "a viewer's brief write"
"""Written into the lock file by a viewer that holds the lock for one operator action."""
BRIEF_WAIT_S = 2.0
"""How long a writer waits for a viewer's brief write to finish before giving up, seconds (a brief write
takes milliseconds; a recorder's lock is never waited for)."""


def take_lock(path: Path, holder: str, wait_brief_s: float = BRIEF_WAIT_S, clock=time.monotonic) -> int:
    """Take the log's writer lock ``FILE.db.lock`` (``flock``, exclusive, never blocking); return its descriptor.

    One writer at a time, always: the recorder for a whole session, or a viewer
    for one operator action. A viewer's brief write is waited for (polled for up
    to ``wait_brief_s``); any other holder is refused at once.

    Raises
    ------
    LogLocked
        Another process holds the lock; the message names it.
    """
    fd = _open_lock(Path(f"{path}.lock"))
    deadline: float | None = None
    while True:
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
            break
        except BlockingIOError:
            who = os.pread(fd, 200, 0).decode(errors="replace").strip() or "another process"
            if BRIEF_HOLDER in who:
                now = clock()
                deadline = now + wait_brief_s if deadline is None else deadline
                if now < deadline:
                    threading.Event().wait(0.02)  # a brief write lasts milliseconds; flock has no timeout
                    continue
            os.close(fd)
            if BRIEF_HOLDER in who:
                raise LogLocked(f"{path} is being written by {who}; try again") from None
            raise LogLocked(f"{path} is already being recorded by {who}; one recorder per log") from None
    os.ftruncate(fd, 0)
    os.pwrite(fd, f"{holder}\n".encode(), 0)
    return fd


def release_lock(fd: int) -> None:
    """Give the writer lock back (the kernel does it too if the process dies)."""
    try:
        fcntl.flock(fd, fcntl.LOCK_UN)
        os.close(fd)
    except OSError:
        pass


def _upgrade(con: sqlite3.Connection) -> None:
    """Bring a version 1 log to version 2 in place (adds ``session.heartbeat_utc``); inside the caller's transaction."""
    columns = {r[1] for r in con.execute("PRAGMA table_info(session)")}
    if "heartbeat_utc" not in columns:
        con.execute("ALTER TABLE session ADD COLUMN heartbeat_utc REAL")
    con.execute("UPDATE meta SET value = ? WHERE key = 'schema_version'", (str(SCHEMA_VERSION),))


def _open_lock(path: Path) -> int:
    """Open (or create) the lock file without following a link, and only if it is a file of its own.

    The writer truncates and rewrites its lock file, so a symbolic link planted at ``FILE.db.lock``
    would make it overwrite the link's target, and so would a hard link to another file.
    ``O_NOFOLLOW`` refuses the link (``open(2)`` fails with ELOOP); the checks on the opened file
    refuse anything but a regular file with one name. ``O_NONBLOCK`` keeps a FIFO or device
    planted there from blocking the open.
    """
    flags = os.O_RDWR | os.O_CREAT | os.O_NOFOLLOW | os.O_NONBLOCK | os.O_CLOEXEC
    try:
        fd = os.open(path, flags, 0o644)
    except OSError as exc:
        if exc.errno == errno.ELOOP or path.is_symlink():
            raise LogError(f"{path} is a symbolic link; firewatch does not write through one (remove it if it is stale)") from None
        raise LogError(f"{path}: cannot open the lock file ({exc.strerror})") from None
    st = os.fstat(fd)
    problem = None
    if not stat.S_ISREG(st.st_mode):
        problem = "is not a regular file"
    elif st.st_nlink != 1:
        problem = f"has {st.st_nlink} names (hard links); firewatch writes only a lock file of its own"
    if problem is not None:
        os.close(fd)
        raise LogError(f"{path} {problem}; remove it and start again")
    return fd


class LogWriter:
    """The one writer of a firing log.

    Parameters
    ----------
    path : path
        The log file; created if missing, continued if it holds a firing.
    channels : list of ChannelInfo
    site_text, schedule_text : str
        The profiles the firing runs with, kept in the log.
    durable : bool
        ``synchronous=FULL`` (the recorder) or ``NORMAL`` (batch runs such
        as ``sim --to-log``, where speed matters and a crash just reruns).

    Raises
    ------
    LogLocked
        Another process holds the log's lock.
    LogError
        The file is not a firing log, or of a newer schema.
    """

    def __init__(
        self,
        path: str | Path,
        channels: list[ChannelInfo],
        *,
        site_name: str = "",
        kiln: str = "",
        site_text: str = "",
        schedule_name: str = "",
        schedule_text: str = "",
        clock: str = "wall",
        port: str = "",
        durable: bool = True,
        clock_fn=time.time,
    ) -> None:
        self.path = Path(path)
        self._clock = clock_fn
        if self.path.parent and not self.path.parent.exists():
            raise LogError(f"{self.path}: directory {self.path.parent} does not exist")
        if self.path.exists() and not self.path.is_file():
            raise LogError(f"{self.path}: not a regular file, so not a firing log")
        self._lock_fd = take_lock(self.path, f"pid {os.getpid()} on {socket.gethostname()}")
        try:
            self._open(channels, site_name, kiln, site_text, schedule_name, schedule_text, clock, port, durable)
        except Exception:
            self._release()
            raise

    def _open(self, channels, site_name, kiln, site_text, schedule_name, schedule_text, clock, port, durable) -> None:
        new = not self.path.exists() or self.path.stat().st_size == 0
        try:
            self.con = _connect(self.path, read_only=False)
            self.con.execute("PRAGMA journal_mode=WAL")
            self.con.execute(f"PRAGMA synchronous={'FULL' if durable else 'NORMAL'}")
            if new:
                self.con.executescript("BEGIN;\n" + schema_sql() + "\nCOMMIT;")
        except sqlite3.DatabaseError as exc:
            raise LogError(f"{self.path}: not a firing log ({exc})") from None
        stored_version = SCHEMA_VERSION
        if new:
            self.con.execute("BEGIN")
            self.con.executemany(
                "INSERT INTO meta(key, value) VALUES (?, ?)",
                [("schema_version", str(SCHEMA_VERSION)), ("created_by", f"firewatch {__version__}")],
            )
            self.con.execute(
                "INSERT INTO firing(id, created_utc, site_name, kiln, site_profile, schedule_name, schedule, clock) VALUES (1, ?, ?, ?, ?, ?, ?, ?)",
                (self._clock(), site_name, kiln, site_text, schedule_name, schedule_text, clock),
            )
            self.con.execute("COMMIT")
        else:
            try:
                version = self.con.execute("SELECT value FROM meta WHERE key='schema_version'").fetchone()
            except sqlite3.DatabaseError as exc:
                raise LogError(f"{self.path}: not a firing log ({exc})") from None
            if version is None or int(version[0]) > SCHEMA_VERSION:
                raise LogError(f"{self.path}: log schema {version[0] if version else '?'} is newer than this firewatch reads ({SCHEMA_VERSION})")
            stored_version = int(version[0])
        self.continuing = not new
        self.last_t: float | None = None
        if self.continuing:
            row = self.con.execute("SELECT max(t) FROM sample").fetchone()
            self.last_t = row[0]
        self._channel_ids: dict[str, int] = {r[1]: r[0] for r in self.con.execute("SELECT id, name FROM channel")}
        self.con.execute("BEGIN")
        if stored_version < SCHEMA_VERSION:
            _upgrade(self.con)
        for ch in channels:
            if ch.name not in self._channel_ids:
                cur = self.con.execute(
                    "INSERT INTO channel(name, kind, unit, source, description) VALUES (?, ?, ?, ?, ?)",
                    (ch.name, ch.kind, ch.unit, ch.source, ch.description),
                )
                self._channel_ids[ch.name] = int(cur.lastrowid)
        cur = self.con.execute(
            "INSERT INTO session(started_utc, heartbeat_utc, port, pid, host, firewatch_version, sqlite_version, site_profile, schedule) "
            "VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)",
            (now := self._clock(), now, port, os.getpid(), socket.gethostname(), __version__, sqlite3.sqlite_version, site_text, schedule_text),
        )
        self.session_id = int(cur.lastrowid)
        self.con.execute("COMMIT")
        self.con.execute("BEGIN")

    # -- writing --------------------------------------------------------------------
    def write(self, batch: Batch) -> None:
        """Add a batch inside the open transaction (nothing is durable until :meth:`commit`)."""
        con = self.con
        first_raw = con.execute("SELECT coalesce(max(id), 0) FROM raw_line").fetchone()[0] + 1
        con.executemany(
            "INSERT INTO raw_line(id, session_id, received_utc, line, ok, reason) VALUES (?, ?, ?, ?, ?, ?)",
            [(first_raw + i, self.session_id, r[0], r[1], int(r[2]), r[3] or None) for i, r in enumerate(batch.raw)],
        )
        if batch.samples:
            first_sample = con.execute("SELECT coalesce(max(id), 0) FROM sample").fetchone()[0] + 1
            ids = np.arange(first_sample, first_sample + len(batch.samples))
            con.executemany(
                "INSERT INTO sample(id, session_id, t, received_utc, device_time, seq, raw_id) VALUES (?, ?, ?, ?, ?, ?, ?)",
                [(int(ids[i]), self.session_id, s[1], s[2], s[3], s[4], first_raw + s[0]) for i, s in enumerate(batch.samples)],
            )
            times = batch.times
            id_list = ids.tolist()
            t_list = times.tolist()
            for name, values in batch.values.items():
                cid = self._channel_ids.get(name)
                if cid is None:
                    continue
                status = batch.status[name].tolist()
                vals = [None if v != v else v for v in values.tolist()]  # NaN is stored as NULL
                con.executemany(
                    "INSERT INTO reading(channel_id, sample_id, t, value, status) VALUES (?, ?, ?, ?, ?)",
                    zip([cid] * len(id_list), id_list, t_list, vals, status),
                )
            self._write_minutes(times, batch)
            if self.last_t is None:
                con.execute("UPDATE firing SET started_t = coalesce(started_t, ?) WHERE id = 1", (t_list[0],))
            self.last_t = t_list[-1]
            con.execute("UPDATE firing SET ended_t = ? WHERE id = 1", (t_list[-1],))
        if batch.events:
            con.executemany("INSERT INTO event(t, kind, channel, detail) VALUES (?, ?, ?, ?)", batch.events)

    def _write_minutes(self, times: np.ndarray, batch: Batch) -> None:
        """Keep the per-minute min and max of every channel, so that viewers draw long firings at once."""
        minutes = np.floor(times / 60.0).astype(np.int64)
        starts = np.concatenate([[0], np.flatnonzero(np.diff(minutes)) + 1])
        keys = minutes[starts].tolist()
        rows = []
        for name, values in batch.values.items():
            cid = self._channel_ids.get(name)
            if cid is None:
                continue
            ok = np.isfinite(values)
            if not ok.any():
                continue
            lo = np.minimum.reduceat(np.where(ok, values, np.inf), starts)
            hi = np.maximum.reduceat(np.where(ok, values, -np.inf), starts)
            n = np.add.reduceat(ok.astype(np.int64), starts)
            rows.extend((cid, k, float(a), float(b), int(c)) for k, a, b, c in zip(keys, lo, hi, n) if c > 0)
        self.con.executemany(
            "INSERT INTO trend_minute(channel_id, minute, lo, hi, n) VALUES (?, ?, ?, ?, ?) "
            "ON CONFLICT(channel_id, minute) DO UPDATE SET lo = min(lo, excluded.lo), hi = max(hi, excluded.hi), n = n + excluded.n",
            rows,
        )

    def event(self, t: float, kind: str, detail: str = "", channel: str | None = None) -> None:
        self.con.execute("INSERT INTO event(t, kind, channel, detail) VALUES (?, ?, ?, ?)", (t, kind, channel, detail))

    def gap(self, start_t: float, end_t: float, reason: str) -> None:
        self.con.execute("INSERT INTO gap(start_t, end_t, reason) VALUES (?, ?, ?)", (start_t, end_t, reason))
        self.event(end_t, "gap", f"{end_t - start_t:.1f} s without data: {reason}")

    def execute(self, sql: str, params: Iterable[Any] = ()) -> sqlite3.Cursor:
        """For the alarm engine: a statement inside the writer's transaction."""
        return self.con.execute(sql, tuple(params))

    def heartbeat(self) -> None:
        """Say "still recording" (``session.heartbeat_utc``, wall clock), inside the open transaction.

        The recorder calls it every cycle, lines or not, so viewers can tell a
        silent line (fresh heartbeat, old data) from a stopped recorder (old heartbeat).
        """
        self.con.execute("UPDATE session SET heartbeat_utc = ? WHERE id = ?", (self._clock(), self.session_id))

    def commit(self) -> None:
        self.con.execute("COMMIT")
        self.con.execute("BEGIN")

    def close(self, reason: str = "stopped") -> None:
        """Commit, end the session with ``reason`` and release the lock."""
        try:
            if self.con.in_transaction:
                self.con.execute("COMMIT")
            self.con.execute("UPDATE session SET ended_utc = ?, end_reason = ? WHERE id = ?", (self._clock(), reason, self.session_id))
            self.con.execute("PRAGMA wal_checkpoint(PASSIVE)")
            self.con.close()
        finally:
            self._release()

    def _release(self) -> None:
        release_lock(self._lock_fd)


class BriefWrite:
    """A viewer's short turn as the log's only writer: one operator action while no recorder runs.

    Takes the writer lock (refused at once if a recorder holds it), opens the
    log, and offers what the alarm log needs (``execute``, ``event``) inside one
    transaction; leaving the ``with`` block commits (or rolls back on an error),
    closes and releases the lock. No session is opened: a brief write is not a
    recording.

    Raises
    ------
    LogLocked
        A recorder holds the log (its actions go through the side channel).
    LogError
        The file is not a firing log this firewatch can write.
    """

    def __init__(self, path: str | Path, clock_fn=time.time) -> None:
        self.path = Path(path)
        self._clock = clock_fn
        if not self.path.is_file():
            raise LogError(f"{self.path}: no such firing log")
        self._lock_fd = take_lock(self.path, f"{BRIEF_HOLDER}, pid {os.getpid()} on {socket.gethostname()}")
        try:
            self.con = _connect(self.path, read_only=False)
            self.con.execute("PRAGMA synchronous=FULL")
            version = self.con.execute("SELECT value FROM meta WHERE key='schema_version'").fetchone()
            if version is None or int(version[0]) > SCHEMA_VERSION:
                self.con.close()
                raise LogError(f"{self.path}: not a firing log this firewatch writes (schema {version[0] if version else '?'})")
            self.con.execute("BEGIN IMMEDIATE")
        except sqlite3.DatabaseError as exc:
            release_lock(self._lock_fd)
            raise LogError(f"{self.path}: not a firing log ({exc})") from None
        except Exception:
            release_lock(self._lock_fd)
            raise

    def __enter__(self) -> BriefWrite:
        return self

    def __exit__(self, exc_type, exc, tb) -> None:
        try:
            if self.con.in_transaction:
                self.con.execute("COMMIT" if exc_type is None else "ROLLBACK")
            self.con.close()
        finally:
            release_lock(self._lock_fd)

    def commit(self) -> None:
        """Make what was written durable now, still holding the lock."""
        self.con.execute("COMMIT")
        self.con.execute("BEGIN IMMEDIATE")

    def timeline_now(self) -> float:
        """Now on the firing's time line: the wall clock, shifted as the newest sample was (device clock)."""
        row = self.con.execute("SELECT t - received_utc FROM sample ORDER BY id DESC LIMIT 1").fetchone()
        return self._clock() + (row[0] if row and row[0] is not None else 0.0)

    def execute(self, sql: str, params: Iterable[Any] = ()) -> sqlite3.Cursor:
        return self.con.execute(sql, tuple(params))

    def event(self, t: float, kind: str, detail: str = "", channel: str | None = None) -> None:
        self.con.execute("INSERT INTO event(t, kind, channel, detail) VALUES (?, ?, ?, ?)", (t, kind, channel, detail))
