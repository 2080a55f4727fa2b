"""Converting a log of the earlier layout (schema 1, one ``reading`` row per value) to the compact layout.

Used by ``firewatch upgrade-log OLD NEW``, by a recorder continuing an old
log, and by readers of an old log (through a converted copy kept in the
user's cache). The original is only ever read. The conversion streams, a
block of samples at a time, so that a week-long log never sits in memory.
"""

from __future__ import annotations

import hashlib
import os
import sqlite3
import tempfile
from pathlib import Path

import numpy as np

from firewatch import __version__
from firewatch.store._common import SCHEMA_VERSION, LogError, schema_sql
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

__all__ = ["upgrade_log", "needs_upgrade", "upgraded_copy", "CHUNK"]

CHUNK = 20_000
"""Samples converted per step."""

_SESSION = ("id", "started_utc", "ended_utc", "end_reason", "heartbeat_utc", "port", "pid", "host", "firewatch_version", "sqlite_version",
            "site_profile", "schedule")


def needs_upgrade(path: str | Path) -> bool:
    """True when ``path`` is a firing log of the earlier layout."""
    try:
        con = sqlite3.connect(f"file:{Path(path).resolve()}?mode=ro", uri=True)
    except sqlite3.Error:
        return False
    try:
        return not is_compact(con) and con.execute("SELECT 1 FROM sqlite_master WHERE name = 'meta'").fetchone() is not None
    except sqlite3.DatabaseError:
        return False  # not a log, or a damaged one: the writer says which
    finally:
        con.close()


def upgrade_log(old: str | Path, new: str | Path) -> dict[str, int]:
    """Write the compact copy of the old-layout log ``old`` to ``new`` (which must not exist); ``old`` is only read.

    Returns counts: samples, raw lines, alarms. Raises :class:`LogError` for a
    file that is not an old-layout log, or a ``new`` that exists.
    """
    old, new = Path(old), Path(new)
    if new.exists():
        raise LogError(f"{new}: already exists; upgrade-log writes a new file and never overwrites one")
    src = sqlite3.connect(f"file:{old.resolve()}?mode=ro", uri=True)
    try:
        try:
            version = src.execute("SELECT value FROM meta WHERE key = 'schema_version'").fetchone()
            compact = is_compact(src)
        except sqlite3.DatabaseError as exc:
            raise LogError(f"{old}: not a firing log ({exc})") from None
        if version is None:
            raise LogError(f"{old}: not a firing log (no schema version)")
        if compact:
            raise LogError(f"{old}: already in the compact layout (schema {version[0]}); nothing to convert")
        dst = sqlite3.connect(str(new), isolation_level=None)
        try:
            dst.execute("PRAGMA journal_mode=WAL")
            dst.execute("PRAGMA synchronous=NORMAL")
            dst.executescript("BEGIN;\n" + schema_sql() + "\nCOMMIT;")
            dst.execute("BEGIN")
            counts = _convert(src, dst, int(version[0]))
            dst.execute("COMMIT")
            dst.execute("PRAGMA wal_checkpoint(TRUNCATE)")
        except BaseException:
            dst.close()
            for suffix in ("", "-wal", "-shm"):
                Path(f"{new}{suffix}").unlink(missing_ok=True)
            raise
        dst.close()
        return counts
    finally:
        src.close()


def _convert(src: sqlite3.Connection, dst: sqlite3.Connection, version: int) -> dict[str, int]:
    dst.execute("INSERT INTO meta(key, value) VALUES ('schema_version', ?)", (str(SCHEMA_VERSION),))
    dst.execute("INSERT INTO meta(key, value) VALUES ('created_by', ?)", (f"firewatch {__version__}",))
    dst.execute("INSERT INTO meta(key, value) VALUES ('upgraded_from', ?)", (f"schema {version}",))
    for key, value in src.execute("SELECT key, value FROM meta WHERE key NOT IN ('schema_version', 'created_by', 'upgraded_from')"):
        dst.execute("INSERT INTO meta(key, value) VALUES (?, ?)", (key, value))
    dst.execute("INSERT INTO firing SELECT * FROM (SELECT ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
                src.execute("SELECT id, created_utc, started_t, ended_t, site_name, kiln, site_profile, schedule_name, schedule, clock "
                            "FROM firing").fetchone() or (1, 0.0, None, None, "", "", "", "", "", "wall"))
    have = {r[1] for r in src.execute("PRAGMA table_info(session)")}
    cols = ", ".join(c if c in have else "NULL" for c in _SESSION)
    for row in src.execute(f"SELECT {cols} FROM session ORDER BY id"):
        last = src.execute("SELECT received_utc, device_time FROM sample WHERE session_id = ? ORDER BY id DESC LIMIT 1", (row[0],)).fetchone()
        dst.execute(f"INSERT INTO session({', '.join(_SESSION)}, last_received_utc, last_device_time) VALUES ({', '.join('?' * (len(_SESSION) + 2))})",
                    (*row, *(last or (None, None))))
    channels = src.execute("SELECT id, name, kind, unit, source, description FROM channel ORDER BY id").fetchall()
    measured: list[int] = []
    derived: list[int] = []
    progress: set[int] = set()
    for cid, name, kind, unit, source, description in channels:
        first = src.execute("SELECT min(sample_id) FROM reading WHERE channel_id = ?", (cid,)).fetchone()[0]
        dst.execute("INSERT INTO channel(id, name, kind, unit, source, description, first_sample) VALUES (?, ?, ?, ?, ?, ?, ?)",
                    (cid, name, kind, unit, source, description, first))
        if kind in MEASURED_KINDS:
            dst.execute(f"ALTER TABLE sample ADD COLUMN {column(cid)} REAL")
            measured.append(cid)
        else:
            derived.append(cid)
            if kind == STEP_KIND:
                progress.add(cid)
                dst.execute(f"ALTER TABLE step ADD COLUMN {step_column(cid)} REAL")
    write_views(dst)

    samples = 0
    last_slot = -np.inf
    open_runs: dict[int, tuple[int, int, int]] = {}
    latest: dict[int, tuple[int, float, float | None, int]] = {}
    after = 0
    while True:
        rows = src.execute("SELECT id, session_id, t FROM sample WHERE id > ? ORDER BY id LIMIT ?", (after, CHUNK)).fetchall()
        if not rows:
            break
        ids = np.array([r[0] for r in rows], dtype=np.int64)
        times = np.array([r[2] for r in rows], dtype=float)
        lo, hi = int(ids[0]), int(ids[-1])
        after = hi
        values: dict[int, list[float | None]] = {}
        for cid in measured:
            got = src.execute("SELECT sample_id, value, status FROM reading WHERE channel_id = ? AND sample_id BETWEEN ? AND ?", (cid, lo, hi)).fetchall()
            arr = np.full(ids.size, np.nan)
            status = np.zeros(ids.size, dtype=np.int64)
            if got:
                sids = np.fromiter((r[0] for r in got), dtype=np.int64, count=len(got))
                pos = np.searchsorted(ids, sids)
                hit = (pos < ids.size) & (ids[np.minimum(pos, ids.size - 1)] == sids)
                arr[pos[hit]] = np.array([np.nan if r[1] is None else r[1] for r in got], dtype=float)[hit]
                status[pos[hit]] = np.fromiter((r[2] for r in got), dtype=np.int64, count=len(got))[hit]
            values[cid] = [None if v != v else v for v in arr.tolist()]
            _flags(dst, cid, ids, status, open_runs)
        names = "".join(f", {column(cid)}" for cid in measured)
        dst.executemany(f"INSERT INTO sample(id, session_id, t{names}) VALUES (?, ?, ?{', ?' * len(measured)})",
                        zip(ids.tolist(), [r[1] for r in rows], times.tolist(), *(values[cid] for cid in measured)))
        slots = np.floor(times / STEP_S)
        steps = set(ids[slots != np.concatenate([[last_slot], slots[:-1]])].tolist())
        last_slot = float(slots[-1])
        wide: dict[int, dict[int, float | None]] = {sid: {} for sid in sorted(steps)}
        for cid in derived:
            for sid, t, value, st in src.execute("SELECT sample_id, t, value, status FROM reading WHERE channel_id = ? AND sample_id BETWEEN ? AND ?",
                                                 (cid, lo, hi)):
                if cid in progress and sid in wide:
                    wide[sid][cid] = value
                latest[cid] = (sid, t, value, st)
        order = sorted(progress)
        if order:
            dst.executemany(f"INSERT INTO step(sample_id{''.join(', ' + step_column(c) for c in order)}) VALUES (?{', ?' * len(order)})",
                            [(sid, *(row.get(c) for c in order)) for sid, row in wide.items()])
        samples += ids.size
    for cid, (a, b, st) in open_runs.items():
        dst.execute("INSERT INTO flag(channel_id, first_id, last_id, status) VALUES (?, ?, ?, ?)", (cid, a, b, st))
    dst.executemany("INSERT INTO latest(channel_id, sample_id, t, value, status) VALUES (?, ?, ?, ?, ?)",
                    [(cid, *row) for cid, row in latest.items()])

    lines = 0
    after = 0
    while True:
        rows = src.execute("SELECT id, received_utc, line, ok, reason, session_id FROM raw_line WHERE id > ? ORDER BY id LIMIT ?",
                           (after, RAW_BLOCK_LINES)).fetchall()
        if not rows:
            break
        after = rows[-1][0]
        insert_raw_blocks(dst, rows)
        lines += len(rows)
    for table, cols in (("event", "id, t, kind, channel, detail"), ("gap", "id, start_t, end_t, reason"),
                        ("alarm", "id, kind, channel, cause, priority, raised_t, cleared_t, state, message, evidence"),
                        ("alarm_state", "id, alarm_id, t, state, detail"), ("trend_minute", "channel_id, minute, lo, hi, n")):
        where, order_by = "", " ORDER BY 1"
        if table == "trend_minute":  # the charted channels only, as the writer keeps them
            where = (f" WHERE channel_id IN (SELECT id FROM channel WHERE kind IN ('thermocouple', 'cold_junction', 'pyrometer') "
                     f"OR name LIKE '%{CHARTED_SUFFIX}')")
            order_by = " ORDER BY minute, channel_id"
        rows = src.execute(f"SELECT {cols} FROM {table}{where}{order_by}").fetchall()
        dst.executemany(f"INSERT INTO {table}({cols}) VALUES ({', '.join('?' * len(cols.split(',')))})", rows)
    alarms = dst.execute("SELECT count(*) FROM alarm").fetchone()[0]
    return {"samples": samples, "lines": lines, "alarms": int(alarms)}


def _flags(dst: sqlite3.Connection, cid: int, ids: np.ndarray, status: np.ndarray, open_runs: dict[int, tuple[int, int, int]]) -> None:
    """Runs of one status other than OK, a run reaching the end of the chunk held open for the next."""
    for a, b, st in status_runs(status):
        first, last = int(ids[a]), int(ids[b])
        prev = open_runs.pop(cid, None)
        if prev is not None:
            if a == 0 and prev[2] == st:
                first = prev[0]
            else:
                dst.execute("INSERT INTO flag(channel_id, first_id, last_id, status) VALUES (?, ?, ?, ?)", (cid, *prev))
        if b == ids.size - 1:
            open_runs[cid] = (first, last, st)
        else:
            dst.execute("INSERT INTO flag(channel_id, first_id, last_id, status) VALUES (?, ?, ?, ?)", (cid, first, last, st))
    if cid in open_runs and open_runs[cid][1] != int(ids[-1]):  # the run ended with the chunk before
        dst.execute("INSERT INTO flag(channel_id, first_id, last_id, status) VALUES (?, ?, ?, ?)", (cid, *open_runs.pop(cid)))


def upgraded_copy(path: str | Path) -> Path:
    """A compact copy of the old-layout log ``path`` for reading, converted once and kept in the user's cache.

    The copy is named by the original's path, size and modification time, so
    a changed original is converted again. Where no cache directory can be
    written, the copy goes to a temporary directory.
    """
    path = Path(path)
    st = path.stat()
    key = hashlib.sha256(f"{path.resolve()}\0{st.st_size}\0{st.st_mtime_ns}\0{st.st_ino}".encode()).hexdigest()[:24]
    base = Path(os.environ.get("XDG_CACHE_HOME") or Path.home() / ".cache") / "firewatch" / "upgraded"
    for folder in (base, Path(tempfile.gettempdir()) / f"firewatch-upgraded-{os.getuid()}"):
        target = folder / f"{path.stem}-{key}.db"
        if target.exists():
            return target
        try:
            folder.mkdir(parents=True, exist_ok=True, mode=0o700)
            tmp = folder / f".{target.name}.{os.getpid()}.tmp"
            for suffix in ("", "-wal", "-shm"):
                Path(f"{tmp}{suffix}").unlink(missing_ok=True)
            upgrade_log(path, tmp)
            os.replace(tmp, target)
            return target
        except OSError:
            continue
    raise LogError(f"{path}: a log of the earlier layout, and no directory could hold its converted copy")


def convert_in_place(path: str | Path) -> Path:
    """Convert the old-layout log ``path`` for a writer that continues it; return where the original is kept.

    The caller holds the log's lock. The compact copy is written beside it
    and synced; the original's WAL is checkpointed into it (its content
    unchanged), the original is renamed ``FILE.db.schema<N>`` and the copy
    takes its name, so that nothing recorded is lost whatever happens midway.
    """
    path = Path(path)
    con = sqlite3.connect(str(path), isolation_level=None)
    try:
        version = con.execute("SELECT value FROM meta WHERE key = 'schema_version'").fetchone()
        con.execute("PRAGMA wal_checkpoint(TRUNCATE)")
    finally:
        con.close()
    keep = path.with_name(f"{path.name}.schema{version[0] if version else 1}")
    if keep.exists():
        raise LogError(f"{path}: cannot convert it to the compact layout: {keep} is in the way")
    tmp = path.with_name(f"{path.name}.upgrading")
    for suffix in ("", "-wal", "-shm"):
        Path(f"{tmp}{suffix}").unlink(missing_ok=True)
    upgrade_log(path, tmp)
    fd = os.open(tmp, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)
    for suffix in ("-wal", "-shm"):
        Path(f"{path}{suffix}").unlink(missing_ok=True)  # checkpointed and truncated above
    os.replace(path, keep)
    os.replace(tmp, path)
    return keep
