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
from typing import Any

import numpy as np

from firewatch.settings._tomlcheck import (
    Field,
    ProfileError,
    TomlReader,
    in_range,
    one_of,
    temperature_range,
)

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
        return np.asarray(np.interp(np.asarray(elapsed_s, dtype=float), times, temps), dtype=float)

    @property
    def peak_c(self) -> float:
        return max([self.start_c] + [s.target_c for s in self.segments])


# -- the tables, key by key ------------------------------------------------------------------
# Temperatures and rates are written in the file's units and converted to degC by the reader
# (Field.quantity, through settings.units); defaults are degC. The key tables in
# docs/schedules.md are written from these lists (python -m firewatch.settings.keydocs).

LOWEST_C, HIGHEST_C = -50.0, 2000.0
"""The targets a schedule may name, degC."""
UNITS = ("C", "F")


def _hold(value: float) -> str | None:
    return f"a hold cannot be negative, got {value!r} minutes" if value < 0 else None


def _rate(value: Any) -> str | None:
    if value == "max":
        return None
    if isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(value):
        return "a rate of 0 never reaches the target; use a hold" if value == 0 else None
    return f"expected degrees per hour or \"max\", got {value!r}"


def _rate_value(value: Any) -> Any:
    return value if value == "max" else float(value)


TOP_LEVEL = ("schedule", "segment", "critical")
"""The tables a schedule may have."""

UNITS_FIELD = Field("units", str, "C", one_of(*UNITS), help="`C` or `F`: every temperature and rate in the file")
SCHEDULE_FIELDS = (
    Field("name", str, "unnamed schedule", help="what the firing is"),
    UNITS_FIELD,
    Field("start", float, 20.0, quantity="temperature", shown_default="20 °C (68 °F)", help="the assumed starting temperature"),
    Field("fast_rate", float, 250.0, in_range(0.0, lo_open=True), quantity="rate", shown_default="250 °C/h (450 °F/h)",
          help="planning assumption for `rate = \"max\"` when heating, degrees per hour"),
    Field("cool_rate", float, 80.0, in_range(0.0, lo_open=True), quantity="rate", shown_default="80 °C/h (144 °F/h)",
          help="planning assumption for `rate = \"max\"` when cooling, degrees per hour"),
)
"""``[schedule]``: the firing as a whole."""


def segment_fields(units: str = "C") -> tuple[Field, ...]:
    """``[[segment]]``: one ramp and its hold, for a file in ``units`` (the target's range speaks them)."""
    return (
        Field("name", str, None, shown_default="segment N", help="what the segment does"),
        Field("rate", None, check=_rate, convert=_rate_value, quantity="rate", missing="degrees per hour (negative to cool) or \"max\"",
              help="degrees per hour, negative to cool; `\"max\"`: as fast as the kiln can (cooling: power off)"),
        Field("target", float, check=temperature_range(LOWEST_C, HIGHEST_C, units), quantity="temperature",
              help=f"the temperature the ramp ends at ({LOWEST_C:g} to {HIGHEST_C:g} °C)"),
        Field("hold_min", float, 0.0, _hold, help="minutes held at the target"),
    )


CRITICAL_FIELDS = (
    Field("name", str, None, shown_default="critical range N", help="what happens in the range (e.g. quartz inversion)"),
    Field("low", float, quantity="temperature", help="the range's lower end"),
    Field("high", float, quantity="temperature", help="its upper end"),
    Field("max_rate", float, check=in_range(0.0, lo_open=True), quantity="rate", help="the fastest allowed through the range, degrees per hour"),
    Field("direction", str, "both", one_of("heating", "cooling", "both"), help="`heating`, `cooling` or `both`"),
)
"""``[[critical]]``: a range to pass no faster than ``max_rate``."""

TABLES: dict[str, tuple[Field, ...]] = {
    "schedule": SCHEDULE_FIELDS,
    "[segment]": segment_fields(),
    "[critical]": CRITICAL_FIELDS,
}
"""Every table of a schedule and its fields, as the docs name them (``[x]`` for ``[[x]]``)."""


def _read(reader: TomlReader) -> Schedule | None:
    reader.unknown_keys((), reader.data, TOP_LEVEL)
    head_table = reader.table(("schedule",), required=True)
    units = reader.value(head_table, ("schedule",), UNITS_FIELD) or "C"  # read first: the other values are in these units
    head = reader.read(head_table, ("schedule",), SCHEDULE_FIELDS, units)
    start = head["start"]

    segments: list[Segment] = []
    previous = start
    for i, table in enumerate(reader.tables("segment", required=True)):
        path = ("segment", i)
        v = reader.read(table, path, segment_fields(units), units)
        target, rate = v["target"], v["rate"]
        if target is None or rate is None:
            continue
        rising = target > previous
        if rate == "max":
            rate = FAST if rising else -FAST
        else:
            rate_raw, target_raw = table["rate"], table["target"]
            if target == previous:
                reader.problem(path + ("target",), f"target {target_raw:g} equals the previous temperature; use hold_min on the segment before")
                continue
            if rising and rate < 0:
                reader.problem(path + ("rate",), f"{rate_raw:g} cools, but target {target_raw:g} is above the start; use a positive rate to heat")
                continue
            if not rising and rate > 0:
                reader.problem(path + ("rate",), f"{rate_raw:g} heats, but target {target_raw:g} is below the start; use a negative rate to cool")
                continue
        segments.append(Segment(v["name"] if v["name"] is not None else f"segment {i + 1}", rate, target, (v["hold_min"] or 0.0) * 60.0))
        previous = target

    critical: list[CriticalRange] = []
    for i, table in enumerate(reader.tables("critical")):
        path = ("critical", i)
        v = reader.read(table, path, CRITICAL_FIELDS, units)
        if v["low"] is not None and v["high"] is not None and v["low"] >= v["high"]:
            reader.problem(path + ("high",), f"must be above low ({table['low']:g}), got {table['high']:g}")
            continue
        if None in (v["low"], v["high"], v["max_rate"]):
            continue
        cr = CriticalRange(v["name"] if v["name"] is not None else f"critical range {i + 1}", v["low"], v["high"], v["max_rate"], v["direction"])
        critical.append(cr)
        for j, seg in enumerate(segments):
            lo_t, hi_t = sorted((segments[j - 1].target_c if j else start, seg.target_c))
            crosses = lo_t < cr.high_c and hi_t > cr.low_c
            if crosses and not seg.is_fast and abs(seg.rate_c_per_h) > cr.max_rate_c_per_h and cr.applies(seg.rate_c_per_h):
                reader.problem(
                    ("segment", j, "rate"),
                    f"{abs(seg.rate_c_per_h):g} degC/h passes through {cr.name} ({table['low']:g}-{table['high']:g}) "
                    f"faster than its max_rate {table['max_rate']:g}",
                )

    if reader.problems:
        return None
    return Schedule(name=head["name"], segments=tuple(segments), critical=tuple(critical), start_c=start, fast_rate_c_per_h=head["fast_rate"],
                    cool_rate_c_per_h=head["cool_rate"], units=units, path=reader.path, text=reader.text)


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
