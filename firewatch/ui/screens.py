"""Modal screens: help (the cautions, then every key), the cautions at first start, shelving, notes.

Each fits 80×24: a dialog taller than the screen scrolls, and every field is labelled.
"""

from __future__ import annotations

from rich.table import Table
from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Vertical, VerticalScroll
from textual.events import Resize
from textual.screen import ModalScreen
from textual.widgets import Button, Input, Label, Static

__all__ = ["CAUTIONS", "CAUTION_ITEMS", "CautionsScreen", "HelpScreen", "NoteScreen", "ShelveScreen", "cautions_table"]

CAUTIONS_HEAD = "firewatch is a monitoring aid, never a safety device."
CAUTION_ITEMS = (
    ("The kiln's own controller and an independent over-temperature cut-out stay in charge; never rely on firewatch "
     "to stop a kiln."),
    ("Follow the site's safety rules, the kiln maker's instructions and local codes; defer to licensed practice where "
     "the law requires it."),
    "Electrical work only by qualified people, with the supply isolated.",
    "Infrared- and UV-rated eye protection at sight ports; heat-resistant gloves.",
    "Ventilate for fumes, and for carbon monoxide in reduction firings; keep combustibles clear.",
)
CAUTIONS = CAUTIONS_HEAD + "\n" + "\n".join(f"• {item}" for item in CAUTION_ITEMS)
"""The cautions as plain text."""


def cautions_table() -> Table:
    """The cautions with a hanging indent, so that they wrap at any width and still read as a list."""
    return _grid([(Text(CAUTIONS_HEAD, style="bold"), "")] + [("•", item) for item in CAUTION_ITEMS], span_first=True)


def keys_table(keys: list[tuple[str, str]]) -> Table:
    """Keys and what they do, each description wrapping under itself."""
    return _grid([(f"  {k}", d) for k, d in keys])


def _grid(rows: list[tuple[str | Text, str]], span_first: bool = False) -> Table:
    grid = Table.grid(padding=(0, 1), expand=True)
    grid.add_column(no_wrap=True)
    grid.add_column(ratio=1)
    for i, (left, right) in enumerate(rows):
        if span_first and i == 0:
            continue
        grid.add_row(left, right)
    if span_first:  # the lead line spans both columns: a grid of its own above the items
        outer = Table.grid(expand=True)
        outer.add_column(ratio=1)
        outer.add_row(rows[0][0])
        outer.add_row(grid)
        return outer
    return grid


def _fit_body(screen: ModalScreen, height: int, below: int) -> None:
    """Let a dialog's body scroll within the screen: its height less the border and what is docked below it."""
    screen.query_one("#help-body", VerticalScroll).styles.max_height = max(height - 2 - below, 3)


class CautionsScreen(ModalScreen[None]):
    """Shown at first start; any key or the button dismisses it."""

    BINDINGS = [("enter", "dismiss_screen", "Understood"), ("escape", "dismiss_screen", "Understood")]

    def compose(self) -> ComposeResult:
        with Vertical(id="dialog"):
            with VerticalScroll(id="help-body"):
                yield Label("Cautions", id="dialog-title")
                yield Static(cautions_table())
            yield Button("Understood (Enter)", id="ok")

    def on_resize(self, event: Resize) -> None:
        _fit_body(self, event.size.height, 3)

    def on_button_pressed(self, event: Button.Pressed) -> None:
        self.dismiss(None)

    def action_dismiss_screen(self) -> None:
        self.dismiss(None)


class HelpScreen(ModalScreen[None]):
    """The cautions first, then every key; scrolls with the arrows, PgUp/PgDn, Home/End (and the wheel)."""

    BINDINGS = [
        Binding("escape,q,question_mark", "dismiss_screen", "Close"),
        Binding("up,k", "scroll('up')", "Up", show=False),
        Binding("down,j", "scroll('down')", "Down", show=False),
        Binding("pageup", "scroll('page_up')", "Page up", show=False),
        Binding("pagedown,space", "scroll('page_down')", "Page down", show=False),
        Binding("home", "scroll('home')", "Top", show=False),
        Binding("end", "scroll('end')", "Bottom", show=False),
    ]

    def __init__(self, keys: list[tuple[str, str]], notes: str = "") -> None:
        super().__init__()
        self.keys = keys
        self.notes = notes

    def compose(self) -> ComposeResult:
        with Vertical(id="dialog"):
            with VerticalScroll(id="help-body"):
                yield Label("Cautions", id="dialog-title")
                yield Static(cautions_table())
                yield Label("Keys", id="dialog-title-2")
                yield Static(keys_table(self.keys))
                if self.notes:
                    yield Label("Times", classes="section")
                    yield Static(self.notes, markup=False)
            yield Static("↑ ↓ PgUp PgDn Home End scroll · Esc closes", classes="hint", id="help-hint")

    @property
    def body(self) -> VerticalScroll:
        """The scrolling part (tests read its scroll position)."""
        return self.query_one("#help-body", VerticalScroll)

    def on_resize(self, event: Resize) -> None:
        _fit_body(self, event.size.height, 1)

    def action_scroll(self, how: str) -> None:
        body = self.body
        {"up": body.scroll_up, "down": body.scroll_down, "page_up": body.scroll_page_up, "page_down": body.scroll_page_down,
         "home": body.scroll_home, "end": body.scroll_end}[how](animate=False)

    def action_dismiss_screen(self) -> None:
        self.dismiss(None)


class ShelveScreen(ModalScreen["tuple[str, float] | None"]):
    """Ask for the reason and the duration of a shelf."""

    BINDINGS = [("escape", "cancel", "Cancel")]

    def __init__(self, alarm_text: str) -> None:
        super().__init__()
        self.alarm_text = alarm_text

    def compose(self) -> ComposeResult:
        with Vertical(id="dialog"):
            yield Label(f"Shelve {self.alarm_text}", id="dialog-title")
            yield Label("Reason (required, kept in the log):", classes="field")
            yield Input(placeholder="for example: tc2 being replaced", id="reason")
            yield Label("Shelve for, minutes (the alarm returns after):", classes="field")
            yield Input(value="60", placeholder="minutes", id="minutes", type="number")
            yield Static("Enter shelves, Esc cancels.", classes="hint")

    def on_input_submitted(self, event: Input.Submitted) -> None:
        reason = self.query_one("#reason", Input).value.strip()
        try:
            minutes = float(self.query_one("#minutes", Input).value)
        except ValueError:
            minutes = 0.0
        if not reason:
            self.notify("a shelf needs a reason", severity="error")
            self.query_one("#reason", Input).focus()
            return
        if not minutes > 0:
            self.notify("give the shelf a duration in minutes", severity="error")
            return
        self.dismiss((reason, minutes * 60.0))

    def action_cancel(self) -> None:
        self.dismiss(None)


class NoteScreen(ModalScreen["str | None"]):
    """Ask for an operator note for the firing log."""

    BINDINGS = [("escape", "cancel", "Cancel")]

    def compose(self) -> ComposeResult:
        with Vertical(id="dialog"):
            yield Label("Note for the firing log", id="dialog-title")
            yield Label("Note (kept in the log with your account name and the time):", classes="field")
            yield Input(placeholder="for example: cones 6 down at the top spy", id="note")
            yield Static("Enter saves, Esc cancels.", classes="hint")

    def on_input_submitted(self, event: Input.Submitted) -> None:
        text = event.value.strip()
        self.dismiss(text or None)

    def action_cancel(self) -> None:
        self.dismiss(None)
