"""The textual application: a thin shell holding the units, the action desk and the screens."""

from __future__ import annotations

import os
from pathlib import Path

from textual import work
from textual.app import App
from textual.reactive import reactive

from firewatch.services.desk import ActionDesk
from firewatch.settings.timefmt import Clock
from firewatch.store._common import LogError, damage_error
from firewatch.store.reader import LogReader
from firewatch.store.view import FiringView
from firewatch.ui.dashboard import DashboardScreen
from firewatch.ui.screens import CautionsScreen

__all__ = ["FirewatchApp", "cautions_marker"]

DAMAGE_NOTICE_S = 24 * 3600.0
"""A damaged log's notice stays this long: as long as a firing, until the operator closes it."""


def cautions_marker() -> Path:
    """A file whose presence means the cautions were shown on this account before."""
    base = os.environ.get("XDG_STATE_HOME") or os.path.join(os.path.expanduser("~"), ".local", "state")
    return Path(base) / "firewatch" / "cautions-seen"


class FirewatchApp(App):
    """The dashboard over one firing log."""

    CSS_PATH = "firewatch.tcss"
    TITLE = "firewatch"
    ENABLE_COMMAND_PALETTE = False

    unit: reactive[str] = reactive("C", repaint=False)
    """Units people read: C or F (the screen redraws what shows a temperature; nothing else is repainted)."""

    def __init__(self, log, mode: str = "live", site=None, schedule=None, speed: float = 60.0,
                 show_cautions: bool | None = None, desk: ActionDesk | None = None, site_path=None, utc: bool = False) -> None:
        super().__init__()
        self.site_path = site_path
        """The site profile file the tuning screen may write (None: accepting is not offered)."""
        self.log_path = Path(log)
        self.mode = mode
        self.view = FiringView(self.log_path, site=site, schedule=schedule)
        self.clock = Clock.for_site(self.view.site.timezone if self.view.site is not None else "", utc=utc)
        """Every clock time on the screens: the site's ``[site] timezone``, the computer's zone, or UTC (``--utc``)."""
        self.speed = speed
        # live and in replay: written at once while no recorder holds the log, else handed to the recorder
        self.desk = desk if desk is not None else ActionDesk(self.log_path, self.view.site, self.view.schedule)
        marker = cautions_marker()
        self.show_cautions = (not marker.exists()) if show_cautions is None else show_cautions
        self._marker = marker if show_cautions is None else None
        self.failure: str | None = None
        """Why the app ended on its own (a damaged log): the command says it once the screen is gone."""
        self.integrity: list[str] | None = None
        """What SQLite's quick check found in the live log (empty: sound; None: not checked yet)."""

    def fail(self, message: str) -> None:
        """End the app because the log cannot be read; ``message`` names the file and the problem."""
        if self.failure is None:
            self.failure = message
            self.exit(return_code=2)

    def on_mount(self) -> None:
        self.theme = "textual-dark"
        self.push_screen(DashboardScreen(self.view, self.mode, self.speed))
        if self.mode == "live":
            self.check_integrity()
        if self.show_cautions:
            self.push_screen(CautionsScreen())
            if self._marker is not None:
                try:
                    self._marker.parent.mkdir(parents=True, exist_ok=True)
                    self._marker.touch()
                except OSError:
                    pass  # cannot remember: the cautions show again next time, which is harmless

    @work(thread=True, exclusive=True, group="integrity")
    def check_integrity(self) -> None:
        """SQLite's quick check of the live log, behind the screen: what it finds stays on the screen.

        The screen goes on showing what can be read (a damaged page may be an old one while the
        recorder writes on); when the poller itself meets the damage, the app ends with the message.
        """
        try:
            with LogReader(self.log_path) as reader:
                problems = reader.integrity(limit=5)
        except LogError as exc:
            problems = [str(exc)]
        self.integrity = problems
        if not problems:
            return
        try:
            self.call_from_thread(
                self.notify,
                f"{damage_error(self.log_path, problems)}. What is shown may be incomplete; 'firewatch inspect' lists the problems.",
                title="firing log damaged", severity="error", timeout=DAMAGE_NOTICE_S, markup=False,
            )
        except RuntimeError:  # the app closed meanwhile: nobody to tell
            pass

    def on_unmount(self) -> None:
        self.view.close()
        self.desk.close()
