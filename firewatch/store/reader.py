"""Read-only access to a firing log, in short transactions (safe beside a live recorder)."""

from __future__ import annotations

import contextlib
import json
import sqlite3
from collections.abc import Iterable, Iterator
from contextlib import AbstractContextManager
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from firewatch.firing.pipeline import ChannelInfo
from firewatch.store._common import SCHEMA_VERSION, STORAGE_CODES, LogDamaged, LogError, LogUnavailable, _connect, log_error, sqlite_code
from firewatch.store.layout import MEASURED_KINDS, RAW_BLOCK_LINES, STEP_KIND, column, is_compact, step_column, unpack_raw
from firewatch.transport.records import Status

__all__ = ["Block", "Series", "LogReader", "open_reader"]


_CHUNK = 50_000
"""Samples read per query when a whole channel is read."""


@dataclass
class Block:
    """A stretch of samples with measured channels as arrays: ids, sessions, times, and per channel its
    values (NaN where none), statuses and which samples it has (a channel added later has none before)."""

    ids: np.ndarray
    session: np.ndarray
    t: np.ndarray
    values: dict[str, np.ndarray]
    status: dict[str, np.ndarray]
    has: dict[str, np.ndarray]


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
        if not self.path.exists():
            raise LogError(f"{self.path}: no such firing log")
        if not self.path.is_file():
            raise LogError(f"{self.path}: not a regular file, so not a firing log")
        if self.path.stat().st_size == 0:
            raise LogError(f"{self.path}: an empty file, not a firing log")
        con = None
        try:
            con = _connect(self.path, read_only=True)
            version = con.execute("SELECT value FROM meta WHERE key='schema_version'").fetchone()
        except sqlite3.DatabaseError as exc:
            if con is not None:
                con.close()
            if sqlite_code(exc) in STORAGE_CODES:
                raise LogUnavailable(f"{self.path}: cannot open the firing log ({exc})") from None
            error = log_error(self.path, exc)
            if not isinstance(error, LogDamaged):  # not SQLite, another SQLite database, or no meta table
                error = LogError(f"{self.path}: not a firing log ({exc})")
            raise error from None
        if version is None:
            con.close()
            raise LogError(f"{self.path}: not a firing log (no schema version)")
        if int(version[0]) > SCHEMA_VERSION:
            con.close()
            raise LogError(f"{self.path}: log schema {version[0]} is newer than this firewatch reads ({SCHEMA_VERSION})")
        self.upgraded_from: str | None = None
        """The old layout's schema version when this reads a converted copy of an old log (see docs/log-format.md)."""
        self.data_path = self.path
        """The file the readings are read from: the log, or the converted copy of an old one."""
        self._source = con
        self._con: sqlite3.Connection | None = con
        if not is_compact(con):
            self.upgraded_from = str(version[0])
            self._con = None  # converted when first read: an integrity check alone reads the original
        self._layout: tuple[dict[str, tuple[int, int]], dict[str, tuple[int, str]]] | None = None
        self.lock: AbstractContextManager[Any] = contextlib.nullcontext()
        """Held around reads that bypass :meth:`query` (a viewer sharing the connection between threads sets its own)."""

    def readings_path(self) -> Path:
        """The file the readings are read from (converting an old log first, see :attr:`data_path`)."""
        self.con.execute("SELECT 1")
        return self.data_path

    @property
    def con(self) -> sqlite3.Connection:
        """The connection the readings are read through (an old log is converted on first use)."""
        if self._con is None:
            from firewatch.store.upgrade import upgraded_copy

            try:
                self.data_path = upgraded_copy(self.path)
                self._con = _connect(self.data_path, read_only=True)
            except sqlite3.DatabaseError as exc:
                raise log_error(self.path, exc) from None
        return self._con

    def close(self) -> None:
        if self._con is not None and self._con is not self._source:
            self._con.close()
        self._source.close()

    def __enter__(self) -> LogReader:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def query(self, sql: str, params: Iterable[Any] = ()) -> list[tuple[Any, ...]]:
        """Rows of one statement; a SQLite failure becomes a :class:`LogError` naming the file
        (:class:`LogDamaged` when SQLite finds the file damaged)."""
        try:
            return self.con.execute(sql, tuple(params)).fetchall()
        except sqlite3.DatabaseError as exc:
            raise log_error(self.path, exc) from None

    def integrity(self, limit: int = 20) -> list[str]:
        """SQLite's ``PRAGMA quick_check``: no problems (an empty list) when the log is sound, else up to ``limit``.

        ``quick_check`` reads every page and checks the b-trees and records but not that each index
        matches its table (SQLite's documentation, "PRAGMA quick_check"); it takes 0.2 to 0.7 s for a
        day's log of 60 MB, which a command reading the whole log can afford.
        """
        try:
            rows = self._source.execute(f"PRAGMA quick_check({int(limit)})").fetchall()
        except sqlite3.DatabaseError as exc:
            return [str(exc)]
        # SQLite may join several problems into one row, headed by the database's name
        problems = [line.strip() for (text,) in rows for line in str(text).splitlines()]
        problems = [p for p in problems if p and not p.startswith("*** in database")]
        return [] if problems == ["ok"] else problems[:limit]

    def firing(self) -> dict[str, Any]:
        try:
            cur = self.con.execute("SELECT * FROM firing WHERE id = 1")
            row = cur.fetchone()
        except sqlite3.DatabaseError as exc:
            raise log_error(self.path, exc) from None
        if row is None:
            return {}
        return dict(zip([d[0] for d in cur.description], row))

    def channels(self) -> list[ChannelInfo]:
        return [ChannelInfo(*r) for r in self.query("SELECT name, kind, unit, source, description FROM channel ORDER BY id")]

    # -- the layout ---------------------------------------------------------------------
    def _channels(self) -> tuple[dict[str, tuple[int, int]], dict[str, tuple[int, str]]]:
        """Measured channels: name -> (id, first sample); the others: name -> (id, kind)."""
        if self._layout is None:
            measured: dict[str, tuple[int, int]] = {}
            other: dict[str, tuple[int, str]] = {}
            for cid, name, kind, first in self.query("SELECT id, name, kind, coalesce(first_sample, 1) FROM channel ORDER BY id"):
                if kind in MEASURED_KINDS:
                    measured[name] = (int(cid), int(first))
                else:
                    other[name] = (int(cid), str(kind))
            self._layout = (measured, other)
        return self._layout

    def refresh(self) -> None:
        """Forget what was read of the channel table (a recorder may add channels)."""
        self._layout = None

    def sample_span(self) -> tuple[int, int] | None:
        """The first and last sample id, or None before the first sample."""
        lo = self.query("SELECT id FROM sample ORDER BY id LIMIT 1")
        if not lo:
            return None
        return int(lo[0][0]), int(self.query("SELECT id FROM sample ORDER BY id DESC LIMIT 1")[0][0])

    def sample_at(self, t: float, after: bool = False) -> int | None:
        """The last sample at or before ``t`` (with ``after``: the first at or after it), or None.

        The firing's time line never runs back (docs/line-format.md), so sample
        times rise with their ids and a bisection over the ids finds it in about
        20 lookups, with no index on the time to store.
        """
        span = self.sample_span()
        if span is None:
            return None
        lo, hi = span

        def t_from(x: int) -> tuple[int, float]:  # the first sample at or after id x (ids may have holes)
            row = self.query("SELECT id, t FROM sample WHERE id >= ? ORDER BY id LIMIT 1", (x,))[0]
            return int(row[0]), float(row[1])

        if after:
            if t_from(hi)[1] < t:
                return None
            a, b = lo - 1, hi  # t(a) < t <= t(b), a sentinel below
            while b - a > 1:
                mid = (a + b) // 2
                if t_from(mid)[1] >= t:
                    b = mid
                else:
                    a = mid
            return t_from(b)[0]
        if t_from(lo)[1] > t:
            return None
        a, b = lo, hi + 1  # t(a) <= t < t(b), b a sentinel above
        while b - a > 1:
            mid = (a + b) // 2
            if t_from(mid)[1] <= t:
                a = mid
            else:
                b = mid
        return a

    def block(self, lo: int, hi: int, names: Iterable[str] | None = None) -> Block:
        """Samples ``lo`` to ``hi`` (ids, inclusive) with the measured channels ``names`` (all when None).

        A channel's values before its first sample are NaN with status MISSING
        (``Block.has`` says which samples it has).
        """
        measured = self._channels()[0]
        wanted = [n for n in (names if names is not None else measured) if n in measured]
        # NULL is read as +inf (9e999) and turned into NaN, so that the rows go straight into a numpy record array;
        # no measured value is infinite (the parsers reject inf as malformed)
        cols = "".join(f", ifnull({column(measured[n][0])}, 9e999)" for n in wanted)
        dtype = np.dtype([("id", "i8"), ("s", "i8"), ("t", "f8")] + [(f"v{k}", "f8") for k in range(len(wanted))])
        try:
            with self.lock:
                rows = np.fromiter(self.con.execute(f"SELECT id, session_id, t{cols} FROM sample WHERE id BETWEEN ? AND ? ORDER BY id", (lo, hi)),
                                   dtype=dtype)
        except sqlite3.DatabaseError as exc:
            raise log_error(self.path, exc) from None
        ids = rows["id"].copy()
        out = Block(ids, rows["s"].copy(), rows["t"].copy(), {}, {}, {})
        for k, name in enumerate(wanted):
            cid, first = measured[name]
            v = rows[f"v{k}"].copy()
            v[np.isinf(v)] = np.nan
            out.values[name] = v
            status = np.zeros(ids.size, dtype=np.int64)
            if ids.size:
                for a, b, st in self.query("SELECT first_id, last_id, status FROM flag WHERE channel_id = ? AND first_id <= ? AND last_id >= ?",
                                           (cid, int(ids[-1]), int(ids[0]))):
                    status[np.searchsorted(ids, a, side="left"):np.searchsorted(ids, b, side="right")] = st
            has = ids >= first
            status[~has] = int(Status.MISSING)
            out.status[name], out.has[name] = status, has
        return out

    def series(self, channel: str, start_t: float | None = None, end_t: float | None = None) -> Series:
        """One channel's readings between two times (inclusive): measured ones as kept, derived ones recomputed,
        progress at the step rate."""
        measured, other = self._channels()
        empty = Series(np.empty(0), np.empty(0), np.empty(0, dtype=np.int64))
        if channel not in measured and channel not in other:
            return empty
        span = self.sample_span()
        if span is None:
            return empty
        lo = self.sample_at(start_t, after=True) if start_t is not None else span[0]
        hi = self.sample_at(end_t) if end_t is not None else span[1]
        if lo is None or hi is None or hi < lo:
            return empty
        if channel in measured:
            out = []
            for a in range(lo, hi + 1, _CHUNK):
                b = self.block(a, min(a + _CHUNK - 1, hi), [channel])
                has = b.has[channel]
                out.append((b.t[has], b.values[channel][has], b.status[channel][has]))
            return Series(*(np.concatenate([o[i] for o in out]) for i in range(3)))
        if other[channel][1] == STEP_KIND:
            _, t, steps = self.steps(lo, hi, [channel])
            v = steps[channel]
            return Series(t, v, np.where(np.isnan(v), int(Status.MISSING), int(Status.OK)))  # NaN: not placed
        from firewatch.store.derive import derived_series

        return derived_series(self, channel, lo, hi)

    def steps(self, lo: int, hi: int, names: Iterable[str] | None = None) -> tuple[np.ndarray, np.ndarray, dict[str, np.ndarray]]:
        """The progress channels ``names`` (all when None) at their steps among samples ``lo`` to ``hi``: the step
        samples' ids and times, and each channel's values there (NaN where the tracker had not placed the kiln)."""
        other = self._channels()[1]
        wanted = [(n, other[n][0]) for n in (names if names is not None else other) if n in other and other[n][1] == STEP_KIND]
        cols = "".join(f", p.{step_column(cid)}" for _, cid in wanted)
        rows = self.query(f"SELECT p.sample_id, s.t{cols} FROM step p JOIN sample s ON s.id = p.sample_id "
                          "WHERE p.sample_id BETWEEN ? AND ? ORDER BY p.sample_id", (lo, hi))
        arr = np.array(rows, dtype=float).reshape(len(rows), 2 + len(wanted))  # NULL becomes NaN
        return arr[:, 0].astype(np.int64), arr[:, 1].copy(), {name: arr[:, 2 + k].copy() for k, (name, _) in enumerate(wanted)}

    def raw_span(self) -> tuple[int, int]:
        """``(lo, hi)``: every raw line has an id ``lo < id <= hi``."""
        row = self.query("SELECT min((SELECT coalesce(min(id), 1) FROM raw_block), (SELECT coalesce(min(id), 1) FROM raw_line)) - 1, "
                         "max((SELECT coalesce(max(last_id), 0) FROM raw_block), (SELECT coalesce(max(id), 0) FROM raw_line))")[0]
        return int(row[0]), int(row[1])

    def raw_rows(self, lo: int | None = None, hi: int | None = None) -> Iterator[list[tuple[int, float, bytes, int, str | None, int]]]:
        """Raw lines ``lo < id <= hi`` (all when None) in order, a block at a time:
        ``(id, received_utc, line, ok, reason, session_id)``."""
        lo = 0 if lo is None else lo
        hi = (1 << 62) if hi is None else hi
        blocks = self.query("SELECT id, last_id, session_id, received, ok, lengths, lines, reasons FROM raw_block "
                            "WHERE last_id > ? AND id <= ? ORDER BY id", (lo, hi))
        for first, _last, session, received, ok, lengths, lines, reasons in blocks:
            rows = [(*r, session) for r in unpack_raw(first, received, ok, lengths, lines, reasons) if lo < r[0] <= hi]
            if rows:
                yield rows
        after = max(lo, blocks[-1][1] if blocks else lo)
        while True:
            rows = self.query("SELECT id, received_utc, line, ok, reason, session_id FROM raw_line WHERE id > ? AND id <= ? ORDER BY id LIMIT ?",
                              (after, hi, RAW_BLOCK_LINES))
            if not rows:
                return
            after = rows[-1][0]
            yield [(r[0], r[1], bytes(r[2]), r[3], r[4], r[5]) for r in rows]

    def raw_lines(self, lo: int | None = None, hi: int | None = None, batch_size: int = 5000) -> Iterator[list[tuple[float, bytes, int]]]:
        """Raw lines ``lo < id <= hi`` (all when None) in order, in batches: ``(received_utc, line, session_id)``."""
        batch: list[tuple[float, bytes, int]] = []
        for rows in self.raw_rows(lo, hi):
            batch.extend((r[1], r[2], r[5]) for r in rows)
            if len(batch) >= batch_size:
                yield batch
                batch = []
        if batch:
            yield batch

    def raw_counts(self) -> tuple[int, int]:
        """Raw lines in all, and how many of them were rejected."""
        a = self.query("SELECT coalesce(sum(n), 0), coalesce(sum(bad), 0) FROM raw_block")[0]
        b = self.query("SELECT count(*), coalesce(sum(ok = 0), 0) FROM raw_line")[0]
        return int(a[0] + b[0]), int(a[1] + b[1])

    def malformed_reasons(self, limit: int = 5) -> list[tuple[str, int]]:
        """The commonest reasons lines were rejected, with their counts (most first)."""
        counts: dict[str, int] = {}
        for (reasons,) in self.query("SELECT reasons FROM raw_block WHERE bad > 0"):
            for _, why in json.loads(reasons or "[]"):
                counts[why] = counts.get(why, 0) + 1
        for why, n in self.query("SELECT coalesce(reason, 'no reason given'), count(*) FROM raw_line WHERE ok = 0 GROUP BY 1"):
            counts[why] = counts.get(why, 0) + int(n)
        return sorted(counts.items(), key=lambda kv: (-kv[1], kv[0]))[:limit]

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
