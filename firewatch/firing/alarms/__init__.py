"""The alarm engine: conditions, debouncing, the ISA-18.2 lifecycle, and the likely cause of a divergence.

Kinds
-----
=================== ========================================================== =========
kind                condition                                                  priority
=================== ========================================================== =========
divergence          |reconciled pyrometer - reference thermocouple| above k x  medium
                    the combined standard uncertainty for the debounce time;
                    clears below clear_k x
schedule-deviation  temperature off the segment's plan by more than            low
                    deviation_c, or the rate off plan, for deviation_debounce_s
over-temperature    any temperature above over_temperature_c                   high
rate-limit          faster than a critical range's max_rate inside the range   medium
sensor-fault        thermocouple open; reading out of range; value frozen;     high/med.
                    a device error or failed signal (no answer, a 4-20 mA
                    loop outside NAMUR NE 43's range); pyrometer below range
                    or saturated when the thermocouples say it should read;
                    line noise (many malformed lines)
no-data             no readings from the line, or a channel missing            high/med.
=================== ========================================================== =========

Lifecycle (ISA-18.2 alarm states)
---------------------------------
``normal`` -> ``active-unacknowledged`` (raised) -> ``active-acknowledged``
(acknowledge) -> ``normal`` (cleared). Cleared while unacknowledged:
``returned-unacknowledged``, then ``normal`` on acknowledge. A *latching*
kind that clears stays ``latched`` until acknowledged. ``shelved`` (with a
reason and an expiry) hides an alarm; at expiry it returns to
``active-unacknowledged`` if its condition still holds, else ``normal``.
Each transition is a :class:`Transition` with its time, written to the
firing log's ``alarm_state`` table.

Likely cause of a divergence
----------------------------
Decided at the moment the alarm is raised from the last hour of history
(10 s means), with the evidence kept beside it:

* ``thermocouple-lag``: the divergence follows the rate of change (a
  straight-line fit explains most of it) and was small in holds;
* ``emissivity-change``: the single-band divergence moved in a step (most
  of its change within ten minutes) while a ratio pyrometer, where there
  is one, did not;
* ``window-attenuation``: the single-band pyrometer reads steadily lower
  while the ratio pyrometer holds, or, without one, while the thermocouples
  agree with each other;
* ``thermocouple-drift``: the reference thermocouple departs slowly from
  both pyrometers alike, or from another thermocouple;
* ``unknown`` when the evidence does not decide.
"""

from __future__ import annotations

import json
import math
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from firewatch.settings.profile import SiteProfile
from firewatch.settings.schedule import Schedule
from firewatch.transport.records import Status

__all__ = [
    "KINDS",
    "CAUSES",
    "STATES",
    "Alarm",
    "Transition",
    "AlarmEngine",
    "Debounce",
    "History",
]

KINDS = ("divergence", "schedule-deviation", "over-temperature", "rate-limit", "sensor-fault", "no-data")
CAUSES = ("window-attenuation", "thermocouple-drift", "emissivity-change", "thermocouple-lag", "unknown")
STATES = (
    "normal",
    "active-unacknowledged",
    "active-acknowledged",
    "returned-unacknowledged",
    "latched",
    "shelved",
)
PRIORITY_ORDER = {"high": 0, "medium": 1, "low": 2}


@dataclass
class Alarm:
    """One alarm instance: raised once, then through its states until normal."""

    id: int
    kind: str
    channel: str | None
    priority: str
    raised_t: float
    message: str
    cause: str | None = None
    evidence: dict[str, Any] | None = None
    state: str = "active-unacknowledged"
    cleared_t: float | None = None
    condition: bool = True
    latching: bool = False
    shelved_until: float | None = None
    shelve_reason: str = ""

    @property
    def key(self) -> tuple[str, str | None]:
        return (self.kind, self.channel)

    @property
    def channel_name(self) -> str | None:
        """The channel without the sensor-fault's sub-key (``tc2:open-circuit`` -> ``tc2``)."""
        return None if self.channel is None else self.channel.split(":", 1)[0]

    @property
    def annunciated(self) -> bool:
        """Shown to the operator as needing attention."""
        return self.state in ("active-unacknowledged", "returned-unacknowledged", "latched")

    @property
    def open(self) -> bool:
        return self.state != "normal"


@dataclass(frozen=True)
class Transition:
    """A logged change of an alarm's state."""

    alarm: Alarm
    t: float
    state: str
    detail: str
    new: bool = False


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


class History:
    """10-second means of chosen channels over the last two hours, for the cause of a divergence."""

    BIN_S = 10.0
    KEEP_S = 7200.0

    def __init__(self, names: list[str]) -> None:
        self.names = names
        self.t = np.empty(0)
        self.v = {n: np.empty(0) for n in names}
        self._bin: float | None = None
        self._open_sum: dict[str, float] = {}
        self._open_count: dict[str, float] = {}

    def add(self, times: np.ndarray, values: dict[str, np.ndarray]) -> None:
        """Add a batch; each completed 10 s bin becomes one mean per channel (vectorised with reduceat)."""
        if times.size == 0:
            return
        bins = np.floor(times / self.BIN_S)
        starts = np.concatenate([[0], np.flatnonzero(np.diff(bins)) + 1])
        bin_ids = bins[starts]
        sums: dict[str, np.ndarray] = {}
        counts: dict[str, np.ndarray] = {}
        for n in self.names:
            col = values.get(n)
            if col is None:
                col = np.full(times.size, np.nan)
            ok = np.isfinite(col)
            sums[n] = np.add.reduceat(np.where(ok, col, 0.0), starts)
            counts[n] = np.add.reduceat(ok.astype(float), starts)
        # merge the bin left open by the previous batch
        if self._bin is not None and bin_ids[0] == self._bin:
            for n in self.names:
                sums[n][0] += self._open_sum[n]
                counts[n][0] += self._open_count[n]
        elif self._bin is not None:
            bin_ids = np.concatenate([[self._bin], bin_ids])
            for n in self.names:
                sums[n] = np.concatenate([[self._open_sum[n]], sums[n]])
                counts[n] = np.concatenate([[self._open_count[n]], counts[n]])
        # the last bin stays open for the next batch
        self._bin = float(bin_ids[-1])
        self._open_sum = {n: float(sums[n][-1]) for n in self.names}
        self._open_count = {n: float(counts[n][-1]) for n in self.names}
        done = bin_ids[:-1]
        if done.size == 0:
            return
        self.t = np.concatenate([self.t, (done + 0.5) * self.BIN_S])
        for n in self.names:
            with np.errstate(invalid="ignore", divide="ignore"):
                mean = sums[n][:-1] / counts[n][:-1]
            self.v[n] = np.concatenate([self.v[n], np.where(counts[n][:-1] > 0, mean, np.nan)])
        keep = self.t >= self.t[-1] - self.KEEP_S
        self.t = self.t[keep]
        for n in self.names:
            self.v[n] = self.v[n][keep]

    def window(self, end_t: float, span_s: float) -> tuple[np.ndarray, dict[str, np.ndarray]]:
        keep = (self.t > end_t - span_s) & (self.t <= end_t)
        return self.t[keep], {n: self.v[n][keep] for n in self.names}


def _trend_per_h(t: np.ndarray, y: np.ndarray) -> float:
    ok = np.isfinite(y)
    if ok.sum() < 6 or np.ptp(t[ok]) < 600:
        return math.nan
    return float(np.polyfit(t[ok], y[ok], 1)[0] * 3600.0)


def _step_fraction(t: np.ndarray, y: np.ndarray, within_s: float = 600.0) -> tuple[float, float]:
    """The largest change within ``within_s`` and that change as a fraction of the window's total change."""
    ok = np.isfinite(y)
    t, y = t[ok], y[ok]
    if y.size < 12:
        return math.nan, math.nan
    # 2-minute means smooth the noise before looking for a step
    k = max(1, int(120 / History.BIN_S))
    n = y.size // k
    if n < 6:
        return math.nan, math.nan
    ym = y[: n * k].reshape(n, k).mean(axis=1)
    lag = max(1, int(within_s / (k * History.BIN_S)))
    steps = ym[lag:] - ym[:-lag]
    if steps.size == 0:
        return math.nan, math.nan
    biggest = float(steps[np.argmax(np.abs(steps))])
    total = float(ym[-3:].mean() - ym[:3].mean())
    return biggest, abs(biggest) / max(abs(total), 1e-9)


def _fmt(x: float) -> float | None:
    return None if x is None or not math.isfinite(x) else round(float(x), 3)


@dataclass
class _Key:
    debounce: Debounce
    message: str = ""


class AlarmEngine:
    """Evaluate a site's alarms over batches; report transitions to ``sink``.

    Parameters
    ----------
    site : SiteProfile
    schedule : Schedule, optional
    sink : callable(Transition)
        Receives each transition in order (the recorder writes them to the log).
    next_id : callable() -> int
        Gives a new alarm its id (the recorder's log row id).
    """

    def __init__(
        self,
        site: SiteProfile,
        schedule: Schedule | None = None,
        sink: Callable[[Transition], None] | None = None,
        next_id: Callable[[], int] | None = None,
    ) -> None:
        self.site = site
        self.schedule = schedule
        self.settings = site.alarms
        self.sink = sink or (lambda tr: None)
        self._ids = iter(range(1, 1 << 62))
        self.next_id = next_id or (lambda: next(self._ids))
        self.alarms: dict[int, Alarm] = {}
        self._open: dict[tuple[str, str | None], Alarm] = {}
        self._keys: dict[tuple[str, str | None], _Key] = {}
        names = [tc.name for tc in site.thermocouples] + [f"{p.name}.divergence" for p in site.pyrometers if p.reference]
        names += [f"{p.name}.reconciled" for p in site.pyrometers]
        rate_name = f"{site.control.name}.rate" if site.control else None
        if rate_name:
            names.append(rate_name)
        self._rate_name = rate_name
        self.history = History(names)
        self._last_sample_t: float | None = None
        self._last_change: dict[str, tuple[float, float]] = {}
        self._seg_entry: tuple[int, float] | None = None
        self._restored: set[tuple[str, str | None]] = set()
        self._bad_lines = np.empty(0)
        self._good_lines = np.empty(0)
        self.transitions: list[Transition] = []

    # -- lifecycle --------------------------------------------------------------------
    def _emit(self, alarm: Alarm, t: float, state: str, detail: str, new: bool = False) -> None:
        alarm.state = state
        tr = Transition(alarm, t, state, detail, new)
        self.transitions.append(tr)
        self.sink(tr)

    def _raise(self, kind: str, channel: str | None, t: float, message: str, priority: str,
               cause: str | None = None, evidence: dict[str, Any] | None = None) -> None:
        key = (kind, channel)
        alarm = self._open.get(key)
        if alarm is not None:
            alarm.condition = True
            if alarm.state == "shelved":
                return
            if alarm.state in ("returned-unacknowledged", "latched"):
                self._emit(alarm, t, "active-unacknowledged", f"active again: {message}")
            return
        alarm = Alarm(self.next_id(), kind, channel, priority, t, message, cause, evidence,
                      latching=kind in self.settings.latching)
        self.alarms[alarm.id] = alarm
        self._open[key] = alarm
        self._emit(alarm, t, "active-unacknowledged", message, new=True)

    def _clear(self, kind: str, channel: str | None, t: float, detail: str) -> None:
        alarm = self._open.get((kind, channel))
        if alarm is None or not alarm.condition:
            return
        alarm.condition = False
        alarm.cleared_t = t
        if alarm.state == "shelved":
            return
        if alarm.state == "active-acknowledged" and not alarm.latching:
            self._emit(alarm, t, "normal", f"cleared: {detail}")
            del self._open[alarm.key]
        elif alarm.latching:
            self._emit(alarm, t, "latched", f"condition cleared, latched until acknowledged: {detail}")
        else:
            self._emit(alarm, t, "returned-unacknowledged", f"returned to normal: {detail}")

    def acknowledge(self, alarm_id: int, t: float, by: str = "operator") -> str:
        """Acknowledge; returns what happened (raises KeyError for an unknown id)."""
        alarm = self.alarms[alarm_id]
        if alarm.state == "active-unacknowledged":
            self._emit(alarm, t, "active-acknowledged", f"acknowledged by {by}")
        elif alarm.state in ("returned-unacknowledged", "latched"):
            self._emit(alarm, t, "normal", f"acknowledged by {by}; cleared")
            self._open.pop(alarm.key, None)
        else:
            return f"alarm {alarm_id} is {alarm.state}: nothing to acknowledge"
        return f"alarm {alarm_id} acknowledged"

    def shelve(self, alarm_id: int, t: float, reason: str, until_t: float, by: str = "operator") -> str:
        alarm = self.alarms[alarm_id]
        if not reason.strip():
            raise ValueError("shelving needs a reason")
        if until_t <= t:
            raise ValueError("a shelf must expire after now")
        if alarm.state == "normal":
            return f"alarm {alarm_id} is normal: nothing to shelve"
        alarm.shelved_until, alarm.shelve_reason = until_t, reason
        self._emit(alarm, t, "shelved", f"shelved by {by} until {until_t:.0f}: {reason}")
        return f"alarm {alarm_id} shelved"

    def unshelve(self, alarm_id: int, t: float, by: str = "operator") -> str:
        alarm = self.alarms[alarm_id]
        if alarm.state != "shelved":
            return f"alarm {alarm_id} is not shelved"
        self._return_from_shelf(alarm, t, f"unshelved by {by}")
        return f"alarm {alarm_id} unshelved"

    def _return_from_shelf(self, alarm: Alarm, t: float, detail: str) -> None:
        alarm.shelved_until = None
        if alarm.condition:
            self._emit(alarm, t, "active-unacknowledged", detail + "; still active")
        else:
            self._emit(alarm, t, "normal", detail + "; condition had cleared")
            self._open.pop(alarm.key, None)

    def tick(self, t: float) -> None:
        """Time passes: shelves expire, and a silent line raises no-data (the recorder calls this each cycle)."""
        for alarm in list(self._open.values()):
            if alarm.state == "shelved" and alarm.shelved_until is not None and t >= alarm.shelved_until:
                self._return_from_shelf(alarm, t, "shelf expired")
        if self._last_sample_t is not None and t - self._last_sample_t >= self.settings.no_data_s:
            self._raise("no-data", None, self._last_sample_t + self.settings.no_data_s,
                        f"no readings from the line for {self.settings.no_data_s:.0f} s", "high")

    def restore(self, alarm: Alarm) -> None:
        """Take back an alarm that was open when a recorder stopped (its condition assumed to hold)."""
        alarm.condition = alarm.state not in ("returned-unacknowledged", "latched")
        self.alarms[alarm.id] = alarm
        self._open[alarm.key] = alarm
        if alarm.condition:
            self._restored.add(alarm.key)

    @property
    def active(self) -> list[Alarm]:
        return sorted(self._open.values(), key=lambda a: (PRIORITY_ORDER[a.priority], a.raised_t))

    # -- evaluation -------------------------------------------------------------------
    def _debounce(self, key: tuple[str, str | None], on_s: float, off_s: float) -> Debounce:
        k = self._keys.get(key)
        if k is None:
            k = self._keys[key] = _Key(Debounce(on_s, off_s, active=key in self._restored))
        return k.debounce

    def _apply(self, key: tuple[str, str | None], times: np.ndarray, bad: np.ndarray, clear: np.ndarray,
               on_s: float, off_s: float, raise_fn: Callable[[float], None], clear_detail: str) -> None:
        deb = self._debounce(key, on_s, off_s)
        for t, active in deb.process(times, bad, clear):
            if active:
                raise_fn(t)
            else:
                self._clear(key[0], key[1], t, clear_detail)

    def evaluate(self, times: np.ndarray, values: dict[str, np.ndarray], status: dict[str, np.ndarray],
                 malformed_times: list[float] | None = None) -> list[Transition]:
        """Evaluate one batch of samples (arrays aligned with ``times``)."""
        start = len(self.transitions)
        s = self.settings
        self._line_noise(np.asarray(malformed_times or [], dtype=float), times)
        if times.size == 0:
            return self.transitions[start:]
        # a gap in the samples: no-data from the last reading + no_data_s to the next
        first = float(times[0])
        if self._last_sample_t is not None and first - self._last_sample_t >= s.no_data_s:
            self._raise("no-data", None, self._last_sample_t + s.no_data_s, f"no readings from the line for {s.no_data_s:.0f} s", "high")
        steps = np.diff(times)
        for i in np.flatnonzero(steps >= s.no_data_s):
            self._raise("no-data", None, float(times[i]) + s.no_data_s, f"no readings from the line for {s.no_data_s:.0f} s", "high")
            self._clear("no-data", None, float(times[i + 1]), "readings again")
        self._clear("no-data", None, first, "readings again")
        self._last_sample_t = float(times[-1])

        self.history.add(times, values)
        for tc in self.site.thermocouples:
            self._sensor(tc.name, times, values[tc.name], status[tc.name], thermocouple=True)
        for py in self.site.pyrometers:
            # what the thermocouples say: the reference, or the control one where the reference has no value
            ref = self.site.thermocouple(py.reference) if py.reference else self.site.control
            ref_values = values[ref.name] if ref is not None else np.full(times.size, np.nan)
            if self.site.control is not None:
                ref_values = np.where(np.isfinite(ref_values), ref_values, values[self.site.control.name])
            self._sensor(py.name, times, values[py.name], status[py.name], thermocouple=False, reference=ref_values)
            if py.reference:
                self._divergence(py.name, times, values, status)
        self._over_temperature(times, values)
        if self.schedule is not None and "plan.segment" in values:
            self._schedule(times, values)
        return self.transitions[start:]

    def _line_noise(self, malformed: np.ndarray, times: np.ndarray) -> None:
        """sensor-fault on the line when over 20 % of the last 60 s of lines were malformed; clears below 5 %."""
        if malformed.size == 0 and times.size == 0:
            return
        if malformed.size == 0 and self._bad_lines.size == 0 and ("sensor-fault", None) not in self._open:
            return  # a clean line: nothing to judge
        self._bad_lines = np.concatenate([self._bad_lines, malformed])
        self._good_lines = np.concatenate([self._good_lines, times])
        # judge at each second of the batch, so a long batch (sim --to-log) is judged as a live one
        ends = np.concatenate([malformed, times])
        for now in np.unique(np.floor(ends))[:: max(1, int(np.unique(np.floor(ends)).size // 600))] if ends.size else []:
            now = float(now) + 1.0
            bad_n = int(np.count_nonzero((self._bad_lines > now - 60.0) & (self._bad_lines <= now)))
            total = bad_n + int(np.count_nonzero((self._good_lines > now - 60.0) & (self._good_lines <= now)))
            if total < 20:
                continue
            if bad_n / total > 0.2:
                self._raise("sensor-fault", None, now, f"{bad_n} of the last {total} lines malformed (line noise)", "medium",
                            cause="line-noise", evidence={"malformed": bad_n, "lines": total})
            elif bad_n / total < 0.05:
                self._clear("sensor-fault", None, now, "the line is clean again")
        latest = float(ends.max())
        self._bad_lines = self._bad_lines[self._bad_lines > latest - 60.0]
        self._good_lines = self._good_lines[self._good_lines > latest - 60.0]

    def _sensor(self, name: str, times: np.ndarray, value: np.ndarray, status: np.ndarray, thermocouple: bool,
                reference: np.ndarray | None = None) -> None:
        s = self.settings
        # open circuit / out of range / device error
        if thermocouple:
            for code, cause, what in ((Status.OPEN, "open-circuit", "thermocouple open"), (Status.OUT_OF_RANGE, "out-of-range", "reading outside the type's range"), (Status.ERROR, "device-error", "device error or failed signal (no answer, a 4-20 mA loop outside NAMUR NE 43's range, or no cold junction)")):
                bad = status == code
                key = ("sensor-fault", f"{name}:{cause}")
                prio = "high" if self.site.thermocouple(name).role in ("control", "reference") else "medium"
                self._apply(key, times, bad, status == Status.OK, 5.0, 30.0,
                            lambda t, n=name, c=cause, w=what, p=prio: self._raise("sensor-fault", f"{n}:{c}", t, f"{n}: {w}", p, cause=c),
                            "reading again")
            # frozen: exactly the same value for frozen_s
            self._frozen(name, times, value)
        else:
            py = self.site.pyrometer(name)
            # a failed signal: a device error, no answer, or a 4-20 mA loop outside NAMUR NE 43's range
            self._apply(("sensor-fault", f"{name}:signal-failure"), times, status == Status.ERROR, status == Status.OK, 5.0, 30.0,
                        lambda t, n=name: self._raise("sensor-fault", f"{n}:signal-failure", t, f"{n}: signal failed (a device error, no answer, or a 4-20 mA loop outside NAMUR NE 43's range)", "medium", cause="signal-failure"),
                        "reading again")
            if reference is not None and math.isfinite(py.range_c[0]):
                ref_value = reference
                lo, hi = py.range_c
                under_bad = (status == Status.UNDER) & (ref_value > lo + 50.0)
                over_bad = (status == Status.OVER) & (ref_value < hi - 50.0)
                for bad, cause, what in ((under_bad, "below-range", "reads below its range while the thermocouples say it should not"),
                                         (over_bad, "saturated", "saturated while the thermocouples read well inside its range")):
                    key = ("sensor-fault", f"{name}:{cause}")
                    self._apply(key, times, bad, status == Status.OK, 60.0, 60.0,
                                lambda t, n=name, c=cause, w=what: self._raise("sensor-fault", f"{n}:{c}", t, f"{n}: {w}", "medium", cause=c),
                                "reading again")
        # a channel missing from the lines while others arrive
        missing = status == Status.MISSING
        key = ("no-data", name)
        self._apply(key, times, missing, ~missing, s.no_data_s, 5.0,
                    lambda t, n=name: self._raise("no-data", n, t, f"{n}: no value in the lines for {s.no_data_s:.0f} s", "medium"),
                    "values again")

    def _frozen(self, name: str, times: np.ndarray, value: np.ndarray) -> None:
        s = self.settings
        ok = np.isfinite(value)
        if not ok.any():
            return
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
        if now - frozen_since >= s.frozen_s:
            self._raise("sensor-fault", f"{name}:frozen", frozen_since + s.frozen_s, f"{name}: value unchanged for {s.frozen_s:.0f} s", "medium", cause="frozen")
        elif changed.size:
            self._clear("sensor-fault", f"{name}:frozen", float(times[changed[-1]]), "changing again")

    def _over_temperature(self, times: np.ndarray, values: dict[str, np.ndarray]) -> None:
        limit = self.settings.over_temperature_c
        if limit is None:
            return
        names = [tc.name for tc in self.site.thermocouples] + [f"{p.name}.reconciled" for p in self.site.pyrometers]
        stack = np.vstack([values[n] for n in names])
        with np.errstate(invalid="ignore"):
            hottest = np.nanmax(np.where(np.isfinite(stack), stack, -np.inf), axis=0)
        which = [names[i] for i in np.argmax(np.where(np.isfinite(stack), stack, -np.inf), axis=0)]
        bad = hottest > limit
        clear = hottest < limit - 5.0
        self._apply(("over-temperature", None), times, bad, clear, 10.0, 30.0,
                    lambda t: self._raise("over-temperature", None, t, f"above {limit:g} °C ({which[int(np.searchsorted(times, t))] if int(np.searchsorted(times, t)) < len(which) else ''})", "high"),
                    f"below {limit - 5:g} °C")

    def _schedule(self, times: np.ndarray, values: dict[str, np.ndarray]) -> None:
        s = self.settings
        sched = self.schedule
        assert sched is not None
        seg = values["plan.segment"]
        dev = values["plan.deviation"]
        hold = values["plan.hold"]
        ctl = self.site.control
        temp = values[ctl.name] if ctl else np.full(times.size, np.nan)
        rate = values[self._rate_name] if self._rate_name else np.full(times.size, np.nan)
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
        settle = since > self.settings.rate_window_s + 120.0
        near_target = np.abs(temp - target) < 15.0
        tol = np.maximum(0.25 * np.abs(planned), 15.0)
        with np.errstate(invalid="ignore"):
            off_temp = (np.abs(dev) > s.deviation_c) & ~fast
            rate_off = ramping & ~fast & settle & ~near_target & (np.abs(rate - planned) > tol)
            bad = off_temp | rate_off
            clear = (np.abs(dev) < 0.5 * s.deviation_c) & ~rate_off | (seg >= n_seg) | fast
        bad = np.where(np.isfinite(dev) | rate_off, bad, False)

        def raise_(t: float) -> None:
            i = min(int(np.searchsorted(times, t)), times.size - 1)
            sg = int(seg[i]) if math.isfinite(seg[i]) else 0
            name = sched.segments[min(sg, n_seg - 1)].name
            if rate_off[i] and not off_temp[i]:
                msg = f"segment '{name}': rate {rate[i]:.0f} °C/h against a planned {planned[i]:.0f} °C/h"
            else:
                msg = f"segment '{name}': {dev[i]:+.0f} K off the plan"
            self._raise("schedule-deviation", None, t, msg, "low",
                        evidence={"segment": sg, "deviation_k": _fmt(dev[i]), "rate_c_per_h": _fmt(rate[i]), "planned_c_per_h": _fmt(planned[i])})

        self._apply(("schedule-deviation", None), times, bad, clear, s.deviation_debounce_s, 120.0, raise_, "back on plan")
        # critical ranges
        for cr in sched.critical:
            with np.errstate(invalid="ignore"):
                inside = (temp >= cr.low_c) & (temp <= cr.high_c)
                applies = np.where(rate > 0, cr.direction in ("heating", "both"), cr.direction in ("cooling", "both"))
                too_fast = inside & applies & (np.abs(rate) > cr.max_rate_c_per_h)
                ok = ~inside | (np.abs(rate) <= cr.max_rate_c_per_h)
            self._apply(("rate-limit", cr.name), times, too_fast, ok, 120.0, 60.0,
                        lambda t, c=cr: self._raise("rate-limit", c.name, t, f"faster than {c.max_rate_c_per_h:g} °C/h through {c.name} ({c.low_c:g}-{c.high_c:g} °C)", "medium",
                                                    evidence={"max_rate_c_per_h": c.max_rate_c_per_h}),
                        "within the rate limit")

    def _divergence(self, name: str, times: np.ndarray, values: dict[str, np.ndarray], status: dict[str, np.ndarray]) -> None:
        s = self.settings
        div = values[f"{name}.divergence"]
        allowed = values[f"{name}.allowed"]
        with np.errstate(invalid="ignore"):
            bad = np.abs(div) > allowed
            clear = np.abs(div) < allowed * (s.divergence_clear_k / s.divergence_k)

        def raise_(t: float) -> None:
            i = min(int(np.searchsorted(times, t)), times.size - 1)
            cause, evidence = self.likely_cause(name, t)
            evidence.update({"divergence_k": _fmt(div[i]), "allowed_k": _fmt(allowed[i])})
            self._raise("divergence", name, t, f"{name} {div[i]:+.1f} K from {self.site.pyrometer(name).reference} (allowed ±{allowed[i]:.1f} K)",
                        "medium", cause=cause, evidence=evidence)

        self._apply(("divergence", name), times, bad, clear, s.divergence_debounce_s, 60.0, raise_, "within the combined uncertainty")

    # -- likely cause -----------------------------------------------------------------
    def likely_cause(self, name: str, t: float) -> tuple[str, dict[str, Any]]:
        """The likely cause of ``name``'s divergence at ``t``, with the evidence."""
        py = self.site.pyrometer(name)
        tt, h = self.history.window(t, 3600.0)
        ev: dict[str, Any] = {"window_s": 3600}
        d = h.get(f"{name}.divergence")
        if d is None or np.isfinite(d).sum() < 12:
            return "unknown", ev | {"reason": "too little history"}
        # 1. lag: divergence proportional to the rate of change
        rate = h.get(self._rate_name) if self._rate_name else None
        ref = py.reference
        others = [tc.name for tc in self.site.thermocouples if tc.name != ref]
        if rate is not None:
            ok = np.isfinite(d) & np.isfinite(rate)
            rate_now = float(rate[ok][-1]) if ok.any() else math.nan
            d_now = float(d[ok][-1]) if ok.any() else math.nan
            if ok.sum() >= 12 and np.ptp(rate[ok]) > 20.0:
                b, a = np.polyfit(rate[ok], d[ok], 1)
                pred = a + b * rate[ok]
                ss = np.sum((d[ok] - d[ok].mean()) ** 2)
                r2 = 1.0 - np.sum((d[ok] - pred) ** 2) / ss if ss > 0 else 0.0
                ev.update({"lag_r2": _fmt(r2), "lag_s": _fmt(b * 3600.0), "offset_k": _fmt(a)})
                if r2 > 0.6 and abs(a) < 0.5 * np.nanmax(np.abs(d[ok])):
                    ev["reason"] = f"the divergence follows the rate of change (R² {r2:.2f}, {b * 3600:.0f} s per degree/s) and vanishes at rate 0"
                    return "thermocouple-lag", ev
            # during a steady ramp the fit has no spread to work with: a thermocouple that
            # lags reads behind the ware (divergence has the sign of the rate) and behind
            # the other thermocouples too
            if math.isfinite(rate_now) and abs(rate_now) > 30.0 and np.sign(d_now) == np.sign(rate_now) and others and ref in h and others[0] in h:
                pair = h[ref] - h[others[0]]
                pair_now = float(pair[np.isfinite(pair)][-1]) if np.isfinite(pair).any() else math.nan
                implied = d_now / (rate_now / 3600.0)
                ev.update({"rate_c_per_h": _fmt(rate_now), "implied_lag_s": _fmt(implied), "pair_now_k": _fmt(pair_now)})
                if math.isfinite(pair_now) and np.sign(pair_now) == -np.sign(rate_now) and abs(pair_now) > 0.5 * abs(d_now) and 0 < implied < 3600:
                    ev["reason"] = (
                        f"during a {rate_now:+.0f} °C/h ramp {ref} reads {abs(d_now):.1f} K behind {name} and {abs(pair_now):.1f} K "
                        f"behind {others[0]}: a lag of about {implied:.0f} s"
                    )
                    return "thermocouple-lag", ev
        # 2. other instruments for comparison
        ratio = [p for p in self.site.pyrometers if p.kind == "ratio" and p.reference and p.name != name]
        single = [p for p in self.site.pyrometers if p.kind == "single" and p.reference and p.name != name]
        trend = _trend_per_h(tt, d)
        step, step_frac = _step_fraction(tt, d)
        ev.update({"trend_k_per_h": _fmt(trend), "largest_10min_change_k": _fmt(step), "step_fraction": _fmt(step_frac)})
        partner = (ratio or single)
        partner_trend = math.nan
        partner_step = math.nan
        if partner:
            pd = h.get(f"{partner[0].name}.divergence")
            if pd is not None:
                partner_trend = _trend_per_h(tt, pd)
                partner_step, _ = _step_fraction(tt, pd)
            ev.update({"partner": partner[0].name, "partner_trend_k_per_h": _fmt(partner_trend), "partner_10min_change_k": _fmt(partner_step)})
        pair_trend = math.nan
        if ref and others and ref in h and others[0] in h:
            pair_trend = _trend_per_h(tt, h[ref] - h[others[0]])
            ev.update({"thermocouple_pair": f"{ref}-{others[0]}", "pair_trend_k_per_h": _fmt(pair_trend)})
        # 3. a step: emissivity change (single band moved, the ratio instrument did not)
        if math.isfinite(step_frac) and step_frac > 0.6 and abs(step) > 1.5:
            if py.kind == "single" and ratio and math.isfinite(partner_step) and abs(partner_step) > 0.5 * abs(step):
                ev["reason"] = "both pyrometers stepped together"
                return "unknown", ev
            ev["reason"] = f"a step of {step:+.1f} K within ten minutes" + (f" while {partner[0].name} moved {partner_step:+.1f} K" if partner and math.isfinite(partner_step) else "")
            return "emissivity-change", ev
        # 4. a slow trend: window (single band falls alone) or thermocouple drift (both move, or thermocouples part)
        if math.isfinite(trend) and abs(trend) > 1.0:
            if math.isfinite(pair_trend) and abs(pair_trend) > 0.5 * abs(trend):
                ev["reason"] = f"{ref} departs from {others[0]} at {pair_trend:+.1f} K/h"
                return "thermocouple-drift", ev
            if partner and math.isfinite(partner_trend):
                if abs(partner_trend) > 0.5 * abs(trend) and np.sign(partner_trend) == np.sign(trend):
                    ev["reason"] = f"{name} and {partner[0].name} both depart from {ref} ({trend:+.1f} and {partner_trend:+.1f} K/h)"
                    return "thermocouple-drift", ev
                if py.kind == "single" and trend < 0 and abs(partner_trend) < 0.34 * abs(trend):
                    ev["reason"] = f"{name} reads ever lower ({trend:+.1f} K/h) while {partner[0].name} holds ({partner_trend:+.1f} K/h)"
                    return "window-attenuation", ev
            elif py.kind == "single" and trend < 0 and math.isfinite(pair_trend):
                ev["reason"] = f"{name} reads ever lower ({trend:+.1f} K/h) while the thermocouples agree"
                return "window-attenuation", ev
        ev["reason"] = "the evidence does not decide"
        return "unknown", ev


def evidence_json(evidence: dict[str, Any] | None) -> str | None:
    return None if evidence is None else json.dumps(evidence)
