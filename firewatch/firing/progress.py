"""Where a firing stands against its schedule, and when it will finish.

The current segment is inferred from time *and* the measured temperature,
as a careful controller runs a firing: a ramp ends when the kiln reaches
its target (within ``band_c``), a hold then runs for its time, and a kiln
that lags a ramp is still in that segment. The finish is predicted from
the kiln's demonstrated climbing ability where it has shown one: while the
kiln falls short of a planned heating rate, the rates it managed are kept
against temperature, and a straight line through them (climbing ability
falls as losses rise with temperature) caps the planned rates of the
segments still to come.

Where the tracker has no history (a recorder started mid-firing) or the
readings stopped for longer than ``resume_gap_s`` (a recorder restart, a
lost port), it does not carry its state blindly across the silence: it
re-infers where the kiln is, from the first readings after the silence,
the temperature, the direction it is moving in, and the least time the
schedule needs to get there (a controller never runs ahead of its
program). See :meth:`ProgressTracker.update`.

Per reading, :meth:`ProgressTracker.update` returns arrays for the firing
log's ``plan.*`` channels:

============== ====== ======================================================
plan.segment   1      current segment index (0-based); len(segments) = done
plan.setpoint  degC   the segment's own plan: start + rate x time in segment
plan.deviation K      measured minus plan.setpoint (NaN in "max" ramps)
plan.hold      s      time into the current hold (NaN while ramping)
plan.remaining s      predicted time to the end of the schedule
plan.behind    s      actual minus planned elapsed time at this progress
============== ====== ======================================================
"""

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
        self._lines: dict[int, tuple[float, float, float] | None] = {}
        """The ability line by the number of shortfalls it is drawn through (the shortfalls only grow)."""
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

    def _ability_line(self, count: int) -> tuple[float, float, float] | None:
        """(latest, slope, last temperature) of the line through the first ``count`` shortfalls; None with too few."""
        cached = self._lines.get(count)
        if cached is not None or count in self._lines:
            return cached
        pts = [p for p in self.ability[:count] if p[0] > 150.0]
        line = None
        if len(pts) >= 3:
            x = np.array([p[0] for p in pts[-12:]])
            y = np.array([p[1] for p in pts[-12:]])
            latest = float(np.median(y[-5:]))
            slope = min(float(np.polyfit(x, y, 1)[0]), 0.0) if np.ptp(x) >= 100.0 else 0.0
            line = (latest, slope, float(x[-1]))
        self._lines[count] = line
        return line

    def _ability_at(self, temp: float, count: int | None = None) -> float:
        """The heating rate the kiln can manage at ``temp``, degC/h (inf while it has kept up).

        The median of the latest shortfalls, falling further with temperature
        where the shortfalls show a clear fall over 100 degC or more, and never
        below half the latest rate (a guard against extrapolating noise).
        ``count``: judge by the first ``count`` shortfalls only (all by default).
        """
        line = self._ability_line(len(self.ability) if count is None else count)
        if line is None:
            return math.inf
        latest, slope, x_last = line
        value = latest + slope * max(temp - x_last, 0.0)
        return max(value, 0.5 * latest)

    def _ability_array(self, temp: np.ndarray, count: int) -> np.ndarray:
        """:meth:`_ability_at` over an array of temperatures (the same operations, element by element)."""
        line = self._ability_line(count)
        if line is None:
            return np.full(temp.shape, math.inf)
        latest, slope, x_last = line
        value = latest + slope * np.maximum(temp - x_last, 0.0)
        return np.maximum(value, 0.5 * latest)

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

    # -- the batch as arrays -----------------------------------------------------------
    def _sample(self, t: float, temp: float, rate: float) -> bool:
        """One reading in turn, as a state-changing reading is taken; False where the plan is not given."""
        if math.isfinite(temp):
            if self._resume is None and (self.start_t is None or (self._seen is not None and t - self._seen[0] > self.resume_gap_s)):
                # a start, or a silence the kiln may have moved on in: place it again (issue 10)
                self._before = self._seen if self.start_t is not None else None
                self._resume = []
            self._seen = (t, temp)
            if self._resume is not None:
                self._resume.append((t, temp, rate))
                if not self._try_resume():
                    return False  # not yet placed: the plan is unknown, not segment 1
            else:
                self._step(t, temp, rate)
        elif self.start_t is None or self._resume is not None:
            return False
        return True

    def _next_event(self, i: int, times: np.ndarray, temps: np.ndarray, finite: np.ndarray, gap: np.ndarray) -> int:
        """The first reading from ``i`` on that may change the state (``times.size`` when none does)."""
        event = gap[i:].copy()
        if not self.done:
            seg = self.schedule.segments[self.segment]
            with np.errstate(invalid="ignore"):
                if self.hold_start_t is not None:
                    event |= finite[i:] & (times[i:] - self.hold_start_t >= seg.hold_s)
                elif seg.target_c >= self.schedule.start_of(self.segment):
                    event |= finite[i:] & (temps[i:] >= seg.target_c - self.band_c)
                else:
                    event |= finite[i:] & (temps[i:] <= seg.target_c + self.band_c)
        hits = np.flatnonzero(event)
        return i + int(hits[0]) if hits.size else times.size

    def _stretch(self, i: int, j: int, times: np.ndarray, temps: np.ndarray, rates: np.ndarray, finite: np.ndarray) -> np.ndarray:
        """Readings ``i:j`` that change no state: learn from them as :meth:`_learn` would, one by one.

        Returns the number of shortfalls known after each reading.
        """
        known = np.full(j - i, len(self.ability), dtype=np.intp)
        last = np.flatnonzero(finite[i:j])
        if last.size:
            k = i + int(last[-1])
            self._seen = (float(times[k]), float(temps[k]))
        if self.done or self.hold_start_t is not None:
            return known
        seg = self.schedule.segments[self.segment]
        if seg.rate_c_per_h <= 0:
            return known
        planned = seg.rate_c_per_h if not seg.is_fast else math.inf
        t, temp, rate = times[i:j], temps[i:j], rates[i:j]
        with np.errstate(invalid="ignore"):
            keep = finite[i:j] & np.isfinite(rate) & ~(t - self.segment_start_t < 600.0) & (rate > 0) & (rate < 0.85 * planned)
        at = np.flatnonzero(keep)
        if not at.size:
            return known
        # one point per 25 degC bin: a shortfall is kept when its bin differs from the one before it
        bins = np.floor_divide(temp[at], 25.0)
        before = np.empty_like(bins)
        before[0] = self._last_bin
        before[1:] = bins[:-1]
        new = bins != before
        self._last_bin = int(bins[-1])
        kept = at[new]
        self.ability.extend(zip(temp[kept].tolist(), rate[kept].tolist()))
        added = np.zeros(j - i, dtype=np.intp)
        added[kept] = 1
        return known + np.cumsum(added)

    def _mark(self, lo: int, hi: int, known: np.ndarray | None, state: dict[str, np.ndarray]) -> None:
        """Readings ``lo:hi`` are given the plan of the current state."""
        state["emit"][lo:hi] = True
        state["segment"][lo:hi] = self.segment
        state["seg_t"][lo:hi] = self.segment_start_t
        state["seg_c"][lo:hi] = self.segment_start_c
        state["hold_t"][lo:hi] = math.nan if self.hold_start_t is None else self.hold_start_t
        state["known"][lo:hi] = len(self.ability) if known is None else known

    def _remaining_array(self, k: int, hold_t: float | None, known: int, t: np.ndarray, temp: np.ndarray) -> np.ndarray:
        """:meth:`_remaining` at readings in segment ``k`` (hold from ``hold_t``), the same sums in the same order."""
        sched = self.schedule
        total = np.zeros(t.size)
        if k >= len(sched.segments):
            return total
        for i in range(k, len(sched.segments)):
            seg = sched.segments[i]
            if i == k and hold_t is not None:
                total += np.maximum(seg.hold_s - (t - hold_t), 0.0)
                continue
            rate = abs(sched.planned_rate(i))
            if i == k:
                mid = 0.5 * (temp + seg.target_c)
                r = np.where(seg.target_c > temp, np.minimum(rate, self._ability_array(mid, known)), rate)
                total += np.abs(seg.target_c - temp) / r * 3600.0 + seg.hold_s
            else:
                start = sched.start_of(i)
                if seg.target_c > start:
                    rate = min(rate, self._ability_at(0.5 * (start + seg.target_c), known))
                total += abs(seg.target_c - start) / rate * 3600.0 + seg.hold_s
        return total

    def _planned_elapsed_array(self, k: int, hold_t: float | None, t: np.ndarray, temp: np.ndarray) -> np.ndarray:
        """:meth:`_planned_elapsed` at readings in segment ``k`` (not done), element by element."""
        ramp_end, seg_end = self._plan_ramp_end, self._plan_seg_end
        if hold_t is not None:
            return ramp_end[k] + (t - hold_t)
        begin = seg_end[k - 1] if k else 0.0
        start = self.schedule.start_of(k)
        span = self.schedule.segments[k].target_c - start
        frac = np.zeros(t.size) if span == 0 else np.minimum(np.maximum((temp - start) / span, 0.0), 1.0)
        return begin + frac * (ramp_end[k] - begin)

    def _outputs(self, times: np.ndarray, temps: np.ndarray, state: dict[str, np.ndarray], out: dict[str, np.ndarray]) -> None:
        """The plan.* arrays from each reading's state."""
        at = np.flatnonzero(state["emit"])
        if not at.size:
            return
        segs = self.schedule.segments
        n_seg = len(segs)
        k = state["segment"][at]
        done = k >= n_seg
        ki = np.minimum(k, n_seg)
        rate_k = np.array([s.rate_c_per_h for s in segs] + [1.0])[ki]
        target_k = np.array([s.target_c for s in segs] + [math.nan])[ki]
        fast_k = np.array([s.is_fast for s in segs] + [False])[ki]
        t, temp = times[at], temps[at]
        seg_t, seg_c, hold_t = state["seg_t"][at], state["seg_c"][at], state["hold_t"][at]
        in_hold = np.isfinite(hold_t)
        with np.errstate(invalid="ignore", over="ignore"):
            sp = seg_c + rate_k / 3600.0 * (t - seg_t)
            sp = np.where(rate_k > 0, np.minimum(sp, target_k), np.maximum(sp, target_k))
        sp = np.where(in_hold | fast_k, target_k, sp)
        sp[done] = math.nan
        out["plan.segment"][at] = k
        out["plan.setpoint"][at] = sp
        fast_ramp = ~done & ~in_hold & fast_k
        out["plan.deviation"][at] = np.where(np.isfinite(temp) & ~fast_ramp, temp - sp, math.nan)
        out["plan.hold"][at] = np.where(in_hold, t - hold_t, math.nan)
        # the prediction changes slowly: judged at the first reading, every 10th and the last, then carried
        n = times.size
        est = (at == at[0]) | (at == n - 1) | (at % 10 == 0)
        e = np.flatnonzero(est)
        temp_e = np.where(np.isfinite(temp[e]), temp[e], seg_c[e])
        remaining = np.empty(e.size)
        behind = np.empty(e.size)
        start_t = self.start_t
        assert start_t is not None  # placed: a start sets it before any plan is given
        known = state["known"][at][e]
        keys = np.stack([k[e], np.where(in_hold[e], hold_t[e], -np.inf), known])
        # groups of readings with the same segment, hold and shortfalls: a handful per batch
        for key in np.unique(keys.T, axis=0):
            sel = np.flatnonzero((keys[0] == key[0]) & (keys[1] == key[1]) & (keys[2] == key[2]))
            seg_i = int(key[0])
            hold = None if key[1] == -np.inf else float(key[1])
            tt, te = t[e][sel], temp_e[sel]
            if seg_i >= n_seg:  # frozen at the moment the schedule ended
                remaining[sel] = 0.0
                behind[sel] = (seg_t[e][sel] - start_t) - self._plan_seg_end[-1]
                continue
            remaining[sel] = self._remaining_array(seg_i, hold, int(key[2]), tt, te)
            behind[sel] = (tt - start_t) - self._planned_elapsed_array(seg_i, hold, tt, te)
        carry = np.maximum.accumulate(np.where(est, np.arange(at.size), 0))
        place = np.cumsum(est) - 1
        out["plan.remaining"][at] = remaining[place[carry]]
        out["plan.behind"][at] = behind[place[carry]]

    def update(self, times: np.ndarray, temps: np.ndarray, rates: np.ndarray) -> dict[str, np.ndarray]:
        """Feed readings (degC and degC/h of the control thermocouple); return the plan.* arrays.

        The arrays are NaN where the tracker has not placed the kiln: before the
        first temperature, and after a start or a silence of more than
        ``resume_gap_s`` until the readings tell where the kiln is (at most
        :data:`SETTLE_S` of them).

        The batch is taken as arrays (issue 15): between the readings where the
        state can change (a ramp reaching its target, a hold running out, a
        start or a resume after a silence) the state is fixed, so each stretch
        is judged with numpy and only those few readings go through
        :meth:`_sample` one at a time. The result is the same, bit for bit, as
        taking every reading in turn.
        """
        times = np.asarray(times, dtype=float)
        temps = np.asarray(temps, dtype=float)
        rates = np.asarray(rates, dtype=float)
        n = times.size
        out = {name: np.full(n, np.nan) for name, _, _ in PLAN_CHANNELS}
        # the state each reading is reported with (after its own step), filled stretch by stretch
        state = {
            "emit": np.zeros(n, dtype=bool), "segment": np.zeros(n, dtype=np.intp), "seg_t": np.full(n, np.nan),
            "seg_c": np.full(n, np.nan), "hold_t": np.full(n, np.nan), "known": np.zeros(n, dtype=np.intp),
        }
        finite = np.isfinite(temps)
        # a reading that starts a resume: the first with a temperature after a silence (or the first ever)
        fin_idx = np.flatnonzero(finite)
        prev_t = np.empty(fin_idx.size)
        if fin_idx.size:
            prev_t[0] = self._seen[0] if self._seen is not None else math.nan
            prev_t[1:] = times[fin_idx[:-1]]
        with np.errstate(invalid="ignore"):
            gap = np.zeros(n, dtype=bool)
            gap[fin_idx] = (times[fin_idx] - prev_t) > self.resume_gap_s
        i = 0
        while i < n:
            if self._resume is not None or self.start_t is None:
                # placing the kiln: one reading at a time (at most SETTLE_S of them)
                if self._sample(float(times[i]), float(temps[i]), float(rates[i])):
                    self._mark(i, i + 1, None, state)
                i += 1
                continue
            # the next reading where the state may change: it goes through _sample alone
            j = self._next_event(i, times, temps, finite, gap)
            if j > i:
                known = self._stretch(i, j, times, temps, rates, finite)
                self._mark(i, j, known, state)
                if j >= n:
                    break
            ok = self._sample(float(times[j]), float(temps[j]), float(rates[j]))
            if ok:
                self._mark(j, j + 1, None, state)
            i = j + 1
        self._outputs(times, temps, state, out)
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
