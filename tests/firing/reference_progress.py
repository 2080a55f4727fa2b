"""The per-sample ProgressTracker as it was before issue 15 made it batch-wise: the reference the batch-wise
tracker must match bit for bit (tests/firing/test_progress_batch.py). Test code only; not maintained beyond that."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from firewatch.settings.schedule import Schedule

__all__ = ["ProgressTracker", "Snapshot", "PLAN_CHANNELS", "RESUME_GAP_S", "SETTLE_S", "STEADY_C_PER_H"]

RESUME_GAP_S = 60.0
"""A silence longer than this, s, and the kiln may have moved on: its place in the schedule is inferred again."""
SETTLE_S = 30.0
"""Readings after a start or a silence spanning this long, s, tell the direction the kiln is moving in."""
STEADY_C_PER_H = 20.0
"""Slower than this, degC/h either way, a kiln counts as holding (common practice, no source)."""

PLAN_CHANNELS: tuple[tuple[str, str, str], ...] = (
    ("plan.segment", "#", "current schedule segment (0-based)"),
    ("plan.setpoint", "C", "the current segment's planned temperature"),
    ("plan.deviation", "K", "measured minus the segment's plan"),
    ("plan.hold", "s", "time into the current hold"),
    ("plan.remaining", "s", "predicted time to the end of the schedule"),
    ("plan.behind", "s", "actual minus planned elapsed time"),
)


@dataclass
class Snapshot:
    """Progress at one moment, for display."""

    segment: int
    phase: str  # "ramp", "hold" or "done"
    elapsed_s: float
    segment_elapsed_s: float
    hold_s: float | None
    fraction: float
    setpoint_c: float
    deviation_c: float
    remaining_s: float
    behind_s: float


class ProgressTracker:
    """Follow one firing; feed it readings in time order with :meth:`update`."""

    def __init__(self, schedule: Schedule, band_c: float = 3.0, resume_gap_s: float = RESUME_GAP_S) -> None:
        self.schedule = schedule
        self.band_c = band_c
        self.resume_gap_s = resume_gap_s
        self._seen: tuple[float, float] | None = None
        """(time, degC) of the last reading with a temperature."""
        self._resume: list[tuple[float, float, float]] | None = None
        """Readings since a start or a silence that have not yet placed the kiln in the schedule."""
        self._before: tuple[float, float] | None = None
        """(time, degC) of the last reading before the silence; None at a first start."""
        self.start_t: float | None = None
        self.segment = 0
        self.segment_start_t = math.nan
        self.segment_start_c = math.nan
        self.hold_start_t: float | None = None
        self.ability: list[tuple[float, float]] = []  # (temperature, demonstrated heating rate degC/h)
        self._last_bin = -1
        self.last: Snapshot | None = None
        times, _, _ = schedule.breakpoints()
        # planned elapsed time at the end of each segment's ramp and hold
        self._plan_ramp_end = []
        self._plan_seg_end = []
        # and the least elapsed time: a controller never runs ahead of its program, but a
        # "max" ramp may take no time at all
        self._least_ramp_end = []
        self._least_seg_end = []
        t = least = 0.0
        for i, seg in enumerate(schedule.segments):
            t += abs(seg.target_c - schedule.start_of(i)) / abs(schedule.planned_rate(i)) * 3600.0
            self._plan_ramp_end.append(t)
            t += seg.hold_s
            self._plan_seg_end.append(t)
            least += 0.0 if seg.is_fast else abs(seg.target_c - schedule.start_of(i)) / abs(seg.rate_c_per_h) * 3600.0
            self._least_ramp_end.append(least)
            least += seg.hold_s
            self._least_seg_end.append(least)

    @property
    def done(self) -> bool:
        return self.segment >= len(self.schedule.segments)

    def _enter(self, index: int, t: float, temp: float) -> None:
        self.segment = index
        self.segment_start_t = t
        self.segment_start_c = temp
        self.hold_start_t = None

    def _reached(self, temp: float) -> bool:
        seg = self.schedule.segments[self.segment]
        start = self.schedule.start_of(self.segment)
        if seg.target_c >= start:
            return temp >= seg.target_c - self.band_c
        return temp <= seg.target_c + self.band_c

    def _step(self, t: float, temp: float, rate: float) -> None:
        while not self.done:
            seg = self.schedule.segments[self.segment]
            if self.hold_start_t is None:
                if not math.isfinite(temp) or not self._reached(temp):
                    break
                self.hold_start_t = t
            if t - self.hold_start_t >= seg.hold_s:
                self._enter(self.segment + 1, t, temp)
                continue
            break
        self._learn(t, temp, rate)

    def _learn(self, t: float, temp: float, rate: float) -> None:
        """Keep the heating rates the kiln managed while it fell short of the plan (settled ramps only)."""
        if self.done or self.hold_start_t is not None or not (math.isfinite(temp) and math.isfinite(rate)):
            return
        if t - self.segment_start_t < 600.0:
            return
        seg = self.schedule.segments[self.segment]
        if seg.rate_c_per_h <= 0 or rate <= 0:
            return
        planned = seg.rate_c_per_h if not seg.is_fast else math.inf
        if rate < 0.85 * planned:
            b = int(temp // 25)  # one point per 25 degC
            if b != self._last_bin:
                self._last_bin = b
                self.ability.append((temp, rate))

    def _ability_at(self, temp: float) -> float:
        """The heating rate the kiln can manage at ``temp``, degC/h (inf while it has kept up).

        The median of the latest shortfalls, falling further with temperature
        where the shortfalls show a clear fall over 100 degC or more, and never
        below half the latest rate (a guard against extrapolating noise).
        """
        pts = [p for p in self.ability if p[0] > 150.0]
        if len(pts) < 3:
            return math.inf
        x = np.array([p[0] for p in pts[-12:]])
        y = np.array([p[1] for p in pts[-12:]])
        latest = float(np.median(y[-5:]))
        slope = min(float(np.polyfit(x, y, 1)[0]), 0.0) if np.ptp(x) >= 100.0 else 0.0
        value = latest + slope * max(temp - float(x[-1]), 0.0)
        return max(value, 0.5 * latest)

    def _remaining(self, t: float, temp: float) -> float:
        sched = self.schedule
        if self.done:
            return 0.0
        total = 0.0
        for i in range(self.segment, len(sched.segments)):
            seg = sched.segments[i]
            if i == self.segment and self.hold_start_t is not None:
                total += max(seg.hold_s - (t - self.hold_start_t), 0.0)
                continue
            start = temp if i == self.segment else sched.start_of(i)
            rate = abs(sched.planned_rate(i))
            if seg.target_c > start:
                mid = 0.5 * (start + seg.target_c)
                rate = min(rate, self._ability_at(mid))
            total += abs(seg.target_c - start) / rate * 3600.0 + seg.hold_s
        return total

    def _setpoint(self, t: float) -> float:
        if self.done:
            return math.nan
        seg = self.schedule.segments[self.segment]
        if self.hold_start_t is not None or seg.is_fast:
            return seg.target_c
        sp = self.segment_start_c + seg.rate_c_per_h / 3600.0 * (t - self.segment_start_t)
        return min(sp, seg.target_c) if seg.rate_c_per_h > 0 else max(sp, seg.target_c)

    def _planned_elapsed(self, t: float, temp: float, least: bool = False) -> float:
        """Planned elapsed time at the current point of progress (``least``: the least time the program allows)."""
        ramp_end, seg_end = (self._least_ramp_end, self._least_seg_end) if least else (self._plan_ramp_end, self._plan_seg_end)
        i = self.segment
        if self.done:
            return seg_end[-1]
        if self.hold_start_t is not None:
            return ramp_end[i] + (t - self.hold_start_t)
        begin = seg_end[i - 1] if i else 0.0
        start = self.schedule.start_of(i)
        seg = self.schedule.segments[i]
        span = seg.target_c - start
        frac = 0.0 if span == 0 else min(max((temp - start) / span, 0.0), 1.0)
        return begin + frac * (ramp_end[i] - begin)

    # -- placing the kiln after a start or a silence -------------------------------------
    def _positions(self) -> list[tuple[int, bool]]:
        """The ramps and holds from the current one to the end, in order: (segment, is the hold)."""
        if self.start_t is None:
            first, hold = 0, False
        else:
            first, hold = self.segment, self.hold_start_t is not None
        out: list[tuple[int, bool]] = []
        for j in range(first, len(self.schedule.segments)):
            if not (j == first and hold):
                out.append((j, False))
            if self.schedule.segments[j].hold_s > 0:
                out.append((j, True))
        return out

    def _fits(self, j: int, hold: bool, temp: float, direction: int, current: bool) -> bool:
        """Whether a kiln at ``temp`` moving in ``direction`` (-1, 0 steady, +1) can be in this ramp or hold."""
        seg = self.schedule.segments[j]
        start = self.schedule.start_of(j)
        up = seg.target_c >= start
        if hold:
            # a kiln holds within a few degrees of its target, and holds still
            return abs(temp - seg.target_c) <= 3.0 * self.band_c and direction == 0
        if (temp >= seg.target_c - self.band_c) if up else (temp <= seg.target_c + self.band_c):
            return False  # arrived: this ramp is over
        if not current and not ((temp >= start - self.band_c) if up else (temp <= start + self.band_c)):
            return False  # not yet begun
        return direction != (-1 if up else 1)

    def _place(self, temp: float, direction: int, silence_s: float | None) -> tuple[int, bool] | None:
        """The first ramp or hold, from the current one on, that fits the kiln and that the program
        could have reached in the silence; the current one when none fits (None when the schedule is done)."""
        positions = self._positions()
        if self._before is not None and self.start_t is not None:
            least_now = self._planned_elapsed(self._before[0], self._before[1], least=True)
        else:
            least_now = 0.0
        for k, (j, hold) in enumerate(positions):
            if silence_s is not None:
                least_start = self._least_ramp_end[j] if hold else (self._least_seg_end[j - 1] if j else 0.0)
                if silence_s < 0.8 * (least_start - least_now):  # 20 % slack for the band and clock drift
                    break
            if self._fits(j, hold, temp, direction, current=k == 0):
                return j, hold
        return positions[0] if positions else None  # nothing fits: no reason to move on

    def _try_resume(self) -> bool:
        """Place the kiln from the readings since the start or silence; False while they cannot yet tell."""
        pts = self._resume
        assert pts is not None
        t_a, temp_a, _ = pts[0]
        t_z, temp_z, rate_z = pts[-1]
        silence = None if self._before is None else t_a - self._before[0]
        direction: int | None = None
        if t_z - t_a >= SETTLE_S:
            slope = float(np.polyfit([p[0] - t_a for p in pts], [p[1] for p in pts], 1)[0]) * 3600.0
            direction = 0 if abs(slope) < STEADY_C_PER_H else (1 if slope > 0 else -1)
        elif math.isfinite(rate_z):
            direction = 0 if abs(rate_z) < STEADY_C_PER_H else (1 if rate_z > 0 else -1)
        if direction is None:
            options = {self._place(temp_z, d, silence) for d in (-1, 0, 1)}
            if len(options) != 1:
                return False  # the direction decides: wait for more readings
            place = options.pop()
        else:
            place = self._place(temp_z, direction, silence)
        positions = self._positions()
        current = positions[0] if positions and self.start_t is not None else None
        planned_before = math.nan
        if self._before is not None and current is not None:
            planned_before = self._planned_elapsed(self._before[0], self._before[1])
        if self.start_t is None:
            self.start_t = t_a
        if place is not None and place != current:
            j, hold = place
            if not (hold and current is not None and current == (j, False)):
                self._enter(j, t_a, temp_a)
            if hold:
                # timed from when the plan says the kiln arrived, never before the last reading
                # before the silence nor after the first one after it
                arrived = t_a
                if self._before is not None and math.isfinite(planned_before):
                    t0 = self._before[0]
                    arrived = min(max(t0 + self._plan_ramp_end[j] - planned_before, t0), t_a)
                self.hold_start_t = arrived
        self._resume = None
        self._before = None
        for t, temp, rate in pts:
            self._step(t, temp, rate)
        return True

    def update(self, times: np.ndarray, temps: np.ndarray, rates: np.ndarray) -> dict[str, np.ndarray]:
        """Feed readings (degC and degC/h of the control thermocouple); return the plan.* arrays.

        The arrays are NaN where the tracker has not placed the kiln: before the
        first temperature, and after a start or a silence of more than
        ``resume_gap_s`` until the readings tell where the kiln is (at most
        :data:`SETTLE_S` of them).
        """
        n = len(times)
        out = {name: np.full(n, np.nan) for name, _, _ in PLAN_CHANNELS}
        remaining = behind = math.nan
        estimated = False
        for i in range(n):
            t, temp, rate = float(times[i]), float(temps[i]), float(rates[i])
            if math.isfinite(temp):
                if self._resume is None and (self.start_t is None or (self._seen is not None and t - self._seen[0] > self.resume_gap_s)):
                    # a start, or a silence the kiln may have moved on in: place it again (issue 10)
                    self._before = self._seen if self.start_t is not None else None
                    self._resume = []
                self._seen = (t, temp)
                if self._resume is not None:
                    self._resume.append((t, temp, rate))
                    if not self._try_resume():
                        continue  # not yet placed: the plan is unknown, not segment 1
                else:
                    self._step(t, temp, rate)
            elif self.start_t is None or self._resume is not None:
                continue
            sp = self._setpoint(t)
            out["plan.segment"][i] = self.segment
            out["plan.setpoint"][i] = sp
            fast_ramp = not self.done and self.hold_start_t is None and self.schedule.segments[self.segment].is_fast
            out["plan.deviation"][i] = temp - sp if math.isfinite(temp) and not fast_ramp else math.nan
            out["plan.hold"][i] = (t - self.hold_start_t) if self.hold_start_t is not None else math.nan
            if not estimated or i == n - 1 or i % 10 == 0:  # the prediction changes slowly; every 10th reading is plenty
                estimated = True
                start_t = self.start_t
                assert start_t is not None  # placed: a start sets it before any setpoint is given
                remaining = self._remaining(t, temp if math.isfinite(temp) else self.segment_start_c)
                if self.done:  # frozen at the moment the schedule ended
                    behind = (self.segment_start_t - start_t) - self._plan_seg_end[-1]
                else:
                    behind = (t - start_t) - self._planned_elapsed(t, temp if math.isfinite(temp) else self.segment_start_c)
            out["plan.remaining"][i] = remaining
            out["plan.behind"][i] = behind
        if n and self.start_t is not None and self._resume is None:
            t = float(times[-1])
            seg_el = t - self.segment_start_t
            hold = None if self.hold_start_t is None else t - self.hold_start_t
            if self.done:
                phase, frac = "done", 1.0
            elif hold is not None:
                seg = self.schedule.segments[self.segment]
                phase, frac = "hold", 1.0 if seg.hold_s == 0 else min(hold / seg.hold_s, 1.0)
            else:
                seg = self.schedule.segments[self.segment]
                span = seg.target_c - self.segment_start_c
                last_temp = float(temps[-1])
                phase, frac = "ramp", 0.0 if span == 0 or not math.isfinite(last_temp) else min(max((last_temp - self.segment_start_c) / span, 0.0), 1.0)
            self.last = Snapshot(
                self.segment, phase, t - self.start_t, seg_el, hold, frac,
                float(out["plan.setpoint"][-1]), float(out["plan.deviation"][-1]),
                float(out["plan.remaining"][-1]), float(out["plan.behind"][-1]),
            )
        return out
