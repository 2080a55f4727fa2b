"""Modal screens: help (every key, and the cautions), the cautions at first start, shelving, notes."""

from __future__ import annotations

from textual.app import ComposeResult
from textual.containers import Vertical
from textual.screen import ModalScreen
from textual.widgets import Button, Input, Label, Static

__all__ = ["CAUTIONS", "CautionsScreen", "HelpScreen", "ShelveScreen", "NoteScreen"]

CAUTIONS = """\
firewatch is a monitoring aid, never a safety device.
• The kiln's own controller and an independent over-temperature cut-out stay in charge;
  never rely on firewatch to stop a kiln.
• Follow the site's safety rules, the kiln maker's instructions and local codes; defer to
  licensed practice where the law requires it.
• Electrical work only by qualified people, with the supply isolated.
• Infrared- and UV-rated eye protection at sight ports; heat-resistant gloves.
• Ventilate for fumes, and for carbon monoxide in reduction firings; keep combustibles clear."""


class CautionsScreen(ModalScreen[None]):
    """Shown at first start; any key or the button dismisses it."""

    BINDINGS = [("enter", "dismiss_screen", "Understood"), ("escape", "dismiss_screen", "Understood")]

    def compose(self) -> ComposeResult:
        with Vertical(id="dialog"):
            yield Label("Cautions", id="dialog-title")
            yield Static(CAUTIONS)
            yield Button("Understood (Enter)", id="ok")

    def on_button_pressed(self, event: Button.Pressed) -> None:
        self.dismiss(None)

    def action_dismiss_screen(self) -> None:
        self.dismiss(None)


class HelpScreen(ModalScreen[None]):
    """Every key of the dashboard, and the cautions."""

    BINDINGS = [("escape,q,question_mark", "dismiss_screen", "Close")]

    def __init__(self, keys: list[tuple[str, str]]) -> None:
        super().__init__()
        self.keys = keys

    def compose(self) -> ComposeResult:
        lines = "\n".join(f"  {k:<18} {d}" for k, d in self.keys)
        with Vertical(id="dialog"):
            yield Label("Keys", id="dialog-title")
            yield Static(lines)
            yield Label("Cautions", id="dialog-title-2")
            yield Static(CAUTIONS)
            yield Static("Esc closes this help.", classes="hint")

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
            yield Label(f"Shelve: {self.alarm_text}", id="dialog-title")
            yield Input(placeholder="reason (required)", id="reason")
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
            yield Input(placeholder="for example: cones 6 down at the top spy", id="note")
            yield Static("Enter saves, Esc cancels.", classes="hint")

    def on_input_submitted(self, event: Input.Submitted) -> None:
        text = event.value.strip()
        self.dismiss(text or None)

    def action_cancel(self) -> None:
        self.dismiss(None)
