"""The plant overview: one row per kiln on the broker, drill-down into one kiln, plant-wide acknowledgement."""

from __future__ import annotations

import math
import time
from typing import cast

from rich.text import Text
from textual.app import App, ComposeResult
from textual.binding import Binding
from textual.screen import Screen
from textual.widgets import DataTable, Footer, Static

from firewatch.services.plant import PlantState
from firewatch.settings.timefmt import Clock, duration
from firewatch.ui import format as fmt

__all__ = ["PlantApp", "KilnScreen"]

STALE_S = 30.0
ABNORMAL = "bold reverse"


def _num(value, digits: int = 1) -> str:
    return "—" if value is None or not isinstance(value, (int, float)) or not math.isfinite(value) else f"{value:.{digits}f}"


class KilnScreen(Screen):
    """One kiln from its last state message: every value, and its alarms to acknowledge."""

    BINDINGS = [Binding("a", "acknowledge", "Ack"), Binding("escape,backspace", "app.pop_screen", "Back")]

    def __init__(self, kiln: str) -> None:
        super().__init__()
        self.kiln = kiln

    @property
    def fw(self) -> PlantApp:
        """The app, typed: this screen is only ever shown by :class:`PlantApp`."""
        return cast("PlantApp", self.app)

    def compose(self) -> ComposeResult:
        yield Static(id="kiln-title")
        yield DataTable(id="kiln-alarms", cursor_type="row")
        yield DataTable(id="kiln-values", cursor_type="row")
        yield Footer()

    def on_mount(self) -> None:
        self.query_one("#kiln-alarms", DataTable).add_columns("priority", "state", "kind", "channel", "cause", "id")
        self.query_one("#kiln-values", DataTable).add_columns("channel", "value")
        self.refresh_view()
        self.set_interval(0.5, self.refresh_view)

    def _view(self):
        return next((v for v in self.fw.plant.snapshot() if v.kiln == self.kiln), None)

    def refresh_view(self) -> None:
        view = self._view()
        if view is None:
            return
        s = view.state.get("summary", {})
        age = time.time() - view.received if view.received else math.inf
        self.query_one("#kiln-title", Static).update(
            f"{self.kiln} · {s.get('site', '')} · {s.get('kiln_name', '')} · data {duration(age)} old "
            f"(at {self.fw.clock.header(view.received)}) · Esc back"
        )
        alarms = self.query_one("#kiln-alarms", DataTable)
        alarms.clear()
        for a in view.alarms:
            alarms.add_row(fmt.PRIORITY_WORDS.get(a["priority"], a["priority"]), fmt.STATE_WORDS.get(a["state"], a["state"]),
                           a["kind"], a["channel"] or "line", a["cause"] or "", str(a["id"]), key=str(a["id"]))
        values = self.query_one("#kiln-values", DataTable)
        values.clear()
        for name, value in sorted(view.state.get("values", {}).items()):
            values.add_row(name, _num(value, 2))

    def action_acknowledge(self) -> None:
        table = self.query_one("#kiln-alarms", DataTable)
        view = self._view()
        if view is None or not view.alarms or table.cursor_row is None or table.cursor_row >= len(view.alarms):
            return
        alarm = view.alarms[table.cursor_row]
        self.fw.plant.acknowledge(self.kiln, int(alarm["id"]))
        self.notify(f"acknowledge sent to {self.kiln} (applied if its site enables plant actions)")


class PlantScreen(Screen):
    BINDINGS = [
        Binding("enter", "open", "Open kiln"),
        Binding("A", "acknowledge_all", "Ack all"),
        Binding("question_mark", "help", "Help"),
        Binding("q", "app.quit", "Quit"),
    ]

    @property
    def fw(self) -> PlantApp:
        """The app, typed: this screen is only ever shown by :class:`PlantApp`."""
        return cast("PlantApp", self.app)

    def compose(self) -> ComposeResult:
        yield Static(id="plant-title")
        yield DataTable(id="kilns", cursor_type="row")
        yield Static("⚠ a monitoring aid, never a safety device: each kiln's controller and cut-out stay in charge", id="evidence")
        yield Footer()

    def on_mount(self) -> None:
        self.query_one("#kilns", DataTable).add_columns("kiln", "state", "segment", "temperature °C", "divergence K", "alarms", "end in", "data age")
        self.refresh_rows()
        self.set_interval(0.5, self.refresh_rows)

    def refresh_rows(self) -> None:
        table = self.query_one("#kilns", DataTable)
        views = self.fw.plant.snapshot()
        now = time.time()
        keep = table.cursor_row
        table.clear()
        for v in views:
            s = v.state.get("summary", {})
            age = now - v.received if v.received else math.inf
            unack = len(v.unacknowledged)
            if age > STALE_S:
                state = Text(f"STALE {duration(age)}", style=ABNORMAL)
            elif unack:
                state = Text(f"ALARM {unack} unack", style=ABNORMAL)
            elif v.alarms:
                state = Text(f"{len(v.alarms)} alarm(s) ack")
            else:
                state = Text("normal")
            seg = s.get("segment")
            table.add_row(v.kiln, state, "—" if seg is None else str(seg + 1), _num(s.get("temperature_c")), _num(s.get("divergence_k")),
                          ", ".join(f"{a['kind']} {a['channel'] or ''}".strip() for a in v.alarms) or "—",
                          duration(s.get("remaining_s")), duration(age) if math.isfinite(age) else "—", key=v.kiln)
        if keep is not None and views:
            table.move_cursor(row=min(keep, len(views) - 1))
        total = sum(len(v.unacknowledged) for v in views)
        self.query_one("#plant-title", Static).update(
            f"PLANT {self.fw.plant.url.prefix} · {self.fw.clock.header(now)} · {len(views)} kiln(s) · "
            f"{total} unacknowledged alarm(s) · broker {'connected' if self.fw.plant.connected.is_set() else 'NOT CONNECTED'}"
        )

    def on_data_table_row_selected(self, event: DataTable.RowSelected) -> None:
        event.stop()
        self.action_open()

    def action_open(self) -> None:
        table = self.query_one("#kilns", DataTable)
        views = self.fw.plant.snapshot()
        if views and table.cursor_row is not None and table.cursor_row < len(views):
            self.app.push_screen(KilnScreen(views[table.cursor_row].kiln))

    def action_acknowledge_all(self) -> None:
        n = self.fw.plant.acknowledge_all()
        self.notify(f"{n} acknowledgement(s) sent; each kiln applies them if its site enables plant actions")

    def action_help(self) -> None:
        from firewatch.ui.screens import HelpScreen

        self.app.push_screen(HelpScreen([("↑ ↓", "choose a kiln"), ("Enter", "open the kiln: its values and alarms"),
                                         ("a", "(in a kiln) acknowledge the chosen alarm"), ("A", "acknowledge every alarm of every kiln"),
                                         ("Esc", "back"), ("q", "quit")]))


class PlantApp(App):
    CSS_PATH = "firewatch.tcss"
    TITLE = "firewatch plant"
    ENABLE_COMMAND_PALETTE = False

    def __init__(self, url, utc: bool = False) -> None:
        super().__init__()
        self.plant = PlantState(url)
        self.clock = Clock.for_site("", utc=utc)
        """Clock times: this computer's zone (kilns may be in several sites), or UTC with ``--utc``."""

    def on_mount(self) -> None:
        self.theme = "textual-dark"
        self.push_screen(PlantScreen())

    def on_unmount(self) -> None:
        self.plant.close()
