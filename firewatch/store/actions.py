"""Operator actions from viewers, by a side channel: a small SQLite file beside the firing log.

Viewers (any number) append actions to ``FILE.db.actions``; the recorder,
the firing log's only writer, applies them each cycle, logs each with its
source and result in the firing log, and marks it applied. The firing log
itself never gets a second writer. Several processes may append at once:
each insert is one short transaction with a busy timeout.
"""

from __future__ import annotations

import getpass
import os
import socket
import sqlite3
import time
from dataclasses import dataclass
from pathlib import Path

__all__ = ["Action", "ActionQueue", "ACTION_KINDS", "actions_path", "default_source"]

ACTION_KINDS = ("acknowledge", "shelve", "unshelve", "note")

_SCHEMA = """
CREATE TABLE IF NOT EXISTS action(
    id INTEGER PRIMARY KEY,
    submitted_utc REAL NOT NULL,
    kind TEXT NOT NULL,
    alarm_id INTEGER,
    reason TEXT,
    duration_s REAL,
    text TEXT,
    source TEXT NOT NULL,
    applied_utc REAL,
    result TEXT
);
"""


def actions_path(log: str | Path) -> Path:
    return Path(f"{log}.actions")


def default_source() -> str:
    """Who acts: user, host and process, for the log."""
    try:
        user = getpass.getuser()
    except (KeyError, OSError):
        user = "unknown"
    return f"{user}@{socket.gethostname()} (viewer pid {os.getpid()})"


@dataclass(frozen=True)
class Action:
    id: int
    submitted_utc: float
    kind: str
    alarm_id: int | None
    reason: str
    duration_s: float | None
    text: str
    source: str


class ActionQueue:
    """The side channel of one firing log."""

    def __init__(self, log: str | Path) -> None:
        self.path = actions_path(log)
        self.con = sqlite3.connect(str(self.path), timeout=5.0, isolation_level=None, check_same_thread=False)
        self.con.execute("PRAGMA journal_mode=WAL")
        self.con.executescript(_SCHEMA)

    def close(self) -> None:
        self.con.close()

    def submit(self, kind: str, *, alarm_id: int | None = None, reason: str = "", duration_s: float | None = None,
               text: str = "", source: str | None = None, clock=time.time) -> int:
        """Queue an action for the recorder; returns its id. ``ValueError`` for an incomplete action."""
        if kind not in ACTION_KINDS:
            raise ValueError(f"unknown action {kind!r}; expected one of {', '.join(ACTION_KINDS)}")
        if kind in ("acknowledge", "shelve", "unshelve") and alarm_id is None:
            raise ValueError(f"{kind} needs an alarm")
        if kind == "shelve" and (not reason.strip() or not duration_s or duration_s <= 0):
            raise ValueError("shelving needs a reason and a duration")
        if kind == "note" and not text.strip():
            raise ValueError("a note needs some text")
        cur = self.con.execute(
            "INSERT INTO action(submitted_utc, kind, alarm_id, reason, duration_s, text, source) VALUES (?, ?, ?, ?, ?, ?, ?)",
            (clock(), kind, alarm_id, reason, duration_s, text, source or default_source()),
        )
        return int(cur.lastrowid)

    def pending(self) -> list[Action]:
        rows = self.con.execute(
            "SELECT id, submitted_utc, kind, alarm_id, coalesce(reason, ''), duration_s, coalesce(text, ''), source "
            "FROM action WHERE applied_utc IS NULL ORDER BY id"
        ).fetchall()
        return [Action(*r) for r in rows]

    def mark_applied(self, action_id: int, result: str, clock=time.time) -> None:
        self.con.execute("UPDATE action SET applied_utc = ?, result = ? WHERE id = ?", (clock(), result, action_id))

    def results(self) -> list[tuple[int, str, str | None]]:
        return self.con.execute("SELECT id, kind, result FROM action ORDER BY id").fetchall()
