"""The dashboard screen: readings, schedule, trend, alarms and events, live or replayed.

Live (``watch``): a thread worker polls the log every second in short
read-only transactions and posts what it read, news or not, since the state
(LIVE, NO DATA, RECORDER STOPPED, FIRING ENDED), the values' ages and the
alarms change when nothing arrives too; the chart is redrawn every ten
seconds. Replay: a cursor moves through the firing at 1x to 1000x, two steps
a second; seeking and jumping between alarms move it at once. What is true
is decided by the model (:mod:`firewatch.store.view`); this screen draws it.
Operator actions go through :class:`firewatch.services.desk.ActionDesk`,
live and in replay.
"""

from __future__ import annotations

import threading
import time
from dataclasses import replace
from typing import Protocol, cast

from rich.text import Text
from textual import work
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal
from textual.message import Message
from textual.screen import Screen
from textual.widgets import Footer, Static, TabbedContent, TabPane

from firewatch.services.desk import ActionDesk, Outcome
from firewatch.settings.timefmt import Clock, duration
from firewatch.settings.units import Units
from firewatch.store._common import LogDamaged
from firewatch.store.view import FIRING_ENDED, LIVE, NO_DATA, FiringView, Moment
from firewatch.ui import format as fmt
from firewatch.ui.screens import HelpScreen, NoteScreen, ShelveScreen
from firewatch.ui.widgets import (
    AlarmList,
    ChartData,
    EventList,
    ReadingsPanel,
    SchedulePanel,
    TrendChart,
    corners,
    envelope_line,
)


class DashboardHost(Protocol):
    """What this screen needs of its app (:class:`~firewatch.ui.app.FirewatchApp`); a protocol, so that the
    screen does not import the app that shows it."""

    unit: str
    desk: ActionDesk

__all__ = ["SPEEDS", "DashboardScreen"]

SPEEDS = (1, 2, 5, 10, 20, 60, 120, 300, 600, 1000)
"""Replay speeds, simulated seconds per second."""
CAUTION_LINES = (
    "⚠ a monitoring aid, never a safety device: the kiln's controller and cut-out stay in charge (? cautions)",
    "⚠ a monitoring aid, never a safety device: the controller and cut-out stay in charge (? cautions)",
    "⚠ a monitoring aid, never a safety device (? for the cautions)",
    "⚠ monitoring aid only, not a safety device (?)",
)
"""The caution under the lists, longest first: the screen shows the longest that fits whole."""
CAUTION_LINE = CAUTION_LINES[0]
CHART_EVERY_S = 10.0
"""Live: the chart is redrawn this often at most (numbers update every second)."""


def _set(line: Static, content: str | Text) -> None:
    """Update a one-row line only when its text changes, without a layout pass (its size is fixed)."""
    key = content.markup if isinstance(content, Text) else content
    if getattr(line, "_shown_key", None) != key:
        line._shown_key = key  # type: ignore[attr-defined]
        line.update(content, layout=False)


class LogRead(Message):
    """What the poller read: a moment and, sometimes, chart data."""

    def __init__(self, moment: Moment, chart: ChartData | None, end_t: float | None) -> None:
        super().__init__()
        self.moment = moment
        self.chart = chart
        self.end_t = end_t


class ActionsSettled(Message):
    """What became of operator actions handed to the recorder (from the poller)."""

    def __init__(self, outcomes: list[Outcome]) -> None:
        super().__init__()
        self.outcomes = outcomes


class DashboardScreen(Screen):
    """One screen for live and replay."""

    SPEED = Binding.Group("Speed", compact=True)
    ALARM = Binding.Group("Alarm", compact=True)
    BINDINGS = [
        # the footer shows these at 80 columns; every key, shown or not, is in the help (?)
        Binding("question_mark", "help", "Help"),
        Binding("u", "units", "°C/°F"),
        Binding("a", "acknowledge", "Ack"),
        Binding("s", "shelve", "Shelve"),
        Binding("o", "note", "Note"),
        Binding("space", "play", "Play", priority=True),
        Binding("plus,equals_sign", "faster", "Faster", group=SPEED),
        Binding("minus", "slower", "Slower", group=SPEED),
        Binding("left", "seek(-60)", "-1 min", show=False, priority=True),
        Binding("right", "seek(60)", "+1 min", show=False, priority=True),
        Binding("shift+left", "seek(-600)", "-10 min", show=False, priority=True),
        Binding("shift+right", "seek(600)", "+10 min", show=False, priority=True),
        Binding("pageup", "seek(-3600)", "-1 h", show=False, priority=True),
        Binding("pagedown", "seek(3600)", "+1 h", show=False, priority=True),
        Binding("home", "seek_to('start')", "Start", show=False, priority=True),
        Binding("end", "seek_to('end')", "End", show=False, priority=True),
        Binding("right_square_bracket", "next_alarm", "Next alarm", group=ALARM),
        Binding("left_square_bracket", "previous_alarm", "Previous alarm", group=ALARM),
        Binding("z", "zoom(0.5)", "Zoom in", show=False),
        Binding("x", "zoom(2)", "Zoom out", show=False),
        Binding("f", "fit", "Fit", show=False),
        Binding("e", "toggle_tab", "Events", show=False),
        Binding("t", "tune", "Tune"),
        Binding("q", "app.quit", "Quit"),
    ]

    KEY_HELP = [
        ("?", "this help (Esc, q or ? closes it)"),
        ("u", "switch °C / °F (differences: K / °F)"),
        ("↑ ↓", "choose an alarm in the list"),
        ("a", "acknowledge the chosen alarm (live and replay)"),
        ("s", "shelve the chosen alarm with a reason and a time (live)"),
        ("o", "add a note to the log (replay: about the moment shown)"),
        ("e", "alarms / events"),
        ("t", "the tuning screen: ↑↓ emissivity, ←→ transmission, f fitted value, Enter accept"),
        ("z  x  f", "zoom the trend in, out, fit the whole firing"),
        ("space", "play / pause (replay)"),
        ("+  -", "replay faster / slower (1x to 1000x)"),
        ("← →", "seek 1 minute (replay)"),
        ("shift ← →", "seek 10 minutes (replay)"),
        ("PgUp PgDn", "seek 1 hour (replay)"),
        ("Home End", "start / end of the firing (replay)"),
        ("]  [", "next / previous alarm (replay)"),
        ("q", "quit (the recorder keeps recording)"),
    ]
    TIME_HELP = (
        "Clock times are in the zone the header names (the site profile's [site] timezone, or this computer's; "
        "--utc for UTC). Durations carry their units: 2 h 49 min, 12 min 46 s, 45 s. The trend's time axis reads "
        "in clock time when it spans 12 hours or less, else in h:mm since the firing's start; the line under the "
        "trend says which."
    )

    def __init__(self, view: FiringView, mode: str, speed: float = 60.0) -> None:
        super().__init__()
        self.view = view
        self.mode = mode
        self.speed = min(SPEEDS, key=lambda s: abs(s - speed))
        self.playing = False
        self.cursor: float | None = view.start_t if mode == "replay" else None
        self.zoom_span: float | None = None
        self.selected_alarm: int | None = None
        self._wake = threading.Event()
        self._want_chart = True
        self._want_read = True
        self._last_chart = 0.0
        self._stop = threading.Event()
        self._last_moment: Moment | None = None
        self._last_chart_data: ChartData | None = None
        self._legend: list[tuple[str, str]] = []
        self._axis = ""
        self._evidence = ""
        self._series_key: tuple | None = None
        self._series: list = []
        self._alarm_marks: list[float] = []
        self.chart_cursor: float | None = None
        """Where the chart last drew its cursor (tests wait on it)."""
        self.headline = ""
        """The header's state words as last drawn (LIVE …, NO DATA for …, RECORDER STOPPED since …)."""
        self.last_outcome: Outcome | None = None
        """What became of the last action submitted from this screen."""

    # -- layout ---------------------------------------------------------------------------
    def compose(self) -> ComposeResult:
        site = self.view.site
        yield Static(id="title", markup=False)
        with Horizontal(id="top"):
            yield ReadingsPanel(site)
            yield SchedulePanel(self.view.schedule, site.control.name if site and site.control else None)
        yield TrendChart()
        yield Static(id="cursorline", markup=False)
        with TabbedContent(id="lower"):
            with TabPane("Alarms", id="alarms-tab"):
                yield AlarmList()
            with TabPane("Events", id="events-tab"):
                yield EventList()
        yield Static(id="evidence", markup=False)
        yield Footer(compact=True)

    def on_mount(self) -> None:
        self.query_one(AlarmList).focus()
        self.poll()
        if self.mode == "replay":
            self.set_interval(0.5, self._tick)
        self._request()

    def on_unmount(self) -> None:
        self._stop.set()
        self._wake.set()

    # -- the poller (thread worker: reads only, posts messages) ------------------------
    @work(thread=True, exclusive=True, group="poll")
    def poll(self) -> None:
        view = self.view
        shown: float | None = None
        while not self._stop.is_set():
            self._wake.wait(1.0)
            self._wake.clear()
            if self._stop.is_set():
                return
            try:
                # take the request first, then the cursor: a seek that lands meanwhile wakes us again
                want_chart, self._want_chart = self._want_chart, False
                want_read, self._want_read = self._want_read, False
                moment: Moment | None = None
                if self.mode == "live":
                    # every second, news or not: a silent line or a stopped recorder is news to the operator
                    moment = view.live()
                    t: float | None = moment.t
                else:
                    news = view.refresh_bounds()
                    t = self.cursor
                    if t is None:
                        continue
                    if want_read or want_chart or news or t != shown:
                        moment = view.moment(t)  # a paused replay with nothing new is left as drawn
                        shown = t
                chart = None
                now = time.monotonic()
                if moment is not None and t is not None and view.end_t is not None and (
                        want_chart or (self.mode == "live" and now - self._last_chart >= CHART_EVERY_S)):
                    chart = self._chart_data(t)
                    self._last_chart = now
                if moment is not None:
                    self.post_message(LogRead(moment, chart, view.end_t))
                desk = getattr(self.app, "desk", None)
                settled = desk.follow_up() if desk is not None and desk.waiting else []
                if settled:
                    self.post_message(ActionsSettled(settled))
            except LogDamaged as exc:  # nothing true can be shown: end with the message (the command prints it)
                fail = getattr(self.app, "fail", None)
                try:
                    self.app.call_from_thread(fail or self.app.exit, *((str(exc),) if fail else ()))
                except RuntimeError:
                    pass
                return
            except Exception as exc:  # a busy or vanished log: say so, keep polling
                if self._stop.is_set():
                    return
                try:
                    self.app.call_from_thread(self.notify, f"cannot read the log: {exc}", severity="error")
                except RuntimeError:
                    return

    def _chart_data(self, t: float) -> ChartData:
        view = self.view
        start = view.start_t or t
        end = view.end_t or t
        span = self.zoom_span or max(end - start, 60.0)
        if self.zoom_span:
            t0 = max(start, t - span / 2)
            t1 = min(max(t0 + span, t), end if self.mode == "replay" else max(end, t))
        else:
            t0, t1 = start, max(end, start + 60.0)
        columns = max(20, (self.size.width or 80) - 12)
        names = []
        site = view.site
        if site is not None:
            if site.reference:
                names.append(site.reference.name)
            if site.control and site.control is not site.reference:
                names.append(site.control.name)
            names += [f"{p.name}.reconciled" for p in site.pyrometers[:2]]
        key = (t0, t1, columns, tuple(names))
        if self._series_key != key:  # a seek within the same span redraws only the cursor
            import numpy as np

            trends = [(name.replace(".reconciled", ""), view.trend(name, t0, t1, columns)) for name in names[:4]]
            # min and max per column, drawn as one line through both where the line between neighbours would
            # not show the column's spread: half the points to draw for a smooth trace (the chart's redraw cost)
            finite = [tr for _, tr in trends if tr.t.size]
            spread = (np.nanmax([np.nanmax(tr.hi) for tr in finite]) - np.nanmin([np.nanmin(tr.lo) for tr in finite])) if finite else 0.0
            rows = max(self.query_one(TrendChart).size.height - 2, 4)
            tolerance = float(spread) / (4 * rows) if np.isfinite(spread) else 0.0  # a braille dot's height
            series = [(label, *envelope_line(tr.t, tr.lo, tr.hi, tolerance)) for label, tr in trends]
            self._series_key, self._series = key, series
            self._alarm_marks = [a[0] for a in view.alarm_times()]
        series, alarms = self._series, self._alarm_marks
        return ChartData(t0, t1, series, corners(*view.planned(t0, t1)), t if self.mode == "replay" else None, alarms,
                         self.fw.unit, origin=start, clock=self.clock)

    def _request(self, chart: bool = False) -> None:
        """Ask the poller to read the log now (and the chart too)."""
        self._want_read = True
        self._want_chart = self._want_chart or chart
        self._wake.set()

    # -- applying what was read -------------------------------------------------------
    @property
    def fw(self) -> DashboardHost:
        """The app, typed: this screen is only ever shown by :class:`~firewatch.ui.app.FirewatchApp`."""
        return cast(DashboardHost, self.app)

    @property
    def clock(self) -> Clock:
        """The clock every time on this screen is read in (the site's zone, or UTC with ``--utc``)."""
        return getattr(self.app, "clock", None) or Clock.for_site("", utc=True)

    def on_log_read(self, message: LogRead) -> None:
        m = message.moment
        unit, clock = self.fw.unit, self.clock
        self._last_moment = m
        if message.chart is not None:
            self._last_chart_data = message.chart
            if message.chart.unit != unit:  # read before a unit switch: the data are °C, drawn in the unit now chosen
                message.chart = replace(message.chart, unit=unit)
        readings = self.query_one(ReadingsPanel)
        readings.unit, readings.moment = unit, m
        sched = self.query_one(SchedulePanel)
        sched.unit, sched.clock, sched.moment = unit, clock, m
        self.query_one(AlarmList).show(m.alarms, m.t, clock, unit)
        self.query_one(EventList).show(m.events, m.t, clock, unit)
        if message.chart is not None:
            chart = self.query_one(TrendChart)
            chart.draw(message.chart)
            self._legend = [("plan", TrendChart.PLAN_STYLE)] + [
                (label, TrendChart.STYLES[i % len(TrendChart.STYLES)]) for i, (label, _, _) in enumerate(message.chart.series)]
            self._axis = chart.axis_meaning
            self.chart_cursor = message.chart.cursor
        self._title(m)

    def on_actions_settled(self, message: ActionsSettled) -> None:
        for outcome in message.outcomes:
            self.notify(outcome.text, severity="information" if outcome.ok else "warning", timeout=8)
        self._request()

    def _where(self, m: Moment) -> tuple[str, str]:
        """The header's first words, the state the model decided, and the reason a recorder stopped."""
        clock = self.clock
        if self.mode == "replay":
            return f"REPLAY {'▶' if self.playing else '❚❚'} {self.speed}x {clock.header(m.t)}", ""
        st = m.state
        if st.kind == LIVE:
            return (f"LIVE {clock.header(m.t)}" if m.values else f"LIVE · waiting for the first readings ({clock.name})"), ""
        if st.kind == NO_DATA:
            last = f"last {clock.header(st.since_utc)}" if st.data_age_s is not None else f"none since the recorder started, {clock.name}"
            return f"NO DATA for {duration(st.silent_s)} ({last})", ""
        since = clock.header(st.since_utc)
        return f"{st.label} {'since ' if st.kind != FIRING_ENDED else ''}{since}", st.reason

    def _title(self, m: Moment) -> None:
        view = self.view
        firing = view.firing
        unack = [a for a in m.alarms if a.state in ("active-unacknowledged", "returned-unacknowledged", "latched")]
        alarm_text = f"ALARMS {len(m.alarms)} ({len(unack)} unack)" if m.alarms else "no alarms"
        state, reason = self._where(m)
        self.headline = f"{state} ({reason})" if reason else state
        # what must be read comes first; the rest (the reason, the site, the kiln) is cut at the right if need be
        parts = [state, alarm_text] + ([f"({reason})"] if reason else []) + [firing.get("site_name") or "", firing.get("kiln") or ""]
        title = self.query_one("#title", Static)
        _set(title, fmt.clip(" · ".join(p for p in parts if p), max(self.size.width - 2, 20)))
        title.set_class(bool(unack), "alarming")
        title.set_class(self.mode == "live" and not m.state.fresh, "degraded")
        start = view.start_t
        line = Text(no_wrap=True, overflow="ellipsis")
        line.append(f"{duration(m.t - start) if start else '—'}")
        if self.mode == "replay" and view.end_t and start:
            line.append(f" of {duration(view.end_t - start)}")
        line.append(" since start")
        if self._axis:
            line.append(f" · axis {self._axis}")
        if self._legend:
            line.append(f" · {'°F' if self.fw.unit == 'F' else '°C'}")
            for label, style in self._legend:
                line.append(" ━", style=style)
                line.append(label)
        _set(self.query_one("#cursorline", Static), line)
        self._notice()

    def _notice(self) -> None:
        """The line under the lists: the chosen alarm's evidence, else the caution, whole at this width."""
        width = max(self.size.width - 2, 10)
        if self._evidence:
            text = fmt.clip(f"evidence: {Units(self.fw.unit).restate(self._evidence)}", width)
        else:
            text = next((c for c in CAUTION_LINES if len(c) <= width), CAUTION_LINES[-1])
        _set(self.query_one("#evidence", Static), text)

    def on_resize(self) -> None:
        self._notice()

    def on_alarm_list_highlighted(self, message: AlarmList.Highlighted) -> None:
        chosen_before = self.selected_alarm is not None
        self.selected_alarm = message.alarm_id
        self._evidence = message.evidence
        self._notice()
        if chosen_before != (message.alarm_id is not None):
            self.refresh_bindings()  # Ack and Shelve need a chosen alarm; the footer is rebuilt only when that changes

    # -- actions ------------------------------------------------------------------------
    def check_action(self, action: str, parameters: tuple) -> bool | None:
        replay_only = {"play", "faster", "slower", "seek", "seek_to", "next_alarm", "previous_alarm"}
        if action in replay_only and self.mode != "replay":
            return False
        if action == "shelve" and self.mode != "live":
            return False  # a shelf hides what is still to come: a finished firing has nothing to come
        if action in ("acknowledge", "shelve") and self.selected_alarm is None:
            return None  # shown dimmed: choose an alarm first
        return True

    def action_help(self) -> None:
        self.app.push_screen(HelpScreen(self.KEY_HELP, self.TIME_HELP))

    def action_units(self) -> None:
        self.fw.unit = "F" if self.fw.unit == "C" else "C"
        if self._last_moment is not None:  # at once, from what was last read: nothing new to read for a unit
            self.on_log_read(LogRead(self._last_moment, self._last_chart_data, self.view.end_t))

    def action_tune(self) -> None:
        from firewatch.ui.tuning import TuningScreen

        self.app.push_screen(TuningScreen(self.view.path, self.view.site, getattr(self.app, "site_path", None)))

    def action_toggle_tab(self) -> None:
        tabs = self.query_one(TabbedContent)
        tabs.active = "events-tab" if tabs.active == "alarms-tab" else "alarms-tab"

    def _submit(self, kind: str, **kw) -> None:
        """Hand an action to the desk and say what became of it: written, sent to the recorder, or refused."""
        outcome = self.fw.desk.submit(kind, **kw)
        self.last_outcome = outcome
        self.notify(outcome.text, severity="information" if outcome.ok else "error", timeout=8)
        if outcome.written:
            self._request()

    def action_acknowledge(self) -> None:
        if self.selected_alarm is not None:
            self._submit("acknowledge", alarm_id=self.selected_alarm)

    def action_shelve(self) -> None:
        alarm_id = self.selected_alarm
        if alarm_id is None:
            return

        def done(result) -> None:
            if result:
                reason, seconds = result
                self._submit("shelve", alarm_id=alarm_id, reason=reason, duration_s=seconds)

        alarm = next((a for a in self.query_one(AlarmList).alarms if a.id == alarm_id), None)
        what = f"alarm #{alarm_id}" + (f": {alarm.kind} {alarm.channel or 'line'}" if alarm is not None else "")
        self.app.push_screen(ShelveScreen(what), done)

    def action_note(self) -> None:
        about = self.cursor if self.mode == "replay" else None  # a note in replay is about the moment shown

        def done(text) -> None:
            if text:
                self._submit("note", text=text, about_t=about)

        self.app.push_screen(NoteScreen(), done)

    def action_play(self) -> None:
        self.playing = not self.playing
        self._request()

    def action_faster(self) -> None:
        i = SPEEDS.index(self.speed)
        self.speed = SPEEDS[min(i + 1, len(SPEEDS) - 1)]
        self._request()

    def action_slower(self) -> None:
        i = SPEEDS.index(self.speed)
        self.speed = SPEEDS[max(i - 1, 0)]
        self._request()

    def seek(self, t: float) -> None:
        """Move the replay cursor (clamped to the firing)."""
        view = self.view
        if view.start_t is None or view.end_t is None:
            return
        self.cursor = min(max(t, view.start_t), view.end_t)
        self._request(chart=True)

    def action_seek(self, seconds: float) -> None:
        if self.cursor is not None:
            self.seek(self.cursor + float(seconds))

    def action_seek_to(self, where: str) -> None:
        self.seek((self.view.start_t if where == "start" else self.view.end_t) or 0.0)

    def action_next_alarm(self) -> None:
        times = [t for t, _, _ in self.view.alarm_times() if self.cursor is not None and t > self.cursor + 0.5]
        if times:
            self.seek(times[0])
        else:
            self.notify("no later alarm")

    def action_previous_alarm(self) -> None:
        times = [t for t, _, _ in self.view.alarm_times() if self.cursor is not None and t < self.cursor - 0.5]
        if times:
            self.seek(times[-1])
        else:
            self.notify("no earlier alarm")

    def action_zoom(self, factor: float) -> None:
        view = self.view
        full = (view.end_t or 0) - (view.start_t or 0)
        span = (self.zoom_span or full) * float(factor)
        self.zoom_span = None if span >= full else max(span, 600.0)
        self._request(chart=True)

    def action_fit(self) -> None:
        self.zoom_span = None
        self._request(chart=True)

    def _tick(self) -> None:
        if self.mode != "replay" or not self.playing or self.cursor is None:
            return
        if self.view.end_t is not None and self.cursor >= self.view.end_t:
            self.playing = False
            return
        self.cursor = min(self.cursor + self.speed * 0.5, self.view.end_t or self.cursor)
        self._request(chart=True)
