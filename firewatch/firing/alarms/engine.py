"""The alarm engine: the ISA-18.2 lifecycle, fed by the conditions.

Lifecycle (ISA-18.2 alarm states)
---------------------------------
``normal`` -> ``active-unacknowledged`` (raised) -> ``active-acknowledged``
(acknowledge) -> ``normal`` (cleared). Cleared while unacknowledged:
``returned-unacknowledged``, then ``normal`` on acknowledge. A *latching*
kind that clears stays ``latched`` until acknowledged. ``shelved`` (with a
reason and an expiry) hides an alarm; at expiry it returns to
``active-unacknowledged`` if its condition still holds, else ``normal``.
Each transition is a :class:`Transition` with its time, written to the
firing log's ``alarm_state`` table. A divergence alarm's likely cause is
decided when it is raised and again while its condition holds
(:mod:`~firewatch.firing.alarms.learning`); each change is a transition too,
with state ``cause-changed`` (:data:`CAUSE_CHANGED`), which leaves the
alarm's ISA-18.2 state as it is.

The conditions (:mod:`~firewatch.firing.alarms.conditions`) say when each
alarm's condition starts and ends; this module alone decides what that
means for the alarm.
"""

from __future__ import annotations

import json
import math
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from firewatch.firing.alarms import causes
from firewatch.firing.alarms.conditions import (
    Change,
    Debounces,
    Divergence,
    LineNoise,
    OverTemperature,
    Raise,
    RateLimit,
    ScheduleDeviation,
    SensorFaults,
    Silence,
)
from firewatch.firing.alarms.history import BIN_S, History
from firewatch.firing.alarms.learning import CauseLearner
from firewatch.settings.profile import SiteProfile
from firewatch.settings.schedule import Schedule

__all__ = ["KINDS", "STATES", "CAUSE_CHANGED", "PRIORITY_ORDER", "Alarm", "Transition", "AlarmEngine", "evidence_json"]

KINDS = ("divergence", "schedule-deviation", "over-temperature", "rate-limit", "sensor-fault", "no-data")
"""Every kind of alarm."""
STATES = (
    "normal",
    "active-unacknowledged",
    "active-acknowledged",
    "returned-unacknowledged",
    "latched",
    "shelved",
)
"""The ISA-18.2 states an alarm passes through."""
CAUSE_CHANGED = "cause-changed"
"""The transition that logs a new likely cause (not an ISA-18.2 state: the alarm's state stays as it was)."""
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
    cause_steps: list[causes.CauseStep] = field(default_factory=list)
    """Each change of the likely cause since the alarm was raised, oldest first."""

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


def evidence_json(evidence: dict[str, Any] | None) -> str | None:
    """The evidence as stored in the firing log (JSON, keys in the order measured)."""
    return None if evidence is None else json.dumps(evidence)


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
    thresholds : CauseThresholds, optional
        What the likely cause of a divergence judges by (default: :data:`~.causes.THRESHOLDS` with the site
        profile's ``[alarms]`` cause keys).
    """

    def __init__(
        self,
        site: SiteProfile,
        schedule: Schedule | None = None,
        sink: Callable[[Transition], None] | None = None,
        next_id: Callable[[], int] | None = None,
        thresholds: causes.CauseThresholds | None = None,
    ) -> None:
        self.site = site
        self.schedule = schedule
        self.settings = site.alarms
        self.thresholds = thresholds if thresholds is not None else causes.CauseThresholds.for_site(site.alarms)
        self.sink = sink or (lambda tr: None)
        self._ids = iter(range(1, 1 << 62))
        self.next_id = next_id or (lambda: next(self._ids))
        self.alarms: dict[int, Alarm] = {}
        self._open: dict[tuple[str, str | None], Alarm] = {}
        names = [tc.name for tc in site.thermocouples] + [f"{p.name}.divergence" for p in site.pyrometers if p.reference]
        names += [f"{p.name}.reconciled" for p in site.pyrometers]
        rate_name = f"{site.control.name}.rate" if site.control else None
        # each reference's own rate: a lagging sensor reads behind by its time constant times the rate it sees
        names += list(dict.fromkeys(f"{p.reference}.rate" for p in site.pyrometers if p.reference))
        if rate_name and rate_name not in names:
            names.append(rate_name)
        self._rate_name = rate_name
        self.history = History(names)
        self.transitions: list[Transition] = []
        # the conditions, in the order they are evaluated
        self._debounces = Debounces()
        self._line_noise = LineNoise()
        self._silence = Silence(self.settings)
        self._sensors = SensorFaults(site, self._debounces)
        self._divergence = Divergence(site, self._debounces, self.likely_cause)
        self._over_temperature = OverTemperature(site, self._debounces)
        self._deviation = ScheduleDeviation(site, schedule, self._debounces) if schedule is not None else None
        self._rate_limit = RateLimit(site, schedule, self._debounces) if schedule is not None else None
        self.learner = CauseLearner(self.thresholds, self.signals, self._cause_changed)

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
            if not alarm.condition and kind == "divergence":
                self.learner.active(alarm, t)
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
        if kind == "divergence":
            self.learner.active(alarm, t)

    def _clear(self, kind: str, channel: str | None, t: float, detail: str) -> None:
        alarm = self._open.get((kind, channel))
        if alarm is None or not alarm.condition:
            return
        alarm.condition = False
        alarm.cleared_t = t
        if kind == "divergence":
            self.learner.inactive(alarm, t)
        if alarm.state == "shelved":
            return
        if alarm.state == "active-acknowledged" and not alarm.latching:
            self._emit(alarm, t, "normal", f"cleared: {detail}")
            del self._open[alarm.key]
        elif alarm.latching:
            self._emit(alarm, t, "latched", f"condition cleared, latched until acknowledged: {detail}")
        else:
            self._emit(alarm, t, "returned-unacknowledged", f"returned to normal: {detail}")

    def _apply(self, changes: Iterable[Change]) -> None:
        """Apply the conditions' changes in order."""
        for c in changes:
            if isinstance(c, Raise):
                self._raise(c.kind, c.channel, c.t, c.message, c.priority, c.cause, c.evidence)
            else:
                self._clear(c.kind, c.channel, c.t, c.detail)

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
        """Shelve until ``until_t`` with a reason; returns what happened (ValueError without a reason or expiry)."""
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
        """Take an alarm off the shelf before its expiry; returns what happened."""
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
        self._apply(self._silence.silence(t))

    def restore(self, alarm: Alarm) -> None:
        """Take back an alarm that was open when a recorder stopped (its condition assumed to hold)."""
        alarm.condition = alarm.state not in ("returned-unacknowledged", "latched")
        self.alarms[alarm.id] = alarm
        self._open[alarm.key] = alarm
        if alarm.condition:
            self._debounces.restored.add(alarm.key)
        if alarm.kind == "divergence":
            self.learner.restored(alarm, -math.inf)

    @property
    def active(self) -> list[Alarm]:
        """The open alarms, highest priority first, then oldest first."""
        return sorted(self._open.values(), key=lambda a: (PRIORITY_ORDER[a.priority], a.raised_t))

    # -- evaluation -------------------------------------------------------------------
    def evaluate(self, times: np.ndarray, values: dict[str, np.ndarray], status: dict[str, np.ndarray],
                 malformed_times: list[float] | None = None) -> list[Transition]:
        """Evaluate one batch of samples (arrays aligned with ``times``); return its transitions."""
        start = len(self.transitions)
        self._apply(self._line_noise.check(np.asarray(malformed_times or [], dtype=float), times, ("sensor-fault", None) in self._open))
        if times.size == 0:
            return self.transitions[start:]
        self._apply(self._silence.gaps(times))
        self.history.add(times, values)
        for tc in self.site.thermocouples:
            self._apply(self._sensors.thermocouple(tc.name, times, values[tc.name], status[tc.name]))
        for py in self.site.pyrometers:
            # what the thermocouples say: the reference, or the control one where the reference has no value
            ref = self.site.thermocouple(py.reference) if py.reference else self.site.control
            ref_values = values[ref.name] if ref is not None else np.full(times.size, np.nan)
            if self.site.control is not None:
                ref_values = np.where(np.isfinite(ref_values), ref_values, values[self.site.control.name])
            self._apply(self._sensors.pyrometer(py.name, times, status[py.name], reference=ref_values))
            if py.reference:
                self._apply(self._divergence.check(py.name, times, values))
        self._apply(self._over_temperature.check(times, values))
        if self._deviation is not None and self._rate_limit is not None and "plan.segment" in values:
            self._apply(self._deviation.check(times, values))
            self._apply(self._rate_limit.check(times, values))
        if self.history.t.size:
            self.learner.update(float(self.history.t[-1]) + BIN_S / 2)
        return self.transitions[start:]

    # -- likely cause -----------------------------------------------------------------
    def signals(self, name: str, t: float) -> causes.Signals:
        """What the causes of ``name``'s divergence look at, over the window before ``t``."""
        return causes.Signals.from_history(self.site, self.history, self._rate_name, name, t, float(self.thresholds.window_s))

    def likely_cause(self, name: str, t: float) -> tuple[str, dict[str, Any]]:
        """The likely cause of ``name``'s divergence at ``t``, with the evidence (see :mod:`.causes`)."""
        return causes.likely_cause(self.signals(name, t), self.thresholds)

    def _cause_changed(self, alarm: Alarm, step: causes.CauseStep) -> None:
        """Log a new likely cause (the learner found one); the alarm's ISA-18.2 state stays as it is."""
        alarm.cause, alarm.evidence = step.cause, step.evidence
        alarm.cause_steps.append(step)
        tr = Transition(alarm, step.t, CAUSE_CHANGED, step.detail())
        self.transitions.append(tr)
        self.sink(tr)
