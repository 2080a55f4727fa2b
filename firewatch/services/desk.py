"""Where a viewer's operator actions go: to the recorder that holds the log, or into the log at once.

One writer at a time, always. When a recorder holds the log's lock, an
action goes through the side channel (``FILE.db.actions``); the recorder
applies it within a second and the desk reports its result. When no
recorder runs, the viewer takes the lock for one action (a brief write),
applies it with :func:`firewatch.store.actions.apply_action`, the function
the recorder uses, and lets go. An action is never accepted silently to be
stamped later: it is written now, refused with its reason, or reported as
still waiting; and if the recorder stops before applying a queued action,
the desk writes it itself as soon as the lock is free.
"""

from __future__ import annotations

import sqlite3
import threading
import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

from firewatch.settings.profile import SiteProfile
from firewatch.settings.schedule import Schedule
from firewatch.store._common import LogError, LogLocked
from firewatch.store.actions import (
    Action,
    ActionFileError,
    ActionQueue,
    apply_action,
    check_action,
    default_source,
)
from firewatch.store.writer import BriefWrite

__all__ = ["FOLLOW_UP_S", "ActionDesk", "Outcome"]

FOLLOW_UP_S = 10.0
"""A queued action the recorder has not applied after this long is reported as waiting, seconds (the
recorder applies actions every half second)."""


@dataclass(frozen=True)
class Outcome:
    """What became of an action, in words for the operator."""

    text: str
    ok: bool
    """False: refused, or it could not be written or sent."""
    written: bool
    """In the firing log now."""
    action_id: int | None = None
    """Its number in the side channel, when it went to the recorder."""


@dataclass
class _Waiting:
    kind: str
    submitted: float
    warned: bool = False


class ActionDesk:
    """A viewer's operator actions on one firing log.

    Parameters
    ----------
    log : path
        The firing log.
    site, schedule : optional
        The log's profiles, to restore its alarms for a direct write (None:
        alarm actions are refused with the reason; notes still go in).
    clock : callable
        The wall clock (injected in tests).
    source : str, optional
        Who acts; default the viewer's account from its uid, host and pid.
    """

    def __init__(self, log: str | Path, site: SiteProfile | None, schedule: Schedule | None,
                 clock: Callable[[], float] = time.time, source: str | None = None) -> None:
        self.log = Path(log)
        self.site = site
        self.schedule = schedule
        self.clock = clock
        self.source = source or default_source()
        self._queue: ActionQueue | None = None
        self._waiting: dict[int, _Waiting] = {}
        self._lock = threading.Lock()  # the interface thread submits, the poller follows up

    def close(self) -> None:
        with self._lock:
            if self._queue is not None:
                self._queue.close()
                self._queue = None

    @property
    def waiting(self) -> list[int]:
        """Actions handed to the recorder and not yet applied."""
        with self._lock:
            return sorted(self._waiting)

    # -- submitting -----------------------------------------------------------------------
    def submit(self, kind: str, *, alarm_id: int | None = None, reason: str = "", duration_s: float | None = None,
               text: str = "", about_t: float | None = None) -> Outcome:
        """Write the action now if no recorder holds the log, else hand it to the recorder."""
        try:
            check_action(kind, alarm_id, reason, duration_s, text)
        except ValueError as exc:
            return Outcome(str(exc), ok=False, written=False)
        action = Action(kind, self.source, alarm_id=alarm_id, reason=reason, duration_s=duration_s, text=text, about_t=about_t)
        with self._lock:
            try:
                result = self._write(action)
            except LogLocked:
                return self._hand_over(action, "")
            except PermissionError as exc:  # this account cannot take the lock: only the recorder can apply it
                return self._hand_over(action, f" (this account cannot take the log's lock: {exc.strerror})")
            except (LogError, OSError, sqlite3.Error) as exc:
                return Outcome(f"{kind} not written: {exc}", ok=False, written=False)
        refused = result.startswith("refused")
        return Outcome(f"{kind} written to the log (no recorder is running): {result}", ok=not refused, written=True)

    def _write(self, action: Action) -> str:
        """Apply one action under the log's lock."""
        with BriefWrite(self.log, clock_fn=self.clock) as bw:
            return apply_action(action, self._engine(bw), bw.event, bw.timeline_now(), self.clock())

    def _engine(self, bw: BriefWrite):
        """The log's open alarms in an engine whose transitions are written through ``bw``."""
        if self.site is None:
            return None
        from firewatch.firing.alarms import AlarmEngine
        from firewatch.services.recorder import AlarmLog

        log = AlarmLog(bw)
        engine = AlarmEngine(self.site, self.schedule, sink=log.sink, next_id=log.next_id)
        log.restore_into(engine)
        return engine

    def _hand_over(self, action: Action, why: str) -> Outcome:
        try:
            if self._queue is None:
                self._queue = ActionQueue(self.log)
            action_id = self._queue.submit(action.kind, alarm_id=action.alarm_id, reason=action.reason,
                                           duration_s=action.duration_s, text=action.text, source=action.source,
                                           about_t=action.about_t, clock=self.clock)
        except (ActionFileError, sqlite3.Error) as exc:
            return Outcome(f"{action.kind} not sent: {exc}", ok=False, written=False)
        self._waiting[action_id] = _Waiting(action.kind, self.clock())
        return Outcome(f"{action.kind} sent to the recorder (#{action_id}){why}", ok=True, written=False, action_id=action_id)

    # -- following up -----------------------------------------------------------------------
    def follow_up(self) -> list[Outcome]:
        """What became of the actions handed to the recorder since the last call (call it every second or so)."""
        out: list[Outcome] = []
        with self._lock:
            queue = self._queue
            if queue is None:
                return out
            for action_id, w in list(self._waiting.items()):
                try:
                    result, by = self._settle(queue, action_id)
                    problem = "the recorder holds the log"
                except (LogError, OSError, sqlite3.Error) as exc:
                    result, by, problem = None, "", str(exc)
                if result is not None:
                    del self._waiting[action_id]
                    out.append(Outcome(f"{w.kind} #{action_id} applied by {by}: {result}",
                                       ok=not result.startswith("refused"), written=True, action_id=action_id))
                elif not w.warned and self.clock() - w.submitted >= FOLLOW_UP_S:
                    w.warned = True
                    out.append(Outcome(f"{w.kind} #{action_id} is still waiting: not applied in {FOLLOW_UP_S:.0f} s "
                                       f"({problem})", ok=False, written=False, action_id=action_id))
        return out

    def _settle(self, queue: ActionQueue, action_id: int) -> tuple[str | None, str]:
        """The result of a queued action and who applied it; applied here if no recorder holds the log any more."""
        result = queue.result(action_id)
        if result is not None:
            return result, "the recorder"
        try:
            with BriefWrite(self.log, clock_fn=self.clock) as bw:
                result = queue.result(action_id)
                if result is not None:  # the recorder applied it on its way out
                    return result, "the recorder"
                action = queue.get(action_id)
                if action is None:
                    return "refused: it vanished from the side channel", "nobody"
                result = apply_action(action, self._engine(bw), bw.event, bw.timeline_now(), self.clock())
                bw.commit()
                queue.mark_applied(action_id, result, clock=self.clock)  # before the lock is let go
                return result, "this viewer (the recorder stopped before applying it)"
        except LogLocked:
            return None, ""
