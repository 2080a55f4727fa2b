"""Operator actions: one way to apply them, and the side channel that carries them to a running recorder.

:func:`apply_action` is the one path every action takes into the firing log,
whoever applies it and wherever it came from: the recorder applying what
viewers queued, the recorder applying what arrived over MQTT, or a viewer
writing directly while no recorder holds the log. It gives one set of
results (acknowledge, shelve with a reason and an expiry, unshelve, note;
refusals with their reason) and logs each as an ``action`` event with its
source.

The side channel is ``FILE.db.actions``, a small SQLite file beside the log:
viewers (any number) append to it; the recorder, the log's only writer,
applies each pending action every cycle and marks it applied with its
result. The file is never opened through a symbolic link (a link there
would let whoever can write its target inject acknowledgements).

The source of a local action is the operating-system account of the viewer
process, looked up from its uid (never the ``USER`` environment variable,
which anyone sets). An action over MQTT is known only by the topic it came
on; a name in its payload is recorded as claimed.
"""

from __future__ import annotations

import datetime as dt
import os
import pwd
import socket
import sqlite3
import stat
import time
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Protocol

from firewatch.store._common import LogError

__all__ = [
    "ACTION_KINDS", "LATE_S", "Action", "ActionFileError", "ActionQueue", "actions_path", "apply_action",
    "check_action", "default_source", "mqtt_action", "os_user",
]

ACTION_KINDS = ("acknowledge", "shelve", "unshelve", "note")
LATE_S = 5.0
"""An action applied more than this long after it was submitted says when it was submitted, seconds."""
MAX_TEXT = 2000
"""Longest note or reason kept, characters."""
MAX_CLAIM = 64
"""Longest name claimed in an MQTT payload that is kept, characters."""

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
    result TEXT,
    about_t REAL
);
"""


class ActionFileError(LogError):
    """The side-channel file cannot be used safely (a symbolic link, not a regular file, unreadable)."""


def actions_path(log: str | Path) -> Path:
    return Path(f"{log}.actions")


def os_user() -> str:
    """The account this process runs as, from its real uid (the password database, not the environment)."""
    uid = os.getuid()
    try:
        return pwd.getpwuid(uid).pw_name
    except KeyError:  # a uid without an entry (containers): the number is still the truth
        return f"uid {uid}"


def default_source() -> str:
    """Who acts from this viewer: account, host and process, for the log."""
    return f"{os_user()}@{socket.gethostname()} (viewer pid {os.getpid()})"


def _clean(text: object, limit: int) -> str:
    """One line of printable text at most ``limit`` long: a payload must not forge lines in the log."""
    s = "".join(ch if ch.isprintable() else " " for ch in str(text))
    return " ".join(s.split())[:limit]


@dataclass(frozen=True)
class Action:
    """One operator action, from a viewer or over MQTT.

    ``about_t`` is the moment on the firing's time line a note is about (a note
    made in replay is about the moment shown); None means when it is applied.
    ``id`` and ``submitted_utc`` are set for actions that went through the side channel.
    """

    kind: str
    source: str
    alarm_id: int | None = None
    reason: str = ""
    duration_s: float | None = None
    text: str = ""
    about_t: float | None = None
    id: int | None = None
    submitted_utc: float | None = None


def check_action(kind: str, alarm_id: int | None = None, reason: str = "", duration_s: float | None = None,
                 text: str = "") -> None:
    """Refuse an incomplete action: ``ValueError`` with the reason an operator reads."""
    if kind not in ACTION_KINDS:
        raise ValueError(f"unknown action {kind!r}; expected one of {', '.join(ACTION_KINDS)}")
    if kind in ("acknowledge", "shelve", "unshelve") and alarm_id is None:
        raise ValueError(f"{kind} needs an alarm")
    if kind == "shelve" and (not reason.strip() or duration_s is None or not duration_s > 0):
        raise ValueError("shelving needs a reason and a duration")
    if kind == "note" and not text.strip():
        raise ValueError("a note needs some text")


def mqtt_action(topic: str, body: Mapping[str, Any]) -> tuple[Action, str | None]:
    """An action from an MQTT payload, and why it is refused (None if it is complete).

    The source is the topic it came on; a ``source`` named in the payload is
    only a claim, recorded as ``(claimed: NAME)``. Shelves give ``minutes``.
    """
    claim = _clean(body.get("source", ""), MAX_CLAIM) if isinstance(body, Mapping) else ""
    source = f"mqtt {_clean(topic, 200)}" + (f" (claimed: {claim})" if claim else "")
    if not isinstance(body, Mapping) or "invalid" in body:
        return Action("unreadable", source), "the payload is not a JSON object"
    kind = _clean(body.get("action", ""), 32) or "unnamed"
    try:
        alarm_id = None if body.get("alarm_id") is None else int(body["alarm_id"])
        minutes = body.get("minutes")
        duration_s = None if minutes is None else float(minutes) * 60.0
    except (TypeError, ValueError) as exc:
        return Action(kind, source), f"bad alarm_id or minutes ({exc})"
    action = Action(kind, source, alarm_id=alarm_id, reason=_clean(body.get("reason", ""), MAX_TEXT),
                    duration_s=duration_s, text=_clean(body.get("text", ""), MAX_TEXT))
    try:
        check_action(action.kind, action.alarm_id, action.reason, action.duration_s, action.text)
    except ValueError as exc:
        return action, str(exc)
    return action, None


class AlarmActions(Protocol):
    """What :func:`apply_action` needs of the alarm engine."""

    def acknowledge(self, alarm_id: int, t: float, by: str = ...) -> str: ...
    def shelve(self, alarm_id: int, t: float, reason: str, until_t: float, by: str = ...) -> str: ...
    def unshelve(self, alarm_id: int, t: float, by: str = ...) -> str: ...


def _utc(t: float) -> str:
    return dt.datetime.fromtimestamp(t, dt.UTC).strftime("%Y-%m-%d %H:%M:%SZ")


def apply_action(action: Action, engine: AlarmActions | None, event: Callable[[float, str, str], None], now: float,
                 now_utc: float | None = None, refused: str | None = None) -> str:
    """Apply one operator action and log it; return the result (the one path for every action).

    Parameters
    ----------
    action : Action
    engine : alarm engine or None
        Holds the alarms (the recorder's, or one restored from the log for a
        viewer's direct write); None when the log's profiles do not load, so
        alarm actions are refused (notes still go in).
    event : callable(t, kind, detail)
        Writes an event into the firing log, inside the writer's transaction.
    now : float
        Now on the firing's time line (UTC s).
    now_utc : float, optional
        The wall clock: a queued action applied late says so, and a queued
        note is dated when it was typed (its submission, on the time line).
    refused : str, optional
        A reason decided before (actions over MQTT not enabled, a payload
        that does not parse): the action is logged as refused with it.

    Returns
    -------
    str
        What happened, e.g. ``alarm 3 acknowledged``, ``note logged``,
        ``refused: no alarm 9``; the same text is in the ``action`` event.
    """
    if refused is None:
        try:
            check_action(action.kind, action.alarm_id, action.reason, action.duration_s, action.text)
        except ValueError as exc:
            refused = str(exc)
    if refused is None and action.kind == "note":
        when = now if action.about_t is None else action.about_t
        if action.about_t is None and action.submitted_utc is not None and now_utc is not None:
            when = action.submitted_utc + (now - now_utc)  # when it was typed, on the firing's time line
        written = "" if action.about_t is None else f"; written {_utc(now_utc if now_utc is not None else now)}"
        event(when, "note", f"{_clean(action.text, MAX_TEXT)} ({action.source}{written})")
        result = "note logged"
    elif refused is None and engine is not None:
        result = _alarm_action(action, engine, now)
    else:
        result = f"refused: {refused or 'the alarms of this log cannot be loaded (its site profile does not load)'}"
    late = ""
    if action.submitted_utc is not None and now_utc is not None and now_utc - action.submitted_utc > LATE_S:
        late = f" (submitted {_utc(action.submitted_utc)}, applied {now_utc - action.submitted_utc:.0f} s later)"
    event(now, "action", f"{action.kind} from {action.source}: {result}{late}")
    return result


def _alarm_action(action: Action, engine: AlarmActions, now: float) -> str:
    alarm_id = int(action.alarm_id if action.alarm_id is not None else -1)
    try:
        if action.kind == "acknowledge":
            return engine.acknowledge(alarm_id, now, by=action.source)
        if action.kind == "unshelve":
            return engine.unshelve(alarm_id, now, by=action.source)
        until = now + float(action.duration_s or 0.0)
        result = engine.shelve(alarm_id, now, action.reason, until, by=action.source)
        return result + (f" until {_utc(until)}: {_clean(action.reason, MAX_TEXT)}" if result == f"alarm {alarm_id} shelved" else "")
    except KeyError:  # the engine holds every open alarm (and those closed in this session)
        return f"refused: alarm {alarm_id} is not open"
    except (ValueError, TypeError) as exc:
        return f"refused: {exc}"


def _open_plain(path: Path) -> None:
    """Create or check ``path`` without following a symbolic link; ActionFileError if it is one or not a file."""
    try:
        fd = os.open(path, os.O_RDWR | os.O_CREAT | os.O_NOFOLLOW | os.O_CLOEXEC, 0o644)
    except OSError as exc:
        if os.path.islink(path):
            raise ActionFileError(f"{path} is a symbolic link; refusing to use it for operator actions "
                                  "(remove it: firewatch makes a new one)") from None
        raise ActionFileError(f"{path}: cannot open for operator actions ({exc.strerror})") from None
    try:
        if not stat.S_ISREG(os.fstat(fd).st_mode):
            raise ActionFileError(f"{path} is not a regular file; refusing to use it for operator actions")
    finally:
        os.close(fd)


class ActionQueue:
    """The side channel of one firing log (``FILE.db.actions``).

    Raises
    ------
    ActionFileError
        The file is a symbolic link, not a regular file, or cannot be opened.
    """

    def __init__(self, log: str | Path) -> None:
        self.path = actions_path(log)
        _open_plain(self.path)
        try:
            self.con = sqlite3.connect(str(self.path), timeout=5.0, isolation_level=None, check_same_thread=False)
            # SQLite resolves links itself: if the name it opened is not ours, a link was put there meanwhile
            opened = self.con.execute("PRAGMA database_list").fetchone()[2]
            if os.path.realpath(opened) != os.path.realpath(os.path.abspath(self.path)) or os.path.islink(self.path):
                self.con.close()
                raise ActionFileError(f"{self.path} is a symbolic link; refusing to use it for operator actions")
            self.con.execute("PRAGMA journal_mode=WAL")
            self.con.executescript(_SCHEMA)
            if "about_t" not in {r[1] for r in self.con.execute("PRAGMA table_info(action)")}:
                self.con.execute("ALTER TABLE action ADD COLUMN about_t REAL")  # a file from before notes in replay
        except sqlite3.Error as exc:
            raise ActionFileError(f"{self.path}: not usable for operator actions ({exc})") from None

    def close(self) -> None:
        self.con.close()

    def submit(self, kind: str, *, alarm_id: int | None = None, reason: str = "", duration_s: float | None = None,
               text: str = "", source: str | None = None, about_t: float | None = None,
               clock: Callable[[], float] = time.time) -> int:
        """Queue an action for the recorder; returns its id. ``ValueError`` for an incomplete action."""
        check_action(kind, alarm_id, reason, duration_s, text)
        cur = self.con.execute(
            "INSERT INTO action(submitted_utc, kind, alarm_id, reason, duration_s, text, source, about_t) VALUES (?, ?, ?, ?, ?, ?, ?, ?)",
            (clock(), kind, alarm_id, reason, duration_s, text, source or default_source(), about_t),
        )
        return int(cur.lastrowid or 0)

    def pending(self) -> list[Action]:
        return self._select("applied_utc IS NULL", ())

    def get(self, action_id: int) -> Action | None:
        """One action as it was queued (None if there is no such row)."""
        return next(iter(self._select("id = ?", (action_id,))), None)

    def _select(self, where: str, params: tuple[Any, ...]) -> list[Action]:
        rows = self.con.execute(
            "SELECT id, submitted_utc, kind, alarm_id, coalesce(reason, ''), duration_s, coalesce(text, ''), source, about_t "
            f"FROM action WHERE {where} ORDER BY id", params
        ).fetchall()
        return [Action(r[2], r[7], alarm_id=r[3], reason=r[4], duration_s=r[5], text=r[6], about_t=r[8], id=r[0],
                       submitted_utc=r[1]) for r in rows]

    def mark_applied(self, action_id: int, result: str, clock: Callable[[], float] = time.time) -> bool:
        """Record the result of a pending action; False if it had been applied already."""
        cur = self.con.execute("UPDATE action SET applied_utc = ?, result = ? WHERE id = ? AND applied_utc IS NULL",
                               (clock(), result, action_id))
        return cur.rowcount == 1

    def result(self, action_id: int) -> str | None:
        """The result the recorder logged for an action, or None while it is pending."""
        row = self.con.execute("SELECT applied_utc, result FROM action WHERE id = ?", (action_id,)).fetchone()
        return None if row is None or row[0] is None else (row[1] or "")

    def results(self) -> list[tuple[int, str, str | None]]:
        return self.con.execute("SELECT id, kind, result FROM action ORDER BY id").fetchall()
