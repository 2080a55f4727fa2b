"""The tuning screen: both answers of ``firewatch tune``, and the ware's emissivity by hand over the whole firing.

The data are read and both answers found once, in a thread worker: the
*instrument setting* (the emissivity to dial into the instrument so that it
reads the reference) and the *ware's emissivity* (or why the firing hides
it). Each key press then recomputes, at up to 2000 points spread over the
firing (vectorised, well under 100 ms), the pyrometer reconciled with the
emissivity and transmission set by hand, and redraws it beside the
reference and beside what the instrument would show at the suggested
setting, with the residual against the reference below. Both plots carry
labelled axes and a legend. A line says what Enter will write and where,
or why it cannot (no ``--site`` file, as in the demo); writing goes through
the same profile writer as ``tune --apply``, after a confirmation.
"""

from __future__ import annotations

import datetime as dt
import math
from pathlib import Path

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


class _Plot(PlotWidget):
    """A plot that never takes focus: its own pan and zoom keys would shadow the screen's arrows and fill the footer."""

    can_focus = False


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
    """Both answers, and the ware's emissivity (and transmission) by hand, over the whole firing."""

    DEFAULT_CSS = """
    TuningScreen .tune-key {
        height: auto;
        padding: 0 1;
    }
    TuningScreen #tune-time {
        height: 1;
        width: 100%;
        content-align: center middle;
        color: $text-muted;
    }
    TuningScreen #tune-enter {
        height: auto;
        padding: 0 1;
        background: $panel;
        color: $text-muted;
    }
    """

    BINDINGS = [
        Binding("up", "step(0.01)", "ε +0.01", priority=True),
        Binding("down", "step(-0.01)", "ε -0.01", priority=True),
        Binding("shift+up", "step(0.001)", "ε +0.001", show=False, priority=True),
        Binding("shift+down", "step(-0.001)", "ε -0.001", show=False, priority=True),
        Binding("right", "gray(0.01)", "τ +0.01", priority=True),
        Binding("left", "gray(-0.01)", "τ -0.01", priority=True),
        Binding("f", "fitted", "Fitted ε"),
        Binding("enter", "accept", "Write"),
        Binding("escape,t", "app.pop_screen", "Back"),
    ]

    def __init__(self, log_path, site, site_path=None) -> None:
        super().__init__()
        self.log_path = log_path
        self.site = site
        self.site_path = site_path
        self.data = None
        self.result = None
        """The :class:`~firewatch.firing.tuning.TuneResult` once loaded (None when no stretch is usable)."""
        self.refusal = ""
        py = next((p for p in site.pyrometers if p.kind == "single"), None) if site else None
        self.emissivity = py.emissivity if py else 1.0
        self.gray = 1.0
        self.redraw_ms = math.nan

    # -- what the answers are ------------------------------------------------------------------
    @property
    def fitted(self) -> float | None:
        """The ware's fitted emissivity, or None where the firing hides it."""
        if self.result is None or self.result.ware is None or self.result.ware.emissivity_held:
            return None
        return self.result.ware.emissivity

    def pending(self) -> dict[str, float]:
        """What Enter writes into the site profile's ``[[pyrometer]]``: key -> value.

        The instrument setting always (where it can be dialled in, at most 1); the ware's emissivity when it
        has been moved from the profile's value (by hand, or to the fit with f); the fouling factor when the
        transmission has been moved.
        """
        values: dict[str, float] = {}
        if self.result is None or self.data is None:
            return values
        setting = self.result.instrument.emissivity
        if setting <= 1.0:
            values["set_emissivity"] = round(setting, 4)
        if abs(self.emissivity - self.data.py.emissivity) > 5e-4:
            values["emissivity"] = round(self.emissivity, 4)
        if self.gray != 1.0:
            values["fouling"] = round(self.gray * self.data.py.fouling, 4)
        return values

    def enter_text(self) -> str:
        """The line saying what Enter will write and where, or why it cannot."""
        if self.data is None:
            return "Enter: nothing to write (no stretch of this firing is usable)."
        if self.site_path is None:
            return ("Enter cannot write: no --site file (the demo's shipped profiles are never changed); "
                    "use `firewatch watch LOG --site SITE.toml`.")
        values = self.pending()
        if not values:
            return "Enter: nothing to write."
        what = " and ".join(f"{k} = {v:.3f}" for k, v in values.items())
        text = f"Enter writes {what} for {self.data.py.name} into {self.site_path}"
        if "emissivity" not in values:
            text += (f"; the ware's ε stays {self.data.py.emissivity:g}"
                     + (f" (f: the fitted {self.fitted:.3f})" if self.fitted is not None else ""))
        return text + "."

    # -- screen ---------------------------------------------------------------------------------
    def compose(self) -> ComposeResult:
        yield Static("reading the firing and finding both answers…", id="tune-status")
        yield Static("temperature (°C)", id="tune-trace-key", classes="tune-key")
        yield _Plot(allow_pan_and_zoom=False, id="tune-trace")
        yield Static("residual (K)", id="tune-residual-key", classes="tune-key")
        yield _Plot(allow_pan_and_zoom=False, id="tune-residual")
        yield Static("time into the firing (h)", id="tune-time")
        yield Static("", id="tune-enter")
        yield Footer()

    def on_mount(self) -> None:
        # Each plot's y-axis label and legend share the line above it (one line, not a legend box over the data),
        # and time is labelled once, under the residual plot that shares the trace's time axis: so that both plots
        # keep some rows of data at 80x24. Inline styles, as the app's stylesheet sizes the plots otherwise.
        trace = self.query_one("#tune-trace", PlotWidget)
        trace.margin_top, trace.margin_bottom = 0, 1
        residual = self.query_one("#tune-residual", PlotWidget)
        residual.margin_top, residual.margin_bottom = 0, 1
        for plot in (trace, residual):
            plot.styles.height, plot.styles.min_height = "1fr", 6
            plot.styles.border_top = ("none", "black")
        self.load()

    @work(thread=True, exclusive=True)
    def load(self) -> None:
        from firewatch.firing.tuning import TuneError, load_data, tune
        from firewatch.store.reader import LogReader

        data = result = None
        refusal = ""
        try:
            with LogReader(self.log_path) as reader:
                data = load_data(reader, self.site)
            result = tune(data)
        except TuneError as exc:
            result, refusal = None, str(exc)
        self.app.call_from_thread(self._loaded, data if result is not None else None, result, refusal)

    def _loaded(self, data, result, refusal: str) -> None:
        self.data, self.result, self.refusal = data, result, refusal
        if data is not None:
            n = data.t.size
            self._idx = np.unique(np.linspace(0, n - 1, min(POINTS, n)).astype(int))
            self._t_h = (data.t[self._idx] - data.start_t) / 3600.0
            self._ref = data.ref[self._idx]
            self._at_setting = self._instrument_at_setting()
        self.redraw()
        self.refresh_bindings()

    def _instrument_at_setting(self) -> np.ndarray:
        """What the instrument would show at the suggested setting: S(T') = S(T_ind) e_set / e'."""
        import warnings

        from firewatch.physics._warnings import FirewatchWarning

        assert self.data is not None and self.result is not None
        band = self.data.band
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", FirewatchWarning)
            log_s = band.log_signal(self.data.indicated[self._idx] + 273.15)
            shift = math.log(self.data.py.set_emissivity / self.result.instrument.emissivity)
            return band.temperature_from_log_signal(log_s + shift) - 273.15

    def check_action(self, action: str, parameters: tuple) -> bool | None:
        if action in ("step", "gray", "fitted", "accept") and self.data is None:
            return None
        if action == "fitted" and self.fitted is None:
            return None
        if action == "accept" and (self.site_path is None or not self.pending()):
            return None  # shown dimmed; the line above the footer says why
        return True

    def redraw(self) -> None:
        import time

        from firewatch.firing.tuning import interval_text, reconcile_with

        status = self.query_one("#tune-status", Static)
        enter = self.query_one("#tune-enter", Static)
        enter.update(self.enter_text())
        if self.data is None or self.result is None:
            status.update(f"cannot tune: {self.refusal}")
            return
        t0 = time.perf_counter()
        data, result = self.data, self.result
        rec = reconcile_with(data, self.emissivity, self.gray, self._idx)
        resid = rec - self._ref
        valid = data.valid[self._idx]
        trace = self.query_one("#tune-trace", PlotWidget)
        trace.clear()
        at_setting = f"{data.py.name} set to {result.instrument.emissivity:.3f}"
        reconciled = f"{data.py.name} reconciled ε {self.emissivity:.3f}" + (f" τ×{self.gray:.2f}" if self.gray != 1.0 else "")
        trace.plot(self._t_h, self._ref, line_style="grey50", hires_mode=HiResMode.BRAILLE, label=f"{data.reference} reference")
        trace.plot(self._t_h, self._at_setting, line_style="dark_orange", hires_mode=HiResMode.BRAILLE, label=at_setting)
        trace.plot(self._t_h, rec, line_style="bright_white", hires_mode=HiResMode.BRAILLE, label=reconciled)
        self.query_one("#tune-trace-key", Static).update(
            f"temperature (°C)  [grey50]━━[/] {data.reference}  [dark_orange]━━[/] {at_setting}  [bright_white]━━[/] {reconciled}"
        )
        residual = self.query_one("#tune-residual", PlotWidget)
        residual.clear()
        ok = valid & np.isfinite(resid)
        if ok.any():
            residual.scatter(self._t_h[ok], resid[ok], marker="•", marker_style="bright_white", label="used")
        if (~valid).any():
            residual.scatter(self._t_h[~valid], np.nan_to_num(resid[~valid]), marker="·", marker_style="grey42", label="rejected")
        residual.set_ylimits(-10, 10)
        key = "residual (K)  [bright_white]•[/] used  [grey42]·[/] rejected"
        if ok.any():
            key += f"  mean {np.mean(resid[ok]):+.1f} K, sd {np.std(resid[ok]):.1f} K"
        self.query_one("#tune-residual-key", Static).update(key)
        self.redraw_ms = (time.perf_counter() - t0) * 1000
        setting = result.instrument
        top = next((s for s in setting.by_stretch if s.get("basis")), None)
        where = f"the {top['ref_c']:.0f} °C hold" if top is not None else "all valid stretches"
        lines = [
            f"{data.py.name} against {data.reference}: set the instrument to [b]{setting.emissivity:.3f}[/b] "
            f"({interval_text(setting.ci95)}; now {data.py.set_emissivity:g}), from {where}"
        ]
        if setting.note:
            lines.append(setting.note)
        if self.fitted is not None:
            ware = result.ware
            lines.append(f"ware's emissivity [b]{ware.emissivity:.3f}[/b] ({interval_text(ware.ci95)}; "
                         f"the profile says {data.py.emissivity:g})")
        else:
            lines.append(f"ware's emissivity not found: {result.hidden_reason}")
        status.update("\n".join(lines))

    def action_step(self, delta: float) -> None:
        self.emissivity = float(min(max(self.emissivity + float(delta), 0.02), 1.0))
        self.redraw()
        self.refresh_bindings()

    def action_gray(self, delta: float) -> None:
        self.gray = float(min(max(self.gray + float(delta), 0.05), 1.0))
        self.redraw()
        self.refresh_bindings()

    def action_fitted(self) -> None:
        if self.fitted is not None:
            self.emissivity = self.fitted
            self.gray = 1.0
            self.redraw()

    def action_accept(self) -> None:
        values = self.pending()
        if self.site_path is None or self.data is None or not values:
            return
        what = " and ".join(f"{k} = {v:.3f}" for k, v in values.items())
        question = f"Write {what} for {self.data.py.name} into {self.site_path}?"
        if "set_emissivity" in values:
            question += f" Then dial {values['set_emissivity']:.3f} into {self.data.py.name} itself."

        def done(yes: bool) -> None:
            if not yes:
                return
            self._write(values)

        self.app.push_screen(ConfirmScreen(question), done)

    def _write(self, values: dict[str, float]) -> None:
        from firewatch.firing.profile_writer import apply_tuning
        from firewatch.firing.tuning import interval_text
        from firewatch.settings._tomlcheck import ProfileError

        assert self.data is not None and self.result is not None
        when = dt.datetime.now(dt.UTC).isoformat(timespec="seconds").replace("+00:00", "Z")
        setting = self.result.instrument
        parts: list[str] = []
        if "set_emissivity" in values:
            parts.append(f"instrument setting {setting.emissivity:.3f} (95 % interval {interval_text(setting.ci95)})")
        if "emissivity" in values:
            how = ("the fitted value" if self.fitted is not None and abs(self.emissivity - self.fitted) <= 5e-4
                   else "set by hand on the tuning screen")
            fit_text = (f"; fit {self.fitted:.3f} (95 % interval {interval_text(self.result.ware.ci95)})"
                        if self.fitted is not None else "")
            parts.append(f"ware's emissivity {self.emissivity:.3f}, {how}{fit_text}")
        comment = f"tuned on the firewatch tuning screen from {Path(self.log_path)} at {when}: " + "; ".join(parts)
        try:
            apply_tuning(self.site_path, self.data.py.name, values, comment)
        except (ProfileError, OSError) as exc:
            self.notify(f"not written: {exc}", severity="error")
            return
        self.notify(f"written to {self.site_path}: " + ", ".join(f"{k} = {v:.3f}" for k, v in values.items()))
