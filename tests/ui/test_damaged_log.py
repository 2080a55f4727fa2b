"""The live dashboard over a damaged log (issue 10, item 5): it says so, and never waits for readings forever.

Two cases, on real logs spoiled on disk (tests/damage.py): damage the screen reads (every page
of the newest derived values, which the live screen reads at every poll) ends the app with the message, which ``watch`` prints as one line (exit 2);
damage it does not read (the raw lines) leaves the screen running with a notice that stays.
Before issue 10 the first case showed "waiting for readings…" for ever.
"""

from __future__ import annotations

from pathlib import Path

import pytest

from firewatch.store._common import LogDamaged
from firewatch.ui import run_app
from firewatch.ui.app import FirewatchApp
from firewatch.ui.widgets import ReadingsPanel
from tests.damage import spoil_table
from tests.ui.helpers import settle


async def test_damage_the_screen_reads_ends_the_app_with_the_message(fault_log: Path, tmp_path: Path) -> None:
    log = spoil_table(fault_log, tmp_path / "latest.db", "latest")
    app = FirewatchApp(log, mode="live", show_cautions=False)
    async with app.run_test(size=(100, 30)) as pilot:
        await settle(pilot, lambda: app.failure is not None or not app.is_running)
    assert app.failure is not None and app.failure.startswith(f"{log}: the firing log is damaged")
    assert app.return_code == 2


def test_run_app_raises_the_message_once_the_screen_is_gone(fault_log: Path, tmp_path: Path, monkeypatch) -> None:
    # what `firewatch watch` prints: run_app turns the app's failure into a LogDamaged (one line, exit 2)
    import asyncio

    log = spoil_table(fault_log, tmp_path / "latest.db", "latest")
    app = FirewatchApp(log, mode="live", show_cautions=False)

    async def drive() -> None:  # headless, where run() would take the terminal
        async with app.run_test(size=(80, 24)) as pilot:
            await settle(pilot, lambda: app.failure is not None or not app.is_running)

    monkeypatch.setattr(app, "run", lambda: asyncio.run(drive()))
    with pytest.raises(LogDamaged, match="the firing log is damaged"):
        run_app(app)


async def test_damage_the_screen_does_not_read_stays_on_screen(fault_log: Path, tmp_path: Path) -> None:
    log = spoil_table(fault_log, tmp_path / "raw.db", "raw_line")
    app = FirewatchApp(log, mode="live", show_cautions=False)
    async with app.run_test(size=(100, 30), notifications=True) as pilot:
        await settle(pilot, lambda: app.screen.query_one(ReadingsPanel).moment is not None)
        await settle(pilot, lambda: bool(list(app.screen.query("Toast"))))
        assert app.integrity  # what SQLite listed
        await pilot.pause(0.2)
        svg = app.export_screenshot()
        assert "firing&#160;log&#160;damaged" in svg  # the notice's title, drawn
        assert app.is_running and app.failure is None  # the readings still show
        assert app.screen.query_one(ReadingsPanel).moment is not None


async def test_a_sound_log_gives_no_notice(fault_log: Path) -> None:
    app = FirewatchApp(fault_log, mode="live", show_cautions=False)
    async with app.run_test(size=(100, 30), notifications=True) as pilot:
        await settle(pilot, lambda: app.screen.query_one(ReadingsPanel).moment is not None)
        await settle(pilot, lambda: app.integrity is not None)
        await pilot.pause(0.2)
        assert app.integrity == [] and not list(app.screen.query("Toast")) and app.failure is None
