"""The one writer of a firing log (the recorder, or ``sim --to-log``).

A lock file beside the log (``FILE.db.lock``, held with ``flock``, released by
the kernel even on SIGKILL) refuses a second writer. Durability: the recorder
commits at least once a second with ``synchronous=FULL``, so a crash or power
cut loses at most what was not yet committed; SQLite's WAL keeps the file
intact through SIGKILL.

Write errors (a full disk, a file-size limit, an I/O error) never end the
recorder. Every statement of the open transaction is also *held* in memory
until its COMMIT succeeds, because after SQLITE_FULL or SQLITE_IOERR SQLite
may already have rolled the whole transaction back (SQLite documentation,
"Response To Errors Within A Transaction", lang_transaction.html). When a
statement or the COMMIT fails, the writer rolls back, stops touching the log
and keeps holding what comes, up to :data:`HOLD_LINES` (ten minutes at 100
lines a second); every :data:`RETRY_S` it re-applies the held statements in
fresh transactions, oldest first, so when space comes back nothing is lost.
Past the bound it drops the oldest held readings, never alarms or events
unless nothing else is left, and records the hole as a gap. A file
``FILE.db.reserve`` of :data:`RESERVE_BYTES` keeps enough disk space aside to
close the session with its reason when the disk is still full at the stop.

The WAL stays bounded: when it has grown past :data:`WAL_CHECKPOINT_BYTES`
the writer runs ``PRAGMA wal_checkpoint(TRUNCATE)`` between transactions with
a short busy timeout (readers keep their transactions short, so it rarely has
to wait), and ``journal_size_limit`` trims it whenever SQLite resets it.
"""

from __future__ import annotations

import errno
import fcntl
import itertools
import os
import resource
import shutil
import socket
import sqlite3
import stat
import threading
import time
from collections import deque
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field
from pathlib import Path
from types import TracebackType
from typing import Any

import numpy as np

from firewatch import __version__
from firewatch.firing.pipeline import Batch, ChannelInfo
from firewatch.settings.timefmt import duration
from firewatch.store._common import (
    SCHEMA_VERSION,
    STORAGE_CODES,
    LogError,
    LogLocked,
    LogWriteError,
    _connect,
    schema_sql,
    sqlite_code,
)
from firewatch.store.layout import (
    CHARTED_SUFFIX,
    MEASURED_KINDS,
    RAW_BLOCK_LINES,
    STEP_KIND,
    STEP_S,
    column,
    insert_raw_blocks,
    is_compact,
    status_runs,
    step_column,
    write_views,
)

__all__ = [
    "LogWriter", "BriefWrite", "take_lock", "release_lock", "BRIEF_HOLDER", "BRIEF_WAIT_S", "Outage", "HOLD_S", "HOLD_RATE_HZ",
    "HOLD_LINES", "HOLD_LINE_BYTES", "RETRY_S", "RESERVE_BYTES",
    "WAL_CHECKPOINT_BYTES", "JOURNAL_SIZE_LIMIT", "hold_memory_bytes",
]

BRIEF_HOLDER = "a viewer's brief write"
"""Written into the lock file by a viewer that holds the lock for one operator action."""
BRIEF_WAIT_S = 2.0
"""How long a writer waits for a viewer's brief write to finish before giving up, seconds (a brief write
takes milliseconds; a recorder's lock is never waited for)."""


def take_lock(path: Path, holder: str, wait_brief_s: float = BRIEF_WAIT_S, clock: Callable[[], float] = time.monotonic) -> int:
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
    try:
        os.ftruncate(fd, 0)
        os.pwrite(fd, f"{holder}\n".encode(), 0)
    except OSError:
        pass  # a full disk: the holder's name is a courtesy; the writer's reserve says what is wrong
    return fd


def release_lock(fd: int) -> None:
    """Give the writer lock back (the kernel does it too if the process dies)."""
    try:
        fcntl.flock(fd, fcntl.LOCK_UN)
        os.close(fd)
    except OSError:
        pass


def _real(value: float) -> float | None:
    """A float for SQLite: NaN is stored as NULL."""
    v = float(value)
    return None if v != v else v


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


HOLD_S = 600.0
"""The writer holds at least this long of readings in memory while the log cannot be written, seconds."""

HOLD_RATE_HZ = 100.0
"""The line rate that hold is sized for: the fastest firewatch is built for (16 channels at 100 lines a second)."""

HOLD_LINES = int(HOLD_S * HOLD_RATE_HZ)
"""The bound on held writes, in lines: 60,000 (ten minutes at 100 lines a second; 16 h 40 min at one a second)."""

HOLD_LINE_BYTES = 256
"""A held line counts once per this many bytes of its text (garbage floods count for their size); any other
held record (an event, an alarm transition, an MQTT message) counts like a line of its size."""

HOLD_OVERHEAD_BYTES = 500
"""Python's memory per held line besides its text and values (tuples, floats). Measured with tracemalloc on
the demo kiln: 943 bytes a held line of 87 bytes with 21 channels, which this estimate (945) covers."""

RETRY_S = 2.0
"""How often a writer that cannot write tries again, seconds."""

CATCH_UP_S = 0.25
"""The longest one commit spends re-applying held writes, seconds, so that reading goes on meanwhile."""

RESERVE_BYTES = 1 << 20
"""Disk space kept aside in ``FILE.db.reserve`` (1 MiB), released to close the session on a disk still full at the stop."""

WAL_CHECKPOINT_BYTES = 4 << 20
"""A WAL larger than this (4 MiB, about SQLite's own 1000-page checkpoint threshold) is checkpointed and truncated."""

JOURNAL_SIZE_LIMIT = 4 << 20
"""``PRAGMA journal_size_limit``: whenever SQLite resets the WAL it trims the file to this, bytes."""

CHECKPOINT_BUSY_MS = 200
"""How long a truncating checkpoint waits for readers to finish, milliseconds (then it is tried again later)."""

# SQLite primary result codes that say the log cannot be written now, rather than that a statement is wrong
# (SQLite documentation, "Result and Error Codes"): BUSY, LOCKED, NOMEM, READONLY, IOERR, CORRUPT, FULL,
# CANTOPEN, PROTOCOL, NOTADB.
_CANNOT_WRITE = frozenset({5, 6, 7, 8, 10, 11, 13, 14, 15, 26})


def _cannot_write(exc: BaseException) -> bool:
    """True for an error that says the log cannot be written now (keep the writes and retry)."""
    return isinstance(exc, sqlite3.DatabaseError) and sqlite_code(exc) in _CANNOT_WRITE


def _inserted_id(cur: sqlite3.Cursor) -> int:
    """The rowid the INSERT just run on ``cur`` gave its row (always set after an INSERT into a rowid table)."""
    if cur.lastrowid is None:
        raise sqlite3.InterfaceError("an INSERT gave no rowid")
    return cur.lastrowid


def hold_memory_bytes(channels: int, lines: int = HOLD_LINES) -> int:
    """About how much memory ``lines`` held lines of a site with ``channels`` stored channels take, bytes."""
    return lines * (HOLD_LINE_BYTES + 9 * channels + HOLD_OVERHEAD_BYTES)


def _bytes_text(n: float) -> str:
    for unit, size in (("GiB", 1 << 30), ("MiB", 1 << 20), ("KiB", 1 << 10)):
        if n >= size:
            return f"{n / size:.1f} {unit}"
    return f"{int(n)} B"


def _units(params: Iterable[Any]) -> int:
    """What one held statement counts against the bound: one line per HOLD_LINE_BYTES of its text."""
    size = sum(len(p) for p in params if isinstance(p, (str, bytes)))
    return 1 + size // HOLD_LINE_BYTES


@dataclass(slots=True)
class _Statement:
    """One held statement: ``params`` for one row, or ``rows`` for executemany."""

    sql: str
    params: tuple[Any, ...]
    rows: list[tuple[Any, ...]] | None
    units: int
    bulk: bool


@dataclass(slots=True)
class _BatchOp:
    """One held batch, with the ids it was given when it was written."""

    batch: Batch
    first_raw: int
    first_sample: int
    first_t: float | None
    last_t: float | None
    lines: int
    units: int
    steps: list[int] = field(default_factory=list)
    """Indices of the batch's samples that keep the derived channels (the step rate)."""
    bulk: bool = True


@dataclass(slots=True)
class _Dropped:
    """Where held writes were dropped: written as a gap (and an event) when the log can be written again."""

    start_t: float | None
    first_t: float | None = None
    last_t: float | None = None
    lines: int = 0
    other: int = 0
    units: int = 0
    bulk: bool = False


@dataclass
class Outage:
    """A stretch during which the log could not be written."""

    since_utc: float
    since_mono: float
    error: str
    held_written: int = 0
    """Lines held in memory and written when the log could be written again."""
    dropped_lines: int = 0
    dropped_other: int = 0
    told: set[str] = field(default_factory=set)


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
    hold_lines : int or None
        The bound on writes held in memory while the log cannot be written
        (:data:`HOLD_LINES`); None for batch runs, where a write error raises
        :class:`LogWriteError` instead.
    clock_fn, monotonic_fn : callable
        Wall clock (session times) and monotonic clock (retries), injectable for tests.

    Raises
    ------
    LogLocked
        Another process holds the log's lock.
    LogWriteError
        The log cannot be written (a full disk, a file-size limit): the message says which.
    LogError
        The file is not a firing log, or of a newer schema.

    Notes
    -----
    Every statement goes through :meth:`execute`, :meth:`executemany`,
    :meth:`event`, :meth:`gap` or :meth:`write`, so that it is held until
    committed and re-applied after a write error; never use ``con`` to write.
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
        clock_fn: Callable[[], float] = time.time,
        hold_lines: int | None = HOLD_LINES,
        monotonic_fn: Callable[[], float] = time.monotonic,
    ) -> None:
        self.path = Path(path)
        self._clock = clock_fn
        self._mono = monotonic_fn
        self.hold_lines = hold_lines
        self._durable = durable
        self._reserve = Path(f"{self.path}.reserve")
        self._reserve_held = False
        # under a file-size limit (ulimit -f) checkpoint sooner, so that the WAL never meets it before the log does
        fsize = resource.getrlimit(resource.RLIMIT_FSIZE)[0]
        self._wal_checkpoint_bytes = WAL_CHECKPOINT_BYTES if fsize == resource.RLIM_INFINITY else min(WAL_CHECKPOINT_BYTES, fsize // 2)
        if self.path.parent and not self.path.parent.exists():
            raise LogError(f"{self.path}: directory {self.path.parent} does not exist")
        if self.path.exists() and not self.path.is_file():
            raise LogError(f"{self.path}: not a regular file, so not a firing log")
        self._lock_fd = take_lock(self.path, f"pid {os.getpid()} on {socket.gethostname()}")
        self.converted: Path | None = None
        """Where the original of a log of the earlier layout is kept, when this writer converted it to continue it."""
        try:
            if self.path.exists() and self.path.stat().st_size > 0:
                from firewatch.store.upgrade import convert_in_place, needs_upgrade

                if needs_upgrade(self.path):
                    self.converted = convert_in_place(self.path)
            if hold_lines is not None:
                self._make_reserve()
            self._open(channels, site_name, kiln, site_text, schedule_name, schedule_text, clock, port, durable)
        except sqlite3.Error as exc:
            self._release()
            if sqlite_code(exc) in STORAGE_CODES:
                raise LogWriteError(f"{self.path}: cannot write: {self._describe(exc)}") from None
            raise
        except Exception:
            self._release()
            raise

    def _open(
        self, channels: list[ChannelInfo], site_name: str, kiln: str, site_text: str, schedule_name: str, schedule_text: str,
        clock: str, port: str, durable: bool,
    ) -> None:
        new = not self.path.exists() or self.path.stat().st_size == 0
        try:
            self._connect()
            if new:
                self.con.executescript("BEGIN;\n" + schema_sql() + "\nCOMMIT;")
        except sqlite3.DatabaseError as exc:
            if sqlite_code(exc) in STORAGE_CODES:
                raise
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
                if sqlite_code(exc) in STORAGE_CODES:
                    raise
                raise LogError(f"{self.path}: not a firing log ({exc})") from None
            if version is None or int(version[0]) > SCHEMA_VERSION:
                raise LogError(f"{self.path}: log schema {version[0] if version else '?'} is newer than this firewatch reads ({SCHEMA_VERSION})")
            if not is_compact(self.con):
                raise LogError(f"{self.path}: a log of the earlier layout (schema {version[0]}); it is converted before it is continued")
        self.continuing = not new
        self.last_t: float | None = None
        self._last_slot = -np.inf
        if self.continuing:
            row = self.con.execute("SELECT t FROM sample ORDER BY id DESC LIMIT 1").fetchone()
            self.last_t = None if row is None else row[0]
            if self.last_t is not None:
                self._last_slot = float(np.floor(self.last_t / STEP_S))
        # ids are counted here rather than read back, so that held batches keep theirs
        self._next_raw: int = self.con.execute(
            "SELECT max((SELECT coalesce(max(id), 0) FROM raw_line), (SELECT coalesce(max(last_id), 0) FROM raw_block)) + 1").fetchone()[0]
        self._next_sample: int = self.con.execute("SELECT coalesce(max(id), 0) + 1 FROM sample").fetchone()[0]
        self._durable_t = self.last_t
        self._held: deque[_Statement | _BatchOp | _Dropped] = deque()
        self._batch_ops: list[_Statement | _BatchOp] | None = None
        self._held_units = 0
        self._open_tx = True
        """True: the held writes are applied in the open transaction. False: the log cannot be written."""
        self.outage: Outage | None = None
        self._resumed: Outage | None = None
        self._next_try = 0.0
        self._chunk = 64
        self._next_checkpoint = 0.0
        rows = self.con.execute("SELECT id, name, kind FROM channel").fetchall()
        kinds = {r[1]: r[2] for r in rows}
        self._channel_ids: dict[str, int] = {r[1]: r[0] for r in rows}
        self.con.execute("BEGIN")
        added = False
        for ch in channels:
            if ch.name not in self._channel_ids:
                cur = self.con.execute(
                    "INSERT INTO channel(name, kind, unit, source, description, first_sample) VALUES (?, ?, ?, ?, ?, ?)",
                    (ch.name, ch.kind, ch.unit, ch.source, ch.description, self._next_sample),
                )
                cid = self._channel_ids[ch.name] = _inserted_id(cur)
                kinds[ch.name] = ch.kind
                if ch.kind in MEASURED_KINDS:
                    # a column of its own: ALTER TABLE ADD COLUMN changes the schema only, never rewrites the rows
                    self.con.execute(f"ALTER TABLE sample ADD COLUMN {column(cid)} REAL")
                    added = True
                elif ch.kind == STEP_KIND:
                    self.con.execute(f"ALTER TABLE step ADD COLUMN {step_column(cid)} REAL")
                    added = True
        if added or new:
            write_views(self.con)
        self._measured = {name: cid for name, cid in self._channel_ids.items() if kinds[name] in MEASURED_KINDS}
        self._derived = {name: cid for name, cid in self._channel_ids.items() if kinds[name] not in MEASURED_KINDS}
        self._progress = frozenset(name for name in self._derived if kinds[name] == STEP_KIND)
        self._charted = {name: cid for name, cid in self._channel_ids.items() if name in self._measured or name.endswith(CHARTED_SUFFIX)}
        # lines a killed recorder left waiting are compressed now, before this session's join them
        self._pack_raw(1)
        cur = self.con.execute(
            "INSERT INTO session(started_utc, heartbeat_utc, port, pid, host, firewatch_version, sqlite_version, site_profile, schedule) "
            "VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)",
            (now := self._clock(), now, port, os.getpid(), socket.gethostname(), __version__, sqlite3.sqlite_version, site_text, schedule_text),
        )
        self.session_id = _inserted_id(cur)
        self.con.execute("COMMIT")
        self.con.execute("BEGIN")

    def _connect(self) -> None:
        self.con = _connect(self.path, read_only=False)
        self.con.execute("PRAGMA journal_mode=WAL")
        self.con.execute(f"PRAGMA synchronous={'FULL' if self._durable else 'NORMAL'}")
        self.con.execute(f"PRAGMA journal_size_limit={JOURNAL_SIZE_LIMIT}")

    @property
    def next_sample_id(self) -> int:
        """The id the next written sample gets (MQTT messages name their samples before they are written)."""
        return self._next_sample

    # -- writing --------------------------------------------------------------------
    def write(self, batch: Batch) -> None:
        """Add a batch inside the open transaction (nothing is durable until :meth:`commit`)."""
        first_raw, first_sample = self._next_raw, self._next_sample
        self._next_raw += len(batch.raw)
        self._next_sample += len(batch.samples)
        first_t = last_t = None
        steps: list[int] = []
        if batch.samples:
            first_t, last_t = batch.samples[0][1], batch.samples[-1][1]
            # the first sample of every STEP_S seconds keeps the derived channels (decided here, once, so that
            # a batch held through a write error keeps its own)
            slots = np.floor(batch.times / STEP_S)
            before = np.concatenate([[self._last_slot], slots[:-1]])
            steps = np.flatnonzero(slots != before).tolist()
            self._last_slot = float(slots[-1])
            self.last_t = last_t
        units = sum(1 + len(r[1]) // HOLD_LINE_BYTES for r in batch.raw) or 1
        self._run(_BatchOp(batch, first_raw, first_sample, first_t, last_t, len(batch.raw), units, steps))

    def _insert_batch(self, op: _BatchOp) -> None:
        con, batch, first_raw = self.con, op.batch, op.first_raw
        con.executemany(
            "INSERT INTO raw_line(id, session_id, received_utc, line, ok, reason) VALUES (?, ?, ?, ?, ?, ?)",
            [(first_raw + i, self.session_id, r[0], r[1], int(r[2]), r[3] or None) for i, r in enumerate(batch.raw)],
        )
        if batch.samples:
            first_sample = op.first_sample
            n = len(batch.samples)
            ids = range(first_sample, first_sample + n)
            t_list = batch.times.tolist()
            measured = [(name, cid) for name, cid in self._measured.items() if name in batch.values]
            # NaN is stored as NULL; one row per sample, the time once. The channels go to Python lists in one
            # call over them stacked, and only a channel with a NaN is looked through (issue 15)
            columns: list[list[float | None]] = []
            flagged: list[int] = []
            if measured:
                stacked = np.stack([batch.values[name] for name, _ in measured])
                nan_rows = np.isnan(stacked).any(axis=1).tolist()
                columns = [[None if v != v else v for v in row] if has_nan else row
                           for row, has_nan in zip(stacked.tolist(), nan_rows)]
                # statuses other than OK (0) are kept as runs: only the channels that have any
                flagged = np.flatnonzero(np.stack([batch.status[name] for name, _ in measured]).any(axis=1)).tolist()
            names = "".join(f", {column(cid)}" for _, cid in measured)
            con.executemany(
                f"INSERT INTO sample(id, session_id, t{names}) VALUES (?, ?, ?{', ?' * len(measured)})",
                zip(ids, itertools.repeat(self.session_id, n), t_list, *columns),
            )
            for k in flagged:
                name, cid = measured[k]
                self._insert_flags(cid, first_sample, batch.status[name])
            derived = [(name, cid) for name, cid in self._derived.items() if name in batch.values]
            progress = [(name, cid) for name, cid in derived if name in self._progress]
            if op.steps and progress:
                names = "".join(f", {step_column(cid)}" for _, cid in progress)
                con.executemany(
                    f"INSERT INTO step(sample_id{names}) VALUES (?{', ?' * len(progress)})",
                    [(first_sample + i, *(_real(batch.values[name][i]) for name, _ in progress)) for i in op.steps],
                )
            last = first_sample + n - 1
            con.executemany(
                "INSERT OR REPLACE INTO latest(channel_id, sample_id, t, value, status) VALUES (?, ?, ?, ?, ?)",
                [(cid, last, t_list[-1], _real(batch.values[name][-1]), int(batch.status[name][-1])) for name, cid in derived],
            )
            self._write_minutes(batch.times, batch)
            # every batch may set started_t: the first one may be dropped while the log cannot be written
            con.execute("UPDATE firing SET started_t = coalesce(started_t, ?), ended_t = ? WHERE id = 1", (t_list[0], t_list[-1]))
            newest = batch.samples[-1]
            con.execute("UPDATE session SET last_received_utc = ?, last_device_time = ? WHERE id = ?", (newest[2], newest[3], self.session_id))
        if batch.events:
            con.executemany("INSERT INTO event(t, kind, channel, detail) VALUES (?, ?, ?, ?)", batch.events)
        self._pack_raw(RAW_BLOCK_LINES)

    def _insert_flags(self, cid: int, first_sample: int, status: np.ndarray) -> None:
        """Keep a measured channel's statuses other than OK as runs, a run that goes on from the last batch extended."""
        runs = status_runs(status)
        if not runs:
            return
        con = self.con
        if runs[0][0] == 0:
            prev = con.execute("SELECT first_id, last_id, status FROM flag WHERE channel_id = ? ORDER BY first_id DESC LIMIT 1", (cid,)).fetchone()
            if prev is not None and prev[1] == first_sample - 1 and prev[2] == runs[0][2]:
                con.execute("UPDATE flag SET last_id = ? WHERE channel_id = ? AND first_id = ?", (first_sample + runs[0][1], cid, prev[0]))
                runs = runs[1:]
        con.executemany(
            "INSERT INTO flag(channel_id, first_id, last_id, status) VALUES (?, ?, ?, ?)",
            [(cid, first_sample + a, first_sample + b, st) for a, b, st in runs],
        )

    def _pack_raw(self, at_least: int) -> None:
        """Compress the waiting raw lines into blocks once ``at_least`` wait (one block per session)."""
        lo, hi = self.con.execute("SELECT min(id), max(id) FROM raw_line").fetchone()
        if lo is None or hi - lo + 1 < max(at_least, 1):
            return
        rows = self.con.execute("SELECT id, received_utc, line, ok, reason, session_id FROM raw_line ORDER BY id").fetchall()
        insert_raw_blocks(self.con, rows)
        self.con.execute("DELETE FROM raw_line WHERE id <= ?", (rows[-1][0],))

    def _write_minutes(self, times: np.ndarray, batch: Batch) -> None:
        """Keep the per-minute min and max of the charted channels, so that viewers draw long firings at once."""
        minutes = np.floor(times / 60.0).astype(np.int64)
        starts = np.concatenate([[0], np.flatnonzero(np.diff(minutes)) + 1])
        keys = minutes[starts].tolist()
        charted = [(cid, values) for name, values in batch.values.items() if (cid := self._charted.get(name)) is not None]
        if not charted:
            return
        # every charted channel at once, stacked (issue 15: three reductions per channel per batch before)
        values = np.stack([v for _, v in charted])
        ok = np.isfinite(values)
        lo = np.minimum.reduceat(np.where(ok, values, np.inf), starts, axis=1)
        hi = np.maximum.reduceat(np.where(ok, values, -np.inf), starts, axis=1)
        count = np.add.reduceat(ok.astype(np.int64), starts, axis=1)
        # in key order, minute then channel: a minute's rows append, pages fill
        order = sorted(range(len(charted)), key=lambda i: charted[i][0])
        cids = [charted[i][0] for i in order]
        lo_l, hi_l, count_l = lo[order].T.tolist(), hi[order].T.tolist(), count[order].T.tolist()
        rows = [(cid, key, a, b, c)
                for key, los, his, counts in zip(keys, lo_l, hi_l, count_l)
                for cid, a, b, c in zip(cids, los, his, counts) if c > 0]
        self.con.executemany(
            "INSERT INTO trend_minute(channel_id, minute, lo, hi, n) VALUES (?, ?, ?, ?, ?) "
            "ON CONFLICT(minute, channel_id) DO UPDATE SET lo = min(lo, excluded.lo), hi = max(hi, excluded.hi), n = n + excluded.n",
            rows,
        )

    def event(self, t: float, kind: str, detail: str = "", channel: str | None = None) -> None:
        self._run(_Statement("INSERT INTO event(t, kind, channel, detail) VALUES (?, ?, ?, ?)", (t, kind, channel, detail), None,
                             _units((kind, detail)), False))

    def gap(self, start_t: float, end_t: float, reason: str) -> None:
        self._run(_Statement("INSERT INTO gap(start_t, end_t, reason) VALUES (?, ?, ?)", (start_t, end_t, reason), None, 1, False))
        self.event(end_t, "gap", f"{end_t - start_t:.1f} s without data: {reason}")

    def heartbeat(self) -> None:
        """Say "still recording" (``session.heartbeat_utc``, wall clock), inside the open transaction.

        The recorder calls it every cycle, lines or not, so viewers can tell a
        silent line (fresh heartbeat, old data) from a stopped recorder (old heartbeat).
        Held like every write: while the log cannot be written the heartbeat ages,
        and viewers rightly show that the recorder is not recording.
        """
        self._run(_Statement("UPDATE session SET heartbeat_utc = ? WHERE id = ?", (self._clock(), self.session_id), None, 1, True))

    def execute(self, sql: str, params: Iterable[Any] = (), *, bulk: bool = False) -> sqlite3.Cursor | None:
        """A statement inside the writer's transaction (for the alarm engine and the outbox).

        A SELECT runs at once and sees what is held in the open transaction,
        or, while the log cannot be written, only what is committed. Any
        other statement is held until committed; it returns None while the
        log cannot be written. ``bulk`` statements (MQTT messages) may be
        dropped with the readings when the held writes pass the bound.
        """
        params = tuple(params)
        if sql.lstrip()[:6].upper() == "SELECT":
            return self.con.execute(sql, params)
        return self._run(_Statement(sql, params, None, _units(params), bulk))

    def query(self, sql: str, params: Iterable[Any] = ()) -> sqlite3.Cursor:
        """Run a SELECT at once and return its cursor (it always has one, unlike :meth:`execute`).

        It sees what is held in the open transaction, or, while the log cannot
        be written, only what is committed. Nothing is held: a query writes nothing.
        """
        return self.con.execute(sql, tuple(params))

    # -- one batch, undone as a whole if its processing fails (the recorder's Ingest) ----------
    def batch_begin(self) -> None:
        """Mark the start of one batch's writes, which :meth:`batch_undo` can take back as a whole.

        A savepoint in the open transaction, and a note of the writes held from
        here on. Not itself a held write: a savepoint replayed after a write
        error could land in another transaction than its release.
        """
        self._batch_ops = []
        if self._open_tx:
            self.con.execute("SAVEPOINT batch")

    def batch_end(self) -> None:
        """The batch's writes stand."""
        if self._open_tx and self.con.in_transaction:
            try:
                self.con.execute("RELEASE batch")
            except sqlite3.OperationalError:
                pass  # the transaction was rolled back (a write error) and the savepoint with it
        self._batch_ops = None

    def batch_undo(self) -> None:
        """Take back every write since :meth:`batch_begin`: from the transaction and from what is held."""
        ops = self._batch_ops or []
        if self._open_tx and self.con.in_transaction:
            try:
                self.con.execute("ROLLBACK TO batch")
                self.con.execute("RELEASE batch")
            except sqlite3.OperationalError:
                pass
        gone = {id(op) for op in ops}
        if gone:
            kept = deque(op for op in self._held if id(op) not in gone)
            self._held_units -= sum(op.units for op in self._held if id(op) in gone)
            self._held = kept
        self._batch_ops = None

    def executemany(self, sql: str, rows: Iterable[Iterable[Any]], *, bulk: bool = False) -> None:
        """Many rows of one statement inside the writer's transaction, held like :meth:`execute`."""
        held = [tuple(r) for r in rows]
        if held:
            self._run(_Statement(sql, (), held, sum(_units(r) for r in held), bulk))

    # -- holding what is not committed ------------------------------------------------
    def _apply(self, op: _Statement | _BatchOp | _Dropped, index: int = -1) -> sqlite3.Cursor | None:
        if isinstance(op, _BatchOp):
            self._insert_batch(op)
            return None
        if isinstance(op, _Dropped):
            self._insert_dropped(op, index)
            return None
        if op.rows is not None:
            return self.con.executemany(op.sql, op.rows)
        return self.con.execute(op.sql, op.params)

    def _run(self, op: _Statement | _BatchOp) -> sqlite3.Cursor | None:
        """Apply a write in the open transaction and hold it until committed; while the log cannot be written, only hold it."""
        if self.hold_lines is None:  # a batch run: the caller hears of write errors
            try:
                return self._apply(op)
            except sqlite3.Error as exc:
                if _cannot_write(exc):
                    raise LogWriteError(f"{self.path}: cannot write: {self._describe(exc)}") from None
                raise
        cursor = None
        if self._open_tx:
            try:
                cursor = self._apply(op)
            except sqlite3.Error as exc:
                if not _cannot_write(exc):
                    raise
                self._fail(exc)
        self._held.append(op)
        self._held_units += op.units
        if self._batch_ops is not None:
            self._batch_ops.append(op)
        if not self._open_tx:
            self._enforce_bound(self.hold_lines)
        return cursor

    def _fail(self, exc: BaseException) -> None:
        """The log cannot be written: roll back (the held writes stay in memory) and try again later."""
        if self.con.in_transaction:
            try:
                self.con.execute("ROLLBACK")
            except sqlite3.Error:
                self._reconnect()
        self._open_tx = False
        error = self._describe(exc)
        if self.outage is None:
            self.outage = Outage(self._clock(), self._mono(), error)
        else:
            self.outage.error = error
        self._next_try = self._mono() + RETRY_S
        self._chunk = 64

    def _reconnect(self) -> None:
        """A connection that cannot even roll back: open a fresh one (SQLite recovers the WAL)."""
        try:
            self.con.close()
        except sqlite3.Error:
            pass
        try:
            self._connect()
        except sqlite3.Error:
            pass  # tried again at the next retry

    def _enforce_bound(self, limit: int | None, everything: bool = False) -> None:
        """Drop the oldest held readings (and MQTT messages) while the held writes pass ``limit``.

        Events, gaps and alarm transitions go only when nothing else is left
        (or when ``everything``). What is dropped is kept as a count and a
        time span, written as a gap when the log can be written again.
        """
        if limit is None:
            return
        held = self._held
        while self._held_units > limit:
            index = next((i for i, op in enumerate(held) if op.bulk), None)
            if index is None:
                if not everything and limit == 0:
                    return  # readings only: the events stay
                index = next((i for i, op in enumerate(held) if not isinstance(op, _Dropped)), None)
                if index is None:
                    return
            op = held[index]
            # never a marker: the readings' search skips them (a marker is not bulk) and so does the other one
            assert not isinstance(op, _Dropped)
            del held[index]
            self._held_units -= op.units
            marker = next((m for m in itertools.islice(held, 0, index) if isinstance(m, _Dropped)), None)
            if marker is None:
                marker = _Dropped(self._durable_t)
                held.insert(index, marker)
            lines = other = 0
            if isinstance(op, _BatchOp):
                lines = op.lines
                if op.first_t is not None:
                    marker.first_t = op.first_t if marker.first_t is None else marker.first_t
                    marker.last_t = op.last_t
            else:
                other = len(op.rows) if op.rows is not None else 1
            marker.lines += lines
            marker.other += other
            if self.outage is not None:
                self.outage.dropped_lines += lines
                self.outage.dropped_other += other

    def _insert_dropped(self, op: _Dropped, index: int) -> None:
        """The gap (and event) for held writes that were dropped."""
        end = next(
            (later.first_t for later in itertools.islice(self._held, index + 1, None) if isinstance(later, _BatchOp) and later.first_t is not None),
            op.last_t,
        )
        start = op.start_t if op.start_t is not None else op.first_t
        if op.lines:
            what = f"{op.lines:,} lines held in memory dropped, oldest first, while the log could not be written"
            what += f" (and {op.other:,} other records)" if op.other else ""
        else:
            what = f"{op.other:,} records held in memory dropped, oldest first, while the log could not be written"
        if op.first_t is not None and start is not None and end is not None:
            self.con.execute("INSERT INTO gap(start_t, end_t, reason) VALUES (?, ?, ?)", (start, end, "write error"))
            self.con.execute("INSERT INTO event(t, kind, channel, detail) VALUES (?, 'gap', NULL, ?)",
                             (end, f"{end - start:.1f} s without data: write error: {what}"))
        else:
            t = end if end is not None else (self.last_t if self.last_t is not None else self._clock())
            self.con.execute("INSERT INTO event(t, kind, channel, detail) VALUES (?, 'write-error', NULL, ?)", (t, what))

    def _catch_up(self, budget_s: float | None) -> None:
        """Re-apply held writes in fresh transactions, oldest first; back to normal when none are left."""
        started = self._mono()
        # a WAL at a file-size limit shrinks only this way; on a full disk a checkpoint would spend the room
        # the held writes need (it grows the log before it can truncate the WAL), so only past the threshold
        self._checkpoint()
        held = self._held
        while held:
            n = units = 0
            last_t = None
            written = 0
            applying = False
            try:
                if self.con.in_transaction:
                    self.con.execute("ROLLBACK")
                self.con.execute("BEGIN")
                for i, op in enumerate(held):
                    applying = True
                    self._apply(op, i)
                    applying = False
                    n += 1
                    units += op.units
                    if isinstance(op, _BatchOp):
                        written += op.lines
                        last_t = op.last_t if op.last_t is not None else last_t
                    if units >= self._chunk:
                        break
                self.con.execute("COMMIT")
            except Exception as exc:  # a held write must never end the recorder
                if not _cannot_write(exc) and applying:
                    # a held write that can never be written (not the disk's fault): drop it, go on
                    self._rollback_quietly()
                    bad = held[n]
                    del held[n]
                    self._held_units -= bad.units
                    if self.outage is not None:
                        self.outage.dropped_other += 1
                    continue
                if not isinstance(exc, sqlite3.Error):
                    raise
                self._fail(exc)
                return
            for _ in range(n):
                held.popleft()
            self._held_units -= units
            if last_t is not None:
                self._durable_t = last_t
            if self.outage is not None:
                self.outage.held_written += written
            self._chunk = min(self._chunk * 4, 8192)
            if budget_s is not None and self._mono() - started > budget_s:
                self._next_try = 0.0  # go on at the next commit
                return
        self._held_units = 0
        self._open_tx = True
        self.con.execute("BEGIN")
        if self._reserve_held is False and self.hold_lines is not None:
            try:
                self._make_reserve()
            except LogError:
                pass  # tried again after the next outage
        self._resumed, self.outage = self.outage, None

    def _rollback_quietly(self) -> None:
        if self.con.in_transaction:
            try:
                self.con.execute("ROLLBACK")
            except sqlite3.Error:
                self._reconnect()

    def _news(self, t: float | None) -> list[str]:
        """One line for the operator per change: failing, dropping, writing again. Events go in the log as held writes."""
        told: list[str] = []
        if t is None:
            t = self.last_t if self.last_t is not None else self._clock()
        outage = self.outage
        if outage is not None:
            if "failing" not in outage.told:
                outage.told.add("failing")
                limit = self.hold_lines or 0
                channels = len(self._channel_ids)
                text = (
                    f"cannot write to {self.path}: {outage.error}; holding readings in memory "
                    f"(up to {limit:,} lines: {duration(limit / HOLD_RATE_HZ)} at {HOLD_RATE_HZ:g} lines/s, "
                    f"about {_bytes_text(hold_memory_bytes(channels, limit))} for {channels} channels) and retrying every {RETRY_S:g} s"
                )
                told.append(text)
                self.event(t, "write-error", text)
            if outage.dropped_lines + outage.dropped_other and "dropping" not in outage.told:
                outage.told.add("dropping")
                told.append(f"cannot write to {self.path} for {duration(self._mono() - outage.since_mono)}: "
                            f"more than {self.hold_lines or 0:,} lines held in memory; dropping the oldest")
        resumed, self._resumed = self._resumed, None
        if resumed is not None:
            text = f"writing to {self.path} again after {duration(self._mono() - resumed.since_mono)}: " + self._outcome(resumed)
            told.append(text)
            self.event(t, "write-resumed", text)
        return told

    @staticmethod
    def _outcome(outage: Outage) -> str:
        text = f"{outage.held_written:,} lines held in memory written"
        lost = []
        if outage.dropped_lines:
            lost.append(f"{outage.dropped_lines:,} lines dropped, oldest first, recorded as a gap")
        if outage.dropped_other:
            lost.append(f"{outage.dropped_other:,} other records dropped")
        return text + ("; " + ", ".join(lost) if lost else ", none lost")

    def commit(self, t: float | None = None) -> list[str]:
        """Commit what is held; while the log cannot be written, retry every :data:`RETRY_S`.

        Parameters
        ----------
        t : float, optional
            Now on the firing's time line, for the events about write errors.

        Returns
        -------
        list of str
            One line for the operator per change of state (cannot write, dropping, writing again); usually none.
        """
        if self.hold_lines is None:
            try:
                self.con.execute("COMMIT")
            except sqlite3.Error as exc:
                if _cannot_write(exc):
                    raise LogWriteError(f"{self.path}: cannot write: {self._describe(exc)}") from None
                raise
            self._checkpoint()
            self.con.execute("BEGIN")
            return []
        if self._open_tx:
            try:
                self.con.execute("COMMIT")
            except sqlite3.Error as exc:
                if not _cannot_write(exc):
                    raise
                self._fail(exc)
            else:
                self._held.clear()
                self._held_units = 0
                self._durable_t = self.last_t
                self._checkpoint()
                self.con.execute("BEGIN")
        elif self._mono() >= self._next_try:
            self._catch_up(CATCH_UP_S)
        return self._news(t)

    # -- closing ----------------------------------------------------------------------
    def close(self, reason: str = "stopped", t: float | None = None) -> list[str]:
        """Commit, end the session with ``reason`` and release the lock.

        On a log that cannot be written it tries once more, then again with
        the reserve's space given back, then without the held readings (a
        gap), so that the session is closed with its reason whenever the
        smallest write fits. Returns the lines for the operator.
        """
        told: list[str] = []
        try:
            if self.hold_lines is None:
                try:
                    if self.con.in_transaction:
                        self._pack_raw(1)  # a batch run's last lines are compressed too
                        self.con.execute("COMMIT")
                    self.con.execute("UPDATE session SET ended_utc = ?, end_reason = ? WHERE id = ?", (self._clock(), reason, self.session_id))
                except sqlite3.Error as exc:
                    if _cannot_write(exc):
                        raise LogWriteError(f"{self.path}: cannot write: {self._describe(exc)}") from None
                    raise
            else:
                told = self._close_holding(reason, t)
                if self.outage is None and not self.con.in_transaction:
                    try:  # the lines still waiting are compressed now; a log that cannot take it keeps them as they are
                        self.con.execute("BEGIN")
                        self._pack_raw(1)
                        self.con.execute("COMMIT")
                    except sqlite3.Error:
                        self._rollback_quietly()
            try:
                self._checkpoint(force=True)
                self.con.close()
            except sqlite3.Error:
                pass
        finally:
            self._release()
        return told

    def _close_holding(self, reason: str, t: float | None) -> list[str]:
        told = self.commit(t) if self._open_tx else []
        attempts: tuple[Callable[[], None], ...] = (
            lambda: None,
            self._release_reserve,
            lambda: self._enforce_bound(0),
            lambda: self._enforce_bound(0, everything=True),
        )
        for attempt in attempts:
            if self._open_tx:
                break
            attempt()
            self._catch_up(None)
        told += self._news(t)
        closing = _Statement("UPDATE session SET ended_utc = ?, end_reason = ? WHERE id = ?", (self._clock(), reason, self.session_id), None, 1, False)
        if self._open_tx:
            self._run(closing)
        if self._open_tx:
            try:
                self.con.execute("COMMIT")
                return told
            except sqlite3.Error as exc:
                if not _cannot_write(exc):
                    raise
                self._fail(exc)
        # the last resort: the session's end alone; whatever is still held is lost
        lost = sum(op.lines for op in self._held if isinstance(op, (_BatchOp, _Dropped)))
        self._held.clear()
        self._held_units = 0
        error = self.outage.error if self.outage is not None else "unknown error"
        try:
            self._rollback_quietly()
            self.con.execute(closing.sql, closing.params)
            told.append(f"cannot write to {self.path}: {error}; the session is closed but {lost:,} lines held in memory are lost")
        except sqlite3.Error:
            told.append(f"could not close the session in {self.path}: {error}; {lost:,} lines held in memory are lost")
        return told

    # -- disk space and the WAL -------------------------------------------------------
    def _make_reserve(self) -> None:
        """Set :data:`RESERVE_BYTES` of disk aside in ``FILE.db.reserve`` (never following a link)."""
        try:
            os.unlink(self._reserve)
        except FileNotFoundError:
            pass
        except OSError as exc:
            raise LogError(f"{self._reserve}: cannot replace it ({exc.strerror}); remove it") from None
        try:
            fd = os.open(self._reserve, os.O_WRONLY | os.O_CREAT | os.O_EXCL | os.O_NOFOLLOW | os.O_CLOEXEC, 0o600)
        except OSError as exc:
            raise LogWriteError(f"{self.path}: cannot write: {self._describe(exc)}") from None
        try:
            os.posix_fallocate(fd, 0, RESERVE_BYTES)
        except OSError as exc:
            os.close(fd)
            os.unlink(self._reserve)
            raise LogWriteError(
                f"{self.path}: cannot write: {self._describe(exc)}; the recorder keeps {_bytes_text(RESERVE_BYTES)} aside "
                "to close the firing if the disk fills"
            ) from None
        os.close(fd)
        self._reserve_held = True

    def _release_reserve(self) -> None:
        if self._reserve_held:
            self._reserve_held = False
            try:
                os.unlink(self._reserve)
            except OSError:
                pass

    def _checkpoint(self, force: bool = False) -> None:
        """Checkpoint and truncate the WAL once it has grown past :data:`WAL_CHECKPOINT_BYTES` (or when ``force``).

        Between transactions only. It waits at most :data:`CHECKPOINT_BUSY_MS`
        for readers; if they are still reading, it is tried again a second later.
        """
        if not force:
            try:
                size = os.stat(f"{self.path}-wal").st_size
            except OSError:
                return
            if size < self._wal_checkpoint_bytes or self._mono() < self._next_checkpoint:
                return
        try:
            self.con.execute(f"PRAGMA busy_timeout={CHECKPOINT_BUSY_MS}")
            try:
                busy = self.con.execute("PRAGMA wal_checkpoint(TRUNCATE)").fetchone()[0]
            finally:
                self.con.execute("PRAGMA busy_timeout=5000")
        except sqlite3.Error:
            busy = 1  # a full disk: the next commit says so
        self._next_checkpoint = self._mono() + 1.0 if busy else 0.0

    def _describe(self, exc: BaseException) -> str:
        """What is wrong, in words an operator can act on: a full disk, a file-size limit, an I/O error."""
        try:
            free: int | None = shutil.disk_usage(self.path.parent).free
        except OSError:
            free = None
        limit = resource.getrlimit(resource.RLIMIT_FSIZE)[0]
        sizes = []
        for file in (self.path, Path(f"{self.path}-wal")):
            try:
                sizes.append(file.stat().st_size)
            except OSError:
                pass
        at_limit = limit != resource.RLIM_INFINITY and max(sizes, default=0) + 65536 >= limit
        if isinstance(exc, OSError):
            full = exc.errno == errno.ENOSPC
            if exc.errno == errno.EFBIG or (at_limit and not full):
                return f"the file size limit (ulimit -f) of {_bytes_text(limit)} is reached"
            if exc.errno == errno.EDQUOT:
                return "the disk quota is exceeded"
            if exc.errno == errno.EROFS:
                return "the filesystem is read-only"
            what = "the disk is full" if full else (exc.strerror or str(exc))
        else:
            name = getattr(exc, "sqlite_errorname", "")
            full = sqlite_code(exc) == 13 or (free is not None and free < 65536)
            if at_limit and sqlite_code(exc) in (10, 13):
                return f"the file size limit (ulimit -f) of {_bytes_text(limit)} is reached"
            what = "the disk is full" if full else (f"{exc} ({name})" if name else str(exc))
        if full and free is not None:
            what += f" ({_bytes_text(free)} free)"
        return what

    def _release(self) -> None:
        self._release_reserve()
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

    def __init__(self, path: str | Path, clock_fn: Callable[[], float] = time.time) -> None:
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

    def __exit__(self, exc_type: type[BaseException] | None, exc: BaseException | None, tb: TracebackType | None) -> None:
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
        row = self.con.execute("SELECT s.t - n.last_received_utc FROM sample s JOIN session n ON n.id = s.session_id ORDER BY s.id DESC LIMIT 1").fetchone()
        shift: float = row[0] if row and row[0] is not None else 0.0
        return self._clock() + shift

    def execute(self, sql: str, params: Iterable[Any] = ()) -> sqlite3.Cursor:
        return self.con.execute(sql, tuple(params))

    def query(self, sql: str, params: Iterable[Any] = ()) -> sqlite3.Cursor:
        """Run a SELECT inside the brief write's transaction (as :meth:`LogWriter.query`)."""
        return self.con.execute(sql, tuple(params))

    def event(self, t: float, kind: str, detail: str = "", channel: str | None = None) -> None:
        self.con.execute("INSERT INTO event(t, kind, channel, detail) VALUES (?, ?, ?, ?)", (t, kind, channel, detail))
