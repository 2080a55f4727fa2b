"""The firing log: one SQLite file per firing, WAL mode, one writer, any number of readers.

The schema is documented in docs/log-format.md and versioned in
``meta.schema_version``. The recorder (and ``sim --to-log``) is the only
writer; a lock file beside the log (``FILE.db.lock``, held with ``flock``,
released by the kernel even on SIGKILL) refuses a second one. Readers open
the file read-only and keep their transactions short.

Durability: the recorder commits at least once a second with
``synchronous=FULL``, so a crash or power cut loses at most what was not yet
committed; SQLite's WAL keeps the file intact through SIGKILL.
"""

from __future__ import annotations

import fcntl
import json
import os
import socket
import sqlite3
import time
from collections.abc import Iterable, Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from . import __version__
from .pipeline import Batch, ChannelInfo

__all__ = ["SCHEMA_VERSION", "LogError", "LogLocked", "LogWriter", "LogReader", "open_reader"]

SCHEMA_VERSION = 1

SCHEMA = """
CREATE TABLE meta(key TEXT PRIMARY KEY, value TEXT NOT NULL);
CREATE TABLE firing(
    id INTEGER PRIMARY KEY CHECK (id = 1),
    created_utc REAL NOT NULL,
    started_t REAL,
    ended_t REAL,
    site_name TEXT,
    kiln TEXT,
    site_profile TEXT,
    schedule_name TEXT,
    schedule TEXT,
    clock TEXT NOT NULL
);
CREATE TABLE session(
    id INTEGER PRIMARY KEY,
    started_utc REAL NOT NULL,
    ended_utc REAL,
    end_reason TEXT,
    port TEXT,
    pid INTEGER,
    host TEXT,
    firewatch_version TEXT,
    sqlite_version TEXT,
    site_profile TEXT,
    schedule TEXT
);
CREATE TABLE channel(
    id INTEGER PRIMARY KEY,
    name TEXT NOT NULL UNIQUE,
    kind TEXT NOT NULL,
    unit TEXT NOT NULL,
    source TEXT,
    description TEXT
);
CREATE TABLE raw_line(
    id INTEGER PRIMARY KEY,
    session_id INTEGER NOT NULL,
    received_utc REAL NOT NULL,
    line BLOB NOT NULL,
    ok INTEGER NOT NULL,
    reason TEXT
);
CREATE TABLE sample(
    id INTEGER PRIMARY KEY,
    session_id INTEGER NOT NULL,
    t REAL NOT NULL,
    received_utc REAL NOT NULL,
    device_time REAL,
    seq INTEGER,
    raw_id INTEGER
);
CREATE INDEX sample_t ON sample(t);
CREATE TABLE reading(
    channel_id INTEGER NOT NULL,
    sample_id INTEGER NOT NULL,
    t REAL NOT NULL,
    value REAL,
    status INTEGER NOT NULL,
    PRIMARY KEY (channel_id, sample_id)
) WITHOUT ROWID;
CREATE TABLE event(
    id INTEGER PRIMARY KEY,
    t REAL NOT NULL,
    kind TEXT NOT NULL,
    channel TEXT,
    detail TEXT
);
CREATE INDEX event_t ON event(t);
CREATE TABLE gap(
    id INTEGER PRIMARY KEY,
    start_t REAL NOT NULL,
    end_t REAL NOT NULL,
    reason TEXT NOT NULL
);
CREATE TABLE alarm(
    id INTEGER PRIMARY KEY,
    kind TEXT NOT NULL,
    channel TEXT,
    cause TEXT,
    priority TEXT NOT NULL,
    raised_t REAL NOT NULL,
    cleared_t REAL,
    state TEXT NOT NULL,
    message TEXT,
    evidence TEXT
);
CREATE TABLE alarm_state(
    id INTEGER PRIMARY KEY,
    alarm_id INTEGER NOT NULL,
    t REAL NOT NULL,
    state TEXT NOT NULL,
    detail TEXT
);
CREATE INDEX alarm_state_alarm ON alarm_state(alarm_id);
CREATE TABLE trend_minute(
    channel_id INTEGER NOT NULL,
    minute INTEGER NOT NULL,
    lo REAL NOT NULL,
    hi REAL NOT NULL,
    n INTEGER NOT NULL,
    PRIMARY KEY (channel_id, minute)
) WITHOUT ROWID;
CREATE VIEW readings AS
    SELECT c.name AS channel, r.t AS t, r.value AS value, r.status AS status, c.unit AS unit
    FROM reading r JOIN channel c ON c.id = r.channel_id;
"""


class LogError(Exception):
    """A firing log that cannot be used: the message names the file and the reason."""


class LogLocked(LogError):
    """Another recorder is writing this log."""


def _connect(path: Path, read_only: bool) -> sqlite3.Connection:
    if read_only:
        uri = f"file:{path.resolve()}?mode=ro"
        try:
            con = sqlite3.connect(uri, uri=True, timeout=5.0, check_same_thread=False)
            con.execute("SELECT count(*) FROM sqlite_master").fetchone()
        except sqlite3.OperationalError:
            # A WAL log whose -shm file cannot be made read-only: open normally, never write.
            con = sqlite3.connect(str(path), timeout=5.0, check_same_thread=False)
            con.execute("PRAGMA query_only=1")
        return con
    return sqlite3.connect(str(path), timeout=5.0, isolation_level=None, check_same_thread=False)


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
        self._lock_fd = os.open(f"{self.path}.lock", os.O_RDWR | os.O_CREAT, 0o644)
        try:
            fcntl.flock(self._lock_fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            holder = os.pread(self._lock_fd, 64, 0).decode(errors="replace").strip() or "another process"
            os.close(self._lock_fd)
            raise LogLocked(f"{self.path} is already being recorded by {holder}; one recorder per log") from None
        os.ftruncate(self._lock_fd, 0)
        os.pwrite(self._lock_fd, f"pid {os.getpid()} on {socket.gethostname()}\n".encode(), 0)
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
                self.con.executescript("BEGIN;\n" + SCHEMA + "\nCOMMIT;")
        except sqlite3.DatabaseError as exc:
            raise LogError(f"{self.path}: not a firing log ({exc})") from None
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
        self.continuing = not new
        self.last_t: float | None = None
        if self.continuing:
            row = self.con.execute("SELECT max(t) FROM sample").fetchone()
            self.last_t = row[0]
        self._channel_ids: dict[str, int] = {r[1]: r[0] for r in self.con.execute("SELECT id, name FROM channel")}
        self.con.execute("BEGIN")
        for ch in channels:
            if ch.name not in self._channel_ids:
                cur = self.con.execute(
                    "INSERT INTO channel(name, kind, unit, source, description) VALUES (?, ?, ?, ?, ?)",
                    (ch.name, ch.kind, ch.unit, ch.source, ch.description),
                )
                self._channel_ids[ch.name] = int(cur.lastrowid)
        cur = self.con.execute(
            "INSERT INTO session(started_utc, port, pid, host, firewatch_version, sqlite_version, site_profile, schedule) VALUES (?, ?, ?, ?, ?, ?, ?, ?)",
            (self._clock(), port, os.getpid(), socket.gethostname(), __version__, sqlite3.sqlite_version, site_text, schedule_text),
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
        try:
            fcntl.flock(self._lock_fd, fcntl.LOCK_UN)
            os.close(self._lock_fd)
        except OSError:
            pass


@dataclass
class Series:
    """One channel's readings: times (UTC s), values (NaN where none) and status codes."""

    t: np.ndarray
    value: np.ndarray
    status: np.ndarray


class LogReader:
    """Read-only access to a firing log, in short transactions (safe beside a live recorder)."""

    def __init__(self, path: str | Path) -> None:
        self.path = Path(path)
        if not self.path.is_file():
            raise LogError(f"{self.path}: no such firing log")
        try:
            self.con = _connect(self.path, read_only=True)
            version = self.con.execute("SELECT value FROM meta WHERE key='schema_version'").fetchone()
        except sqlite3.DatabaseError as exc:
            raise LogError(f"{self.path}: not a firing log ({exc})") from None
        if version is None:
            raise LogError(f"{self.path}: not a firing log (no schema version)")
        if int(version[0]) > SCHEMA_VERSION:
            raise LogError(f"{self.path}: log schema {version[0]} is newer than this firewatch reads ({SCHEMA_VERSION})")

    def close(self) -> None:
        self.con.close()

    def __enter__(self) -> LogReader:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def query(self, sql: str, params: Iterable[Any] = ()) -> list[tuple]:
        return self.con.execute(sql, tuple(params)).fetchall()

    def firing(self) -> dict[str, Any]:
        cur = self.con.execute("SELECT * FROM firing WHERE id = 1")
        row = cur.fetchone()
        if row is None:
            return {}
        return dict(zip([d[0] for d in cur.description], row))

    def channels(self) -> list[ChannelInfo]:
        return [ChannelInfo(*r) for r in self.query("SELECT name, kind, unit, source, description FROM channel ORDER BY id")]

    def series(self, channel: str, start_t: float | None = None, end_t: float | None = None) -> Series:
        sql = "SELECT r.t, r.value, r.status FROM reading r JOIN channel c ON c.id = r.channel_id WHERE c.name = ?"
        params: list[Any] = [channel]
        if start_t is not None:
            sql += " AND r.t >= ?"
            params.append(start_t)
        if end_t is not None:
            sql += " AND r.t <= ?"
            params.append(end_t)
        rows = self.query(sql + " ORDER BY r.sample_id", params)
        if not rows:
            return Series(np.empty(0), np.empty(0), np.empty(0, dtype=np.int64))
        arr = np.array([(r[0], np.nan if r[1] is None else r[1], r[2]) for r in rows], dtype=float)
        return Series(arr[:, 0], arr[:, 1], arr[:, 2].astype(np.int64))

    def raw_lines(self, batch_size: int = 5000) -> Iterator[list[tuple[float, bytes, int]]]:
        """All raw lines in order, in batches: ``(received_utc, line, session_id)``."""
        last = 0
        while True:
            rows = self.query(
                "SELECT id, received_utc, line, session_id FROM raw_line WHERE id > ? ORDER BY id LIMIT ?", (last, batch_size)
            )
            if not rows:
                return
            last = rows[-1][0]
            yield [(r[1], bytes(r[2]), r[3]) for r in rows]

    def gaps(self) -> list[dict[str, Any]]:
        return [
            {"start_t": r[0], "end_t": r[1], "reason": r[2]}
            for r in self.query("SELECT start_t, end_t, reason FROM gap ORDER BY start_t")
        ]

    def events(self, kinds: Iterable[str] | None = None, limit: int | None = None) -> list[dict[str, Any]]:
        sql = "SELECT t, kind, channel, detail FROM event"
        params: list[Any] = []
        if kinds:
            kinds = list(kinds)
            sql += f" WHERE kind IN ({','.join('?' * len(kinds))})"
            params += kinds
        sql += " ORDER BY t, id"
        if limit:
            sql += " LIMIT ?"
            params.append(limit)
        return [{"t": r[0], "kind": r[1], "channel": r[2], "detail": r[3]} for r in self.query(sql, params)]

    def alarms(self) -> list[dict[str, Any]]:
        out = []
        for r in self.query("SELECT id, kind, channel, cause, priority, raised_t, cleared_t, state, message, evidence FROM alarm ORDER BY raised_t, id"):
            states = [
                {"t": s[0], "state": s[1], "detail": s[2]}
                for s in self.query("SELECT t, state, detail FROM alarm_state WHERE alarm_id = ? ORDER BY t, id", (r[0],))
            ]
            out.append(
                {
                    "id": r[0], "kind": r[1], "channel": r[2], "cause": r[3], "priority": r[4], "raised_t": r[5],
                    "cleared_t": r[6], "state": r[7], "message": r[8],
                    "evidence": json.loads(r[9]) if r[9] else None, "states": states,
                }
            )
        return out


def open_reader(path: str | Path) -> LogReader:
    return LogReader(path)
