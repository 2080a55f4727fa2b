"""Causes that learn: the likely cause of an open divergence alarm, decided again as evidence arrives.

While a divergence alarm's condition holds, :class:`CauseLearner` asks
:func:`~firewatch.firing.alarms.causes.likely_cause` again every
``CauseThresholds.every_s`` seconds of the firing's time (a fixed grid of
times, so the recorder's half-second batches and replay's long ones
evaluate at the same moments over the same complete 10 s bins, and give the
same causes). ``unknown`` gives way to the first decided cause that
``confirm`` evaluations in a row name. A decided cause gives way only to
evidence that contradicts it (:func:`~firewatch.firing.alarms.causes.refuted`:
the rate explains the divergence, a step came while the rate held, the
witnesses of a drift saw none, the ratio pyrometer fell alike), again
``confirm`` evaluations in a row; it never returns to ``unknown``, and a
cause that merely cannot be judged any more (its step has left the window,
the rate holds steady) stays. Each change reaches the engine
as a :class:`~firewatch.firing.alarms.causes.CauseStep`, which it logs as a
``cause-changed`` transition with its evidence.

The cost stays bounded: one evaluation per open divergence alarm per
``every_s``, whatever the reading rate.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any, Protocol

from firewatch.firing.alarms.causes import (
    CauseStep,
    CauseThresholds,
    Signals,
    because_words,
    judge,
    refuted,
)


class Alarm(Protocol):
    """What the learner reads and writes of an open alarm (the engine's ``Alarm``; a protocol, so that
    this room does not import the engine that uses it)."""

    id: int
    channel: str | None
    raised_t: float
    cause: str | None
    evidence: dict[str, Any] | None
    condition: bool

    @property
    def open(self) -> bool: ...

__all__ = ["CauseLearner"]


@dataclass
class _Watch:
    """One alarm's re-evaluation state."""

    spans: list[list[float]] = field(default_factory=list)
    """When the alarm's condition held: ``[start, end]`` (end ``inf`` while it holds)."""
    next_t: float | None = None
    """The next time on the grid to evaluate at."""
    candidate: str | None = None
    count: int = 0
    awaited: list[str] = field(default_factory=list)
    """The missing evidence (keys) that the evaluations since the last change lacked, in the order first lacked."""
    evaluations: int = 0


class CauseLearner:
    """Decide the cause of open divergence alarms again, on a fixed grid of times.

    Parameters
    ----------
    thresholds : CauseThresholds
        ``every_s`` (the grid) and ``confirm`` (evaluations in a row), and what the causes judge by.
    signals_at : callable(pyrometer, t) -> Signals
        The signals over the window ending at ``t`` (complete bins only).
    changed : callable(alarm, CauseStep)
        Called for each change of cause, in time order per alarm.
    """

    def __init__(self, thresholds: CauseThresholds, signals_at: Callable[[str, float], Signals],
                 changed: Callable[[Any, CauseStep], None]) -> None:
        self.thresholds = thresholds
        self.signals_at = signals_at
        self.changed = changed
        self._watches: dict[int, tuple[Alarm, _Watch]] = {}
        self.evaluations = 0
        """How many times a cause was decided again (for the benchmark)."""

    def _grid_after(self, t: float) -> float:
        every = self.thresholds.every_s
        return (math.floor(t / every) + 1) * every

    def active(self, alarm: Alarm, t: float) -> None:
        """The alarm's condition holds from ``t`` (raised, or active again)."""
        _, w = self._watches.setdefault(alarm.id, (alarm, _Watch()))
        if w.spans and math.isinf(w.spans[-1][1]):
            return
        w.spans.append([t, math.inf])

    def inactive(self, alarm: Alarm, t: float) -> None:
        """The alarm's condition cleared at ``t``."""
        entry = self._watches.get(alarm.id)
        if entry is not None and entry[1].spans and math.isinf(entry[1].spans[-1][1]):
            entry[1].spans[-1][1] = t

    def restored(self, alarm: Alarm, t: float) -> None:
        """An alarm taken back from the log at a restart: watched from the first complete bin after ``t``."""
        if alarm.condition:
            self.active(alarm, t)

    def update(self, complete_to: float) -> None:
        """Evaluate every alarm at each grid time up to ``complete_to`` (the end of the last complete 10 s bin)."""
        for key in list(self._watches):
            alarm, w = self._watches[key]
            self._run(alarm, w, complete_to)
            if not alarm.open:
                del self._watches[key]

    def _run(self, alarm: Alarm, w: _Watch, complete_to: float) -> None:
        if not w.spans:
            return
        if w.next_t is None:
            start = w.spans[0][0]
            # an alarm restored at a restart is watched from the first complete bin of the new readings
            w.next_t = self._grid_after(start if math.isfinite(start) else complete_to)
        every = self.thresholds.every_s
        while w.next_t <= complete_to:
            t = w.next_t
            span = next((s for s in w.spans if s[1] > t), None)
            if span is None:
                return  # past the last span: nothing to do until the condition holds again
            if t < span[0]:
                w.next_t = self._grid_after(span[0])  # skip the time the condition did not hold
                continue
            self._evaluate(alarm, w, t)
            w.next_t = t + every
        # spans wholly in the past are done with
        w.spans = [s for s in w.spans if s[1] > w.next_t] or w.spans[-1:]

    def _evaluate(self, alarm: Alarm, w: _Watch, t: float) -> None:
        th = self.thresholds
        assert alarm.channel is not None  # a divergence alarm's channel is its pyrometer
        s = self.signals_at(alarm.channel, t)
        j = judge(s, th)
        cause, evidence = j.cause, j.evidence
        self.evaluations += 1
        w.evaluations += 1
        current = alarm.cause or "unknown"
        why = None if current == "unknown" else refuted(current, j, s, th)
        for key in evidence.get("missing") or ():
            if key not in w.awaited:
                w.awaited.append(key)
        if cause == current or cause == "unknown" or (current != "unknown" and why is None):
            w.candidate, w.count = None, 0
            return
        if cause != w.candidate:
            w.candidate, w.count = cause, 0
        w.count += 1
        if w.count < th.confirm:
            return
        if why is not None:
            because, because_t = why, None
        else:
            awaited = list(dict.fromkeys([*((alarm.evidence or {}).get("missing") or ()), *w.awaited]))
            because, because_t = because_words(current, {"missing": awaited}, s, cause, alarm.raised_t)
        old = alarm.evidence or {}
        step = CauseStep(t, alarm.cause or "unknown", cause, because, because_t, str(evidence.get("reason", "")),
                         str(old.get("reason", "")), evidence, alarm.evidence)
        w.candidate, w.count, w.awaited = None, 0, []
        self.changed(alarm, step)
