"""The tuning screen: move the emissivity and transmission by key and see the whole firing reconciled again.

The data are read and the fit is made once, in a thread worker; each key
press then recomputes the reconciled trace at up to 2000 points spread
over the firing (vectorised, well under 100 ms) and redraws it with its
residual against the reference thermocouple, the fitted value marked.
Accepting writes the values into the site profile as ``tune --apply``
does, after a confirmation.
"""

from __future__ import annotations

import datetime as dt
import math

import numpy as np
from textual import work
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Vertical
from textual.screen import ModalScreen, Screen
from textual.widgets import Button, Footer, Label, Static
from textual_plot import HiResMode, PlotWidget

__all__ = ["TuningScreen", "ConfirmScreen"]

POINTS = 2000


class ConfirmScreen(ModalScreen[bool]):
    BINDINGS = [("y", "answer(True)", "Yes"), ("n,escape", "answer(False)", "No")]

    def __init__(self, question: str) -> None:
        super().__init__()
        self.question = question

    def compose(self) -> ComposeResult:
        with Vertical(id="dialog"):
            yield Label(self.question, id="dialog-title")
            yield Static("y writes it, n or Esc goes back.", classes="hint")
            yield Button("Write (y)", id="yes")

    def on_button_pressed(self, event: Button.Pressed) -> None:
        self.dismiss(True)

    def action_answer(self, value: bool) -> None:
        self.dismiss(value)


class TuningScreen(Screen):
    """Emissivity (and transmission) by hand, against the fit, over the whole firing."""

    BINDINGS = [
        Binding("up", "step(0.01)", "ε +0.01", priority=True),
        Binding("down", "step(-0.01)", "ε -0.01", priority=True),
        Binding("shift+up", "step(0.001)", "ε +0.001", show=False, priority=True),
        Binding("shift+down", "step(-0.001)", "ε -0.001", show=False, priority=True),
        Binding("right", "gray(0.01)", "τ +0.01", priority=True),
        Binding("left", "gray(-0.01)", "τ -0.01", priority=True),
        Binding("f", "fitted", "Fitted value"),
        Binding("enter", "accept", "Accept"),
        Binding("escape,t", "app.pop_screen", "Back"),
    ]

    def __init__(self, log_path, site, site_path=None) -> None:
        super().__init__()
        self.log_path = log_path
        self.site = site
        self.site_path = site_path
        self.data = None
        self.result = None
        self.refusal = ""
        py = next((p for p in site.pyrometers if p.kind == "single"), None) if site else None
        self.emissivity = py.emissivity if py else 1.0
        self.gray = 1.0
        self.redraw_ms = math.nan

    def compose(self) -> ComposeResult:
        yield Static("reading the firing and fitting…", id="tune-status")
        yield PlotWidget(allow_pan_and_zoom=False, id="tune-trace")
        yield PlotWidget(allow_pan_and_zoom=False, id="tune-residual")
        yield Footer()

    def on_mount(self) -> None:
        for plot in self.query(PlotWidget):
            plot.can_focus = False
        self.load()

    @work(thread=True, exclusive=True)
    def load(self) -> None:
        from firewatch.store.reader import LogReader
        from firewatch.firing.tuning import TuneError, fit, load_data

        try:
            with LogReader(self.log_path) as reader:
                data = load_data(reader, self.site)
            try:
                result = fit(data)
                refusal = ""
            except TuneError as exc:
                result, refusal = None, str(exc)
        except TuneError as exc:
            data, result, refusal = None, None, str(exc)
        self.app.call_from_thread(self._loaded, data, result, refusal)

    def _loaded(self, data, result, refusal: str) -> None:
        self.data, self.result, self.refusal = data, result, refusal
        if data is not None:
            n = data.t.size
            self._idx = np.unique(np.linspace(0, n - 1, min(POINTS, n)).astype(int))
            self._t_h = (data.t[self._idx] - data.start_t) / 3600.0
            self._ref = data.ref[self._idx]
        self.redraw()
        self.refresh_bindings()

    def check_action(self, action: str, parameters: tuple) -> bool | None:
        if action in ("step", "gray", "fitted", "accept") and self.data is None:
            return None
        if action == "fitted" and self.result is None:
            return None
        if action == "accept" and self.site_path is None:
            return None  # start with --site FILE to be able to write the result
        return True

    def redraw(self) -> None:
        import time

        from firewatch.firing.tuning import reconcile_with

        status = self.query_one("#tune-status", Static)
        if self.data is None:
            status.update(f"cannot tune: {self.refusal}")
            return
        t0 = time.perf_counter()
        rec = reconcile_with(self.data, self.emissivity, self.gray, self._idx)
        resid = rec - self._ref
        valid = self.data.valid[self._idx]
        trace = self.query_one("#tune-trace", PlotWidget)
        trace.clear()
        trace.plot(self._t_h, self._ref, line_style="grey50", hires_mode=HiResMode.BRAILLE, label=self.data.reference)
        trace.plot(self._t_h, rec, line_style="bright_white", hires_mode=HiResMode.BRAILLE, label=f"{self.data.py.name} reconciled")
        residual = self.query_one("#tune-residual", PlotWidget)
        residual.clear()
        ok = valid & np.isfinite(resid)
        if ok.any():
            residual.scatter(self._t_h[ok], resid[ok], marker="•", marker_style="bright_white")
        if (~valid).any():
            residual.scatter(self._t_h[~valid], np.nan_to_num(resid[~valid]), marker="·", marker_style="grey42")
        residual.set_ylimits(-10, 10)
        self.redraw_ms = (time.perf_counter() - t0) * 1000
        used = resid[ok]
        fitted = ""
        if self.result is not None:
            fitted = f" · fitted {self.result.emissivity:.3f} (95 % CI {self.result.ci95[0]:.3f}-{self.result.ci95[1]:.3f})"
        elif self.refusal:
            fitted = f" · no fit: {self.refusal}"
        status.update(
            f"{self.data.py.name}: ε {self.emissivity:.3f} · τ factor {self.gray:.2f}{fitted} · residual on the used stretches "
            f"mean {np.mean(used):+.2f} K, sd {np.std(used):.2f} K (dots: used; faint: rejected)" if used.size else
            f"{self.data.py.name}: ε {self.emissivity:.3f}{fitted}"
        )

    def action_step(self, delta: float) -> None:
        self.emissivity = float(min(max(self.emissivity + float(delta), 0.02), 1.0))
        self.redraw()

    def action_gray(self, delta: float) -> None:
        self.gray = float(min(max(self.gray + float(delta), 0.05), 1.0))
        self.redraw()

    def action_fitted(self) -> None:
        if self.result is not None:
            self.emissivity = self.result.emissivity
            self.gray = 1.0
            self.redraw()

    def action_accept(self) -> None:
        if self.site_path is None or self.data is None:
            return
        question = f"Write ε = {self.emissivity:.3f}" + (f" and fouling {self.gray:.2f}" if self.gray != 1.0 else "") + f" for {self.data.py.name} into {self.site_path}?"

        def done(yes: bool) -> None:
            if not yes:
                return
            from firewatch.settings._tomlcheck import ProfileError
            from firewatch.firing.profile_writer import apply_tuning

            values = {"emissivity": self.emissivity}
            if self.gray != 1.0:
                values["fouling"] = self.gray * self.data.py.fouling
            when = dt.datetime.now(dt.timezone.utc).isoformat(timespec="seconds").replace("+00:00", "Z")
            how = "set by hand on the tuning screen" if self.result is None or abs(self.emissivity - self.result.emissivity) > 5e-4 else "the fitted value"
            comment = f"tuned on the firewatch tuning screen from {self.log_path} at {when}: {how}"
            if self.result is not None:
                comment += f"; fit {self.result.emissivity:.3f} (95 % CI {self.result.ci95[0]:.3f}-{self.result.ci95[1]:.3f})"
            try:
                apply_tuning(self.site_path, self.data.py.name, values, comment)
            except (ProfileError, OSError) as exc:
                self.notify(f"not written: {exc}", severity="error")
                return
            self.notify(f"written to {self.site_path}")

        self.app.push_screen(ConfirmScreen(question), done)
