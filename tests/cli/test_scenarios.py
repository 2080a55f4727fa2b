"""Built-in scenarios by name (issue 12): sim --list-scenarios, sim and demo --scenario NAME, and files still accepted."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest

from firewatch.cli import main
from firewatch.commands import demo
from firewatch.services.replay import profiles_from_log
from firewatch.settings.profile import profiles_dir
from firewatch.simulator.scenario import BUILT_IN, load_scenario
from firewatch.store.reader import LogReader
from tests.e2e.helpers import ROOT, env, wait_for


def _firewatch(*args: str) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "firewatch", *args], cwd=ROOT, env=env(), capture_output=True, text=True, timeout=120)


def test_list_scenarios() -> None:
    out = _firewatch("sim", "--list-scenarios")
    assert out.returncode == 0, out.stderr
    lines = out.stdout.splitlines()
    assert [line.split()[0] for line in lines] == ["closed-kiln", "open-port"]
    assert "cooled sight tube" in lines[1] or "water-cooled sight tube" in lines[1]
    assert str(profiles_dir() / "open-port-scenario.toml") in lines[1]


def test_every_built_in_scenario_loads_with_its_own_profiles() -> None:
    for name, (file, _) in BUILT_IN.items():
        sc = load_scenario(name)
        assert sc.path == profiles_dir() / file
    open_port = load_scenario("open-port")
    assert open_port.site.path == profiles_dir() / "open-port-site.toml"
    assert open_port.schedule.path == profiles_dir() / "open-port-trial.toml"
    py1 = open_port.site.pyrometer("py1")
    # a cooled sight tube: a cold fixed background, so the ware's emissivity matters to the single-band pyrometer
    assert isinstance(py1.background, float) and py1.background < 100.0
    assert open_port.emissivity != py1.emissivity  # the profile's belief is not the truth: there is something to tune
    assert load_scenario(None).path == load_scenario("closed-kiln").path


def test_sim_by_name_equals_sim_by_file() -> None:
    by_name = _firewatch("sim", "--scenario", "open-port", "--stdout", "--minutes", "1", "--speed", "0")
    by_file = _firewatch("sim", "--scenario", str(profiles_dir() / "open-port-scenario.toml"), "--stdout", "--minutes", "1", "--speed", "0")
    assert by_name.returncode == 0 and by_name.stdout == by_file.stdout and by_name.stdout.count("\n") == 60
    default = _firewatch("sim", "--stdout", "--minutes", "1", "--speed", "0")
    assert default.stdout != by_name.stdout  # another furnace, another start


@pytest.mark.parametrize(
    ("argv", "fragment"),
    [
        (["sim", "--scenario", "no-such", "--stdout"], "--scenario: no-such: no such file, and no built-in scenario of that name"),
        (["sim"], "one of --tcp, --pty, --stdout, --to-log or --modbus-tcp is required"),
        (["demo", "--scenario", "no-such"], "--scenario: no-such: no such file"),
    ],
)
def test_bad_scenario_one_line_exit_2(capsys, argv: list[str], fragment: str) -> None:
    assert main(argv) == 2
    err = capsys.readouterr().err
    assert fragment in err and err.count("\n") == 1


def test_demo_records_the_chosen_scenario(tmp_path: Path) -> None:
    # the demo's simulator and recorder (real processes, TCP on 127.0.0.1) both follow the open-port scenario
    log = tmp_path / "demo.db"
    sim, rec = demo.start_demo(log, 600.0, [], scenario="open-port")
    try:
        def recorded_site() -> str | None:
            try:
                with LogReader(log) as r:
                    return profiles_from_log(r)[0].name
            except Exception:
                return None

        assert wait_for(recorded_site, timeout=30) == "Larchmoor Clayworks, trials laboratory"
        with LogReader(log) as r:
            _, schedule = profiles_from_log(r)
        assert schedule.name == "Trial 1200, soak"
    finally:
        demo._stop(rec, sim)
    assert sim.returncode is not None and rec.returncode is not None
