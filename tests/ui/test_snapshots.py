"""Snapshots of the main screens at 80x24, 100x30 and 160x48 (pytest-textual-snapshot; update only after a look).

Clock times in UTC (``utc=True``) so that the pictures do not depend on the computer's zone.
"""

from __future__ import annotations

import time
from pathlib import Path

import pytest

from firewatch.ui.app import FirewatchApp
from firewatch.ui.screens import ShelveScreen
from firewatch.ui.widgets import AlarmList, ReadingsPanel

SIZES = [(80, 24), (100, 30), (160, 48)]


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
        and len(alarms.alarms) == len(panel.moment.alarms)
        and screen.chart_cursor == screen.cursor
    )


def at(seconds_in: float | None, keys: tuple[str, ...] = ()):
    """Seek to ``seconds_in`` after the start (None: the end), wait for the screen, then press ``keys``."""

    async def run_before(pilot) -> None:
        app = pilot.app
        screen = app.screen
        view = screen.view
        screen.seek(view.end_t if seconds_in is None else view.start_t + seconds_in)
        deadline = time.monotonic() + 10
        await pilot.pause(0.3)
        while time.monotonic() < deadline and not _ready(app):
            await pilot.pause(0.1)
        for key in keys:
            await pilot.press(key)
        await pilot.pause(0.5)

    return run_before


@pytest.mark.parametrize("size", SIZES)
def test_replay_with_an_alarm(snap_compare, fault_log: Path, size) -> None:
    """tc2 open since 60 min: OPEN on its row, the pyrometers with no reference to compare with."""
    app = FirewatchApp(fault_log, mode="replay", show_cautions=False, utc=True)
    assert snap_compare(app, terminal_size=size, run_before=at(80 * 60))


@pytest.mark.parametrize("size", SIZES)
def test_replay_out_of_band(snap_compare, glance_log: Path, size) -> None:
    """py1's window fouled: OUT beside its reconciled value, py2 ok; the divergence alarm listed; the trend in clock time."""
    app = FirewatchApp(glance_log, mode="replay", show_cautions=False, utc=True)
    assert snap_compare(app, terminal_size=size, run_before=at(None))


@pytest.mark.parametrize("size", SIZES)
def test_replay_in_fahrenheit_with_help(snap_compare, fault_log: Path, size) -> None:
    app = FirewatchApp(fault_log, mode="replay", show_cautions=False, utc=True)
    assert snap_compare(app, terminal_size=size, run_before=at(30 * 60, ("u", "question_mark")))


def test_fahrenheit_out_of_band(snap_compare, glance_log: Path) -> None:
    app = FirewatchApp(glance_log, mode="replay", show_cautions=False, utc=True)
    assert snap_compare(app, terminal_size=(80, 24), run_before=at(None, ("u",)))


def test_shelve_dialog(snap_compare, glance_log: Path) -> None:
    """Every field labelled (issue 14: the '60' had none)."""

    async def run_before(pilot) -> None:
        await at(None)(pilot)
        pilot.app.push_screen(ShelveScreen("alarm #1: divergence py1"))
        await pilot.pause(0.5)

    app = FirewatchApp(glance_log, mode="replay", show_cautions=False, utc=True)
    assert snap_compare(app, terminal_size=(80, 24), run_before=run_before)


def test_cautions_at_first_start(snap_compare, fault_log: Path) -> None:
    async def run_before(pilot) -> None:
        await pilot.pause(1.0)

    app = FirewatchApp(fault_log, mode="replay", show_cautions=True, utc=True)
    assert snap_compare(app, terminal_size=(80, 24), run_before=run_before)
