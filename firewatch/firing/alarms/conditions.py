"""The alarm conditions: each turns a batch's arrays into the alarms it raises and clears.

A condition never touches an alarm: it returns :class:`Raise` and
:class:`Clear` changes in time order, and the engine
(:mod:`~firewatch.firing.alarms.engine`) applies them through the ISA-18.2
lifecycle. Conditions are evaluated on whole arrays; :class:`Debounce`
times them run by run (a condition must hold ``on_s`` to raise, its
lower, hysteresis threshold ``off_s`` to clear), so only state changes go
through Python one at a time.

=================== ==========================================================
condition           raises
=================== ==========================================================
:class:`LineNoise`  sensor-fault on the line: many malformed lines
:class:`Silence`    no-data: no readings from the line (gaps, silence)
:class:`SensorFaults` sensor-fault per channel (open, out of range, device
                    error, frozen, pyrometer below range or saturated) and
                    no-data for a channel missing from the lines
:class:`Divergence` divergence, with its likely cause
:class:`OverTemperature` over-temperature
:class:`ScheduleDeviation` schedule-deviation
:class:`RateLimit`  rate-limit through a schedule's critical range
=================== ==========================================================
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np

from firewatch.firing.alarms.causes import evidence_number
from firewatch.settings.profile import AlarmSettings, SiteProfile
from firewatch.settings.schedule import CriticalRange, Schedule
from firewatch.transport.records import Status

__all__ = [
    "Key",
    "Raise",
    "Clear",
    "Change",
    "Debounce",
    "Debounces",
    "LineNoise",
    "Silence",
    "SensorFaults",
    "Divergence",
    "OverTemperature",
    "ScheduleDeviation",
    "RateLimit",
]

Key = tuple[str, str | None]
"""An alarm's identity: its kind and its channel (or sub-key), None for the whole kiln."""


@dataclass(frozen=True)
class Raise:
    """The condition of ``(kind, channel)`` holds from ``t``."""

    kind: str
    channel: str | None
    t: float
    message: str
    priority: str
    cause: str | None = None
    evidence: dict[str, Any] | None = None


@dataclass(frozen=True)
class Clear:
    """The condition of ``(kind, channel)`` has cleared at ``t``."""

    kind: str
    channel: str | None
    t: float
    detail: str


Change = Raise | Clear


@dataclass
class Debounce:
    """Raise after ``bad`` holds for ``on_s``; clear after ``clear`` holds for ``off_s``.

    Where neither holds (a value missing), the state stays as it is. Arrays
    are processed run by run, not reading by reading.
    """

    on_s: float
    off_s: float = 0.0
    active: bool = False
    _since: float | None = None

    def process(self, t: np.ndarray, bad: np.ndarray, clear: np.ndarray) -> list[tuple[float, bool]]:
        """Edges as ``(time, now_active)``."""
        edges: list[tuple[float, bool]] = []
        if t.size == 0:
            return edges
        if not (clear if self.active else bad).any():
            # the usual batch: nothing that could start the change (the loop below would forget any start, no edge)
            self._since = None
            return edges
        code = bad.astype(np.int8) * 2 + clear.astype(np.int8)
        starts = np.concatenate([[0], np.flatnonzero(np.diff(code)) + 1])
        ends = np.concatenate([starts[1:], [t.size]])
        for s, e in zip(starts.tolist(), ends.tolist()):
            c = int(code[s])
            i = s
            while i < e:
                want = (c & 1) if self.active else (c >> 1)
                if not want:
                    self._since = None
                    break
                if self._since is None:
                    self._since = float(t[i])
                due = self._since + (self.off_s if self.active else self.on_s)
                j = i + int(np.searchsorted(t[i:e], due, side="left"))
                if j >= e:
                    break
                edges.append((float(t[j]), not self.active))
                self.active = not self.active
                self._since = None
                i = j
        return edges


class Debounces:
    """One :class:`Debounce` per alarm key, made on first use; a key restored open starts active."""

    def __init__(self) -> None:
        self._by_key: dict[Key, Debounce] = {}
        self.restored: set[Key] = set()

    def run(self, key: Key, times: np.ndarray, bad: np.ndarray, clear: np.ndarray, on_s: float, off_s: float,
            raise_at: Callable[[float], Raise], clear_detail: str) -> list[Change]:
        """Debounce ``bad``/``clear`` for ``key``: a :class:`Raise` from ``raise_at(t)`` at each rising edge, a :class:`Clear` at each falling one."""
        deb = self._by_key.get(key)
        if deb is None:
            deb = self._by_key[key] = Debounce(on_s, off_s, active=key in self.restored)
        return [raise_at(t) if active else Clear(key[0], key[1], t, clear_detail) for t, active in deb.process(times, bad, clear)]


class LineNoise:
    """sensor-fault on the line when over 20 % of the last 60 s of lines were malformed; clears below 5 %."""

    WINDOW_S = 60.0
    MIN_LINES = 20
    RAISE_ABOVE = 0.2
    CLEAR_BELOW = 0.05

    def __init__(self) -> None:
        self._bad_lines = np.empty(0)
        self._good_lines = np.empty(0)

    def check(self, malformed: np.ndarray, times: np.ndarray, is_open: bool) -> list[Change]:
        """Judge the line at each second of the batch; ``is_open``: the line-noise alarm is open now."""
        out: list[Change] = []
        ends = np.concatenate([malformed, times])
        if not ends.size:
            return out
        # the good lines of the last minute are kept even on a clean line, so that the first malformed line is
        # counted against the whole window however the lines were batched (issue 15: replay and recorder alike)
        self._bad_lines = np.sort(np.concatenate([self._bad_lines, malformed]))
        self._good_lines = np.sort(np.concatenate([self._good_lines, times]))
        latest = float(ends.max())
        if self._bad_lines.size == 0 and not is_open:
            self._good_lines = self._good_lines[self._good_lines > latest - self.WINDOW_S]
            return out  # a clean line: nothing to judge
        # judged at the end of every second a line came in, whatever the batch; the counts of each window by
        # bisection, all at once
        now = np.unique(np.floor(ends)) + 1.0
        bad = np.searchsorted(self._bad_lines, now, side="right") - np.searchsorted(self._bad_lines, now - self.WINDOW_S, side="right")
        good = np.searchsorted(self._good_lines, now, side="right") - np.searchsorted(self._good_lines, now - self.WINDOW_S, side="right")
        total = bad + good
        judged = total >= self.MIN_LINES
        share = np.where(judged, bad / np.maximum(total, 1), 0.0)
        for i in np.flatnonzero(judged & ((share > self.RAISE_ABOVE) | (share < self.CLEAR_BELOW))).tolist():
            bad_n, lines, at = int(bad[i]), int(total[i]), float(now[i])
            if share[i] > self.RAISE_ABOVE:
                out.append(Raise("sensor-fault", None, at, f"{bad_n} of the last {lines} lines malformed (line noise)", "medium",
                                 cause="line-noise", evidence={"malformed": bad_n, "lines": lines}))
            else:
                out.append(Clear("sensor-fault", None, at, "the line is clean again"))
        self._bad_lines = self._bad_lines[self._bad_lines > latest - self.WINDOW_S]
        self._good_lines = self._good_lines[self._good_lines > latest - self.WINDOW_S]
        return out


class Silence:
    """no-data for the whole line: a gap of ``no_data_s`` between readings, or no reading since."""

    def __init__(self, settings: AlarmSettings) -> None:
        self.settings = settings
        self.last_sample_t: float | None = None

    def _raise(self, t: float) -> Raise:
        return Raise("no-data", None, t, f"no readings from the line for {self.settings.no_data_s:.0f} s", "high")

    def gaps(self, times: np.ndarray) -> list[Change]:
        """The gaps before and inside a batch (``times`` not empty); remembers its last reading."""
        no_data_s = self.settings.no_data_s
        out: list[Change] = []
        first = float(times[0])
        if self.last_sample_t is not None and first - self.last_sample_t >= no_data_s:
            out.append(self._raise(self.last_sample_t + no_data_s))
        steps = np.diff(times)
        for i in np.flatnonzero(steps >= no_data_s):
            out.append(self._raise(float(times[i]) + no_data_s))
            out.append(Clear("no-data", None, float(times[i + 1]), "readings again"))
        out.append(Clear("no-data", None, first, "readings again"))
        self.last_sample_t = float(times[-1])
        return out

    def silence(self, now: float) -> list[Change]:
        """Nothing since the last reading for ``no_data_s`` at ``now``."""
        if self.last_sample_t is not None and now - self.last_sample_t >= self.settings.no_data_s:
            return [self._raise(self.last_sample_t + self.settings.no_data_s)]
        return []


def _fault(name: str, cause: str, what: str, priority: str) -> Callable[[float], Raise]:
    """How a sensor-fault of ``name`` with ``cause`` is raised at a time."""

    def raise_at(t: float) -> Raise:
        return Raise("sensor-fault", f"{name}:{cause}", t, f"{name}: {what}", priority, cause=cause)

    return raise_at


class SensorFaults:
    """sensor-fault per channel, and no-data for a channel missing from the lines while others arrive."""

    #: thermocouple status codes: (status, cause, what the operator reads)
    THERMOCOUPLE_CODES = (
        (Status.OPEN, "open-circuit", "thermocouple open"),
        (Status.OUT_OF_RANGE, "out-of-range", "reading outside the type's range"),
        (Status.ERROR, "device-error", "device error or failed signal (no answer, a 4-20 mA loop outside NAMUR NE 43's range, or no cold junction)"),
    )
    CODE_ON_S, CODE_OFF_S = 5.0, 30.0
    RANGE_ON_S, RANGE_OFF_S = 60.0, 60.0
    RANGE_MARGIN_C = 50.0
    """A pyrometer below range (saturated) is a fault only when the thermocouples read this far inside its range."""
    MISSING_OFF_S = 5.0

    def __init__(self, site: SiteProfile, debounces: Debounces) -> None:
        self.site = site
        self.settings = site.alarms
        self.debounces = debounces
        self._last_change: dict[str, tuple[float, float]] = {}

    def thermocouple(self, name: str, times: np.ndarray, value: np.ndarray, status: np.ndarray) -> list[Change]:
        """Open circuit, out of range, device error, a frozen value, a missing channel."""
        out: list[Change] = []
        tc = self.site.thermocouple(name)
        prio = "high" if tc is not None and tc.role in ("control", "reference") else "medium"
        for code, cause, what in self.THERMOCOUPLE_CODES:
            out += self.debounces.run(("sensor-fault", f"{name}:{cause}"), times, status == code, status == Status.OK,
                                      self.CODE_ON_S, self.CODE_OFF_S, _fault(name, cause, what, prio), "reading again")
        out += self.frozen(name, times, value)
        out += self.missing(name, times, status)
        return out

    def pyrometer(self, name: str, times: np.ndarray, status: np.ndarray, reference: np.ndarray | None) -> list[Change]:
        """A failed signal; below range or saturated while the thermocouples (``reference``, degC) say it should read; a missing channel."""
        out: list[Change] = []
        py = self.site.pyrometer(name)
        # a failed signal: a device error, no answer, or a 4-20 mA loop outside NAMUR NE 43's range
        out += self.debounces.run(("sensor-fault", f"{name}:signal-failure"), times, status == Status.ERROR, status == Status.OK,
                                  self.CODE_ON_S, self.CODE_OFF_S,
                                  _fault(name, "signal-failure", "signal failed (a device error, no answer, or a 4-20 mA loop outside NAMUR NE 43's range)",
                                         "medium"), "reading again")
        if py is not None and reference is not None and math.isfinite(py.range_c[0]):
            lo, hi = py.range_c
            under_bad = (status == Status.UNDER) & (reference > lo + self.RANGE_MARGIN_C)
            over_bad = (status == Status.OVER) & (reference < hi - self.RANGE_MARGIN_C)
            for bad, cause, what in ((under_bad, "below-range", "reads below its range while the thermocouples say it should not"),
                                     (over_bad, "saturated", "saturated while the thermocouples read well inside its range")):
                out += self.debounces.run(("sensor-fault", f"{name}:{cause}"), times, bad, status == Status.OK,
                                          self.RANGE_ON_S, self.RANGE_OFF_S, _fault(name, cause, what, "medium"), "reading again")
        out += self.missing(name, times, status)
        return out

    def missing(self, name: str, times: np.ndarray, status: np.ndarray) -> list[Change]:
        """no-data for one channel: no value in the lines for ``no_data_s``."""
        no_data_s = self.settings.no_data_s
        missing = status == Status.MISSING

        def raise_at(t: float) -> Raise:
            return Raise("no-data", name, t, f"{name}: no value in the lines for {no_data_s:.0f} s", "medium")

        return self.debounces.run(("no-data", name), times, missing, ~missing, no_data_s, self.MISSING_OFF_S, raise_at, "values again")

    def frozen(self, name: str, times: np.ndarray, value: np.ndarray) -> list[Change]:
        """sensor-fault when a value stays exactly the same for ``frozen_s`` (a stuck converter)."""
        frozen_s = self.settings.frozen_s
        ok = np.isfinite(value)
        if not ok.any():
            return []
        last_t, last_v = self._last_change.get(name, (float(times[ok][0]), float(value[ok][0])))
        changed = np.flatnonzero(ok & (value != last_v) & np.concatenate([[True], np.diff(value) != 0]))
        frozen_since = last_t
        if changed.size:
            idx = changed[-1]
            frozen_since = float(times[idx])
            self._last_change[name] = (frozen_since, float(value[idx]))
        else:
            self._last_change[name] = (last_t, last_v)
        now = float(times[ok][-1])  # a value that then goes missing is missing, not frozen (issue 13)
        if now - frozen_since >= frozen_s:
            return [Raise("sensor-fault", f"{name}:frozen", frozen_since + frozen_s, f"{name}: value unchanged for {frozen_s:.0f} s",
                          "medium", cause="frozen")]
        if changed.size:
            return [Clear("sensor-fault", f"{name}:frozen", float(times[changed[-1]]), "changing again")]
        return []


class Divergence:
    """divergence: |reconciled pyrometer - reference| above the allowance for the debounce time; clears below clear_k/k of it.

    Parameters
    ----------
    cause_of : callable(name, t) -> (cause, evidence)
        The likely cause, asked when the alarm is raised.
    """

    OFF_S = 60.0

    def __init__(self, site: SiteProfile, debounces: Debounces, cause_of: Callable[[str, float], tuple[str, dict[str, Any]]]) -> None:
        self.site = site
        self.settings = site.alarms
        self.debounces = debounces
        self.cause_of = cause_of

    def check(self, name: str, times: np.ndarray, values: dict[str, np.ndarray]) -> list[Change]:
        s = self.settings
        div = values[f"{name}.divergence"]
        allowed = values[f"{name}.allowed"]
        py = self.site.pyrometer(name)
        reference = py.reference if py is not None else None
        with np.errstate(invalid="ignore"):
            bad = np.abs(div) > allowed
            clear = np.abs(div) < allowed * (s.divergence_clear_k / s.divergence_k)

        def raise_at(t: float) -> Raise:
            i = min(int(np.searchsorted(times, t)), times.size - 1)
            cause, evidence = self.cause_of(name, t)
            evidence.update({"divergence_k": evidence_number(div[i]), "allowed_k": evidence_number(allowed[i])})
            return Raise("divergence", name, t, f"{name} {div[i]:+.1f} K from {reference} (allowed ±{allowed[i]:.1f} K)",
                         "medium", cause=cause, evidence=evidence)

        return self.debounces.run(("divergence", name), times, bad, clear, s.divergence_debounce_s, self.OFF_S, raise_at,
                                  "within the combined uncertainty")


class OverTemperature:
    """over-temperature: the hottest thermocouple or reconciled pyrometer above ``over_temperature_c``."""

    ON_S, OFF_S = 10.0, 30.0
    HYSTERESIS_K = 5.0

    def __init__(self, site: SiteProfile, debounces: Debounces) -> None:
        self.site = site
        self.settings = site.alarms
        self.debounces = debounces

    def check(self, times: np.ndarray, values: dict[str, np.ndarray]) -> list[Change]:
        limit = self.settings.over_temperature_c
        if limit is None:
            return []
        names = [tc.name for tc in self.site.thermocouples] + [f"{p.name}.reconciled" for p in self.site.pyrometers]
        stack = np.vstack([values[n] for n in names])
        known = np.where(np.isfinite(stack), stack, -np.inf)
        hottest = known.max(axis=0)
        bad = hottest > limit
        clear = hottest < limit - self.HYSTERESIS_K

        def raise_at(t: float) -> Raise:
            # the hottest channel's name only where an alarm is raised, not a name per reading (issue 15)
            i = int(np.searchsorted(times, t))
            which = names[int(np.argmax(known[:, i]))] if i < times.size else ""
            return Raise("over-temperature", None, t, f"above {limit:g} °C ({which})", "high")

        return self.debounces.run(("over-temperature", None), times, bad, clear, self.ON_S, self.OFF_S, raise_at,
                                  f"below {limit - self.HYSTERESIS_K:g} °C")


def _temperature_and_rate(site: SiteProfile, times: np.ndarray, values: dict[str, np.ndarray]) -> tuple[np.ndarray, np.ndarray]:
    """The control thermocouple's temperature and rate (NaN without one)."""
    ctl = site.control
    temp = values[ctl.name] if ctl else np.full(times.size, np.nan)
    rate = values[f"{ctl.name}.rate"] if ctl else np.full(times.size, np.nan)
    return temp, rate


class ScheduleDeviation:
    """schedule-deviation: temperature off the segment's plan by more than ``deviation_c``, or the rate off plan.

    The rate is judged only during ramps, once the trailing rate window has
    settled after the segment began, and away from the target.
    """

    OFF_S = 120.0
    SETTLE_S = 120.0
    """Beyond the rate window, time after a segment begins before its rate is judged."""
    NEAR_TARGET_C = 15.0
    RATE_TOLERANCE = 0.25
    """The rate may be off plan by this fraction of the planned rate ..."""
    RATE_TOLERANCE_MIN_C_PER_H = 15.0
    """... or by this, whichever is larger."""

    def __init__(self, site: SiteProfile, schedule: Schedule, debounces: Debounces) -> None:
        self.site = site
        self.settings = site.alarms
        self.schedule = schedule
        self.debounces = debounces
        self._seg_entry: tuple[int, float] | None = None

    def check(self, times: np.ndarray, values: dict[str, np.ndarray]) -> list[Change]:
        s = self.settings
        sched = self.schedule
        seg = values["plan.segment"]
        dev = values["plan.deviation"]
        hold = values["plan.hold"]
        temp, rate = _temperature_and_rate(self.site, times, values)
        # time since each reading's segment began (suppresses the rate check while the trailing window settles)
        n_seg = len(sched.segments)
        valid = np.isfinite(seg)
        since = np.full(times.size, np.inf)
        segv = np.where(valid, seg, -1.0)
        change = np.flatnonzero(valid & np.concatenate([[True], segv[1:] != segv[:-1]]))
        before = self._seg_entry  # the segment the batch opens in, entered in an earlier batch
        entry_t = np.full(times.size, np.nan)
        for i in change:  # one pass per segment change, not per reading
            if self._seg_entry is None or self._seg_entry[0] != int(seg[i]):
                self._seg_entry = (int(seg[i]), float(times[i]))
            entry_t[i] = self._seg_entry[1]
        if change.size:
            idx = np.where(np.isfinite(entry_t), np.arange(times.size), 0)
            np.maximum.accumulate(idx, out=idx)
            since = np.where(valid & (np.arange(times.size) >= change[0]), times - entry_t[idx], np.inf)
        if before is not None:
            head = np.arange(times.size) < (change[0] if change.size else times.size)
            since = np.where(head & valid, times - before[1], since)
        seg_rates = np.array([sg.rate_c_per_h for sg in sched.segments] + [np.nan])
        seg_targets = np.array([sg.target_c for sg in sched.segments] + [np.nan])
        index = np.where(valid, np.clip(np.nan_to_num(seg, nan=n_seg), 0, n_seg), n_seg).astype(int)
        planned = seg_rates[index]
        target = seg_targets[index]
        fast = ~np.isfinite(planned)
        ramping = ~np.isfinite(hold) & np.isfinite(seg) & (seg < n_seg)
        settle = since > s.rate_window_s + self.SETTLE_S
        near_target = np.abs(temp - target) < self.NEAR_TARGET_C
        tol = np.maximum(self.RATE_TOLERANCE * np.abs(planned), self.RATE_TOLERANCE_MIN_C_PER_H)
        with np.errstate(invalid="ignore"):
            off_temp = (np.abs(dev) > s.deviation_c) & ~fast
            rate_off = ramping & ~fast & settle & ~near_target & (np.abs(rate - planned) > tol)
            bad = off_temp | rate_off
            clear = (np.abs(dev) < 0.5 * s.deviation_c) & ~rate_off | (seg >= n_seg) | fast
        bad = np.where(np.isfinite(dev) | rate_off, bad, False)

        def raise_at(t: float) -> Raise:
            i = min(int(np.searchsorted(times, t)), times.size - 1)
            sg = int(seg[i]) if math.isfinite(seg[i]) else 0
            name = sched.segments[min(sg, n_seg - 1)].name
            if rate_off[i] and not off_temp[i]:
                msg = f"segment '{name}': rate {rate[i]:.0f} °C/h against a planned {planned[i]:.0f} °C/h"
            else:
                msg = f"segment '{name}': {dev[i]:+.0f} K off the plan"
            return Raise("schedule-deviation", None, t, msg, "low",
                         evidence={"segment": sg, "deviation_k": evidence_number(dev[i]), "rate_c_per_h": evidence_number(rate[i]),
                                   "planned_c_per_h": evidence_number(planned[i])})

        return self.debounces.run(("schedule-deviation", None), times, bad, clear, s.deviation_debounce_s, self.OFF_S, raise_at,
                                  "back on plan")


class RateLimit:
    """rate-limit: faster than a critical range's ``max_rate`` while inside the range, in its direction."""

    ON_S, OFF_S = 120.0, 60.0

    def __init__(self, site: SiteProfile, schedule: Schedule, debounces: Debounces) -> None:
        self.site = site
        self.schedule = schedule
        self.debounces = debounces

    def check(self, times: np.ndarray, values: dict[str, np.ndarray]) -> list[Change]:
        temp, rate = _temperature_and_rate(self.site, times, values)
        out: list[Change] = []
        for cr in self.schedule.critical:
            with np.errstate(invalid="ignore"):
                inside = (temp >= cr.low_c) & (temp <= cr.high_c)
                applies = np.where(rate > 0, cr.direction in ("heating", "both"), cr.direction in ("cooling", "both"))
                too_fast = inside & applies & (np.abs(rate) > cr.max_rate_c_per_h)
                ok = ~inside | (np.abs(rate) <= cr.max_rate_c_per_h)

            def raise_at(t: float, c: CriticalRange = cr) -> Raise:
                return Raise("rate-limit", c.name, t, f"faster than {c.max_rate_c_per_h:g} °C/h through {c.name} ({c.low_c:g}-{c.high_c:g} °C)",
                             "medium", evidence={"max_rate_c_per_h": c.max_rate_c_per_h})

            out += self.debounces.run(("rate-limit", cr.name), times, too_fast, ok, self.ON_S, self.OFF_S, raise_at, "within the rate limit")
        return out
