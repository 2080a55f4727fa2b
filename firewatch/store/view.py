"""What a viewer shows, read from a firing log: values at a moment, decimated trends, alarms as they stood.

The same :class:`FiringView` serves a live firing (``watch``: the moment is
the newest reading, polled) and a finished one (``replay``: the moment is a
cursor). Every read is a short read-only query, so a live recorder is never
held up and the WAL never grows behind a viewer. Trends are decimated in
SQL (min and max per screen column), so a three-day firing draws at once.
"""

from __future__ import annotations

import math
import threading
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from firewatch.settings._tomlcheck import ProfileError
from firewatch.store.reader import LogReader
from firewatch.settings.profile import SiteProfile, load_site
from firewatch.settings.schedule import Schedule, load_schedule
from firewatch.transport.records import Status

__all__ = ["FiringView", "Moment", "Trend", "AlarmRow"]


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


@dataclass
class Moment:
    """Everything the dashboard shows for one moment."""

    t: float
    values: dict[str, float] = field(default_factory=dict)
    status: dict[str, int] = field(default_factory=dict)
    age_s: dict[str, float] = field(default_factory=dict)
    alarms: list[AlarmRow] = field(default_factory=list)
    events: list[dict[str, Any]] = field(default_factory=list)

    def value(self, name: str) -> float:
        return self.values.get(name, math.nan)


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
        firing = self.reader.firing()
        self.firing = firing
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
        self.last_sample_id = 0
        self.refresh_bounds()

    def _locked_query(self, sql: str, params=()):
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
        row = self.reader.query("SELECT min(t), max(t), max(id) FROM sample")[0]
        news = (row[2] or 0) != self.last_sample_id
        self.start_t, self.end_t, self.last_sample_id = row[0], row[1], row[2] or 0
        return news

    def sample_at(self, t: float) -> int | None:
        row = self.reader.query("SELECT max(id) FROM sample WHERE t <= ?", (t,))[0]
        return row[0]

    # -- a moment -----------------------------------------------------------------------
    def moment(self, t: float | None = None, events: int = 30) -> Moment:
        """Values, alarms and recent events at ``t`` (the newest reading when None)."""
        if t is None:
            t = self.end_t if self.end_t is not None else 0.0
        m = Moment(t)
        sid = self.sample_at(t)
        if sid is not None:
            for name, cid in self._ids.items():
                row = self.reader.query(
                    "SELECT t, value, status FROM reading WHERE channel_id = ? AND sample_id <= ? ORDER BY sample_id DESC LIMIT 1",
                    (cid, sid),
                )
                if row:
                    rt, value, status = row[0]
                    m.values[name] = math.nan if value is None else float(value)
                    m.status[name] = int(status)
                    m.age_s[name] = t - rt
        m.alarms = self.alarms_at(t)
        m.events = [
            {"t": r[0], "kind": r[1], "channel": r[2], "detail": r[3]}
            for r in self.reader.query(
                "SELECT t, kind, channel, detail FROM event WHERE t <= ? AND kind NOT IN ('malformed') ORDER BY t DESC, id DESC LIMIT ?",
                (t, events),
            )
        ]
        return m

    def alarms_at(self, t: float) -> list[AlarmRow]:
        """Alarms not normal at ``t``, with their state then (most urgent first)."""
        rows = self.reader.query(
            "SELECT a.id, a.kind, a.channel, a.cause, a.priority, a.raised_t, a.message, a.evidence, "
            "(SELECT s.state FROM alarm_state s WHERE s.alarm_id = a.id AND s.t <= ? ORDER BY s.t DESC, s.id DESC LIMIT 1) "
            "FROM alarm a WHERE a.raised_t <= ?",
            (t, t),
        )
        import json

        out = [
            AlarmRow(r[0], r[1], r[2], r[3], r[4], r[8], r[5], r[6] or "", json.loads(r[7]) if r[7] else None)
            for r in rows
            if r[8] and r[8] != "normal"
        ]
        order = {"high": 0, "medium": 1, "low": 2}
        return sorted(out, key=lambda a: (order.get(a.priority, 3), a.state != "active-unacknowledged", a.raised_t))

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
        lo_id = self.reader.query("SELECT min(id) FROM sample WHERE t >= ?", (t0,))[0][0]
        hi_id = self.reader.query("SELECT max(id) FROM sample WHERE t <= ?", (t1,))[0][0]
        if lo_id is None or hi_id is None or hi_id < lo_id:
            return empty
        rows = self.reader.query(
            "SELECT CAST((t - ?) / ? AS INTEGER) AS b, avg(t), min(value), max(value) FROM reading "
            "WHERE channel_id = ? AND sample_id BETWEEN ? AND ? AND value IS NOT NULL GROUP BY b ORDER BY b",
            (t0, width, cid, lo_id, hi_id),
        )
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


def status_text(code: int) -> str:
    """A short word for a status code (for screens that must read without colour)."""
    return {Status.OK: "", Status.OPEN: "OPEN", Status.UNDER: "UNDER", Status.OVER: "OVER", Status.ERROR: "ERROR",
            Status.OUT_OF_RANGE: "RANGE", Status.MISSING: "—"}.get(Status(code), "?")
