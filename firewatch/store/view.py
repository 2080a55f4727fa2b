"""What a viewer shows, read from a firing log: what is true now, values at a moment, decimated trends, alarms.

The same :class:`FiringView` serves a live firing (``watch``: :meth:`FiringView.live`,
polled) and a finished one (``replay``: :meth:`FiringView.moment` at a cursor).
Every read is a short read-only query, so a live recorder is never held up
and the WAL never grows behind a viewer. Trends are decimated in SQL (min and
max per screen column), so a three-day firing draws at once.

Live, the state comes from facts, never from the last row alone: the
recorder's heartbeat (``session.heartbeat_utc``, written every cycle whether
lines arrive or not), whether its session ended and why, and the wall-clock
age of the newest sample against the site's ``no_data_s``. So a dead line
reads NO DATA, a stopped recorder RECORDER STOPPED, each value older than
``no_data_s`` is marked stale on its own row, and alarms raised after the
last sample (no-data above all) are listed as soon as the recorder logs them.
These decisions are made here, so that widgets only draw them.
"""

from __future__ import annotations

import json
import math
import threading
import time
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from firewatch.firing.alarms.causes import CauseStep, cause_label, cause_steps, cause_story
from firewatch.settings._tomlcheck import ProfileError
from firewatch.settings.profile import AlarmSettings, SiteProfile, load_site
from firewatch.settings.schedule import Schedule, load_schedule
from firewatch.store.derive import DerivedBlock, Deriver, derived_block
from firewatch.store.layout import STEP_KIND, column, step_column
from firewatch.store.reader import LogReader
from firewatch.transport.records import Status

__all__ = ["FiringView", "Moment", "Trend", "AlarmRow", "ViewState", "HEARTBEAT_STALE_S", "VERDICTS",
           "LIVE", "NO_DATA", "RECORDER_STOPPED", "FIRING_ENDED", "REPLAY"]

HEARTBEAT_STALE_S = 5.0
"""A recorder whose heartbeat is older than this is taken as stopped, seconds. It writes one every cycle
(half a second), so this allows a slow commit or two and still says so within a few seconds."""

LIVE, NO_DATA, RECORDER_STOPPED, FIRING_ENDED, REPLAY = "live", "no-data", "recorder-stopped", "firing-ended", "replay"
VERDICTS = ("ok", "OUT", "STALE", "OPEN", "UNDER", "OVER", "ERROR", "RANGE", "—")
"""Every word :meth:`Moment.verdict` gives: screens keep room for the longest, never cutting one."""
_DERIVED_CACHE = 20_000
"""Samples a view recomputes derived channels for at most (and keeps); a chart wider than this draws derived channels
from the per-minute envelope."""
_LABELS = {LIVE: "LIVE", NO_DATA: "NO DATA", RECORDER_STOPPED: "RECORDER STOPPED", FIRING_ENDED: "FIRING ENDED", REPLAY: "REPLAY"}


@dataclass(frozen=True)
class ViewState:
    """What is true of a firing log now, for the header: one of LIVE, NO DATA, RECORDER STOPPED, FIRING ENDED.

    ``data_age_s`` is the wall-clock time since the newest sample was received
    (None before the first); ``since_utc`` is when the recorder stopped (its
    session's end, or its last heartbeat) or, for NO DATA, when the data
    stopped; ``reason`` says why the recorder stopped; ``recorder`` is
    ``running``, ``stopped`` or ``unknown`` (a log written before heartbeats).
    Durations are wall-clock seconds; so is ``since_utc``.
    """

    kind: str
    data_age_s: float | None = None
    since_utc: float | None = None
    reason: str = ""
    recorder: str = "running"
    silent_s: float | None = None
    """NO DATA: how long the line has been silent (since the newest sample, or since the recorder started)."""

    @property
    def label(self) -> str:
        return _LABELS[self.kind]

    @property
    def fresh(self) -> bool:
        """Live data from a running recorder: nothing to warn about."""
        return self.kind == LIVE


@dataclass
class AlarmRow:
    """An alarm as it stood at a moment."""

    id: int
    kind: str
    channel: str | None
    cause: str | None
    priority: str
    state: str
    raised_t: float
    message: str
    evidence: dict[str, Any] | None
    steps: tuple[CauseStep, ...] = ()
    """The changes of the likely cause up to the moment shown, oldest first."""

    @property
    def cause_label(self) -> str:
        """The cause for the alarm list's column: ``window-attenuation (was unknown)``."""
        return cause_label(self.cause, list(self.steps))

    def cause_story(self, clock: Callable[[float], str]) -> str:
        """``window-attenuation, was unknown until py2 came into range at 11:42`` (``clock`` words a UTC time)."""
        return cause_story(self.cause, list(self.steps), clock)

    @property
    def reason(self) -> str:
        """Why the cause is what it is (the evidence's own words)."""
        return str((self.evidence or {}).get("reason", ""))


@dataclass
class Moment:
    """Everything the dashboard shows for one moment."""

    t: float
    values: dict[str, float] = field(default_factory=dict)
    status: dict[str, int] = field(default_factory=dict)
    age_s: dict[str, float] = field(default_factory=dict)
    alarms: list[AlarmRow] = field(default_factory=list)
    events: list[dict[str, Any]] = field(default_factory=list)
    stale: frozenset[str] = frozenset()
    """Channels whose value is older than the site's ``no_data_s``: each row says so."""
    state: ViewState = field(default_factory=lambda: ViewState(REPLAY))

    def value(self, name: str) -> float:
        return self.values.get(name, math.nan)

    def verdict(self, name: str) -> str:
        """The word a channel's row ends with, decided here so that screens only draw it.

        ``STALE`` when the value is older than the site's ``no_data_s``; else
        the status word when the reading is not a plain value (``OPEN``,
        ``UNDER``, ``OVER``, ``ERROR``, ``RANGE``, ``—`` for none); else, for a
        pyrometer compared with a reference thermocouple, ``OUT`` when its
        divergence is beyond the allowed band and ``ok`` within it; else "".
        """
        if name in self.stale:
            return "STALE"
        if name in self.status:
            word = status_text(self.status[name])
            if word:
                return word
        elif name not in self.values:
            return "—"
        div, allowed = self.value(f"{name}.divergence"), self.value(f"{name}.allowed")
        if math.isfinite(div) and math.isfinite(allowed):
            return "OUT" if abs(div) > allowed else "ok"
        return ""


@dataclass
class Trend:
    """A decimated series: bucket centres (UTC s) with the min and max in each."""

    t: np.ndarray
    lo: np.ndarray
    hi: np.ndarray


class FiringView:
    """Read-only view of one firing log."""

    def __init__(self, path: str | Path, site: SiteProfile | None = None, schedule: Schedule | None = None) -> None:
        self.path = Path(path)
        self.reader = LogReader(self.path)
        # one connection, used by the poller thread and the interface thread in turn
        self._lock = threading.RLock()
        self._closed = False
        self._query = self.reader.query
        self.reader.query = self._locked_query  # type: ignore[method-assign]
        self.reader.lock = self._lock
        firing = self.reader.firing()
        self.firing = firing
        self.site: SiteProfile | None
        try:
            self.site = site or load_site(f"{self.path} (site profile in the log)", text=firing.get("site_profile") or "")
        except ProfileError:
            self.site = site  # a log without a readable profile still shows its channels
        text = firing.get("schedule") or ""
        try:
            self.schedule = schedule or (load_schedule(f"{self.path} (schedule in the log)", text=text) if text else None)
        except ProfileError:
            self.schedule = None
        self.channels = {c.name: c for c in self.reader.channels()}
        self._ids = {name: cid for cid, name in self.reader.query("SELECT id, name FROM channel")}
        self.start_t: float | None = None
        self.end_t: float | None = None
        self.end_received_utc: float | None = None
        self.last_sample_id = 0
        self._latest: tuple[int, dict[str, tuple[float, float, int]]] = (-1, {})
        self._derived_cache: DerivedBlock | None = None
        self.refresh_bounds()
        Deriver(self.reader).prepare()  # the band tables, built once here rather than by the first seek

    @property
    def no_data_s(self) -> float:
        """The site's ``no_data_s``: older values are stale, and a line silent this long is NO DATA."""
        return self.site.alarms.no_data_s if self.site is not None else AlarmSettings().no_data_s

    def _locked_query(self, sql: str, params: Iterable[Any] = ()) -> list[tuple[Any, ...]]:
        with self._lock:
            if self._closed:
                raise RuntimeError("the firing view is closed")
            return self._query(sql, params)

    def close(self) -> None:
        with self._lock:
            self._closed = True
            self.reader.close()

    # -- bounds -------------------------------------------------------------------------
    def refresh_bounds(self) -> bool:
        """Re-read the first and latest sample (a live log grows); True if there is news."""
        newest = self.reader.query("SELECT id, t FROM sample ORDER BY id DESC LIMIT 1")
        last_id = newest[0][0] if newest else 0
        news = last_id != self.last_sample_id
        if news:
            self.last_sample_id = last_id
            self.reader.refresh()  # a continuing recorder may have added channels
            received = self.reader.query("SELECT last_received_utc FROM session WHERE last_received_utc IS NOT NULL ORDER BY id DESC LIMIT 1")
            self.end_received_utc = received[0][0] if received else None
            self.start_t = self.reader.query("SELECT t FROM sample ORDER BY id LIMIT 1")[0][0] if newest else None
            self.end_t = newest[0][1] if newest else None
        return news

    def sample_at(self, t: float) -> int | None:
        """The last sample at or before ``t``."""
        return self.reader.sample_at(t)

    def _derived(self, lo: int, hi: int) -> DerivedBlock:
        """The derived channels of samples ``lo`` to ``hi``, recomputed; a live view extends what it computed before."""
        cached = self._derived_cache
        if cached is not None and cached.ids.size and cached.ids[0] <= lo and hi <= cached.ids[-1]:
            return cached.between(lo, hi)
        if cached is not None and cached.ids.size and cached.ids[0] <= lo <= cached.ids[-1] + 1 and hi - int(cached.ids[0]) < _DERIVED_CACHE:
            self._derived_cache = DerivedBlock.joined([cached, derived_block(self.reader, int(cached.ids[-1]) + 1, hi)])
            return self._derived_cache.between(lo, hi)
        got = derived_block(self.reader, lo, hi)
        if hi - lo < _DERIVED_CACHE:
            self._derived_cache = got
        return got

    # -- the live state ------------------------------------------------------------------
    def session(self) -> dict[str, Any] | None:
        """The latest recorder session: start, end and reason, heartbeat (None before the first)."""
        columns = {r[1] for r in self.reader.query("PRAGMA table_info(session)")}
        beat = "heartbeat_utc" if "heartbeat_utc" in columns else "NULL"  # a log from before heartbeats
        rows = self.reader.query(
            f"SELECT id, started_utc, ended_utc, end_reason, {beat}, port, host, pid FROM session ORDER BY id DESC LIMIT 1"
        )
        if not rows:
            return None
        keys = ("id", "started_utc", "ended_utc", "end_reason", "heartbeat_utc", "port", "host", "pid")
        return dict(zip(keys, rows[0]))

    def state(self, now_utc: float | None = None, plan_segment: float = math.nan) -> ViewState:
        """What is true of the log at ``now_utc`` (wall clock): LIVE, NO DATA, RECORDER STOPPED or FIRING ENDED.

        Call :meth:`refresh_bounds` first (``live`` does). ``plan_segment`` is
        the schedule's segment at the newest sample: a stopped recorder whose
        schedule had run to its end means the firing ended.
        """
        now = time.time() if now_utc is None else now_utc
        session = self.session()
        data_age = None if self.end_received_utc is None else max(now - self.end_received_utc, 0.0)
        if session is None:
            return ViewState(RECORDER_STOPPED, data_age, None, "no recorder has written this log", "stopped")
        stopped_at, reason = None, ""
        if session["ended_utc"] is not None:
            stopped_at, reason = session["ended_utc"], session["end_reason"] or "stopped"
        elif session["heartbeat_utc"] is not None and now - session["heartbeat_utc"] > HEARTBEAT_STALE_S:
            stopped_at = session["heartbeat_utc"]
            reason = "no heartbeat since: killed, hung, or unable to write"
        if stopped_at is not None:
            done = self.schedule is not None and math.isfinite(plan_segment) and plan_segment >= len(self.schedule.segments)
            return ViewState(FIRING_ENDED if done else RECORDER_STOPPED, data_age, stopped_at, reason, "stopped")
        recorder = "running" if session["heartbeat_utc"] is not None else "unknown"
        if data_age is None:  # no sample yet: silent since the recorder started
            if now - session["started_utc"] > self.no_data_s:
                return ViewState(NO_DATA, None, session["started_utc"], "", recorder, now - session["started_utc"])
            return ViewState(LIVE, None, None, "", recorder)
        if data_age > self.no_data_s:
            return ViewState(NO_DATA, data_age, self.end_received_utc, "", recorder, data_age)
        return ViewState(LIVE, data_age, None, "", recorder)

    def live(self, now_utc: float | None = None, events: int = 30) -> Moment:
        """The log as it is now: newest values with their ages, the alarms as they stand, the latest events, the state."""
        now = time.time() if now_utc is None else now_utc
        self.refresh_bounds()
        data_age = 0.0 if self.end_received_utc is None else max(now - self.end_received_utc, 0.0)
        m = Moment(self.end_t if self.end_t is not None else now)
        sid = self.last_sample_id
        if self._latest[0] != sid:  # read only when there is news
            self._latest = (sid, self._rows_at(sid, live=True) if sid else {})
        for name, (rt, value, status) in self._latest[1].items():
            m.values[name], m.status[name] = value, status
            # time on the firing's line since the value, plus the wall-clock silence since the newest sample
            m.age_s[name] = m.t - rt + data_age
        m.stale = frozenset(n for n, age in m.age_s.items() if age > self.no_data_s)
        m.alarms = self.alarms_now()
        m.events = self._events("", (), events)
        m.state = self.state(now, m.value("plan.segment"))
        return m

    def _rows_at(self, sid: int, live: bool = False) -> dict[str, tuple[float, float, int]]:
        """Every channel's value at sample ``sid``: ``(its time, value, status)``.

        Measured channels from the sample itself; live, the derived and progress
        channels as the recorder last wrote them; at another moment, derived ones
        recomputed there and progress from the last step at or before it.
        """
        reader = self.reader
        out: dict[str, tuple[float, float, int]] = {}
        block = reader.block(sid, sid)
        if not block.ids.size:
            return out
        t = float(block.t[0])
        for name in block.values:
            if block.has[name][0]:
                out[name] = (t, float(block.values[name][0]), int(block.status[name][0]))
        names = {cid: name for name, cid in self._ids.items() if name not in block.values}
        if live:
            for cid, rt, value, status in reader.query("SELECT channel_id, t, value, status FROM latest"):
                if cid in names:
                    out[names[cid]] = (float(rt), math.nan if value is None else float(value), int(status))
            return out
        derived = self._derived(sid, sid)
        for name, values in derived.values.items():
            out[name] = (t, float(values[0]), int(derived.status[name][0]))
        progress = [(name, cid) for name, (cid, kind) in reader._channels()[1].items() if kind == STEP_KIND]
        if progress:
            cols = ", ".join(f"p.{step_column(cid)}" for _, cid in progress)
            row = reader.query(f"SELECT s.t, {cols} FROM step p JOIN sample s ON s.id = p.sample_id "
                               "WHERE p.sample_id <= ? ORDER BY p.sample_id DESC LIMIT 1", (sid,))
            if row:
                rt = float(row[0][0])
                for (name, _), value in zip(progress, row[0][1:]):
                    missing = value is None  # not placed in the schedule
                    out[name] = (rt, math.nan if missing else float(value), int(Status.MISSING) if missing else int(Status.OK))
        return out

    def _events(self, where: str, params: tuple[Any, ...], limit: int) -> list[dict[str, Any]]:
        return [
            {"t": r[0], "kind": r[1], "channel": r[2], "detail": r[3]}
            for r in self.reader.query(
                f"SELECT t, kind, channel, detail FROM event WHERE kind NOT IN ('malformed') {where} ORDER BY t DESC, id DESC LIMIT ?",
                (*params, limit),
            )
        ]

    # -- a moment -----------------------------------------------------------------------
    def moment(self, t: float | None = None, events: int = 30) -> Moment:
        """Values, alarms as they stood and recent events at ``t`` (the newest reading when None), for replay."""
        if t is None:
            t = self.end_t if self.end_t is not None else 0.0
        m = Moment(t)
        sid = self.sample_at(t)
        if sid is not None:
            for name, (rt, value, status) in self._rows_at(sid).items():
                m.values[name], m.status[name] = value, status
                m.age_s[name] = t - rt
        m.stale = frozenset(n for n, age in m.age_s.items() if age > self.no_data_s)
        m.alarms = self.alarms_at(t)
        m.events = self._events("AND t <= ?", (t,), events)
        return m

    def alarms_at(self, t: float) -> list[AlarmRow]:
        """Alarms not normal at ``t``, with their state then (most urgent first): replay."""
        rows = self.reader.query(
            "SELECT a.id, a.kind, a.channel, a.cause, a.priority, a.raised_t, a.message, a.evidence, "
            "(SELECT s.state FROM alarm_state s WHERE s.alarm_id = a.id AND s.t <= ? AND s.state != 'cause-changed' "
            "ORDER BY s.t DESC, s.id DESC LIMIT 1) "
            "FROM alarm a WHERE a.raised_t <= ?",
            (t, t),
        )
        return self._with_causes(_urgent_first(rows), t)

    def alarms_now(self) -> list[AlarmRow]:
        """Alarms not normal as they stand now, whenever they were raised (most urgent first): live.

        A no-data alarm is raised after the last sample; listing alarms "as they
        stood at the newest sample" would hide exactly it.
        """
        rows = self.reader.query(
            "SELECT id, kind, channel, cause, priority, raised_t, message, evidence, state FROM alarm WHERE state != 'normal'"
        )
        return self._with_causes(_urgent_first(rows), None)

    def _with_causes(self, alarms: list[AlarmRow], t: float | None) -> list[AlarmRow]:
        """Each alarm with the changes of its likely cause up to ``t`` (all when None), and its cause as it stood then."""
        ids = [a.id for a in alarms if a.kind == "divergence"]
        if not ids:
            return alarms
        sql = (f"SELECT alarm_id, t, state, detail FROM alarm_state WHERE state = 'cause-changed' "
               f"AND alarm_id IN ({','.join('?' * len(ids))}) ORDER BY t, id")
        rows = self.reader.query(sql, ids)
        for a in alarms:
            every = cause_steps([(r[1], r[2], r[3]) for r in rows if r[0] == a.id])
            if not every:
                continue
            shown = [c for c in every if t is None or c.t <= t]
            a.steps = tuple(shown)
            if t is not None:  # replay: the cause and its evidence as they stood at the cursor
                a.cause = shown[-1].cause if shown else every[0].was
                a.evidence = shown[-1].evidence if shown else every[0].was_evidence
        return alarms

    def alarm_times(self) -> list[tuple[float, int, str]]:
        """Every alarm's raise time, id and kind (for marks and for jumping)."""
        return [(r[0], r[1], r[2]) for r in self.reader.query("SELECT raised_t, id, kind FROM alarm ORDER BY raised_t, id")]

    # -- trends -------------------------------------------------------------------------
    def trend(self, name: str, t0: float, t1: float, buckets: int) -> Trend:
        """``name`` between ``t0`` and ``t1`` decimated to at most ``buckets`` min/max pairs (in SQL)."""
        cid = self._ids.get(name)
        empty = Trend(np.empty(0), np.empty(0), np.empty(0))
        if cid is None or t1 <= t0 or buckets < 1:
            return empty
        width = (t1 - t0) / buckets
        if width >= 120.0:  # wide: from the per-minute table the recorder keeps
            rows = self.reader.query(
                "SELECT CAST((minute * 60.0 + 30.0 - ?) / ? AS INTEGER) AS b, avg(minute * 60.0 + 30.0), min(lo), max(hi) "
                "FROM trend_minute WHERE channel_id = ? AND minute BETWEEN ? AND ? GROUP BY b ORDER BY b",
                (t0, width, cid, int(t0 // 60), int(t1 // 60)),
            )
            if rows:
                arr = np.array([r[1:] for r in rows], dtype=float)
                return Trend(arr[:, 0], arr[:, 1], arr[:, 2])
        lo_id = self.reader.sample_at(t0, after=True)
        hi_id = self.reader.sample_at(t1)
        if lo_id is None or hi_id is None or hi_id < lo_id:
            return empty
        measured, other = self.reader._channels()
        if name in measured:
            col = column(cid)
            rows = self.reader.query(
                f"SELECT CAST((t - ?) / ? AS INTEGER) AS b, avg(t), min({col}), max({col}) FROM sample "
                f"WHERE id BETWEEN ? AND ? AND {col} IS NOT NULL GROUP BY b ORDER BY b",
                (t0, width, lo_id, hi_id),
            )
        elif other[name][1] == STEP_KIND:
            col = f"p.{step_column(cid)}"
            rows = self.reader.query(
                f"SELECT CAST((s.t - ?) / ? AS INTEGER) AS b, avg(s.t), min({col}), max({col}) FROM step p JOIN sample s ON s.id = p.sample_id "
                f"WHERE p.sample_id BETWEEN ? AND ? AND {col} IS NOT NULL GROUP BY b ORDER BY b",
                (t0, width, lo_id, hi_id),
            )
        elif hi_id - lo_id >= _DERIVED_CACHE:  # too many to recompute for a chart: the per-minute envelope
            rows = self.reader.query(
                "SELECT minute * 60.0 + 30.0, minute * 60.0 + 30.0, lo, hi FROM trend_minute WHERE channel_id = ? AND minute BETWEEN ? AND ? ORDER BY minute",
                (cid, int(t0 // 60), int(t1 // 60)),
            )
        else:
            got = self._derived(lo_id, hi_id)
            values = got.values.get(name)
            if values is None:
                return empty
            ok = np.isfinite(values)
            if not ok.any():
                return empty
            t, v = got.t[ok], values[ok]
            b = ((t - t0) / width).astype(np.int64)
            starts = np.concatenate([[0], np.flatnonzero(np.diff(b)) + 1])
            counts = np.diff(np.concatenate([starts, [b.size]]))
            return Trend(np.add.reduceat(t, starts) / counts, np.minimum.reduceat(v, starts), np.maximum.reduceat(v, starts))
        if not rows:
            return empty
        arr = np.array([r[1:] for r in rows], dtype=float)
        return Trend(arr[:, 0], arr[:, 1], arr[:, 2])

    def planned(self, t0: float, t1: float, points: int = 200) -> tuple[np.ndarray, np.ndarray]:
        """The schedule's planned curve between t0 and t1 (from the firing's start)."""
        if self.schedule is None or self.start_t is None:
            return np.empty(0), np.empty(0)
        t = np.linspace(t0, t1, points)
        return t, self.schedule.planned_temperature(t - self.start_t)


def _urgent_first(rows: list[tuple[Any, ...]]) -> list[AlarmRow]:
    out = [
        AlarmRow(r[0], r[1], r[2], r[3], r[4], r[8], r[5], r[6] or "", json.loads(r[7]) if r[7] else None)
        for r in rows
        if r[8] and r[8] != "normal"
    ]
    order = {"high": 0, "medium": 1, "low": 2}
    return sorted(out, key=lambda a: (order.get(a.priority, 3), a.state != "active-unacknowledged", a.raised_t))


def status_text(code: int) -> str:
    """A short word for a status code (for screens that must read without colour)."""
    return {Status.OK: "", Status.OPEN: "OPEN", Status.UNDER: "UNDER", Status.OVER: "OVER", Status.ERROR: "ERROR",
            Status.OUT_OF_RANGE: "RANGE", Status.MISSING: "—"}.get(Status(code), "?")
