"""Read a firing log into the firing record (``firewatch.firing.record``): the loader, no computation.

Reads, read-only and in short queries, the sample times, the channels the
record needs (aligned with the samples), every measured channel for the
readings digest, and the log's sessions, gaps, malformed-line counts,
alarms with their transitions, and operator notes.
"""

from __future__ import annotations

import sqlite3
from pathlib import Path

import numpy as np

from firewatch import __version__
from firewatch.firing.record import (
    MEASURED_KINDS,
    FiringInputs,
    FiringRecord,
    build_record,
    readings_digest,
)
from firewatch.settings._tomlcheck import ProfileError
from firewatch.settings.profile import SiteProfile, load_site
from firewatch.settings.schedule import Schedule, load_schedule
from firewatch.store._common import log_error
from firewatch.store.reader import LogReader

__all__ = ["load_record", "profiles_from_log", "read_record"]

_SAMPLE = np.dtype([("id", "i8"), ("t", "f8")])
_FULL = np.dtype([("id", "i8"), ("t", "f8"), ("v", "f8"), ("s", "i8")])


def profiles_from_log(reader: LogReader) -> tuple[SiteProfile | None, Schedule | None]:
    """The site profile and schedule the firing was recorded with (None where missing or unreadable)."""
    firing = reader.firing()
    site = schedule = None
    try:
        if firing.get("site_profile"):
            site = load_site(f"{reader.path} (site profile in the log)", text=firing["site_profile"])
    except ProfileError:
        site = None
    try:
        if firing.get("schedule"):
            schedule = load_schedule(f"{reader.path} (schedule in the log)", text=firing["schedule"])
    except ProfileError:
        schedule = None
    return site, schedule


class _Columns:
    """Channels' readings as arrays aligned with the samples, read in the cheapest way the log allows.

    Turning rows into Python objects is what costs (a third of a microsecond
    a value), so a channel with a reading in every sample (the usual case) is
    read as its values alone, in sample order; a channel with readings
    missing is read again in full and aligned by sample id.
    """

    def __init__(self, reader: LogReader) -> None:
        self.con = reader.con
        n, lo, hi = self.con.execute("SELECT count(*), min(id), max(id) FROM sample").fetchone()
        self.n = int(n)
        self.contiguous = self.n > 0 and hi - lo + 1 == self.n
        self._ids: np.ndarray | None = None
        self.times: np.ndarray | None = None

    def _sample(self) -> np.ndarray:
        if self._ids is None:
            sample = np.fromiter(self.con.execute("SELECT id, t FROM sample ORDER BY id"), dtype=_SAMPLE, count=self.n)
            self._ids = sample["id"]
            if self.times is None:
                self.times = sample["t"].copy()
        return self._ids

    def channel(self, channel_id: int, status: bool) -> tuple[np.ndarray, tuple[np.ndarray, np.ndarray, np.ndarray] | None]:
        """The channel's values aligned with the samples, and with ``status`` its own (t, value, status) for the digest."""
        want_t = self.times is None
        cols = ("t, " if want_t else "") + "value" + (", status" if status else "")
        dtype = ([("t", "f8")] if want_t else []) + [("v", "f8")] + ([("s", "i8")] if status else [])
        rows = np.fromiter(self.con.execute(f"SELECT {cols} FROM reading WHERE channel_id = ? ORDER BY sample_id", (channel_id,)), dtype=dtype)
        if self.contiguous and rows.size == self.n:  # one reading per sample, so sample order is alignment
            if want_t:
                self.times = rows["t"].copy()
            assert self.times is not None
            own = (self.times, rows["v"], rows["s"]) if status else None
            return rows["v"].copy(), own
        full = np.fromiter(self.con.execute("SELECT sample_id, t, value, status FROM reading WHERE channel_id = ? ORDER BY sample_id",
                                            (channel_id,)), dtype=_FULL)
        ids = self._sample()
        out = np.full(self.n, np.nan)
        if full.size and self.n:
            pos = np.searchsorted(ids, full["id"])
            ok = (pos < self.n) & (ids[np.minimum(pos, self.n - 1)] == full["id"])
            out[pos[ok]] = full["v"][ok]
        return out, ((full["t"], full["v"], full["s"]) if status else None)


def read_record(reader: LogReader, site: SiteProfile | None = None, schedule: Schedule | None = None) -> FiringRecord:
    """The firing record of an open log; ``site``/``schedule`` replace those kept in the log.

    Everything is read in one read transaction, so a log that a recorder is
    still writing gives a consistent snapshot (its readings digest then
    covers the readings committed when the read began).
    """
    own = not reader.con.in_transaction
    try:
        if own:
            reader.con.execute("BEGIN")
        try:
            return _read_record(reader, site, schedule)
        finally:
            if own and reader.con.in_transaction:
                reader.con.execute("COMMIT")
    except sqlite3.DatabaseError as exc:  # its direct reads, like the reader's own queries: a LogError naming the file
        if reader.con.in_transaction:
            reader.con.rollback()
        raise log_error(reader.path, exc) from None


def _read_record(reader: LogReader, site: SiteProfile | None, schedule: Schedule | None) -> FiringRecord:
    logged_site, logged_schedule = profiles_from_log(reader)
    site = site or logged_site
    schedule = schedule or logged_schedule
    firing = reader.firing()
    channels = reader.query("SELECT id, name, kind FROM channel ORDER BY id")
    ids = {name: cid for cid, name, _ in channels}
    derived = ["plan.segment", "plan.deviation"]
    for py in site.pyrometers if site is not None else ():
        derived += [f"{py.name}.divergence", f"{py.name}.allowed"]

    cols = _Columns(reader)
    values: dict[str, np.ndarray] = {}
    samples: dict[str, int] = {}
    digest_input = []
    for cid, name, kind in channels:
        if kind in MEASURED_KINDS:
            values[name], own = cols.channel(cid, status=True)
            assert own is not None
            samples[name] = int(own[0].size)
            digest_input.append((name, *own))
    for name in derived:
        if name in ids:
            values[name] = cols.channel(ids[name], status=False)[0]
    if cols.times is None:
        cols._sample()
    times = cols.times if cols.times is not None else np.empty(0)
    envelopes: dict[str, tuple[np.ndarray, np.ndarray, np.ndarray]] = {}
    reference = site.reference.name if site is not None and site.reference is not None else None
    for name in ([reference] if reference is not None else []) + [f"{py.name}.reconciled" for py in (site.pyrometers if site is not None else ())]:
        if name in ids:
            rows = reader.query("SELECT minute * 60.0 + 30.0, lo, hi FROM trend_minute WHERE channel_id = ? ORDER BY minute", (ids[name],))
            arr = np.array(rows, dtype=float).reshape(-1, 3)
            envelopes[name] = (arr[:, 0], arr[:, 1], arr[:, 2])

    sessions = [
        dict(zip(("started_utc", "ended_utc", "end_reason", "host", "port", "firewatch_version"), r))
        for r in reader.query("SELECT started_utc, ended_utc, end_reason, host, port, firewatch_version FROM session ORDER BY id")
    ]
    lines, malformed = reader.query("SELECT count(*), coalesce(sum(ok = 0), 0) FROM raw_line")[0]
    reasons = reader.query(
        "SELECT coalesce(reason, 'no reason given'), count(*) FROM raw_line WHERE ok = 0 GROUP BY 1 ORDER BY 2 DESC, 1 LIMIT 5"
    )
    notes = [(e["t"], e["detail"] or "") for e in reader.events(["note"])]
    inputs = FiringInputs(
        site=site,
        schedule=schedule,
        times=times,
        values=values,
        site_name=firing.get("site_name") or "",
        kiln=firing.get("kiln") or "",
        schedule_name=firing.get("schedule_name") or "",
        clock=firing.get("clock") or "wall",
        start_t=firing.get("started_t"),
        end_t=firing.get("ended_t"),
        gaps=[(g["start_t"], g["end_t"], g["reason"]) for g in reader.gaps()],
        sessions=sessions,
        lines=int(lines),
        malformed=int(malformed),
        malformed_reasons=[(r[0], int(r[1])) for r in reasons],
        alarms=reader.alarms(),
        notes=notes,
        samples=samples,
        envelopes=envelopes,
        digest=readings_digest(digest_input),
        log_name=reader.path.name,
        firewatch_version=__version__,
    )
    return build_record(inputs)


def load_record(path: str | Path, site: SiteProfile | None = None, schedule: Schedule | None = None) -> FiringRecord:
    """Open ``path`` read-only and return its firing record (raises ``LogError`` for a file that is not a log)."""
    with LogReader(path) as reader:
        return read_record(reader, site, schedule)
