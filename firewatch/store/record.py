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
    FiringInputs,
    FiringRecord,
    build_record,
    readings_digest,
)
from firewatch.settings._tomlcheck import ProfileError
from firewatch.settings.profile import SiteProfile, load_site
from firewatch.settings.schedule import Schedule, load_schedule
from firewatch.store._common import log_error
from firewatch.store.derive import CHUNK, derived_block
from firewatch.store.layout import STEP_KIND
from firewatch.store.reader import LogReader

__all__ = ["load_record", "profiles_from_log", "read_record"]



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

    measured, other = reader._channels()
    span = reader.sample_span()
    values: dict[str, np.ndarray] = {}
    samples: dict[str, int] = {}
    digest_input = []
    times = np.empty(0)
    if span is not None:
        lo, hi = span
        parts = [reader.block(a, min(a + CHUNK - 1, hi)) for a in range(lo, hi + 1, CHUNK)]
        times = np.concatenate([p.t for p in parts])
        sample_ids = np.concatenate([p.ids for p in parts])
        for name in measured:
            values[name] = np.concatenate([p.values[name] for p in parts])
            status = np.concatenate([p.status[name] for p in parts])
            has = np.concatenate([p.has[name] for p in parts])
            samples[name] = int(has.sum())
            digest_input.append((name, times[has], values[name][has], status[has]))
        del parts
        wanted = [n for n in derived if n in other and other[n][1] != STEP_KIND]
        if wanted:
            got = derived_block(reader, lo, hi, wanted)
            values.update({n: got.values[n] for n in wanted if n in got.values})
        progress = [name for name in derived if name in other and other[name][1] == STEP_KIND]
        if progress:
            step_ids, _, steps = reader.steps(lo, hi, progress)
            for name in progress:
                values[name] = _at_samples(step_ids, steps[name], sample_ids, fill=name == "plan.segment")
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
    lines, malformed = reader.raw_counts()
    reasons = reader.malformed_reasons(5)
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


def _at_samples(step_ids: np.ndarray, values: np.ndarray, ids: np.ndarray, fill: bool) -> np.ndarray:
    """A progress channel's values at its steps, aligned with the samples ``ids``: NaN between its steps, or with
    ``fill`` each step's value carried to the samples up to the next (a segment number)."""
    if fill:
        idx = np.searchsorted(step_ids, ids, side="right") - 1  # the last step at or before each sample
        return np.where(idx >= 0, values[np.maximum(idx, 0)], np.nan)
    out = np.full(ids.size, np.nan)
    pos = np.searchsorted(ids, step_ids)
    ok = pos < ids.size
    out[pos[ok]] = values[ok]
    return out


def load_record(path: str | Path, site: SiteProfile | None = None, schedule: Schedule | None = None) -> FiringRecord:
    """Open ``path`` read-only and return its firing record (raises ``LogError`` for a file that is not a log)."""
    with LogReader(path) as reader:
        return read_record(reader, site, schedule)
