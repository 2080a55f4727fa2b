"""The dashboard's widgets. Each owns one piece of data, set by its screen; none reaches into a sibling."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from rich.table import Table
from rich.text import Text
from textual.message import Message
from textual.reactive import reactive
from textual.widgets import DataTable, Static
from textual_plot import HiResMode, PlotWidget

from firewatch.transport.records import Status
from firewatch.settings.units import symbol
from firewatch.store.view import Moment, status_text
from firewatch.ui import format as fmt
__all__ = ["ReadingsPanel", "SchedulePanel", "TrendChart", "AlarmList", "EventList", "ChartData"]

ABNORMAL = "bold reverse"
"""The one emphasis for abnormal values: reads on a monochrome terminal too."""


class ReadingsPanel(Static):
    """Every thermocouple and pyrometer at the moment shown."""

    moment: reactive[Moment | None] = reactive(None, layout=True)
    unit: reactive[str] = reactive("C")

    def __init__(self, site, **kw) -> None:
        super().__init__(**kw)
        self.site = site

    def render(self):
        m = self.moment
        u = self.unit
        table = Table(box=None, padding=(0, 1), expand=True, show_edge=False, show_header=False)
        table.add_column("channel", no_wrap=True, min_width=4)
        table.add_column("value", justify="right", no_wrap=True, min_width=9)
        table.add_column("", no_wrap=True, overflow="ellipsis", ratio=1)
        if m is None or self.site is None:
            table.add_row("waiting for readings…", "", "")
            return table
        if not m.values:
            table.add_row("no readings yet", "", "")
            return table
        for tc in self.site.thermocouples:
            st = m.status.get(tc.name, int(Status.MISSING))
            value = m.value(tc.name)
            word = status_text(st)
            shown = Text(word, style=ABNORMAL) if word else Text(f"{fmt.temp(value, u)} {symbol(u)}")
            role = {"control": "ctl", "reference": "ref", "monitor": "mon"}.get(tc.role, tc.role)
            note = f"{tc.type} {role} {fmt.rate(m.value(tc.name + '.rate'), u)}"
            table.add_row(tc.name, shown, self._stale(m, tc.name, note))
        for py in self.site.pyrometers:
            st = m.status.get(py.name, int(Status.MISSING))
            word = status_text(st)
            rec = m.value(f"{py.name}.reconciled")
            if word:
                shown = Text(word, style=ABNORMAL if word not in ("UNDER", "—") else "")
                note = f"{py.kind}: {'below its range' if word == 'UNDER' else 'no reading'}"
            else:
                shown = Text(f"{fmt.temp(rec, u)} {symbol(u)}")
                note = f"±{fmt.delta(m.value(py.name + '.u'), u, sign=False)}, shows {fmt.temp(m.value(py.name), u)}"
            table.add_row(py.name, shown, self._stale(m, py.name, note))
            if py.reference:
                div, allowed = m.value(f"{py.name}.divergence"), m.value(f"{py.name}.allowed")
                if math.isfinite(div) and math.isfinite(allowed):
                    over = abs(div) > allowed
                    mark = "✗ OUT" if over else "✓ ok"
                    text = Text(f"Δ {fmt.delta(div, u)} of ±{fmt.delta(allowed, u, sign=False)} {mark}", style=ABNORMAL if over else "")
                else:
                    text = Text("Δ —")
                table.add_row("", "", text)
        for cj in self.site.cold_junctions:
            table.add_row(cj, f"{fmt.temp(m.value(cj), u)} {symbol(u)}", self._stale(m, cj, "cold junction"))
        return table

    @staticmethod
    def _stale(m: Moment, name: str, note: str) -> Text:
        if name in m.stale:  # the model decided (older than the site's no_data_s); the row says so
            return Text(f"STALE {fmt.duration_units(m.age_s.get(name))}", style=ABNORMAL)
        return Text(note)


class SchedulePanel(Static):
    """Where the firing stands against its schedule."""

    moment: reactive[Moment | None] = reactive(None, layout=True)
    unit: reactive[str] = reactive("C")

    def __init__(self, schedule, control: str | None, **kw) -> None:
        super().__init__(**kw)
        self.schedule = schedule
        self.control = control

    def render(self):
        sched, m, u = self.schedule, self.moment, self.unit
        if sched is None:
            return Text("no schedule")
        seg = m.value("plan.segment") if m else math.nan
        current = int(seg) if math.isfinite(seg) else -1
        lines = Text()
        lines.append(f"{sched.name}\n", style="bold")
        n = len(sched.segments)
        first = max(0, min(current - 1, n - 3)) if current >= 0 else 0
        for i in range(first, min(n, first + 3)):
            s = sched.segments[i]
            mark = "✓" if i < current else ("▶" if i == current else " ")
            rate = "max" if s.is_fast else f"{float(fmt.delta_from_celsius(s.rate_c_per_h, u)):+.0f}/h"
            hold = f" hold {fmt.duration(s.hold_s)}" if s.hold_s else ""
            style = "bold" if i == current else ("dim" if i < current else "")
            lines.append(f"{mark}{i + 1} {s.name[:14]:14} {rate:>6} →{fmt.temp(s.target_c, u, 0):>5}{hold}\n", style=style)
        if m is None:
            return lines
        if current >= n:
            lines.append("schedule complete\n", style="bold")
        elif current >= 0:
            s = sched.segments[current]
            hold = m.value("plan.hold")
            if math.isfinite(hold):
                lines.append(f"holding {fmt.duration(hold)} of {fmt.duration(s.hold_s)}\n")
            else:
                dev = m.value("plan.deviation")
                rate_now = m.value(f"{self.control}.rate") if self.control else math.nan
                plan_rate = "max" if s.is_fast else fmt.rate(s.rate_c_per_h, u)
                off = f", {fmt.delta(dev, u, 0)} K" if math.isfinite(dev) else ""
                temp_now = m.value(self.control) if self.control else math.nan
                start_c = sched.start_of(current)
                span = s.target_c - start_c
                done = f"{min(max((temp_now - start_c) / span, 0.0), 1.0):.0%} · " if span and math.isfinite(temp_now) else ""
                lines.append(f"{done}rate {fmt.rate(rate_now, u)} of {plan_rate}{off}\n")
        remaining, behind = m.value("plan.remaining"), m.value("plan.behind")
        if math.isfinite(remaining):
            lines.append(f"end in {fmt.duration(remaining)} ≈{fmt.clock(m.t + remaining)[11:16]}Z")
            if math.isfinite(behind) and abs(behind) >= 60:
                lines.append(f" · {fmt.duration(abs(behind))} {'behind' if behind > 0 else 'ahead'}")
        return lines


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


class TrendChart(PlotWidget):
    """Temperatures against hours into the firing, with the plan, the cursor and alarm marks (textual-plot)."""

    DEFAULT_CSS = """
    TrendChart { height: 1fr; min-height: 6; }
    """
    STYLES = ("bright_white", "grey70", "white", "grey50")
    can_focus = False

    def __init__(self, **kw) -> None:
        super().__init__(allow_pan_and_zoom=False, **kw)

    def on_mount(self) -> None:
        super().on_mount()
        self.margin_top = 0
        self.margin_bottom = 2

    def draw(self, data: ChartData) -> None:
        from firewatch.settings.units import from_celsius

        self.clear()
        to_h = lambda t: (np.asarray(t) - data.origin) / 3600.0  # noqa: E731
        px, py = data.planned
        if px.size:
            self.plot(to_h(px), from_celsius(py, data.unit), line_style="grey42", hires_mode=HiResMode.BRAILLE, label="plan")
        for i, (label, t, y) in enumerate(data.series):
            if t.size:
                self.plot(to_h(t), from_celsius(y, data.unit), line_style=self.STYLES[i % len(self.STYLES)], hires_mode=HiResMode.BRAILLE, label=label)
        for t in data.alarms:
            if data.t0 <= t <= data.t1:
                self.add_v_line(float(to_h(t)), "yellow", None)
        if data.cursor is not None:
            self.add_v_line(float(to_h(data.cursor)), "bright_white", None)
        self.set_xlimits(float(to_h(data.t0)), float(to_h(data.t1)))


class AlarmList(DataTable):
    """The alarms at the moment shown; the highlighted one is what acknowledge and shelve act on."""

    class Highlighted(Message):
        def __init__(self, alarm_id: int | None, evidence: str) -> None:
            super().__init__()
            self.alarm_id = alarm_id
            self.evidence = evidence

    def on_mount(self) -> None:
        self.cursor_type = "row"
        self.add_columns("priority", "state", "kind", "channel", "cause", "raised", "message")
        self._rows: list = []

    def show(self, alarms, origin: float | None) -> None:
        key = [(a.id, a.state, a.cause, len(a.steps)) for a in alarms]
        if key == [(a.id, a.state, a.cause, len(a.steps)) for a in self._rows]:
            return  # nothing changed: no redraw
        selected = self.selected_id
        self._rows = list(alarms)
        self.clear()
        for a in alarms:
            emphasis = ABNORMAL if a.state in ("active-unacknowledged", "returned-unacknowledged", "latched") and a.priority == "high" else ""
            self.add_row(
                Text(fmt.PRIORITY_WORDS.get(a.priority, a.priority), style=emphasis),
                Text(fmt.STATE_WORDS.get(a.state, a.state), style="bold" if "UNACK" in fmt.STATE_WORDS.get(a.state, "") else ""),
                a.kind, a.channel or "line", a.cause_label, fmt.duration(a.raised_t - origin) if origin else "", a.message,
                key=str(a.id),
            )
        if selected is not None:
            for i, a in enumerate(alarms):
                if a.id == selected:
                    self.move_cursor(row=i)
        self._announce()

    @property
    def alarms(self) -> list:
        """The alarms listed, in their order on the screen."""
        return list(getattr(self, "_rows", []))

    @property
    def selected_id(self) -> int | None:
        rows = getattr(self, "_rows", [])
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
                reason = f"{alarm.cause_story(fmt.clock_short)}: {reason}"
        self.post_message(self.Highlighted(alarm.id if alarm else None, reason))

    def on_data_table_row_highlighted(self, event: DataTable.RowHighlighted) -> None:
        event.stop()
        self._announce()


class EventList(DataTable):
    """The latest events at the moment shown, newest first."""

    def on_mount(self) -> None:
        self.cursor_type = "row"
        self.add_columns("time", "event", "detail")
        self._key: list = []

    @property
    def events(self) -> list:
        """The events listed, newest first."""
        return list(getattr(self, "_events", []))

    def show(self, events) -> None:
        key = [(e["t"], e["kind"]) for e in events]
        if key == self._key:
            return
        self._key = key
        self._events = list(events)
        self.clear()
        for e in events:
            self.add_row(fmt.clock(e["t"])[11:], e["kind"], (e["detail"] or "")[:160])
