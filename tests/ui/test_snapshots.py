"""Snapshots of the main screens at 80x24 and 160x48 (pytest-textual-snapshot; update only after a look)."""

from __future__ import annotations

import time
from pathlib import Path

import pytest

from firewatch.ui.app import FirewatchApp
from firewatch.ui.widgets import AlarmList, ReadingsPanel


def _ready(app) -> bool:
    screen = app.screen
    try:
        panel = screen.query_one(ReadingsPanel)
        alarms = screen.query_one(AlarmList)
    except Exception:
        return False
    return (
        panel.moment is not None
        and panel.moment.t == screen.cursor
        and alarms.is_mounted
        and screen.chart_cursor == screen.cursor
    )


def at(seconds_in: float, keys: tuple[str, ...] = ()):
    async def run_before(pilot) -> None:
        app = pilot.app
        screen = app.screen
        screen.seek(screen.view.start_t + seconds_in)
        deadline = time.monotonic() + 10
        await pilot.pause(0.3)
        while time.monotonic() < deadline and not _ready(app):
            await pilot.pause(0.1)
        for key in keys:
            await pilot.press(key)
        await pilot.pause(0.5)

    return run_before


@pytest.mark.parametrize("size", [(80, 24), (160, 48)])
def test_replay_with_an_alarm(snap_compare, fault_log: Path, size) -> None:
    app = FirewatchApp(fault_log, mode="replay", show_cautions=False)
    assert snap_compare(app, terminal_size=size, run_before=at(80 * 60))


@pytest.mark.parametrize("size", [(80, 24), (160, 48)])
def test_replay_in_fahrenheit_with_help(snap_compare, fault_log: Path, size) -> None:
    app = FirewatchApp(fault_log, mode="replay", show_cautions=False)
    assert snap_compare(app, terminal_size=size, run_before=at(30 * 60, ("u", "question_mark")))


def test_cautions_at_first_start(snap_compare, fault_log: Path) -> None:
    async def run_before(pilot) -> None:
        await pilot.pause(1.0)

    app = FirewatchApp(fault_log, mode="replay", show_cautions=True)
    assert snap_compare(app, terminal_size=(80, 24), run_before=run_before)
