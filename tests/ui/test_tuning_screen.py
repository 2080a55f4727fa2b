"""The tuning screen driven by Pilot: both answers, labelled axes and a legend, what Enter writes and where (or why not)."""

from __future__ import annotations

import math
import shutil
from pathlib import Path

from firewatch.settings.profile import load_site, profiles_dir
from firewatch.simulator import serve
from firewatch.simulator.run import Simulation
from firewatch.simulator.scenario import load_scenario
from firewatch.ui.app import FirewatchApp
from firewatch.ui.tuning import ConfirmScreen, TuningScreen
from tests.ui.helpers import settle

DATA = Path(__file__).resolve().parents[1] / "data"


def _text(screen: TuningScreen, selector: str) -> str:
    return str(screen.query_one(selector).render())


async def test_tuning_screen(tmp_path: Path) -> None:
    log = tmp_path / "tune.db"
    serve.to_log(Simulation(load_scenario(DATA / "tune-scenario.toml").with_changes(emissivity=0.80, duration_s=480 * 60.0)), log)
    site = tmp_path / "site.toml"
    shutil.copy(DATA / "cold-sight-site.toml", site)
    app = FirewatchApp(log, mode="replay", show_cautions=False, site_path=site)
    async with app.run_test(size=(120, 40)) as pilot:
        await pilot.press("t")
        screen = app.screen
        assert isinstance(screen, TuningScreen)
        await settle(pilot, lambda: screen.result is not None, timeout=20)
        assert abs(screen.fitted - 0.80) < 0.03  # the simulated ware's truth
        assert screen.emissivity == 0.88  # the profile's value to start from
        # both answers are on the screen (issue 12)
        status = _text(screen, "#tune-status")
        setting = screen.result.instrument.emissivity
        assert f"set the instrument to {setting:.3f}" in status and "ware's emissivity" in status and " to " in status
        # labelled axes and a legend naming every trace
        trace_key = _text(screen, "#tune-trace-key")
        assert "temperature (°C)" in trace_key and "tc2" in trace_key
        assert f"py1 set to {setting:.3f}" in trace_key and "py1 reconciled ε 0.880" in trace_key
        assert "residual (K)" in _text(screen, "#tune-residual-key") and "used" in _text(screen, "#tune-residual-key")
        assert "time into the firing (h)" in _text(screen, "#tune-time")
        # what Enter writes, and where
        assert f"Enter writes set_emissivity = {setting:.3f} for py1 into {site}" in _text(screen, "#tune-enter")
        await pilot.press("down", "down")
        assert abs(screen.emissivity - 0.86) < 1e-9
        assert "py1 reconciled ε 0.860" in _text(screen, "#tune-trace-key")
        assert "emissivity = 0.860" in _text(screen, "#tune-enter")
        assert math.isfinite(screen.redraw_ms)  # the redraw ran and was timed (its speed: benchmarks/bench_tune.py, not a test)
        await pilot.press("left")
        assert abs(screen.gray - 0.99) < 1e-9 and "fouling = 0.990" in _text(screen, "#tune-enter")
        await pilot.press("f")
        assert screen.emissivity == screen.fitted and screen.gray == 1.0
        await pilot.press("enter")
        assert isinstance(app.screen, ConfirmScreen)
        assert "set_emissivity" in app.screen.question and "dial" in app.screen.question
        await pilot.press("y")
        await pilot.pause(0.2)
    tuned = load_site(site).pyrometer("py1")
    assert abs(tuned.emissivity - screen.fitted) < 1e-4
    assert abs(tuned.set_emissivity - setting) < 1e-4
    text = site.read_text()
    assert "# tuned on the firewatch tuning screen" in text and "instrument setting" in text
    assert "# a cold sight tube" in text  # the file's own comments stay


async def test_closed_kiln_without_site_says_why_enter_cannot_write(tmp_path: Path) -> None:
    # issue 12: in the demo (no --site) the screen still shows the instrument setting, says why the ware's
    # emissivity is hidden, and why Enter cannot write
    log = tmp_path / "closed.db"
    serve.to_log(Simulation(load_scenario("closed-kiln").with_changes(duration_s=960 * 60.0)), log)
    before = (profiles_dir() / "demo-site.toml").read_text()
    app = FirewatchApp(log, mode="replay", show_cautions=False)
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.press("t")
        screen = app.screen
        assert isinstance(screen, TuningScreen)
        await settle(pilot, lambda: screen.result is not None or bool(screen.refusal), timeout=30)
        assert screen.result is not None, screen.refusal
        status = _text(screen, "#tune-status")
        assert "set the instrument to 0.9" in status and "not found" in status and "cavity effect" in status
        assert "Enter cannot write: no --site file" in _text(screen, "#tune-enter")
        assert screen.check_action("accept", ()) is None and screen.check_action("fitted", ()) is None
        # every part fits at 80x24: nothing pushed off the screen
        assert all(w.region.bottom <= 24 for w in screen.children)
        await pilot.press("enter")
        assert app.screen is screen  # no confirmation: there is nowhere to write
    assert (profiles_dir() / "demo-site.toml").read_text() == before
