"""The dashboard's widgets. Each owns one piece of data, set by its screen; none reaches into a sibling.

80×24 first: each widget lays its text out for the width it has, keeping
whole what an operator must read (values with their units, verdict words,
times with their units or clock) and cutting only what may be cut (labels,
names, messages), with an ellipsis. What is true (a verdict, a stale value)
is decided by the model (:class:`firewatch.store.view.Moment`); widgets draw it.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from contextlib import ExitStack
from dataclasses import dataclass

import numpy as np
from rich.text import Text
from textual.events import Resize
from textual.message import Message
from textual.reactive import reactive
from textual.widgets import DataTable, Static
from textual_hires_canvas import Canvas
from textual_plot import HiResMode, PlotWidget
from textual_plot.axis_formatter import AxisFormatter

from firewatch.settings.timefmt import Clock, duration, time_axis
from firewatch.settings.units import Units, from_celsius
from firewatch.store.view import VERDICTS, AlarmRow, Moment
from firewatch.ui import format as fmt

__all__ = ["AlarmList", "ChartData", "EventList", "ReadingsPanel", "SchedulePanel", "TimeAxisFormatter", "TrendChart", "corners",
           "envelope_line"]

ABNORMAL = "bold reverse"
"""The one emphasis for abnormal values: reads on a monochrome terminal too."""
CALM_VERDICTS = ("", "ok", "UNDER", "—")
"""Verdicts that are no alarm: a pyrometer below its range in a cool kiln is normal."""
VERDICT_WIDTH = max(len(v) for v in VERDICTS)
"""Room kept for the verdict on every row, so that no verdict word is ever cut."""
_ROLES = {"control": "ctl", "reference": "ref", "monitor": "mon"}


def _default_clock() -> Clock:
    return Clock.for_site("", utc=True)


class _Panel(Static):
    """A panel whose height follows its lines: a layout pass only when their number changes, not at every update."""

    _drawn_lines = -1

    def line_count(self, width: int) -> int:
        raise NotImplementedError

    def _changed(self) -> None:
        n = self.line_count(max(self.size.width, 20))
        if n != self._drawn_lines:
            self._drawn_lines = n
            self.refresh(layout=True)
        else:
            self.refresh()

    def on_resize(self) -> None:
        self._drawn_lines = -1
        self._changed()


class ReadingsPanel(_Panel):
    """Every thermocouple and pyrometer at the moment shown: name, value, verdict, then what room allows."""

    moment: reactive[Moment | None] = reactive(None, repaint=False, always_update=True)
    unit: reactive[str] = reactive("C", repaint=False)

    def __init__(self, site, **kw) -> None:
        super().__init__(**kw)
        self.site = site

    def watch_moment(self) -> None:
        self._changed()

    def watch_unit(self) -> None:
        self._changed()

    def line_count(self, width: int) -> int:
        return len(self.rows(width))

    def rows(self, width: int = 200) -> list[tuple[str, str, str, str]]:
        """(name, value, verdict, detail) per row as drawn at ``width``, the detail already fitted (for tests too)."""
        m, u, site = self.moment, Units(self.unit), self.site
        if m is None or site is None:
            return [("waiting for readings…", "", "", "")]
        if not m.values:
            return [("no readings yet", "", "", "")]
        wide = width >= 60
        out: list[tuple[str, str, str, list[str]]] = []
        for tc in site.thermocouples:
            verdict = m.verdict(tc.name)
            value = m.value(tc.name)
            shown = u.temperature(value) if verdict not in ("OPEN", "—") else "—"
            role = tc.role if wide else _ROLES.get(tc.role, tc.role)
            detail = [f"{tc.type} {role}", u.rate(m.value(tc.name + ".rate"), signed=True)]
            if wide and tc.label:
                detail = [f"type {tc.type}", detail[1], tc.label if tc.role in tc.label else f"{tc.role}, {tc.label}"]
            out.append((tc.name, shown, verdict, self._stale(m, tc.name, detail)))
        for py in site.pyrometers:
            verdict = m.verdict(py.name)
            rec = m.value(f"{py.name}.reconciled")
            if verdict in ("UNDER", "OVER", "OPEN", "ERROR", "RANGE", "—"):
                low, high = py.range_c
                edge = {"UNDER": low, "OVER": high}.get(verdict)
                shown = f"{'<' if verdict == 'UNDER' else '>'}{u.temperature(edge, 0)}" if edge is not None and math.isfinite(edge) else "—"
                detail = [{"UNDER": "below its range", "OVER": "above its range"}.get(verdict, "no reading")]
                if wide and math.isfinite(low) and math.isfinite(high):
                    detail[0] += f" {u.number(low, 0)}–{u.temperature(high, 0)}"
            else:
                shown = u.temperature(rec)
                detail = []
                div, allowed = m.value(f"{py.name}.divergence"), m.value(f"{py.name}.allowed")
                if math.isfinite(div) and math.isfinite(allowed):
                    if wide:
                        detail.append(f"Δ {u.delta(div)} of ±{u.delta(allowed, signed=False)}")
                    else:  # the unit once: Δ−11.5/±5.9 K
                        detail.append(f"Δ{u.delta(div).split()[0]}/±{u.delta(allowed, signed=False)}")
                detail.append(f"reads {u.temperature(m.value(py.name))}")
                detail.append(f"{'uncertainty' if wide else 'unc.'} ±{u.delta(m.value(py.name + '.u'), signed=False)}")
            if wide:
                detail.append(py.label or py.kind)
            out.append((py.name, shown, verdict, self._stale(m, py.name, detail)))
        for cj in site.cold_junctions:
            verdict = m.verdict(cj)
            out.append((cj, u.temperature(m.value(cj)), verdict, self._stale(m, cj, ["cold junction"])))
        name_w = max(len(r[0]) for r in out)
        value_w = max(len(r[1]) for r in out)
        room = width - name_w - value_w - VERDICT_WIDTH - 3
        return [(n, v, d, _fit_detail(parts, room)) for n, v, d, parts in out]

    def render(self) -> Text:
        width = max(self.size.width, 20)
        rows = self.rows(width)
        if len(rows) == 1 and not rows[0][1]:
            return Text(rows[0][0])
        name_w = max(len(r[0]) for r in rows)
        value_w = max(len(r[1]) for r in rows)
        text = Text(no_wrap=True, overflow="ellipsis")
        for i, (name, value, verdict, detail) in enumerate(rows):
            if i:
                text.append("\n")
            # the name may be cut at a very narrow width; value and verdict never are
            text.append(fmt.clip(name, max(width - value_w - VERDICT_WIDTH - 2, 3)).ljust(name_w) + " ")
            text.append(value.rjust(value_w) + " ")
            text.append(verdict.ljust(VERDICT_WIDTH), style="" if verdict in CALM_VERDICTS else ABNORMAL)
            if detail:
                text.append(" " + detail, style=ABNORMAL if verdict == "STALE" else "")  # "for 2 min 3 s"
        return text

    @staticmethod
    def _stale(m: Moment, name: str, detail: list[str]) -> list[str]:
        if name in m.stale:  # the model decided (older than the site's no_data_s); the row says for how long
            return [f"for {duration(m.age_s.get(name))}"]
        return detail


def _fit_detail(parts: list[str], room: int) -> str:
    """As many whole parts as fit in ``room`` cells (the first one clipped if it alone does not)."""
    out = ""
    for part in parts:
        if not part or part == "—":
            continue
        candidate = f"{out}, {part}" if out else part
        if len(candidate) <= room:
            out = candidate
        elif not out:
            return fmt.clip(part, room)
        else:
            break
    return out


class SchedulePanel(_Panel):
    """Where the firing stands against its schedule: the segment with its rate and target, the rate now, the end."""

    moment: reactive[Moment | None] = reactive(None, repaint=False, always_update=True)
    unit: reactive[str] = reactive("C", repaint=False)
    clock: reactive[Clock] = reactive(_default_clock, repaint=False)

    def watch_moment(self) -> None:
        self._changed()

    def watch_unit(self) -> None:
        self._changed()

    def watch_clock(self) -> None:
        self._changed()

    def line_count(self, width: int) -> int:
        return len(self.lines(width))
    MAX_LINES = 6
    """At 80×24 the panel keeps to this many lines (the trend below needs the rest)."""

    def __init__(self, schedule, control: str | None, **kw) -> None:
        super().__init__(**kw)
        self.schedule = schedule
        self.control = control

    def lines(self, width: int = 200) -> list[Text]:
        """The panel's lines as drawn at ``width`` (for tests too)."""
        sched, m, u = self.schedule, self.moment, Units(self.unit)
        if sched is None:
            return [Text("no schedule")]
        n = len(sched.segments)
        seg = m.value("plan.segment") if m else math.nan
        current = int(seg) if math.isfinite(seg) else -1
        lines: list[Text] = []
        table = self._segment_table(sched, current, u, width)
        where = f" · segment {current + 1} of {n}" if 0 <= current < n and table is not None else ""
        title = Text(fmt.clip(sched.name + where, width), style="bold")
        if table is not None:
            lines += table
        elif 0 <= current < n:
            s = sched.segments[current]
            # the target keeps its hold: a line may break before "→", never before "hold"
            parts = [f"▶{current + 1}/{n} {s.name}", self._rate(s, u),
                     f"→ {u.temperature(s.target_c, 0)}" + (f", hold {duration(s.hold_s)}" if s.hold_s else "")]
            lines += [Text(line.plain, style="bold") for line in fmt.fit_parts([p for p in parts if p], width, sep=" ", indent=2)]
        if m is None:
            return [title, *lines]
        if current >= n:
            lines.append(Text("schedule complete"))
        elif current >= 0:
            s = sched.segments[current]
            hold = m.value("plan.hold")
            if math.isfinite(hold):
                lines += fit_line([f"holding {duration(hold)} of {duration(s.hold_s)}"], width)
            else:
                temp_now = m.value(self.control) if self.control else math.nan
                start_c = sched.start_of(current)
                span = s.target_c - start_c
                rate_now = m.value(f"{self.control}.rate") if self.control else math.nan
                dev = m.value("plan.deviation")
                parts = [f"now {u.rate(rate_now, signed=True)}", f"{u.delta(dev)} off plan" if math.isfinite(dev) else ""]
                done = f"{min(max((temp_now - start_c) / span, 0.0), 1.0):.0%} of the way" if span and math.isfinite(temp_now) else ""
                # how far along is the first to go when room is short
                lines += fit_line(_first_fitting([[done, *parts], parts], width), width)
        remaining, behind = m.value("plan.remaining"), m.value("plan.behind")
        end: list[str] = []
        if math.isfinite(remaining) and current < n:
            end += [f"end in {duration(remaining)}", f"at {self.clock.when(m.t + remaining, m.t, seconds=False)}"]
        if math.isfinite(behind) and abs(behind) >= 60 and current < n:
            end.append(f"{duration(abs(behind))} {'behind' if behind > 0 else 'ahead of'} plan")
        lines += fit_line(end, width)
        # the schedule's name when there is room: narrow, the segment, the rate now and the end come first
        return [title, *lines] if table is not None or len(lines) < self.MAX_LINES else lines

    @staticmethod
    def _rate(s, u: Units) -> str:
        return "max rate" if s.is_fast else u.rate(s.rate_c_per_h, signed=True)

    def _segment_table(self, sched, current: int, u: Units, width: int) -> list[Text] | None:
        """The previous, current and next segments in columns, or None when they do not fit whole."""
        n = len(sched.segments)
        first = max(0, min(current - 1, n - 3)) if current >= 0 else 0
        shown = list(range(first, min(n, first + 3)))
        if not shown:
            return []
        names = [sched.segments[i].name for i in shown]
        rates = [self._rate(sched.segments[i], u) for i in shown]
        targets = [u.temperature(sched.segments[i].target_c, 0) for i in shown]
        holds = [f"hold {duration(sched.segments[i].hold_s)}" if sched.segments[i].hold_s else "" for i in shown]
        nw, rw, tw = max(map(len, names)), max(map(len, rates)), max(map(len, targets))
        num_w = len(str(n))
        hw = max(map(len, holds))
        if 1 + num_w + 1 + nw + 1 + rw + 3 + tw + (2 + hw if hw else 0) > width:
            return None
        out = []
        for i, name, rate, target, hold in zip(shown, names, rates, targets, holds):
            mark = "✓" if i < current else ("▶" if i == current else " ")
            style = "bold" if i == current else ("dim" if i < current else "")
            line = f"{mark}{i + 1:>{num_w}} {name:<{nw}} {rate:>{rw}} → {target:>{tw}}" + (f"  {hold}" if hold else "")
            out.append(Text(line.rstrip(), style=style))
        return out

    def render(self) -> Text:
        text = Text(no_wrap=True, overflow="ellipsis")
        for i, line in enumerate(self.lines(max(self.size.width, 20))):
            if i:
                text.append("\n")
            text.append_text(line)
        return text


def fit_line(parts: Sequence[str], width: int, indent: int = 0) -> list[Text]:
    return fmt.fit_parts([p for p in parts if p], width, indent=indent)


def _first_fitting(variants: list[list[str]], width: int, sep: str = " · ") -> list[str]:
    """The first variant whose parts fit on one line of ``width``, else the last."""
    for parts in variants:
        if len(sep.join(p for p in parts if p)) <= width:
            return parts
    return variants[-1]


@dataclass
class ChartData:
    """What the chart draws: decimated series, the plan, the cursor and alarm marks."""

    t0: float
    t1: float
    series: list[tuple[str, np.ndarray, np.ndarray]]
    planned: tuple[np.ndarray, np.ndarray]
    cursor: float | None
    alarms: list[float]
    unit: str = "C"
    origin: float = 0.0
    clock: Clock | None = None


def envelope_line(t: np.ndarray, lo: np.ndarray, hi: np.ndarray, tolerance: float = 0.0) -> tuple[np.ndarray, np.ndarray]:
    """One line through each column's minimum and maximum, with a single point where the line between the
    neighbouring columns already spans the column's range to within ``tolerance`` (a smooth ramp or a hold).

    Examples
    --------
    >>> x, y = envelope_line(np.array([0.0, 1, 2, 3]), np.array([0.0, 9, 20, 30]), np.array([0.0, 11, 20, 30]))
    >>> x.tolist(), y.tolist()
    ([0.0, 1.0, 2.0, 3.0], [0.0, 10.0, 20.0, 30.0])
    >>> x, y = envelope_line(np.array([0.0, 1, 2]), np.array([10.0, 0, 10]), np.array([10.0, 20, 10]))
    >>> x.tolist(), y.tolist()
    ([0.0, 1.0, 1.0, 2.0], [10.0, 0.0, 20.0, 10.0])
    """
    t, lo, hi = (np.asarray(a, dtype=float) for a in (t, lo, hi))
    if t.size < 3:
        return np.repeat(t, 2), np.column_stack([lo, hi]).ravel()
    mid = (lo + hi) / 2.0
    prev = np.concatenate([mid[:1], mid[:-1]])
    nxt = np.concatenate([mid[1:], mid[-1:]])
    a, b = (prev + mid) / 2.0, (mid + nxt) / 2.0  # where the drawn line crosses the column's edges
    low, high = np.minimum(np.minimum(a, b), mid), np.maximum(np.maximum(a, b), mid)
    single = (lo >= low - tolerance) & (hi <= high + tolerance)
    counts = np.where(single, 1, 2)
    x = np.repeat(t, counts)
    y = np.empty(x.size)
    starts = np.concatenate([[0], np.cumsum(counts)[:-1]])
    y[starts] = np.where(single, mid, lo)
    y[starts[~single] + 1] = hi[~single]
    return x, y


def corners(x: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """A piecewise-linear curve (the planned schedule) by its corners alone: the same line, fewer points to draw.

    Examples
    --------
    >>> x, y = corners(np.arange(6.0), np.array([0.0, 1, 2, 3, 3, 3]))
    >>> x.tolist(), y.tolist()
    ([0.0, 3.0, 5.0], [0.0, 3.0, 3.0])
    """
    x, y = np.asarray(x, dtype=float), np.asarray(y, dtype=float)
    if x.size < 3:
        return x, y
    slope = np.diff(y) / np.where(np.diff(x) == 0, np.nan, np.diff(x))
    bend = ~np.isclose(slope[1:], slope[:-1], rtol=1e-6, atol=1e-9)
    keep = np.concatenate([[True], bend, [True]])
    return x[keep], y[keep]


class TimeAxisFormatter(AxisFormatter):
    """The trend's time axis from :func:`firewatch.settings.timefmt.time_axis`: clock time or h:mm since start.

    The plot's x is seconds since ``origin`` (small numbers keep the plot's
    arithmetic exact); ticks and labels are chosen in UTC seconds.
    """

    def __init__(self, origin: float, clock: Clock, max_ticks: int = 8, columns: int = 0) -> None:
        self.origin = origin
        self.clock = clock
        self.max_ticks = max_ticks
        self.columns = columns
        """The plot's width in cells: a tick whose centred label would run past the right edge is left out."""
        self.meaning = ""
        self._last: tuple[list[float], list[str]] = ([], [])
        """The ticks and labels the last :meth:`get_ticks` chose."""

    def get_ticks(self, min_: float, max_: float, max_ticks: int = 8) -> list[float]:
        axis = time_axis(self.origin + min_, self.origin + max_, self.origin, self.clock, min(max_ticks, self.max_ticks))
        pairs = [(t - self.origin, label) for t, label in zip(axis.ticks, axis.labels)]
        if self.columns and max_ > min_:
            # the plot right-aligns only a label exactly at the end; any other is centred on its tick
            pairs = [(t, label) for t, label in pairs
                     if t >= max_ or (max_ - t) / (max_ - min_) * self.columns >= len(label) / 2 + 1]
        self._last = ([t for t, _ in pairs], [label for _, label in pairs])
        self.meaning = axis.meaning
        return list(self._last[0])

    def get_labels_for_ticks(self, ticks: Sequence[float]) -> list[str]:
        if list(ticks) == self._last[0]:
            return list(self._last[1])
        # ticks set from outside: label them as the last axis read (clock or since start)
        if self.meaning.startswith("clock"):
            return [self.clock.time(self.origin + t, seconds=False) for t in ticks]
        return [f"{'−' if t < 0 else ''}{round(abs(t) / 60) // 60}:{round(abs(t) / 60) % 60:02d}" for t in ticks]


class TrendChart(PlotWidget):
    """Temperatures against time (clock time, or h:mm since start, by span), with the plan, the cursor and alarm marks."""

    DEFAULT_CSS = """
    TrendChart { height: 1fr; min-height: 6; }
    """
    STYLES = ("bright_white", "grey70", "white", "grey50")
    PLAN_STYLE = "grey42"
    can_focus = False

    def __init__(self, **kw) -> None:
        super().__init__(allow_pan_and_zoom=False, **kw)
        self.axis_meaning = ""
        """How the time axis reads as last drawn: ``clock, CET`` or ``h:mm since start``."""
        self.drawn: ChartData | None = None
        """What the chart last drew (tests and the redraw benchmark wait on it)."""

    def on_mount(self) -> None:
        super().on_mount()
        self.margin_top = 0
        self.margin_bottom = 2

    def render(self):
        if not self._needs_rerender:
            return super().render()  # nothing to draw: no canvas to refresh again
        # textual-plot draws cell by cell and each cell asks textual for a refresh (some 600 per trend at 160x48,
        # nearly half the redraw); its canvases' own batch_refresh makes that one refresh per canvas
        with ExitStack() as stack:
            for canvas in self.query(Canvas):
                stack.enter_context(canvas.batch_refresh())
            return super().render()

    def _draw_now(self) -> None:
        """Draw on the canvases now, so that they are painted in the same frame as the rest of the screen.

        textual-plot draws its canvases while the screen paints the plot widget itself, which only marks the
        canvases for the next frame: the new trend would show a frame after the numbers beside it.
        """
        if self.is_mounted and self.size.area:
            self.render()

    def _same_picture(self, data: ChartData) -> bool:
        """Whether ``data`` would draw what is on the screen already: the same traces, plan, marks and unit, and a
        cursor in the same column (a seek of a minute across a whole firing moves it by a fraction of a cell)."""
        old = self.drawn
        if old is None or not self.size.area:
            return False
        same = (old.t0, old.t1, old.unit, old.origin, old.clock, old.alarms) == (data.t0, data.t1, data.unit, data.origin, data.clock, data.alarms)
        if not same or old.series is not data.series or not all(np.array_equal(a, b) for a, b in zip(old.planned, data.planned)):
            return False
        if old.cursor is None or data.cursor is None:
            return old.cursor is None and data.cursor is None
        return self.get_pixel_from_coordinate(old.cursor - old.origin, 0)[0] == self.get_pixel_from_coordinate(data.cursor - data.origin, 0)[0]

    def draw(self, data: ChartData) -> None:
        if self._same_picture(data):
            self.drawn = data
            return
        clock = data.clock or _default_clock()
        self.clear()
        origin = data.origin

        def rel(t):
            return np.asarray(t, dtype=float) - origin

        # a tick label is five cells: keep two cells between labels at the least
        columns = max(self.size.width - self.margin_left, 10)
        formatter = TimeAxisFormatter(origin, clock, max_ticks=max(2, min(8, columns // 8)), columns=columns)
        self.set_x_formatter(formatter)
        px, py = data.planned
        if px.size:
            self.plot(rel(px), from_celsius(py, data.unit), line_style=self.PLAN_STYLE, hires_mode=HiResMode.BRAILLE, label="plan")
        for i, (label, t, y) in enumerate(data.series):
            if t.size:
                self.plot(rel(t), from_celsius(y, data.unit), line_style=self.STYLES[i % len(self.STYLES)], hires_mode=HiResMode.BRAILLE,
                          label=label)
        for at in data.alarms:
            if data.t0 <= at <= data.t1:
                self.add_v_line(float(rel(at)), "yellow", None)
        if data.cursor is not None:
            self.add_v_line(float(rel(data.cursor)), "bright_white", None)
        self.set_xlimits(float(rel(data.t0)), float(rel(data.t1)))
        self.axis_meaning = time_axis(data.t0, data.t1, origin, clock).meaning
        self.drawn = data
        self._draw_now()


class AlarmList(DataTable):
    """The alarms at the moment shown, most urgent first; the highlighted one is what acknowledge and shelve act on.

    Wide, every field has its column; narrower than :attr:`WIDE`, kind and
    channel share one and the likely cause leads the message, which alone is
    cut to the room left. Priority, state and the raise time are never cut.
    """

    WIDE = 120

    class Highlighted(Message):
        def __init__(self, alarm_id: int | None, evidence: str) -> None:
            super().__init__()
            self.alarm_id = alarm_id
            self.evidence = evidence

    def __init__(self, **kw) -> None:
        super().__init__(**kw)
        self._rows: list[AlarmRow] = []
        self._ref: float | None = None
        self._clock = _default_clock()
        self._units = Units("C")
        self._shown: list[tuple[str, ...]] = []
        self._layout: tuple = ()

    def on_mount(self) -> None:
        self.cursor_type = "row"
        self._rebuild()

    def on_resize(self, event: Resize) -> None:
        self._rebuild()

    def show(self, alarms: list[AlarmRow], ref: float | None = None, clock: Clock | None = None, unit: str = "C") -> None:
        """List ``alarms``; raise times in ``clock``, with the date when not on the day of ``ref`` (the moment shown);
        the figures in messages in ``unit``."""
        clock = clock or self._clock
        same = [(a.id, a.state, a.cause, len(a.steps)) for a in alarms] == [(a.id, a.state, a.cause, len(a.steps)) for a in self._rows]
        day = None if ref is None else clock.local(ref).date()
        old_day = None if self._ref is None else self._clock.local(self._ref).date()
        if same and clock == self._clock and day == old_day and unit == self._units.unit and self._layout:
            return  # nothing changed: no redraw
        self._rows, self._ref, self._clock, self._units = list(alarms), ref, clock, Units(unit)
        self._rebuild(force=True)

    def _cells(self, wide: bool) -> list[tuple[Text, ...]]:
        out = []
        for a in self._rows:
            unack = a.state in ("active-unacknowledged", "returned-unacknowledged", "latched")
            state = fmt.STATE_WORDS.get(a.state, a.state)
            raised = self._clock.when(a.raised_t, self._ref)
            cells = [Text(fmt.PRIORITY_WORDS.get(a.priority, a.priority), style=ABNORMAL if unack and a.priority == "high" else ""),
                     Text(state, style="bold" if "UNACK" in state else ""), Text(raised)]
            message = self._units.restate(a.message)
            if wide:
                cells += [Text(a.kind), Text(a.channel or "line"), Text(a.cause_label or ""), Text(message)]
            else:
                cells += [Text(f"{a.kind} {a.channel or 'line'}"), Text(f"{a.cause_label}: {message}" if a.cause else message)]
            out.append(tuple(cells))
        return out

    def _rebuild(self, force: bool = False) -> None:
        width = self.size.width
        if not width:
            return
        wide = width >= self.WIDE
        cells = self._cells(wide)
        heads = ["priority", "state", "raised"] + (["kind", "channel", "likely cause", "message"] if wide else ["alarm", "likely cause: message"])
        widths = [max([len(h)] + [c[i].cell_len for c in cells]) for i, h in enumerate(heads)]
        # the last column takes the room left (two cells of padding per column, one for the scroll bar)
        fixed = sum(widths[:-1]) + 2 * len(widths) + 1
        widths[-1] = max(width - fixed, 8)
        layout = (wide, tuple(widths))
        if layout == self._layout and not force:
            return
        self._layout = layout
        selected = self.selected_id
        self.clear(columns=True)
        for head, w in zip(heads, widths):
            self.add_column(fmt.clip(head, w), width=w)
        self._shown = []
        for a, row in zip(self._rows, cells):
            last = row[-1].copy()
            last.truncate(widths[-1], overflow="ellipsis")
            row = (*row[:-1], last)
            self._shown.append(tuple(c.plain for c in row))
            self.add_row(*row, key=str(a.id))
        if selected is not None:
            for i, a in enumerate(self._rows):
                if a.id == selected:
                    self.move_cursor(row=i)
        self._announce()

    @property
    def alarms(self) -> list[AlarmRow]:
        """The alarms listed, in their order on the screen."""
        return list(self._rows)

    @property
    def shown(self) -> list[tuple[str, ...]]:
        """Each row's cells as drawn (after fitting to the width), for tests and for reading the screen."""
        return list(self._shown)

    @property
    def selected_id(self) -> int | None:
        rows = self._rows
        if not rows or self.cursor_row is None or not 0 <= self.cursor_row < len(rows):
            return None
        return rows[self.cursor_row].id

    def _announce(self) -> None:
        rows = self._rows
        alarm = rows[self.cursor_row] if rows and 0 <= self.cursor_row < len(rows) else None
        reason = ""
        if alarm is not None and alarm.evidence:
            reason = str(alarm.evidence.get("reason", ""))
            if alarm.steps:  # a cause that changed: the model words its story, the screen only how a time reads
                # a dash, not a colon, after the time: a line cut there must not read as a cut time
                reason = f"{alarm.cause_story(lambda t: self._clock.when(t, self._ref, seconds=False))} — {reason}"
        self.post_message(self.Highlighted(alarm.id if alarm else None, reason))

    def on_data_table_row_highlighted(self, event: DataTable.RowHighlighted) -> None:
        event.stop()
        self._announce()


class EventList(DataTable):
    """The latest events at the moment shown, newest first, in the header's clock."""

    def __init__(self, **kw) -> None:
        super().__init__(**kw)
        self._events: list[dict] = []
        self._key: tuple = ()
        self._ref: float | None = None
        self._clock = _default_clock()
        self._units = Units("C")
        self._shown: list[tuple[str, ...]] = []

    def on_mount(self) -> None:
        self.cursor_type = "row"

    def on_resize(self, event: Resize) -> None:
        self._rebuild()

    @property
    def events(self) -> list[dict]:
        """The events listed, newest first."""
        return list(self._events)

    @property
    def shown(self) -> list[tuple[str, ...]]:
        """Each row's cells as drawn, for tests and for reading the screen."""
        return list(self._shown)

    def show(self, events: list[dict], ref: float | None = None, clock: Clock | None = None, unit: str = "C") -> None:
        """List ``events``, their times in ``clock`` (dated when not on the day of ``ref``), figures in ``unit``."""
        clock = clock or self._clock
        day = None if ref is None else clock.local(ref).date()
        key = (tuple((e["t"], e["kind"]) for e in events), day, clock, unit)
        if key == self._key:
            return
        self._key, self._events, self._ref, self._clock, self._units = key, list(events), ref, clock, Units(unit)
        self._rebuild()

    def _rebuild(self) -> None:
        width = self.size.width
        if not width:
            return
        times = [self._clock.when(e["t"], self._ref) for e in self._events]
        kinds = [e["kind"] for e in self._events]
        tw = max([4] + [len(t) for t in times])
        kw = max([5] + [len(k) for k in kinds])
        dw = max(width - tw - kw - 7, 8)
        self.clear(columns=True)
        self.add_column("time", width=tw)
        self.add_column("event", width=kw)
        self.add_column("detail", width=dw)
        self._shown = []
        for t, k, e in zip(times, kinds, self._events):
            detail = fmt.clip(self._units.restate(" ".join((e["detail"] or "").split())), dw)
            self._shown.append((t, k, detail))
            self.add_row(t, k, detail)
