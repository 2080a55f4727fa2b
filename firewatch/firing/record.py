"""The firing record: what a quality file keeps of one firing, computed from its readings.

Pure computation over arrays, no I/O: a loader (``firewatch.store.record``)
reads a firing log into :class:`FiringInputs`, :func:`build_record` turns
them into a :class:`FiringRecord`, and the report and ``inspect --json``
only present it. Every time is UTC seconds since the epoch on the firing's
time line; every temperature degC, every difference K, every rate degC/h.

What is computed, and how
-------------------------
peak
    The reference thermocouple's highest reading and when.
time above
    Time the reference spent above the schedule's top target less
    ``TOP_MARGIN_K`` (10 K), crossings interpolated linearly; stretches
    between readings longer than ``max_step_s`` (gaps) count as unknown.
holds
    For each segment with a hold: the longest unbroken stretch (no gap) in
    which the reference stayed within ``hold_band_k`` (5 K, common practice,
    no source) of the target, among the stretches that overlap the time the
    firing spent in that segment (the recorded ``plan.segment``).
critical ranges
    Each passage of the reference through a schedule's critical range in a
    direction the range applies to: from its last entry on one side to its
    exit on the other (crossings interpolated). The mean rate is the range's
    width over that time; the fastest is the largest trailing least-squares
    slope over the site's ``rate_window_s`` (as the rate-limit alarm reads
    rates) within the passage. It is within the limit when the fastest is.
deviation
    The largest ``|plan.deviation|``: the control thermocouple against the
    current segment's own plan, as the schedule-deviation alarm sees it.
divergence
    Per pyrometer with a reference: mean, standard deviation and largest
    ``divergence`` (reconciled minus reference), and the time it spent
    outside its ``allowed`` band, time-weighted like *time above*.
readings digest
    :func:`readings_digest`: SHA-256 of a canonical serialisation of the
    measured readings, independent of how a log stores them.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import math
import re
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from firewatch.firing.rates import TrailingSlope
from firewatch.settings.profile import SiteProfile
from firewatch.settings.schedule import CriticalRange, Schedule

__all__ = [
    "DIGEST_NAME",
    "MEASURED_KINDS",
    "AlarmRecord",
    "AlarmStep",
    "ChartData",
    "Deviation",
    "DivergenceStats",
    "FiringInputs",
    "FiringRecord",
    "Gap",
    "Hold",
    "Note",
    "Passage",
    "Peak",
    "SegmentRun",
    "Session",
    "Trace",
    "build_record",
    "envelope",
    "passages",
    "readings_digest",
    "time_above",
]

MEASURED_KINDS = ("thermocouple", "cold_junction", "pyrometer")
"""Channel kinds whose readings the digest covers: what the instruments said, not what firewatch derived."""

DIGEST_NAME = "firewatch-readings-v1"
"""The name (and first line) of the digest's canonical serialisation; a new definition gets a new name."""

TOP_MARGIN_K = 10.0
HOLD_BAND_K = 5.0
MAX_STEP_S = 5.0
"""Readings further apart than this are a gap (the recorder's rule): the time between them counts as unknown."""
CHART_BUCKETS = 900
"""Min/max pairs per chart trace: more than a printed chart's width resolves."""


# -- the canonical digest -------------------------------------------------------------------
def readings_digest(channels: Iterable[tuple[str, np.ndarray, np.ndarray, np.ndarray]]) -> str:
    """SHA-256 of the measured readings in a canonical form, as 64 hex digits.

    The serialisation (``firewatch-readings-v1``, documented in
    docs/log-format.md) is the bytes ``firewatch-readings-v1\\n``, then for
    each channel in ascending order of its name's UTF-8 bytes: the name in
    UTF-8, a newline, the number of readings as an 8-byte big-endian
    unsigned integer, and each reading in ascending order of time (then
    status, then value, no value last) as 17 bytes: time and value as
    IEEE 754 binary64, big-endian (no value as the quiet NaN
    ``7ff8000000000000``, negative zero as zero), and the status code as one
    unsigned byte.

    Parameters
    ----------
    channels : iterable of (name, t, value, status)
        Every measured channel's readings, in any order; NaN marks no value.

    Examples
    --------
    >>> import numpy as np
    >>> one = readings_digest([("tc1", np.array([0.0]), np.array([np.nan]), np.array([6]))])
    >>> len(one), one == readings_digest([("tc1", np.array([0.0]), np.array([None], dtype=float), np.array([6]))])
    (64, True)
    """
    h = hashlib.sha256(DIGEST_NAME.encode() + b"\n")
    record = np.dtype([("t", ">f8"), ("v", ">f8"), ("s", "u1")])
    for name, t, value, status in sorted(channels, key=lambda c: c[0].encode("utf-8")):
        t = np.asarray(t, dtype=float) + 0.0  # + 0.0 turns -0.0 into 0.0
        v = np.asarray(value, dtype=float) + 0.0
        s = np.asarray(status, dtype=np.int64)
        if t.size > 1 and not bool(np.all(t[1:] > t[:-1])):  # already in order as a log keeps them, usually
            order = np.lexsort((v, s, t))  # NaN sorts last
            t, v, s = t[order], v[order], s[order]
        rows = np.empty(t.size, dtype=record)
        rows["t"] = t
        rows["v"] = np.where(np.isnan(v), np.nan, v)  # one NaN bit pattern
        rows["s"] = s
        h.update(name.encode("utf-8") + b"\n" + int(t.size).to_bytes(8, "big"))
        h.update(rows.tobytes())
    return h.hexdigest()


# -- inputs ---------------------------------------------------------------------------------
@dataclass
class FiringInputs:
    """What a loader reads from a firing log for :func:`build_record`.

    ``values`` holds each channel aligned with ``times`` (NaN where a sample
    has no value for it): at least the reference thermocouple, and where the
    log has them ``plan.segment``, ``plan.deviation`` and each pyrometer's
    ``.divergence`` and ``.allowed``. ``envelopes`` holds, for the chart, the
    per-minute minimum and maximum of the reference and of each pyrometer's
    ``.reconciled``: (minute centre times, minima, maxima).
    """

    site: SiteProfile | None
    schedule: Schedule | None
    times: np.ndarray
    values: dict[str, np.ndarray]
    site_name: str = ""
    kiln: str = ""
    schedule_name: str = ""
    clock: str = "wall"
    start_t: float | None = None
    end_t: float | None = None
    gaps: Sequence[tuple[float, float, str]] = ()
    sessions: Sequence[Mapping[str, Any]] = ()
    lines: int = 0
    malformed: int = 0
    malformed_reasons: Sequence[tuple[str, int]] = ()
    alarms: Sequence[Mapping[str, Any]] = ()
    notes: Sequence[tuple[float, str]] = ()
    samples: dict[str, int] = field(default_factory=dict)
    envelopes: dict[str, tuple[np.ndarray, np.ndarray, np.ndarray]] = field(default_factory=dict)
    digest: str = ""
    log_name: str = ""
    firewatch_version: str = ""


# -- the record -----------------------------------------------------------------------------
@dataclass(frozen=True)
class Peak:
    channel: str
    value_c: float
    t: float


@dataclass(frozen=True)
class Hold:
    """A hold of the schedule against what the reference thermocouple did."""

    segment: int
    name: str
    target_c: float
    planned_s: float
    achieved_s: float
    """Longest unbroken stretch within ``band_k`` of the target (0 if never)."""
    band_k: float
    start_t: float | None
    end_t: float | None
    reached: bool
    """Whether the firing reached this segment at all."""

    @property
    def short_s(self) -> float:
        return max(self.planned_s - self.achieved_s, 0.0)


@dataclass(frozen=True)
class SegmentRun:
    """One schedule segment as planned and as the recorded progress went through it."""

    index: int
    name: str
    rate_c_per_h: float
    target_c: float
    hold_s: float
    planned_s: float
    entered_t: float | None
    left_t: float | None

    @property
    def actual_s(self) -> float | None:
        return None if self.entered_t is None or self.left_t is None else self.left_t - self.entered_t


@dataclass(frozen=True)
class Passage:
    """One passage of the reference through a critical range."""

    range: CriticalRange
    direction: str
    """``heating`` or ``cooling``."""
    enter_t: float
    leave_t: float
    mean_rate_c_per_h: float
    """Unsigned: the range's width over the time through it."""
    fastest_c_per_h: float
    """Unsigned: the largest trailing rate within the passage (NaN if none could be computed)."""
    gap: bool
    """A gap in the record falls inside the passage (the rates are then less certain)."""

    @property
    def within(self) -> bool:
        fastest = self.fastest_c_per_h if math.isfinite(self.fastest_c_per_h) else self.mean_rate_c_per_h
        return fastest <= self.range.max_rate_c_per_h and self.mean_rate_c_per_h <= self.range.max_rate_c_per_h


@dataclass(frozen=True)
class Deviation:
    value_k: float
    t: float
    segment: int | None
    channel: str
    alarm_k: float | None = None
    """The site's schedule-deviation alarm threshold (``[alarms] deviation_c``)."""


@dataclass(frozen=True)
class DivergenceStats:
    pyrometer: str
    reference: str
    compared_s: float
    """Time with both a divergence and an allowance."""
    n: int
    mean_k: float
    sd_k: float
    largest_k: float
    largest_t: float | None
    outside_s: float
    """Time with |divergence| above the allowance."""
    mean_allowed_k: float


@dataclass(frozen=True)
class Gap:
    start_t: float
    end_t: float
    reason: str

    @property
    def seconds(self) -> float:
        return self.end_t - self.start_t


@dataclass(frozen=True)
class Session:
    index: int
    started_t: float
    ended_t: float | None
    end_reason: str
    host: str
    port: str
    version: str


@dataclass(frozen=True)
class AlarmStep:
    """One transition of an alarm, with who acted and why where the log says."""

    t: float
    state: str
    detail: str
    by: str = ""
    reason: str = ""
    until_t: float | None = None


@dataclass(frozen=True)
class AlarmRecord:
    id: int
    kind: str
    channel: str | None
    cause: str | None
    priority: str
    raised_t: float
    cleared_t: float | None
    state: str
    message: str
    steps: tuple[AlarmStep, ...]

    @property
    def acknowledged(self) -> list[AlarmStep]:
        return [s for s in self.steps if s.detail.startswith("acknowledged")]

    @property
    def shelves(self) -> list[AlarmStep]:
        return [s for s in self.steps if s.state == "shelved"]


@dataclass(frozen=True)
class Note:
    t: float
    text: str
    source: str


@dataclass(frozen=True)
class Trace:
    """A decimated series for the chart: times with NaN breaking the line at gaps."""

    name: str
    label: str
    t: np.ndarray
    value: np.ndarray


@dataclass(frozen=True)
class ChartData:
    """What the chart draws: the plan, the traces, alarm marks, gaps and critical bands."""

    plan_t: np.ndarray
    plan_c: np.ndarray
    traces: tuple[Trace, ...]
    alarms: tuple[tuple[float, int, str], ...]
    """(raised time, alarm id, priority)."""
    gaps: tuple[tuple[float, float], ...]
    critical: tuple[CriticalRange, ...]
    start_t: float | None
    end_t: float | None


@dataclass(frozen=True)
class FiringRecord:
    """Everything the firing report shows, computed from the log; see the module's docstring."""

    site_name: str
    kiln: str
    timezone: str
    schedule: Schedule | None
    schedule_name: str
    clock: str
    log_name: str
    start_t: float | None
    end_t: float | None
    reference: str | None
    reference_label: str
    control: str | None
    peak: Peak | None
    top_target_c: float | None
    threshold_c: float | None
    time_above_s: float | None
    holds: tuple[Hold, ...]
    segments: tuple[SegmentRun, ...]
    schedule_done_t: float | None
    passages: tuple[Passage, ...]
    ranges_not_passed: tuple[CriticalRange, ...]
    deviation: Deviation | None
    divergence: tuple[DivergenceStats, ...]
    gaps: tuple[Gap, ...]
    sessions: tuple[Session, ...]
    lines: int
    malformed: int
    malformed_reasons: tuple[tuple[str, int], ...]
    alarms: tuple[AlarmRecord, ...]
    notes: tuple[Note, ...]
    samples: dict[str, int]
    digest: str
    chart: ChartData
    firewatch_version: str = ""

    @property
    def duration_s(self) -> float | None:
        return None if self.start_t is None or self.end_t is None else self.end_t - self.start_t

    @property
    def gap_total_s(self) -> float:
        return float(sum(g.seconds for g in self.gaps))

    @property
    def planned_s(self) -> float | None:
        return None if self.schedule is None else self.schedule.planned_duration_s

    def summary(self) -> dict[str, Any]:
        """The record's numbers as plain JSON values (for ``inspect --json``).

        Times are given twice: ``time`` in ISO 8601 UTC and ``t_s`` in seconds from the firing's start.
        """
        start = self.start_t

        def when(t: float | None) -> dict[str, Any]:
            return {"time": _iso(t), "t_s": None if t is None or start is None else round(t - start, 3)}

        return {
            "reference": self.reference,
            "peak": None if self.peak is None else {"channel": self.peak.channel, "value_c": _r(self.peak.value_c, 3), **when(self.peak.t)},
            "top_target_c": self.top_target_c,
            "time_above": None if self.threshold_c is None else {"threshold_c": self.threshold_c, "seconds": _r(self.time_above_s, 1)},
            "holds": [
                {"segment": h.segment, "name": h.name, "target_c": h.target_c, "planned_s": h.planned_s,
                 "achieved_s": _r(h.achieved_s, 1), "band_k": h.band_k, "reached": h.reached}
                for h in self.holds
            ],
            "schedule_done": None if self.schedule_done_t is None else when(self.schedule_done_t),
            "planned_s": _r(self.planned_s, 1),
            "critical_ranges": [
                {"name": p.range.name, "low_c": p.range.low_c, "high_c": p.range.high_c, "direction": p.direction,
                 "max_rate_c_per_h": p.range.max_rate_c_per_h, "mean_rate_c_per_h": _r(p.mean_rate_c_per_h, 2),
                 "fastest_c_per_h": _r(p.fastest_c_per_h, 2), "within_limit": p.within, "gap": p.gap,
                 "enter": when(p.enter_t), "leave": when(p.leave_t)}
                for p in self.passages
            ],
            "critical_ranges_not_passed": [c.name for c in self.ranges_not_passed],
            "largest_deviation": None if self.deviation is None else {
                "value_k": _r(self.deviation.value_k, 3), "channel": self.deviation.channel, "alarm_k": self.deviation.alarm_k,
                "segment": self.deviation.segment, **when(self.deviation.t)},
            "divergence": {
                d.pyrometer: {"reference": d.reference, "n": d.n, "compared_s": _r(d.compared_s, 1), "mean_k": _r(d.mean_k, 3),
                              "sd_k": _r(d.sd_k, 3), "largest_k": _r(d.largest_k, 3), "largest": when(d.largest_t),
                              "outside_allowance_s": _r(d.outside_s, 1), "mean_allowed_k": _r(d.mean_allowed_k, 3)}
                for d in self.divergence
            },
            "gaps": {"count": len(self.gaps), "seconds": _r(self.gap_total_s, 3)},
            "malformed_lines": self.malformed,
            "lines": self.lines,
            "alarms": len(self.alarms),
            "notes": len(self.notes),
            "readings_sha256": self.digest,
            "digest_definition": DIGEST_NAME,
        }


def _r(x: float | None, digits: int) -> float | None:
    return None if x is None or not math.isfinite(x) else round(float(x), digits)


def _iso(t: float | None) -> str | None:
    if t is None or not math.isfinite(t):
        return None
    return dt.datetime.fromtimestamp(t, dt.UTC).isoformat(timespec="seconds").replace("+00:00", "Z")


# -- pieces (each usable on its own) -------------------------------------------------------
def _steps(t: np.ndarray, max_step_s: float) -> np.ndarray:
    """Length of each interval between consecutive readings, 0 where it is a gap."""
    d = np.diff(t)
    return np.where(d <= max_step_s, d, 0.0)


def time_above(t: np.ndarray, v: np.ndarray, threshold: float, max_step_s: float = MAX_STEP_S) -> float:
    """Seconds ``v`` spent above ``threshold``, crossings interpolated linearly, gaps and NaN not counted.

    Examples
    --------
    >>> time_above(np.array([0.0, 1.0, 2.0]), np.array([0.0, 2.0, 2.0]), 1.0)
    1.5
    """
    if t.size < 2:
        return 0.0
    a, b = v[:-1], v[1:]
    dt_ = _steps(t, max_step_s)
    with np.errstate(invalid="ignore", divide="ignore"):
        frac = np.where(
            (a > threshold) & (b > threshold), 1.0,
            np.where((a > threshold) != (b > threshold), np.where(a > threshold, a - threshold, b - threshold) / np.abs(b - a), 0.0),
        )
    frac = np.where(np.isfinite(a) & np.isfinite(b), frac, 0.0)
    return float(np.sum(frac * dt_))


def _runs(mask: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Start and end (exclusive) indices of the runs of True in ``mask``."""
    m = np.concatenate([[False], mask, [False]]).astype(np.int8)
    d = np.diff(m)
    return np.flatnonzero(d == 1), np.flatnonzero(d == -1)


def _segment_spans(times: np.ndarray, seg: np.ndarray, n: int) -> tuple[list[float | None], list[float | None]]:
    """When the recorded progress entered and left each segment (None where it never did)."""
    entered: list[float | None] = [None] * n
    left: list[float | None] = [None] * n
    ok = np.isfinite(seg)
    for i in range(n):
        inside = np.flatnonzero(ok & (seg == i))
        if inside.size:
            entered[i] = float(times[inside[0]])
        after = np.flatnonzero(ok & (seg > i))
        if after.size and entered[i] is not None:
            left[i] = float(times[after[0]])
    return entered, left


def _holds(times: np.ndarray, ref: np.ndarray, seg: np.ndarray | None, schedule: Schedule, band_k: float,
           max_step_s: float) -> list[Hold]:
    n = len(schedule.segments)
    if seg is not None:
        entered, left = _segment_spans(times, seg, n)
    else:  # a log without recorded progress: any stretch of the firing may be the hold
        first = float(times[0]) if times.size else None
        entered, left = [first] * n, [None] * n
    out = []
    for i, s in enumerate(schedule.segments):
        if s.hold_s <= 0:
            continue
        lo_t, left_t = entered[i], left[i]
        if lo_t is None:
            out.append(Hold(i, s.name, s.target_c, s.hold_s, 0.0, band_k, None, None, False))
            continue
        hi_t = left_t if left_t is not None else math.inf
        with np.errstate(invalid="ignore"):
            inside = np.abs(ref - s.target_c) <= band_k
        # a gap breaks a stretch: the record cannot show what happened in it
        breaks = np.concatenate([[False], np.diff(times) > max_step_s])
        starts, ends = _runs(inside)
        best: tuple[float, float | None, float | None] = (0.0, None, None)
        for a, b in zip(starts.tolist(), ends.tolist()):
            cut = np.flatnonzero(breaks[a + 1:b]) + a + 1
            edges = [a, *cut.tolist(), b]
            for p, q in zip(edges[:-1], edges[1:]):
                t0, t1 = float(times[p]), float(times[q - 1])
                if t1 >= lo_t and t0 < hi_t and t1 - t0 > best[0]:
                    best = (t1 - t0, t0, t1)
        out.append(Hold(i, s.name, s.target_c, s.hold_s, best[0], band_k, best[1], best[2], True))
    return out


def _crossing(t: np.ndarray, v: np.ndarray, i: int, level: float) -> float:
    """The interpolated time ``v`` crosses ``level`` between readings i-1 and i."""
    a, b = v[i - 1], v[i]
    if b == a:
        return float(t[i])
    return float(t[i - 1] + (level - a) / (b - a) * (t[i] - t[i - 1]))


def passages(t: np.ndarray, v: np.ndarray, cr: CriticalRange, rate_window_s: float = 300.0,
             max_step_s: float = MAX_STEP_S) -> list[Passage]:
    """Passages of ``v`` through ``cr`` in the directions it applies to.

    A heating passage runs from the last upward crossing of ``low`` to the
    next upward crossing of ``high``; a cooling one from the last downward
    crossing of ``high`` to the next downward crossing of ``low``. The fastest
    rate is the largest trailing least-squares slope over ``rate_window_s``
    at the readings inside the passage.

    Examples
    --------
    >>> from firewatch.settings.schedule import CriticalRange
    >>> p = passages(np.arange(0.0, 7201.0, 1.0), np.linspace(500.0, 700.0, 7201), CriticalRange("q", 550.0, 600.0, 120.0))
    >>> [(x.direction, round(x.mean_rate_c_per_h, 6)) for x in p]
    [('heating', 100.0)]
    """
    ok = np.isfinite(v)
    idx = np.flatnonzero(ok)
    if idx.size < 2:
        return []
    tt, vv = t[idx], v[idx]
    zone = (vv >= cr.low_c).astype(np.int8) + (vv >= cr.high_c).astype(np.int8)
    changes = np.flatnonzero(np.diff(zone)) + 1
    out: list[Passage] = []
    entry: tuple[str, float, int] | None = None
    for k in changes.tolist():
        prev, cur = int(zone[k - 1]), int(zone[k])
        if prev == 0 and cur >= 1:
            entry = ("below", _crossing(tt, vv, k, cr.low_c), k)
        elif prev == 2 and cur <= 1:
            entry = ("above", _crossing(tt, vv, k, cr.high_c), k)
        elif entry is not None and ((entry[0] == "below" and cur == 0) or (entry[0] == "above" and cur == 2)):
            entry = None  # went back out the side it came in
        if entry is None:
            continue
        if entry[0] == "below" and cur == 2:
            direction, leave = "heating", _crossing(tt, vv, k, cr.high_c)
        elif entry[0] == "above" and cur == 0:
            direction, leave = "cooling", _crossing(tt, vv, k, cr.low_c)
        else:
            continue
        enter, first = entry[1], entry[2]
        entry = None
        if not (cr.direction == "both" or cr.direction == direction):
            continue
        span = max(leave - enter, 1e-9)
        mean = (cr.high_c - cr.low_c) / span * 3600.0
        # the trailing slope needs the window before the entry, and only that
        a = int(np.searchsorted(tt, enter - rate_window_s, side="left"))
        b = int(np.searchsorted(tt, leave, side="right"))
        slope = TrailingSlope(rate_window_s).update(tt[a:b], vv[a:b]) * 3600.0
        inside = slope[tt[a:b] >= enter]
        fastest = float(np.nanmax(np.abs(inside))) if np.isfinite(inside).any() else math.nan
        # readings missing (a gap, or no value) between the entry and the exit
        gap = bool(np.any(np.diff(tt[first - 1:k + 1]) > max_step_s)) or bool(np.any(np.diff(idx[first - 1:k + 1]) > 1))
        out.append(Passage(cr, direction, enter, leave, mean, fastest, gap))
    return out


def envelope(t: np.ndarray, lo: np.ndarray, hi: np.ndarray, buckets: int = CHART_BUCKETS, step_s: float = 60.0,
             span: tuple[float, float] | None = None) -> tuple[np.ndarray, np.ndarray]:
    """A chart line through per-interval minima and maxima (the log's per-minute table), at most two points a bucket.

    Each bucket gives its minimum and maximum, the minimum first where the
    line rises and last where it falls, so a ramp draws as a clean line
    and a spike keeps its height. A missing interval (a gap longer than
    ``step_s``) breaks the line with NaN.

    Examples
    --------
    >>> tt, vv = envelope(np.array([30.0, 90.0, 150.0, 330.0]), np.array([0.0, 1.0, 2.0, 5.0]), np.array([1.0, 2.0, 3.0, 6.0]), buckets=10)
    >>> vv.tolist()
    [0.0, 1.0, 1.0, 2.0, 2.0, 3.0, nan, 5.0, 6.0]
    """
    ok = np.isfinite(lo) & np.isfinite(hi)
    t, lo, hi = t[ok], lo[ok], hi[ok]
    if t.size == 0:
        return np.empty(0), np.empty(0)
    t0, t1 = span if span is not None else (float(t[0]), float(t[-1]))
    width = max((t1 - t0) / buckets, step_s)
    b = np.floor((t - t0) / width).astype(np.int64)
    brk = np.concatenate([[False], np.diff(t) > 1.5 * step_s])
    new = np.concatenate([[True], (b[1:] != b[:-1]) | brk[1:]])
    starts = np.flatnonzero(new)
    ends = np.concatenate([starts[1:], [t.size]]) - 1
    lo_v = np.minimum.reduceat(lo, starts)
    hi_v = np.maximum.reduceat(hi, starts)
    mid = 0.5 * (lo_v + hi_v)
    rising = np.concatenate([[True], mid[1:] >= mid[:-1]])
    first = np.where(rising, lo_v, hi_v)
    second = np.where(rising, hi_v, lo_v)
    gap_after = np.concatenate([brk[starts[1:]], [False]])
    out_t = np.stack([t[starts] - 0.5 * step_s, t[ends] + 0.5 * step_s, t[ends] + 0.5 * step_s], axis=1)
    out_v = np.stack([first, second, np.full(starts.size, np.nan)], axis=1)
    keep = np.stack([np.ones(starts.size, dtype=bool), np.ones(starts.size, dtype=bool), gap_after], axis=1)
    return out_t[keep], out_v[keep]


def _parse_step(t: float, state: str, detail: str) -> AlarmStep:
    """Who acted and why, from the alarm engine's transition texts (``acknowledged by X``, ``shelved by X until T: R``)."""
    detail = detail or ""
    m = re.match(r"^acknowledged by (?P<by>.+?)(?:; cleared)?$", detail)
    if m:
        return AlarmStep(t, state, detail, by=m["by"])
    m = re.match(r"^shelved by (?P<by>.+?) until (?P<until>-?[0-9.]+): ?(?P<reason>.*)$", detail, re.DOTALL)
    if m:
        return AlarmStep(t, state, detail, by=m["by"], reason=m["reason"], until_t=float(m["until"]))
    m = re.match(r"^unshelved by (?P<by>.+?);", detail)
    if m:
        return AlarmStep(t, state, detail, by=m["by"])
    return AlarmStep(t, state, detail)


def _split_note(detail: str) -> tuple[str, str]:
    """``text (source)`` as the recorder logs a note -> (text, source); the source may hold parentheses."""
    detail = detail or ""
    if detail.endswith(")"):
        depth = 0
        for i in range(len(detail) - 1, -1, -1):
            depth += {")": 1, "(": -1}.get(detail[i], 0)
            if depth == 0:
                return detail[:i].rstrip(), detail[i + 1:-1]
    return detail, ""


# -- the whole record ----------------------------------------------------------------------
def build_record(inputs: FiringInputs, hold_band_k: float = HOLD_BAND_K, max_step_s: float = MAX_STEP_S,
                 chart_buckets: int = CHART_BUCKETS) -> FiringRecord:
    """Compute the firing record from a log's readings (see the module docstring for each figure)."""
    site, schedule = inputs.site, inputs.schedule
    times = np.asarray(inputs.times, dtype=float)
    values = inputs.values
    nan = np.full(times.size, np.nan)

    ref_tc = site.reference if site is not None else None
    reference = ref_tc.name if ref_tc is not None else None
    if reference is None or reference not in values:
        reference = next((n for n in values if not n.startswith("plan.") and "." not in n), None)
    ref = values.get(reference, nan) if reference else nan
    label = ""
    tc = site.thermocouple(reference) if site is not None and reference else None
    if tc is not None:
        label = f"type {tc.type}" + (f", {tc.label}" if tc.label else "")
    control = site.control.name if site is not None and site.control is not None else None

    peak = None
    if np.isfinite(ref).any():
        i = int(np.nanargmax(ref))
        peak = Peak(reference or "", float(ref[i]), float(times[i]))

    top = threshold = above = None
    holds: list[Hold] = []
    segments: list[SegmentRun] = []
    done_t = None
    seg = values.get("plan.segment")
    passages_: list[Passage] = []
    not_passed: list[CriticalRange] = []
    deviation = None
    if schedule is not None:
        top = schedule.peak_c
        threshold = top - TOP_MARGIN_K
        above = time_above(times, ref, threshold, max_step_s)
        holds = _holds(times, ref, seg, schedule, hold_band_k, max_step_s)
        n = len(schedule.segments)
        entered, left = _segment_spans(times, seg, n) if seg is not None else ([None] * n, [None] * n)
        for i, s in enumerate(schedule.segments):
            planned = abs(s.target_c - schedule.start_of(i)) / abs(schedule.planned_rate(i)) * 3600.0 + s.hold_s
            segments.append(SegmentRun(i, s.name, s.rate_c_per_h, s.target_c, s.hold_s, planned, entered[i], left[i]))
        if seg is not None:
            finished = np.flatnonzero(np.isfinite(seg) & (seg >= n))
            done_t = float(times[finished[0]]) if finished.size else None
        window = site.alarms.rate_window_s if site is not None else 300.0
        for cr in schedule.critical:
            found = passages(times, ref, cr, window, max_step_s)
            passages_ += found
            if not found:
                not_passed.append(cr)
        dev = values.get("plan.deviation")
        if dev is not None and np.isfinite(dev).any():
            i = int(np.nanargmax(np.abs(dev)))
            sg = seg[i] if seg is not None and math.isfinite(seg[i]) else None
            deviation = Deviation(float(dev[i]), float(times[i]), None if sg is None else int(sg), control or "",
                                  site.alarms.deviation_c if site is not None else None)

    divergence: list[DivergenceStats] = []
    steps = np.concatenate([_steps(times, max_step_s), [0.0]]) if times.size else np.empty(0)
    for py in site.pyrometers if site is not None else ():
        div, allowed = values.get(f"{py.name}.divergence"), values.get(f"{py.name}.allowed")
        if div is None or allowed is None or py.reference is None:
            continue
        ok = np.isfinite(div) & np.isfinite(allowed)
        n_ok = int(ok.sum())
        if n_ok == 0:
            divergence.append(DivergenceStats(py.name, py.reference, 0.0, 0, math.nan, math.nan, math.nan, None, 0.0, math.nan))
            continue
        d = div[ok]
        j = int(np.argmax(np.abs(d)))
        outside = ok & (np.abs(np.where(ok, div, 0.0)) > np.where(ok, allowed, np.inf))
        divergence.append(
            DivergenceStats(
                py.name, py.reference, float(np.sum(steps[ok])), n_ok, float(np.mean(d)),
                float(np.std(d, ddof=1)) if n_ok > 1 else 0.0, float(d[j]), float(times[ok][j]),
                float(np.sum(steps[outside])), float(np.mean(allowed[ok])),
            )
        )

    alarms = tuple(
        AlarmRecord(
            int(a["id"]), a["kind"], a.get("channel"), a.get("cause"), a["priority"], float(a["raised_t"]),
            None if a.get("cleared_t") is None else float(a["cleared_t"]), a["state"], a.get("message") or "",
            tuple(_parse_step(float(s["t"]), s["state"], s.get("detail") or "") for s in a.get("states", ())),
        )
        for a in inputs.alarms
    )
    notes = tuple(Note(float(t), *_split_note(detail)) for t, detail in inputs.notes)
    sessions = tuple(
        Session(i + 1, float(s["started_utc"]), None if s.get("ended_utc") is None else float(s["ended_utc"]),
                s.get("end_reason") or "", s.get("host") or "", s.get("port") or "", s.get("firewatch_version") or "")
        for i, s in enumerate(inputs.sessions)
    )

    traces: list[Trace] = []
    span = (inputs.start_t, inputs.end_t) if inputs.start_t is not None and inputs.end_t is not None and inputs.end_t > inputs.start_t else None
    if reference and reference in inputs.envelopes:
        ref_tc = site.thermocouple(reference) if site is not None else None
        tc_type = ref_tc.type if ref_tc is not None else ""
        traces.append(Trace(reference, f"{reference} reference thermocouple" + (f", type {tc_type}" if tc_type else ""),
                            *envelope(*inputs.envelopes[reference], chart_buckets, span=span)))
    for py in site.pyrometers if site is not None else ():
        rec = inputs.envelopes.get(f"{py.name}.reconciled")
        if rec is not None:
            kind = "ratio" if py.kind == "ratio" else "single-band"
            traces.append(Trace(py.name, f"{py.name} {kind} pyrometer, reconciled", *envelope(*rec, chart_buckets, span=span)))
    plan_t, plan_c = np.empty(0), np.empty(0)
    if schedule is not None and inputs.start_t is not None:
        bt, bc, _ = schedule.breakpoints()
        plan_t, plan_c = bt + inputs.start_t, bc
    chart = ChartData(
        plan_t, plan_c, tuple(traces), tuple((a.raised_t, a.id, a.priority) for a in alarms),
        tuple((float(a), float(b)) for a, b, _ in inputs.gaps), schedule.critical if schedule is not None else (),
        inputs.start_t, inputs.end_t,
    )

    return FiringRecord(
        site_name=inputs.site_name or (site.name if site else ""),
        kiln=inputs.kiln or (site.kiln if site else ""),
        timezone=site.timezone if site is not None else "",
        schedule=schedule,
        schedule_name=inputs.schedule_name or (schedule.name if schedule else ""),
        clock=inputs.clock,
        log_name=inputs.log_name,
        start_t=inputs.start_t,
        end_t=inputs.end_t,
        reference=reference,
        reference_label=label,
        control=control,
        peak=peak,
        top_target_c=top,
        threshold_c=threshold,
        time_above_s=above,
        holds=tuple(holds),
        segments=tuple(segments),
        schedule_done_t=done_t,
        passages=tuple(passages_),
        ranges_not_passed=tuple(not_passed),
        deviation=deviation,
        divergence=tuple(divergence),
        gaps=tuple(Gap(float(a), float(b), r) for a, b, r in inputs.gaps),
        sessions=sessions,
        lines=inputs.lines,
        malformed=inputs.malformed,
        malformed_reasons=tuple(inputs.malformed_reasons),
        alarms=alarms,
        notes=notes,
        samples=dict(inputs.samples),
        digest=inputs.digest,
        chart=chart,
        firewatch_version=inputs.firewatch_version,
    )
