"""From parsed lines to what the firing log keeps: conversion, reconciliation, divergence.

One :class:`Pipeline` is shared by the recorder, ``sim --to-log`` and
``replay --headless`` so that all three compute the same thing. It works
on batches (everything received since the last commit) so that the physics
runs vectorised over each channel.

Channels written for each batch
-------------------------------
======================= ======= ==============================================
name                    unit    what
======================= ======= ==============================================
``<cj>``                degC    cold-junction sensor, as reported
``<tc>``                degC    thermocouple, converted (ITS-90, compensated)
``<tc>.rate``           degC/h  trailing least-squares rate of change
``<py>``                degC    pyrometer as the instrument shows it
``<py>.reconciled``     degC    corrected for emissivity, window, reflection
``<py>.u``              K       standard uncertainty of the reconciled value
``<py>.divergence``     K       reconciled minus the reference thermocouple
``<py>.allowed``        K       k times the combined standard uncertainty
======================= ======= ==============================================

The firing's time line
----------------------
Each line's own time is the device's (``clock = "device"``, where the line
carries one) or the moment it was received. A line is *in step* when its
time is not before the last accepted line's and not further ahead than the
wall-clock time between the two plus :data:`JUMP_S`. A line out of step is
held until the lines after it decide: if the next line is in step with the
lines before, the held line was an outlier (kept raw, counted, reported as
malformed, never a sample); if :data:`CONFIRM` lines follow in step with it,
the clock really jumped and a new *stretch* begins, recorded as a gap. A
clock that went back (a device reset) is shifted so that the time line
still runs forward. See docs/line-format.md.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from firewatch.firing.progress import PLAN_CHANNELS, ProgressTracker
from firewatch.firing.rates import TrailingSlopes
from firewatch.physics._warnings import FirewatchWarning
from firewatch.physics.bands import Band
from firewatch.physics.corrections import correct_ratio, correct_single_band
from firewatch.physics.thermocouples import emf_to_temperature
from firewatch.physics.tolerances import tolerance_uncertainty
from firewatch.physics.windows import Window
from firewatch.settings.profile import Pyrometer, SiteProfile
from firewatch.settings.schedule import Schedule
from firewatch.transport.batch import Columns, Gatherer
from firewatch.transport.records import Malformed, ReadingSet, Status

__all__ = ["Batch", "from_columns", "to_columns", "Pipeline", "ChannelInfo", "channel_table", "measurement_key", "JUMP_S", "CONFIRM"]

JUMP_S = 10.0
"""How far a line's time may run ahead of the last accepted line's beyond the wall-clock time between
them, s, before it is held as out of step (ten 1 Hz lines; a larger step of the device clock needs
confirming)."""
CONFIRM = 2
"""Lines that must follow an out-of-step line, in step with it, before it starts a new stretch."""


@dataclass(frozen=True)
class ChannelInfo:
    """A channel of the firing log."""

    name: str
    kind: str
    unit: str
    source: str = ""
    description: str = ""


def channel_table(site: SiteProfile, schedule: Schedule | None = None) -> list[ChannelInfo]:
    """Every channel the pipeline writes for a site (and schedule), in a stable order."""
    out: list[ChannelInfo] = []
    for cj in site.cold_junctions:
        out.append(ChannelInfo(cj, "cold_junction", "C", cj, "cold-junction sensor"))
    for tc in site.thermocouples:
        out.append(ChannelInfo(tc.name, "thermocouple", "C", tc.name, f"type {tc.type} {tc.role} {tc.label}".strip()))
        out.append(ChannelInfo(f"{tc.name}.rate", "derived", "C/h", tc.name, "rate of change"))
    for py in site.pyrometers:
        out.append(ChannelInfo(py.name, "pyrometer", "C", py.name, f"{py.kind} pyrometer as shown {py.label}".strip()))
        out.append(ChannelInfo(f"{py.name}.reconciled", "derived", "C", py.name, "reconciled temperature"))
        out.append(ChannelInfo(f"{py.name}.u", "derived", "K", py.name, "standard uncertainty of the reconciled temperature"))
        if py.reference:
            out.append(ChannelInfo(f"{py.name}.divergence", "derived", "K", py.name, f"reconciled minus {py.reference}"))
            out.append(ChannelInfo(f"{py.name}.allowed", "derived", "K", py.name, "k x combined standard uncertainty"))
    if schedule is not None and site.control is not None:
        for name, unit, description in PLAN_CHANNELS:
            out.append(ChannelInfo(name, "progress", unit, site.control.name, description))
    return out


def measurement_key(site: SiteProfile) -> str:
    """Everything that decides how a site turns lines into the measured values a log keeps (the input, its channels,
    each thermocouple's type, unit and cold junction): two sites with the same key convert any line alike."""
    return repr((
        site.input, tuple(site.channel_names), tuple(site.cold_junctions),
        tuple((tc.name, tc.type, tc.unit, tc.cold_junction) for tc in site.thermocouples),
        tuple(py.name for py in site.pyrometers),
    ))


@dataclass
class Batch:
    """What one batch adds to the firing log.

    ``raw`` holds every line (good or not) in arrival order;
    ``samples`` one entry per good line with the index of its raw line;
    ``values``/``status`` per channel, aligned with ``samples``.
    """

    raw: list[tuple[float, bytes, bool, str]] = field(default_factory=list)
    samples: list[tuple[int, float, float, float | None, int | None]] = field(default_factory=list)
    values: dict[str, np.ndarray] = field(default_factory=dict)
    status: dict[str, np.ndarray] = field(default_factory=dict)
    events: list[tuple[float, str, str | None, str]] = field(default_factory=list)
    gaps: list[tuple[float, float, str]] = field(default_factory=list)
    """Gaps the time line itself shows (a new stretch of the clock): start, end, reason."""

    @property
    def times(self) -> np.ndarray:
        return np.array([s[1] for s in self.samples], dtype=float)

    @property
    def malformed(self) -> int:
        return sum(1 for r in self.raw if not r[2])


def to_columns(items: list[ReadingSet | Malformed], channels: tuple[str, ...], clock: str) -> Batch:
    """Gather lines parsed one by one into a :class:`Batch` of raw lines, samples and per-channel arrays.

    Stateless, so that it can run in another process; a parser's
    ``parse_batch`` gives the same columns from the lines themselves, faster.
    The pipeline then places the lines on the time line, reports the
    malformed ones and computes everything else.
    """
    g = Gatherer(channels, clock)
    for item in items:
        g.item(item)
    return from_columns(g.columns())


def from_columns(cols: Columns | Batch) -> Batch:
    """A parser's :class:`~firewatch.transport.batch.Columns` as a :class:`Batch` (no copy)."""
    if isinstance(cols, Batch):
        return cols
    return Batch(raw=cols.raw, samples=cols.samples, values=cols.values, status=cols.status)


def _join(a: Batch, b: Batch) -> Batch:
    """Lines held from one batch followed by the next batch's (columns not yet computed)."""
    shift = len(a.raw)
    out = Batch(
        raw=a.raw + b.raw,
        samples=a.samples + [(s[0] + shift, *s[1:]) for s in b.samples],
        events=a.events + b.events,
    )
    for name in set(a.values) | set(b.values):
        out.values[name] = np.concatenate([part.values[name] for part in (a, b) if name in part.values])
        out.status[name] = np.concatenate([part.status[name] for part in (a, b) if name in part.status])
    return out


def _split(batch: Batch, first_sample: int) -> Batch:
    """Cut off the lines from sample ``first_sample`` on (and every raw line after it) into a new batch."""
    cut = batch.samples[first_sample][0]
    rest = Batch(
        raw=batch.raw[cut:],
        samples=[(s[0] - cut, *s[1:]) for s in batch.samples[first_sample:]],
        values={k: v[first_sample:] for k, v in batch.values.items()},
        status={k: v[first_sample:] for k, v in batch.status.items()},
    )
    batch.raw = batch.raw[:cut]
    batch.samples = batch.samples[:first_sample]
    batch.values = {k: v[:first_sample] for k, v in batch.values.items()}
    batch.status = {k: v[:first_sample] for k, v in batch.status.items()}
    return rest


class Pipeline:
    """Convert and reconcile batches of lines for one site.

    Parameters
    ----------
    site : SiteProfile
    schedule : Schedule, optional
        For the alarm engine (issue 4).
    clock : str
        ``wall``: a reading's time is when it was received; ``device``: the
        line's own time (falling back to receipt when a line has none).
    """

    def __init__(self, site: SiteProfile, schedule: Schedule | None = None, clock: str = "wall") -> None:
        self.site = site
        self.schedule = schedule
        self.clock = clock
        self.channels = channel_table(site, schedule)
        self.progress = ProgressTracker(schedule) if schedule is not None and site.control is not None else None
        base = site.path.parent if site.path else Path(".")
        self._bands: dict[str, tuple[Band, Band | None]] = {}
        for py in site.pyrometers:
            if py.band_file:
                path = Path(py.band_file)
                band = Band.from_csv(path if path.is_absolute() else base / path)
            else:
                band = Band(*py.band_um)
            band2 = Band(*py.band2_um) if py.kind == "ratio" and py.band2_um else None
            self._bands[py.name] = (band, band2)
        # every thermocouple's rate in one call a batch (issue 15)
        self._rates = TrailingSlopes(site.alarms.rate_window_s, len(site.thermocouples))
        self._last_t = -math.inf
        self._fallback_noted: set[str] = set()
        self._anchor: tuple[float, float, float] | None = None
        """The last accepted line: its own time, when it was received, its place on the time line."""
        self._offset = 0.0
        """Time line minus the line's own time in the current stretch."""
        self._held: Batch | None = None
        """Trailing lines out of step, waiting for the lines after them to decide."""

    def fresh(self) -> Pipeline:
        """A pipeline for the same site and schedule with no history, sharing this one's band tables (their lookups
        stay cached); for a reader that recomputes stretch after stretch of a log."""
        out = Pipeline.__new__(Pipeline)
        out.__dict__.update(self.__dict__)
        out._rates = TrailingSlopes(self.site.alarms.rate_window_s, len(self.site.thermocouples))
        out.progress = ProgressTracker(self.schedule) if self.progress is not None and self.schedule is not None else None
        out._fallback_noted = set()
        out._last_t, out._anchor, out._offset, out._held = -math.inf, None, 0.0, None
        return out

    # -- parsing to arrays ------------------------------------------------------------
    def process(self, items: list[ReadingSet | Malformed]) -> Batch:
        """Convert and reconcile one batch of parsed lines."""
        return self.process_columns(to_columns(items, self.site.channel_names, self.clock))

    def process_columns(self, cols: Batch | Columns, final: bool = False) -> Batch:
        """Like :meth:`process`, from lines already gathered into columns: by a parser's
        ``parse_batch`` or by :func:`to_columns` (either may run in another process).

        Lines out of step on the time line are held back to the next call;
        ``final`` decides them with what is known (see :meth:`flush`).
        """
        # the lines held stay held until this batch is through, so that a failure loses none
        cols = from_columns(cols)
        batch = cols if self._held is None else _join(self._held, cols)
        held = None
        shift = 0.0 if self._anchor is None else self._anchor[2] - self._anchor[1]
        times = np.empty(0)
        if batch.samples:
            times, outliers, held_from = self._place_in_time(batch, final)
            if held_from is not None:
                held = _split(batch, held_from)
                times = times[:held_from]
            if outliers:
                keep = np.ones(times.size, dtype=bool)
                for i, reason in outliers:
                    keep[i] = False
                    raw_i = batch.samples[i][0]
                    r = batch.raw[raw_i]
                    batch.raw[raw_i] = (r[0], r[1], False, reason)
                batch.samples = [s for s, k in zip(batch.samples, keep) if k]
                batch.values = {k: v[keep] for k, v in batch.values.items()}
                batch.status = {k: v[keep] for k, v in batch.status.items()}
                times = times[keep]
            batch.samples = [(s[0], t, *s[2:]) for s, t in zip(batch.samples, times.tolist())]
            if times.size:
                self._last_t = float(times[-1])
                shift = self._anchor[2] - self._anchor[1] if self._anchor is not None else 0.0
        # every line kept raw only is reported, at its place on the time line
        batch.events[:0] = [(r[0] + shift, "malformed", None, r[3]) for r in batch.raw if not r[2]]
        if batch.samples:
            self._cols = {name: (batch.values[name], batch.status[name]) for name in batch.values}
            batch.values, batch.status = {}, {}
            self._compute_arrays(times, batch)
        else:
            batch.values, batch.status = {}, {}
        self._held = held
        return batch

    def held_raw(self) -> list[tuple[float, bytes, bool, str]]:
        """The raw lines held back for the lines after them (not yet in any returned batch)."""
        return [] if self._held is None else list(self._held.raw)

    def drop_held(self) -> None:
        """Forget the held lines (their caller keeps them raw after a failed batch)."""
        self._held = None

    def flush(self) -> Batch:
        """Decide the lines still held (at the end of a recording or replay) and return them as a batch.

        Held lines that a stretch already recorded contradicts, and no line
        confirmed, are kept raw only; lines held at the very start, with
        nothing before them, begin the time line.
        """
        if self._held is None:
            return Batch()
        return self.process_columns(Batch(), final=True)

    def _place_in_time(self, batch: Batch, final: bool) -> tuple[np.ndarray, list[tuple[int, str]], int | None]:
        """Each sample's place on the time line (NaN where not placed), the outliers with their reason,
        and the first sample held back for the lines after it (None when none is)."""
        own = np.fromiter((s[1] for s in batch.samples), dtype=float, count=len(batch.samples))
        received = np.fromiter((s[2] for s in batch.samples), dtype=float, count=len(batch.samples))
        n = own.size
        times = np.full(n, np.nan)
        start = 0
        if self._anchor is not None:
            # the common case, vectorised: every line in step with the one before
            a_own, a_recv, _ = self._anchor
            steps = np.diff(own, prepend=a_own)
            slack = np.maximum(np.diff(received, prepend=a_recv), 0.0) + JUMP_S
            ok = (steps >= 0.0) & (steps <= slack)
            start = n if ok.all() else int(np.argmin(ok))
            if start:
                times[:start] = own[:start] + self._offset
                self._anchor = (float(own[start - 1]), float(received[start - 1]), float(times[start - 1]))
        elif self.clock != "device":
            # the computer's own clock starts the time line as it is
            times[0] = own[0]
            self._anchor = (float(own[0]), float(received[0]), float(own[0]))
            start = 1
        outliers: list[tuple[int, str]] = []
        gaps: list[tuple[float, float, str]] = []
        jumps: list[tuple[float, str]] = []
        pending: list[int] = []
        what = "device time" if self.clock == "device" else "time of receipt"

        def in_step(a: tuple[float, float] | int, k: int) -> bool:
            a_own, a_recv = (own[a], received[a]) if isinstance(a, int) else a
            step = own[k] - a_own
            return 0.0 <= step <= max(received[k] - a_recv, 0.0) + JUMP_S

        def accept(k: int) -> None:
            times[k] = own[k] + self._offset
            self._anchor = (float(own[k]), float(received[k]), float(times[k]))

        def reject(ks: list[int], why: str) -> None:
            for k in ks:
                if self._anchor is None:
                    outliers.append((k, f"{what} out of step with the lines after it; kept raw only ({why})"))
                    continue
                step = own[k] - self._anchor[0]
                where = f"{step:.3f} s ahead of" if step >= 0 else f"{-step:.3f} s behind"
                outliers.append((k, f"{what} {where} the line before ({why}); kept raw only"))

        def new_stretch(ks: list[int]) -> None:
            k0 = ks[0]
            if self._anchor is not None:
                a_own, a_recv, a_t = self._anchor
                step = own[k0] - a_own
                if step < 0:
                    # the clock went back (a reset): shift it so that the time line runs on,
                    # and record the gap, which the time line alone would not show
                    self._offset = a_t + max(received[k0] - a_recv, 0.0) - own[k0]
                    gaps.append((a_t, float(own[k0] + self._offset), f"{what} went back {-step:.3f} s: a new stretch"))
                else:
                    # ahead: the time line shows the gap, recorded like any silence
                    took = max(received[k0] - a_recv, 0.0)
                    jumps.append((float(own[k0] + self._offset), f"{what} jumped {step:.3f} s ahead in {took:.3f} s of receipt: a new stretch"))
            for k in ks:
                accept(k)

        for k in range(start, n):
            if not pending:
                if self._anchor is not None and in_step(self._anchor[:2], k):
                    accept(k)
                else:
                    pending = [k]
                continue
            if self._anchor is not None and in_step(self._anchor[:2], k):
                reject(pending, "the line after it is in step with the lines before")
                pending = []
                accept(k)
            elif in_step(pending[-1], k):
                pending.append(k)
                if len(pending) > CONFIRM:
                    new_stretch(pending)
                    pending = []
            else:
                reject(pending, "the lines after it do not follow it")
                pending = [k]
        held_from = None
        if pending:
            if not final:
                held_from = pending[0]
            elif self._anchor is None:
                new_stretch(pending)
            else:
                reject(pending, "not confirmed before the lines ended")
        batch.gaps.extend(gaps)
        batch.events.extend((t, "clock", None, why) for t, why in jumps)
        return times, outliers, held_from

    def _time_for(self, received: float, device_time: float | None) -> float:
        if self.clock == "device" and device_time is not None:
            return device_time
        return received

    def _column(self, name: str) -> tuple[np.ndarray, np.ndarray]:
        """A copy of one channel's values and status in the batch being computed."""
        values, status = self._cols[name]
        return values.copy(), status.copy()

    def _compute_arrays(self, times: np.ndarray, batch: Batch) -> None:
        self._measure(times, batch)
        self._derive(times, batch.values, batch.status, batch.events)
        self._progress(times, batch.values, batch.status)

    def _progress(self, times: np.ndarray, out_v: dict[str, np.ndarray], out_s: dict[str, np.ndarray]) -> None:
        if self.progress is not None:
            # a tracker is made only for a site with a control thermocouple (__init__)
            assert self.site.control is not None
            ctl = self.site.control.name
            plan = self.progress.update(times, out_v[ctl], out_v[f"{ctl}.rate"])
            for name, values in plan.items():
                out_v[name] = values
                out_s[name] = np.where(np.isfinite(values), int(Status.OK), int(Status.MISSING))

    def continue_measured(self, times: np.ndarray, values: dict[str, np.ndarray], status: dict[str, np.ndarray]
                          ) -> tuple[dict[str, np.ndarray], dict[str, np.ndarray]]:
        """Every channel of measured readings as a log keeps them (in time order, batch after batch), derived and
        progress ones computed on from this pipeline's state, as :meth:`process_columns` would have from the lines.

        For a replay whose site converts lines as the recorder's did: the log's
        measured values are then exactly what parsing and converting its raw lines
        again would give, so they are taken as kept.
        """
        out_v = {name: values[name] for name in self.site.channel_names if name in values}
        out_s = {name: status[name] for name in out_v}
        self._derive(times, out_v, out_s, [])
        self._progress(times, out_v, out_s)
        if times.size:
            self._last_t = float(times[-1])
        return out_v, out_s

    def _measure(self, times: np.ndarray, batch: Batch) -> None:
        """The measured channels as the log keeps them: cold junctions as reported, thermocouples converted, pyrometers as shown."""
        site = self.site
        n = times.size
        out_v, out_s = batch.values, batch.status
        for cj in site.cold_junctions:
            out_v[cj], out_s[cj] = self._column(cj)
        ok = int(Status.OK)
        # the thermocouples reading mV, by type: each type converted in one call over its channels stacked
        # (issue 15: a call per channel per batch cost twenty times the conversion itself)
        by_type: dict[str, list[tuple[str, np.ndarray, np.ndarray, np.ndarray]]] = {}
        for tc in site.thermocouples:
            raw, status = self._column(tc.name)
            if tc.unit == "mV":
                if isinstance(tc.cold_junction, str):
                    cold = out_v.get(tc.cold_junction, np.full(n, np.nan))
                    cold_ok = out_s.get(tc.cold_junction, np.zeros(n, dtype=np.int64)) == Status.OK
                    status = np.where((status == Status.OK) & ~cold_ok, int(Status.ERROR), status)
                else:
                    cold = np.full(n, float(tc.cold_junction))
                by_type.setdefault(tc.type, []).append((tc.name, raw, status, cold))
            else:
                temp = np.where(status == Status.OK, raw, np.nan)
                bad = (status == Status.OK) & np.isnan(temp)
                out_v[tc.name], out_s[tc.name] = temp, np.where(bad, int(Status.OUT_OF_RANGE), status)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", FirewatchWarning)  # out-of-range becomes a status below
            for tc_type, group in by_type.items():
                raws = np.stack([g[1] for g in group])
                statuses = np.stack([g[2] for g in group])
                colds = np.stack([g[3] for g in group])
                good = statuses == ok
                temps = emf_to_temperature(np.where(good, raws, np.nan), tc_type, np.nan_to_num(colds, nan=0.0))
                statuses = np.where(good & np.isnan(temps), int(Status.OUT_OF_RANGE), statuses)
                for (name, *_), temp, status in zip(group, temps, statuses):
                    out_v[name], out_s[name] = temp, status
        # the thermocouples in the site's order, as before (the writer and readers follow the dict's order)
        for tc in site.thermocouples:
            out_v[tc.name] = out_v.pop(tc.name)
            out_s[tc.name] = out_s.pop(tc.name)
        for py in site.pyrometers:
            shown, status = self._column(py.name)
            # below absolute zero no radiance exists to invert: out of range, not a numpy warning
            status = np.where((status == Status.OK) & ~(shown > -273.15), int(Status.OUT_OF_RANGE), status)
            out_v[py.name], out_s[py.name] = np.where(status == Status.OK, shown, np.nan), status

    def derive(self, times: np.ndarray, values: dict[str, np.ndarray], status: dict[str, np.ndarray]) -> tuple[dict[str, np.ndarray], dict[str, np.ndarray]]:
        """The derived channels (rates, reconciled temperatures, uncertainties, divergences, allowances) of
        measured readings as the log keeps them, in time order; progress is not among them.

        This is how a reader recomputes what the log does not keep per sample; a
        rate needs ``rate_window_s`` of readings before the first it is wanted for.
        """
        out_v = {name: values[name] for name in self.site.channel_names if name in values}
        out_s = {name: status[name] for name in out_v}
        events: list[tuple[float, str, str | None, str]] = []
        self._derive(times, out_v, out_s, events)
        keep = [c.name for c in self.channels if c.kind == "derived"]
        return {k: out_v[k] for k in keep if k in out_v}, {k: out_s[k] for k in keep if k in out_s}

    def _derive(self, times: np.ndarray, out_v: dict[str, np.ndarray], out_s: dict[str, np.ndarray],
                events: list[tuple[float, str, str | None, str]]) -> None:
        site = self.site
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", FirewatchWarning)  # out-of-range becomes a status below
            tcs = site.thermocouples
            if tcs:
                rates = self._rates.update(times, np.stack([out_v[tc.name] for tc in tcs])) * 3600.0
                statuses = np.where(np.isnan(rates), int(Status.MISSING), int(Status.OK))
                for tc, rate, status in zip(tcs, rates, statuses):
                    out_v[f"{tc.name}.rate"], out_s[f"{tc.name}.rate"] = rate, status
            for py in site.pyrometers:
                self._pyrometer(py, times, out_v, out_s, events)

    def warm_start(self, times: np.ndarray, values: dict[str, np.ndarray], last: tuple[float, float, float | None] | None = None) -> None:
        """Bring trends and progress up to date from readings already in a continued log (no output).

        ``last`` is the log's last sample: its place on the time line, when
        it was received and its device time; the time line goes on from it.
        """
        if last is not None:
            t, received, device_time = last
            own = device_time if self.clock == "device" and device_time is not None else received
            self._anchor = (float(own), float(received), float(t))
            self._offset = float(t) - float(own)
        rates: dict[str, np.ndarray] = {}
        tcs = self.site.thermocouples
        if tcs and times.size:
            # a thermocouple the log has no readings of goes through as missing readings
            stacked = np.stack([np.asarray(values[tc.name], dtype=float) if tc.name in values else np.full(times.size, np.nan) for tc in tcs])
            rates = {tc.name: rate for tc, rate in zip(tcs, self._rates.update(times, stacked) * 3600.0) if tc.name in values}
        if self.progress is not None and self.site.control is not None:
            ctl = self.site.control.name
            if ctl in values:
                rate = values.get(f"{ctl}.rate", rates.get(ctl, np.full(times.size, np.nan)))
                self.progress.update(times, values[ctl], rate)
        if times.size:
            self._last_t = float(times[-1])

    def _background(self, py: Pyrometer, values: dict[str, np.ndarray], n: int) -> tuple[np.ndarray | None, np.ndarray]:
        if py.background is None:
            return None, np.zeros(n, dtype=bool)
        if isinstance(py.background, float):
            return np.full(n, py.background), np.zeros(n, dtype=bool)
        bg = values[py.background]
        missing = ~np.isfinite(bg)
        return bg, missing

    def _pyrometer(self, py: Pyrometer, times: np.ndarray, values: dict[str, np.ndarray], statuses: dict[str, np.ndarray],
                   events: list[tuple[float, str, str | None, str]]) -> None:
        n = times.size
        band, band2 = self._bands[py.name]
        indicated, status = values[py.name], statuses[py.name]
        ok = status == Status.OK
        accuracy = np.maximum(py.accuracy_c, py.accuracy_percent / 100.0 * np.abs(np.nan_to_num(indicated))) / math.sqrt(3.0)
        if py.kind == "ratio":
            assert band2 is not None
            reconciled, u = correct_ratio(
                indicated, band, band2, py.slope, py.set_slope,
                slope_u=py.slope_uncertainty, instrument_u_c=accuracy, return_uncertainty=True,
            )
        else:
            path: float | Window = Window(py.window, fouling=py.fouling) if py.window else py.transmission
            bg, missing = self._background(py, values, n)
            if bg is None:
                reconciled, u = correct_single_band(
                    indicated, band, py.emissivity, path, py.set_emissivity, py.set_transmission,
                    emissivity_u=py.emissivity_uncertainty, transmission_u=py.transmission_uncertainty,
                    instrument_u_c=accuracy, return_uncertainty=True,
                )
            else:
                # Where the background thermocouple has no value, fall back to the
                # cavity assumption (walls at the ware's temperature: the ware looks
                # black), rather than lose the pyrometer when it is needed most.
                bg_filled = np.where(missing, np.nan_to_num(indicated, nan=1000.0), bg)
                eps = np.where(missing, 1.0, py.emissivity)
                reconciled, u = correct_single_band(
                    indicated, band, eps, path, py.set_emissivity, py.set_transmission, background_c=bg_filled,
                    emissivity_u=np.where(missing, 0.0, py.emissivity_uncertainty),
                    transmission_u=py.transmission_uncertainty, instrument_u_c=accuracy, return_uncertainty=True,
                )
                if missing.any() and py.name not in self._fallback_noted:
                    self._fallback_noted.add(py.name)
                    i = int(np.argmax(missing))
                    events.append((float(times[i]), "fallback", py.name,
                           f"background {py.background} has no value; assuming the walls are at the ware's temperature"))
                if not missing.any():
                    self._fallback_noted.discard(py.name)
        rec_status = np.where(ok & np.isfinite(reconciled), int(Status.OK), np.where(ok, int(Status.OUT_OF_RANGE), status))
        values[f"{py.name}.reconciled"], statuses[f"{py.name}.reconciled"] = reconciled, rec_status
        values[f"{py.name}.u"], statuses[f"{py.name}.u"] = u, rec_status
        if py.reference:
            tc = self.site.thermocouple(py.reference)
            assert tc is not None
            ref = values[tc.name]
            rate_c_per_s = values[f"{tc.name}.rate"] / 3600.0
            u_tc = tolerance_uncertainty(tc.type, ref, tc.tolerance_class)
            # outside its class's range, take 0.75 % of reading as the bound (common practice, no source)
            u_tc = np.where(np.isnan(u_tc), 0.0075 * np.abs(ref) / math.sqrt(3.0), u_tc)
            u_lag = tc.time_constant_s * np.abs(np.nan_to_num(rate_c_per_s))
            divergence = reconciled - ref
            allowed = self.site.alarms.divergence_k * np.sqrt(u**2 + u_tc**2 + u_lag**2)
            both = (rec_status == Status.OK) & (statuses[tc.name] == Status.OK)
            st = np.where(both, int(Status.OK), int(Status.MISSING))
            values[f"{py.name}.divergence"], statuses[f"{py.name}.divergence"] = np.where(both, divergence, np.nan), st
            values[f"{py.name}.allowed"], statuses[f"{py.name}.allowed"] = np.where(both, allowed, np.nan), st
