"""Re-evaluating a recorded firing: conversion, reconciliation and alarms again, with other settings.

The firing log is opened read-only and never changed. When the replay's
site converts lines as every session of the log did (the same input,
channels, thermocouple types and cold junctions: :func:`as_recorded`), the
measured values the log keeps are exactly what parsing and converting its raw
lines again would give, so they are read as kept, a block at a time, and a
fresh :class:`~firewatch.firing.pipeline.Pipeline` computes the derived
channels and progress on from them for a fresh
:class:`~firewatch.firing.alarms.AlarmEngine`. Otherwise the raw lines are
parsed again (in a second process) and run through both, placed on the time
line anew. The two give the same alarms on a log replayed with its own site
(tests/services/test_replay_paths.py).
"""

from __future__ import annotations

import gc
import threading
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from firewatch.firing.alarms import AlarmEngine, Transition
from firewatch.firing.pipeline import Pipeline, measurement_key
from firewatch.services.recorder import GAP_S, make_parser
from firewatch.settings._tomlcheck import ProfileError
from firewatch.settings.profile import SiteProfile, load_site
from firewatch.settings.schedule import Schedule, load_schedule
from firewatch.store.reader import LogReader

__all__ = ["Reevaluation", "reevaluate", "profiles_from_log"]


@dataclass
class Reevaluation:
    """The outcome of a re-run."""

    engine: AlarmEngine
    start_t: float | None
    end_t: float | None
    lines: int = 0
    malformed: int = 0
    samples: int = 0
    transitions: list[Transition] = field(default_factory=list)
    last: dict[str, float] = field(default_factory=dict)

    def add(self, times: np.ndarray, values: dict[str, np.ndarray]) -> None:
        """A batch's samples: counted, the span kept, and each channel's last value."""
        if not times.size:
            return
        self.samples += int(times.size)
        self.start_t = float(times[0]) if self.start_t is None else self.start_t
        self.end_t = float(times[-1])
        for name, v in values.items():
            ok = np.flatnonzero(np.isfinite(v))
            if ok.size:
                self.last[name] = float(v[ok[-1]])

    def finish(self) -> Reevaluation:
        """The silence after the last sample judged, and the transitions taken from the engine."""
        if self.end_t is not None:
            self.engine.tick(self.end_t + GAP_S)
        self.transitions = list(self.engine.transitions)
        return self


def profiles_from_log(reader: LogReader) -> tuple[SiteProfile, Schedule | None]:
    """The site profile and schedule the firing was recorded with (as stored in the log)."""
    firing = reader.firing()
    site = load_site(f"{reader.path} (site profile stored in the log)", text=firing.get("site_profile") or "")
    text = firing.get("schedule") or ""
    schedule = load_schedule(f"{reader.path} (schedule stored in the log)", text=text) if text else None
    return site, schedule


def reevaluate(reader: LogReader, site: SiteProfile, schedule: Schedule | None) -> Reevaluation:
    """Run the raw lines of a log through conversion, reconciliation and alarms again.

    Python's cyclic garbage collector is paused meanwhile: a replay makes
    millions of short-lived reading tuples and none of them form cycles, and
    the collector's passes over them cost more than the parsing itself.
    """
    gc.disable()
    try:
        return _reevaluate(reader, site, schedule)
    finally:
        gc.enable()


_LINES_PER_BATCH = 3000
_LINES_PER_JOB = 24_000


def _parse_job(job: tuple[str, SiteProfile, str, int, int]) -> list:
    """In a worker process: read raw lines ``lo < id <= hi`` and parse them into column batches."""
    path, site, clock, lo, hi = job
    parser = make_parser(site, clock)
    names = site.channel_names
    gc.disable()
    out = []
    with LogReader(path) as reader:
        for rows in reader.raw_lines(lo, hi, batch_size=_LINES_PER_BATCH):
            cols = parser.parse_batch([(received, line) for received, line, _ in rows], names, clock)
            raw = [(r[0], b"", r[2], r[3]) for r in cols.raw]  # the bytes are not needed back here
            out.append(cols._replace(raw=raw))
    return out


def _batches(reader: LogReader, site: SiteProfile, clock: str):
    """Column batches of the whole log, parsed in a second process while this one computes."""
    import multiprocessing

    lo, hi = reader.raw_span()
    path = reader.readings_path()  # an old log's converted copy is made here, not in each worker
    jobs = [(str(path.resolve()), site, clock, a, min(a + _LINES_PER_JOB, hi)) for a in range(lo, hi, _LINES_PER_JOB)]
    # a second process only when forking is safe: from a process with one thread (a child forked while another
    # thread holds a lock waits on it for ever; the dashboard and a test runner have threads)
    if len(jobs) <= 1 or threading.active_count() > 1:
        for job in jobs:
            yield from _parse_job(job)
        return
    with multiprocessing.get_context("fork").Pool(1) as pool:
        for batches in pool.imap(_parse_job, jobs):
            yield from batches


def as_recorded(reader: LogReader, site: SiteProfile) -> bool:
    """True when every session of the log converted its lines as ``site`` does (:func:`measurement_key`), so that the
    measured values it keeps are what parsing its raw lines again would give."""
    key = measurement_key(site)
    fallback = reader.firing().get("site_profile") or ""
    texts = {text or fallback for (text,) in reader.query("SELECT site_profile FROM session")}
    for text in texts:
        try:
            if measurement_key(load_site(f"{reader.path} (site profile in the log)", text=text)) != key:
                return False
        except ProfileError:
            return False
    return bool(texts)


def _reevaluate(reader: LogReader, site: SiteProfile, schedule: Schedule | None) -> Reevaluation:
    if as_recorded(reader, site):
        return _from_kept(reader, site, schedule)
    return _from_raw(reader, site, schedule)


_SAMPLES_PER_BATCH = 20_000


def _from_kept(reader: LogReader, site: SiteProfile, schedule: Schedule | None) -> Reevaluation:
    """Re-evaluate from the measured values as kept: derived channels, progress and alarms computed again."""
    clock = reader.firing().get("clock") or "wall"
    pipeline = Pipeline(site, schedule, clock)
    engine = AlarmEngine(site, schedule)
    result = Reevaluation(engine, None, None)
    result.lines, result.malformed = reader.raw_counts()
    # rejected lines are placed on the time line as the recorder logged them
    malformed = np.array([t for (t,) in reader.query("SELECT t FROM event WHERE kind = 'malformed' ORDER BY t")], dtype=float)
    span = reader.sample_span()
    taken = 0
    if span is not None:
        lo, hi = span
        for a in range(lo, hi + 1, _SAMPLES_PER_BATCH):
            block = reader.block(a, min(a + _SAMPLES_PER_BATCH - 1, hi))
            if not block.ids.size:
                continue
            times = block.t
            values, status = pipeline.continue_measured(times, block.values, block.status)
            upto = int(np.searchsorted(malformed, times[-1], side="right")) if a + _SAMPLES_PER_BATCH <= hi else malformed.size
            engine.evaluate(times, values, status, malformed[taken:upto].tolist())
            taken = upto
            result.add(times, values)
    if taken < malformed.size:
        engine.evaluate(np.empty(0), {}, {}, malformed[taken:].tolist())
    return result.finish()


def _from_raw(reader: LogReader, site: SiteProfile, schedule: Schedule | None) -> Reevaluation:
    """Re-evaluate from the raw lines: parsed, converted and placed on the time line again (another site's settings)."""
    clock = reader.firing().get("clock") or "wall"
    pipeline = Pipeline(site, schedule, clock)
    engine = AlarmEngine(site, schedule)
    result = Reevaluation(engine, None, None)
    def batches():
        for cols in _batches(reader, site, clock):
            result.lines += len(cols.raw)
            yield pipeline.process_columns(cols)
        yield pipeline.flush()  # lines held at the end, out of step on the time line

    for batch in batches():
        malformed_t = [r[0] for r in batch.raw if not r[2]]
        if clock == "device" and batch.samples:
            offset = batch.samples[-1][1] - batch.samples[-1][2]
            malformed_t = [t + offset for t in malformed_t]
        times = batch.times
        engine.evaluate(times, batch.values, batch.status, malformed_t)
        result.malformed += batch.malformed
        result.add(times, batch.values)
    return result.finish()


def alarm_summary(result: Reevaluation) -> list[dict[str, Any]]:
    """Alarms of a re-run in the same form as ``inspect --json``."""
    from firewatch.firing.alarms.causes import earlier_causes

    out = []
    start = result.start_t
    for alarm in sorted(result.engine.alarms.values(), key=lambda a: (a.raised_t, a.id)):
        states = [tr for tr in result.transitions if tr.alarm is alarm]
        out.append(
            {
                "kind": alarm.kind,
                "cause": alarm.cause,
                "channel": alarm.channel_name,
                "priority": alarm.priority,
                "raised_s": None if start is None else round(alarm.raised_t - start, 3),
                "cleared_s": None if alarm.cleared_t is None or start is None else round(alarm.cleared_t - start, 3),
                "state": alarm.state,
                "message": alarm.message,
                "evidence": alarm.evidence,
                "causes": earlier_causes(alarm.raised_t, alarm.cause_steps, start),
                "states": [{"state": tr.state, "t_s": None if start is None else round(tr.t - start, 3), "detail": tr.detail} for tr in states],
            }
        )
    return out
