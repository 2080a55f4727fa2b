"""Shared by the dashboard's Pilot tests."""

from __future__ import annotations

import time


async def settle(pilot, predicate, timeout: float = 10.0) -> None:
    """Let the poller (or any thread worker) deliver until ``predicate()`` holds."""
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        await pilot.pause(0.05)
        if predicate():
            return
    raise AssertionError("the dashboard did not show what was expected in time")
