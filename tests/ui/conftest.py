"""Firing logs for the dashboard tests, made once per session by the simulator (in-process, seeded)."""

from __future__ import annotations

from pathlib import Path

import pytest

from firewatch.simulator import serve
from firewatch.simulator.run import Simulation
from firewatch.simulator.scenario import load_scenario, parse_fault


@pytest.fixture(scope="session")
def fault_log(tmp_path_factory) -> Path:
    """Four hours of the demo glaze firing with tc2 open at 60 min and tc2 drifting... no: open only."""
    log = tmp_path_factory.mktemp("ui") / "replay.db"
    sc = load_scenario().with_changes(duration_s=4 * 3600.0, seed=21, faults=(parse_fault("tc-open@60:channel=tc2"), parse_fault("dropout@150:seconds=120")))
    serve.to_log(Simulation(sc), log)
    return log


@pytest.fixture(autouse=True)
def _state_home(tmp_path, monkeypatch):
    """Keep the cautions marker out of the real home directory."""
    monkeypatch.setenv("XDG_STATE_HOME", str(tmp_path / "state"))


@pytest.fixture(scope="session")
def glance_log(tmp_path_factory) -> Path:
    """Seven and a half hours of the demo glaze firing with py1's window fouling from 320 min: py1 OUT, py2 ok."""
    log = tmp_path_factory.mktemp("glance") / "glance.db"
    sc = load_scenario().with_changes(duration_s=450 * 60.0, seed=7, faults=(parse_fault("window-fouling@320:rate=0.4"),))
    serve.to_log(Simulation(sc), log)
    return log
