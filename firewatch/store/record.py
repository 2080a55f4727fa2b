"""Read a firing log into the firing record (``firewatch.firing.record``): the loader, no computation.

Reads, read-only and in short queries, the sample times, the channels the
record needs (aligned with the samples), every measured channel for the
readings digest, and the log's sessions, gaps, malformed-line counts,
alarms with their transitions, and operator notes.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from firewatch import __version__
from firewatch.firing.record import MEASURED_KINDS, FiringInputs, FiringRecord, build_record, readings_digest
from firewatch.settings._tomlcheck import ProfileError
from firewatch.settings.profile import SiteProfile, load_site
from firewatch.settings.schedule import Schedule, load_schedule
from firewatch.store.reader import LogReader

__all__ = ["read_record", "load_record", "profiles_from_log"]

_ROW = np.dtype([("id", "i8"), ("v", "f8"), ("s", "i8")])
_ROW_T = np.dtype([("id", "i8"), ("t", "f8"), ("v", "f8"), ("s", "i8")])


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


def _channel_rows(reader: LogReader, channel_id: int, with_t: bool) -> np.ndarray:
    """One channel's readings in sample order, straight into a structured array (NULL becomes NaN)."""
    cols = "sample_id, t, value, status" if with_t else "sample_id, value, status"
    cur = reader.con.execute(f"SELECT {cols} FROM reading WHERE channel_id = ? ORDER BY sample_id", (channel_id,))
    return np.fromiter(cur, dtype=_ROW_T if with_t else _ROW)


def read_record(reader: LogReader, site: SiteProfile | None = None, schedule: Schedule | None = None) -> FiringRecord:
    """The firing record of an open log; ``site``/``schedule`` replace those kept in the log."""
    logged_site, logged_schedule = profiles_from_log(reader)
    site = site or logged_site
    schedule = schedule or logged_schedule
    firing = reader.firing()
    channels = reader.query("SELECT id, name, kind FROM channel ORDER BY id")
    ids = {name: cid for cid, name, _ in channels}
    sample = np.fromiter(reader.con.execute("SELECT id, t FROM sample ORDER BY id"), dtype=[("id", "i8"), ("t", "f8")])
    times = sample["t"].copy()

    def align(rows: np.ndarray) -> np.ndarray:
        out = np.full(times.size, np.nan)
        if rows.size == sample.size and np.array_equal(rows["id"], sample["id"]):
            out[:] = rows["v"]
        elif rows.size:
            pos = np.searchsorted(sample["id"], rows["id"])
            ok = (pos < sample.size) & (sample["id"][np.minimum(pos, sample.size - 1)] == rows["id"])
            out[pos[ok]] = rows["v"][ok]
        return out

    values: dict[str, np.ndarray] = {}
    samples: dict[str, int] = {}
    digest_input = []
    for cid, name, kind in channels:
        if kind in MEASURED_KINDS:
            rows = _channel_rows(reader, cid, with_t=True)
            samples[name] = int(rows.size)
            digest_input.append((name, rows["t"], rows["v"], rows["s"]))
            values[name] = align(rows)
    wanted = ["plan.segment", "plan.deviation"]
    for py in site.pyrometers if site is not None else ():
        wanted += [f"{py.name}.reconciled", f"{py.name}.divergence", f"{py.name}.allowed"]
    for name in wanted:
        if name in ids:
            values[name] = align(_channel_rows(reader, ids[name], with_t=False))

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
        digest=readings_digest(digest_input),
        log_name=reader.path.name,
        firewatch_version=__version__,
    )
    return build_record(inputs)


def load_record(path: str | Path, site: SiteProfile | None = None, schedule: Schedule | None = None) -> FiringRecord:
    """Open ``path`` read-only and return its firing record (raises ``LogError`` for a file that is not a log)."""
    with LogReader(path) as reader:
        return read_record(reader, site, schedule)
