"""Read-only access to a firing log, in short transactions (safe beside a live recorder)."""

from __future__ import annotations

import json
import sqlite3
from collections.abc import Iterable, Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from firewatch.firing.pipeline import ChannelInfo
from firewatch.store._common import SCHEMA_VERSION, STORAGE_CODES, LogDamaged, LogError, LogUnavailable, _connect, log_error, sqlite_code

__all__ = ["Series", "LogReader", "open_reader"]


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
        self.con = con
        if version is None:
            con.close()
            raise LogError(f"{self.path}: not a firing log (no schema version)")
        if int(version[0]) > SCHEMA_VERSION:
            con.close()
            raise LogError(f"{self.path}: log schema {version[0]} is newer than this firewatch reads ({SCHEMA_VERSION})")

    def close(self) -> None:
        self.con.close()

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
            rows = self.con.execute(f"PRAGMA quick_check({int(limit)})").fetchall()
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

    def raw_lines(self, lo: int | None = None, hi: int | None = None, batch_size: int = 5000) -> Iterator[list[tuple[float, bytes, int]]]:
        """Raw lines ``lo < id <= hi`` (all when None) in order, in batches: ``(received_utc, line, session_id)``."""
        last = 0 if lo is None else lo
        end = (1 << 63) - 1 if hi is None else hi
        while True:
            rows = self.query(
                "SELECT id, received_utc, line, session_id FROM raw_line WHERE id > ? AND id <= ? ORDER BY id LIMIT ?",
                (last, end, batch_size),
            )
            if not rows:
                return
            last = rows[-1][0]
            yield [(r[1], bytes(r[2]), r[3]) for r in rows]

    def raw_span(self) -> tuple[int, int]:
        """``(lo, hi)`` such that :meth:`raw_lines` ``(lo, hi)`` gives every raw line (``(0, 0)`` for none)."""
        return self.query("SELECT coalesce(min(id), 1) - 1, coalesce(max(id), 0) FROM raw_line")[0]

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
