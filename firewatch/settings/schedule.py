"""Firing schedules: named segments (ramp to a target, then hold) and critical ranges (TOML).

A schedule file::

    [schedule]
    name = "Glaze firing"
    units = "C"            # or "F"; every temperature and rate in the file
    start = 20             # assumed starting temperature (default 20 degC)
    fast_rate = 250        # planning assumption for rate = "max" heating, deg/h
    cool_rate = 80         # planning assumption for rate = "max" cooling, deg/h

    [[segment]]
    name = "candling"
    rate = 60              # deg/h; negative cools; "max" = as fast as the kiln can
    target = 120
    hold_min = 30          # optional

    [[critical]]
    name = "quartz inversion"
    low = 550
    high = 600
    max_rate = 100         # deg/h, the fastest allowed through the range
    direction = "both"     # "heating", "cooling" or "both"

Inside, everything is degC and degC per hour. See docs/schedules.md.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from firewatch.settings._tomlcheck import ProfileError, TomlReader, in_range, one_of

__all__ = ["Segment", "CriticalRange", "Schedule", "load_schedule", "check_schedule", "ProfileError"]

FAST = math.inf
"""The rate of a ``max`` segment (as fast as the kiln can)."""


@dataclass(frozen=True)
class Segment:
    """Ramp from the previous target to ``target_c`` at ``rate_c_per_h``, then hold ``hold_s``."""

    name: str
    rate_c_per_h: float
    """Signed: positive heats, negative cools; +/-inf for ``max``."""
    target_c: float
    hold_s: float = 0.0

    @property
    def is_fast(self) -> bool:
        return math.isinf(self.rate_c_per_h)


@dataclass(frozen=True)
class CriticalRange:
    """A temperature range to pass no faster than ``max_rate_c_per_h``."""

    name: str
    low_c: float
    high_c: float
    max_rate_c_per_h: float
    direction: str = "both"

    def applies(self, rate_c_per_h: float) -> bool:
        return self.direction == "both" or (self.direction == "heating") == (rate_c_per_h > 0)


@dataclass(frozen=True)
class Schedule:
    """A validated schedule, in degC."""

    name: str
    segments: tuple[Segment, ...]
    critical: tuple[CriticalRange, ...] = ()
    start_c: float = 20.0
    fast_rate_c_per_h: float = 250.0
    cool_rate_c_per_h: float = 80.0
    units: str = "C"
    path: Path | None = None
    text: str = ""

    def planned_rate(self, index: int) -> float:
        """The rate used for planning segment ``index``, degC/h, signed."""
        seg = self.segments[index]
        if not seg.is_fast:
            return seg.rate_c_per_h
        return self.fast_rate_c_per_h if seg.rate_c_per_h > 0 else -self.cool_rate_c_per_h

    def start_of(self, index: int) -> float:
        return self.start_c if index == 0 else self.segments[index - 1].target_c

    def breakpoints(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """The planned curve: times (s from the start), temperatures (degC) and segment index per point.

        Each segment contributes its ramp end and, with a hold, its hold end.
        """
        times = [0.0]
        temps = [self.start_c]
        index = [0]
        t = 0.0
        for i, seg in enumerate(self.segments):
            start = self.start_of(i)
            rate = self.planned_rate(i)
            t += abs(seg.target_c - start) / abs(rate) * 3600.0
            times.append(t)
            temps.append(seg.target_c)
            index.append(i)
            if seg.hold_s > 0:
                t += seg.hold_s
                times.append(t)
                temps.append(seg.target_c)
                index.append(i)
        return np.array(times), np.array(temps), np.array(index)

    @property
    def planned_duration_s(self) -> float:
        return float(self.breakpoints()[0][-1])

    def planned_temperature(self, elapsed_s: np.ndarray | float) -> np.ndarray:
        """The planned temperature at times from the start (held at the last target afterwards)."""
        times, temps, _ = self.breakpoints()
        return np.interp(np.asarray(elapsed_s, dtype=float), times, temps)

    @property
    def peak_c(self) -> float:
        return max([self.start_c] + [s.target_c for s in self.segments])


_SCHEDULE_KEYS = {"name", "units", "start", "fast_rate", "cool_rate"}
_SEGMENT_KEYS = {"name", "rate", "target", "hold_min"}
_CRITICAL_KEYS = {"name", "low", "high", "max_rate", "direction"}


def _to_c(value: float, units: str) -> float:
    return (value - 32.0) * 5.0 / 9.0 if units == "F" else value


def _rate_to_c(value: float, units: str) -> float:
    return value * 5.0 / 9.0 if units == "F" else value


def _read(reader: TomlReader) -> Schedule | None:
    reader.unknown_keys((), reader.data, {"schedule", "segment", "critical"})
    head = reader.table(("schedule",), required=True)
    reader.unknown_keys(("schedule",), head, _SCHEDULE_KEYS)
    name = reader.get(head, ("schedule",), "name", str, default="unnamed schedule")
    units = reader.get(head, ("schedule",), "units", str, default="C", check=one_of("C", "F"))
    units = units or "C"
    start = _to_c(reader.get(head, ("schedule",), "start", float, default=68.0 if units == "F" else 20.0), units)
    fast = _rate_to_c(reader.get(head, ("schedule",), "fast_rate", float, default=450.0 if units == "F" else 250.0, check=in_range(0.0, lo_open=True)), units)
    cool = _rate_to_c(reader.get(head, ("schedule",), "cool_rate", float, default=144.0 if units == "F" else 80.0, check=in_range(0.0, lo_open=True)), units)
    lowest, highest = (-58.0, 3632.0) if units == "F" else (-50.0, 2000.0)

    segments: list[Segment] = []
    previous = start
    for i, seg in enumerate(reader.tables("segment", required=True)):
        path = ("segment", i)
        reader.unknown_keys(path, seg, _SEGMENT_KEYS)
        seg_name = reader.get(seg, path, "name", str, default=f"segment {i + 1}")
        target_raw = reader.get(seg, path, "target", float, check=in_range(lowest, highest))
        hold = reader.get(seg, path, "hold_min", float, default=0.0, check=lambda v: f"a hold cannot be negative, got {v!r} minutes" if v < 0 else None)
        rate_raw = seg.get("rate")
        if target_raw is None:
            continue
        target = _to_c(target_raw, units)
        rising = target > previous
        if rate_raw == "max":
            rate = FAST if rising else -FAST
        elif isinstance(rate_raw, (int, float)) and not isinstance(rate_raw, bool) and math.isfinite(rate_raw):
            rate = _rate_to_c(float(rate_raw), units)
            if rate == 0:
                reader.problem(path + ("rate",), "a rate of 0 never reaches the target; use a hold")
                continue
            if target == previous:
                reader.problem(path + ("target",), f"target {target_raw:g} equals the previous temperature; use hold_min on the segment before")
                continue
            if rising and rate < 0:
                reader.problem(path + ("rate",), f"{rate_raw:g} cools, but target {target_raw:g} is above the start; use a positive rate to heat")
                continue
            if not rising and rate > 0:
                reader.problem(path + ("rate",), f"{rate_raw:g} heats, but target {target_raw:g} is below the start; use a negative rate to cool")
                continue
        elif rate_raw is None:
            reader.problem(path + ("rate",), "missing: degrees per hour (negative to cool) or \"max\"")
            continue
        else:
            reader.problem(path + ("rate",), f"expected degrees per hour or \"max\", got {rate_raw!r}")
            continue
        segments.append(Segment(seg_name, rate, target, (hold or 0.0) * 60.0))
        previous = target

    critical: list[CriticalRange] = []
    for i, cr in enumerate(reader.tables("critical")):
        path = ("critical", i)
        reader.unknown_keys(path, cr, _CRITICAL_KEYS)
        low = reader.get(cr, path, "low", float)
        high = reader.get(cr, path, "high", float)
        max_rate = reader.get(cr, path, "max_rate", float, check=in_range(0.0, lo_open=True))
        direction = reader.get(cr, path, "direction", str, default="both", check=one_of("heating", "cooling", "both"))
        if low is not None and high is not None and low >= high:
            reader.problem(path + ("high",), f"must be above low ({low:g}), got {high:g}")
            continue
        if None in (low, high, max_rate):
            continue
        critical.append(
            CriticalRange(
                reader.get(cr, path, "name", str, default=f"critical range {i + 1}"),
                _to_c(low, units), _to_c(high, units), _rate_to_c(max_rate, units), direction,
            )
        )
        for j, seg in enumerate(segments):
            lo_t, hi_t = sorted((segments[j - 1].target_c if j else start, seg.target_c))
            crosses = lo_t < _to_c(high, units) and hi_t > _to_c(low, units)
            if crosses and not seg.is_fast and abs(seg.rate_c_per_h) > _rate_to_c(max_rate, units) and critical[-1].applies(seg.rate_c_per_h):
                reader.problem(
                    ("segment", j, "rate"),
                    f"{abs(seg.rate_c_per_h):g} degC/h passes through {critical[-1].name} ({low:g}-{high:g}) faster than its max_rate {max_rate:g}",
                )

    if reader.problems:
        return None
    return Schedule(name, tuple(segments), tuple(critical), start, fast, cool, units, reader.path, reader.text)


def check_schedule(reader: TomlReader) -> Schedule | None:
    """Validate an already-parsed schedule; problems land in ``reader.problems``."""
    return _read(reader)


def load_schedule(path: str | Path, text: str | None = None) -> Schedule:
    """Load and validate a schedule file, raising :class:`ProfileError` with every problem."""
    reader = TomlReader(path, text)
    schedule = _read(reader)
    reader.raise_if_problems()
    assert schedule is not None
    return schedule
