"""The simulated kiln's physics: heat balance, controller, and instruments against the measurement core."""

from __future__ import annotations

import numpy as np
import pytest

from firewatch.physics.bands import Band
from firewatch.physics.constants import SIGMA, ZERO_CELSIUS
from firewatch.settings.profile import Pyrometer, load_site
from firewatch.settings.schedule import load_schedule
from firewatch.simulator.instruments import pyrometer_reading
from firewatch.simulator.kiln import Controller, KilnModel, KilnParameters
from firewatch.simulator.run import Simulation
from firewatch.simulator.scenario import load_scenario, parse_fault
from firewatch.transport.native import NativeParser


def test_steady_state_heat_balance() -> None:
    # At constant power the chamber settles where heater power equals the losses
    # k_c (T - T_a) + A sigma (T^4 - T_a^4), and the ware at the chamber's temperature
    # (energy balance of the model's own equations, no source).
    params = KilnParameters()
    kiln = KilnModel(params, wall_c=900.0, ware_c=850.0)
    power = 5000.0
    for _ in range(200_000):
        kiln.step(power, 1.0)
    t, ta = kiln.wall_c + ZERO_CELSIUS, params.ambient_c + ZERO_CELSIUS
    losses = params.k_cond_w_per_k * (t - ta) + params.a_leak_m2 * SIGMA * (t**4 - ta**4)
    assert losses == pytest.approx(power, rel=1e-4)  # after 14 time constants
    assert kiln.ware_c == pytest.approx(kiln.wall_c, abs=1e-3)


def test_kiln_falls_behind_a_fast_ramp_at_high_temperature() -> None:
    # Real kilns climb more slowly near the top (common practice, no source): full
    # power climbs far faster at 300 degC than at 1200 degC.
    params = KilnParameters()
    kiln = KilnModel(params)
    c = params.c_wall_j_per_k + params.c_ware_j_per_k
    rate = {t: (params.p_max_w - kiln.losses_w(t)) / c * 3600 for t in (300.0, 1200.0)}
    assert rate[300.0] > 2 * rate[1200.0]
    assert 60 < rate[1200.0] < 150


def test_controller_follows_schedule_and_holds() -> None:
    sched = load_schedule("s.toml", text='[schedule]\n[[segment]]\nrate = 120\ntarget = 600\nhold_min = 30\n')
    kiln = KilnModel()
    ctl = Controller(sched, kiln)
    t = 0.0
    hold_started = None
    while not ctl.finished and t < 10 * 3600:
        power = ctl.power(kiln.wall_c, t, 1.0)
        kiln.step(power, 1.0)
        t += 1.0
        if ctl.holding_since is not None and hold_started is None:
            hold_started = t
    # ramp of 580 degC at 120 degC/h takes 4.83 h, then a 30 min hold (arithmetic)
    assert hold_started == pytest.approx(580 / 120 * 3600, rel=0.03)
    assert t == pytest.approx(hold_started + 1800, abs=5)
    assert kiln.wall_c == pytest.approx(600.0, abs=3.0)


def test_pyrometer_reads_true_temperature_when_everything_is_one() -> None:
    # emissivity, transmission and settings all 1: the instrument shows the true
    # temperature (the measurement equation, common practice, no source).
    py = Pyrometer("p", "single", (0.8, 1.1), set_emissivity=1.0, set_transmission=1.0, transmission=1.0)
    ware = np.array([600.0, 900.0, 1250.0])
    shown, status = pyrometer_reading(py, Band(0.8, 1.1), None, ware, ware - 40.0, np.ones(3), np.ones(3), np.ones(3), np.zeros(3))
    np.testing.assert_allclose(shown, ware, atol=1e-3)
    ratio = Pyrometer("r", "ratio", (0.75, 0.85), (0.95, 1.05))
    shown, _ = pyrometer_reading(ratio, Band(0.75, 0.85), Band(0.95, 1.05), ware, ware, np.ones(3), np.ones(3), np.ones(3), np.zeros(3))
    np.testing.assert_allclose(shown, ware, atol=1e-3)


def test_deterministic_for_a_seed() -> None:
    sc = load_scenario().with_changes(duration_s=600.0)
    a = [line.data for chunk in Simulation(sc).chunks() for line in chunk]
    b = [line.data for chunk in Simulation(sc).chunks() for line in chunk]
    c = [line.data for chunk in Simulation(sc.with_changes(seed=99)).chunks() for line in chunk]
    assert a == b and a != c and len(a) == 600


def test_faults_show_in_the_lines() -> None:
    sc = load_scenario().with_changes(
        duration_s=1800.0,
        faults=(parse_fault("tc-open@10:channel=tc2"), parse_fault("garbage@20:seconds=60,fraction=1"), parse_fault("dropout@25:seconds=30")),
    )
    parser = NativeParser()
    lines = [line for chunk in Simulation(sc).chunks() for line in chunk]
    parsed = [(line, parser.parse(line.data, 0.0)) for line in lines if not line.dropped]
    opened = [p for line, p in parsed if line.sim_s >= 601 and hasattr(p, "get")]
    assert opened and all(p.get("tc2").status.name == "OPEN" for p in opened)
    spoiled = [p for line, p in parsed if 1200 <= line.sim_s < 1260]
    assert spoiled and all(not hasattr(p, "get") for p in spoiled)
    assert sum(line.dropped for line in lines) == 30


def test_fault_syntax_errors() -> None:
    for text, message in [
        ("tc-drift", "KIND@MINUTES"),
        ("melt@10", "unknown fault kind"),
        ("tc-drift@ten", "minutes"),
        ("tc-drift@10:speed=3", "has no parameter 'speed'"),
        ("tc-drift@10:rate", "KEY=VALUE"),
    ]:
        with pytest.raises(ValueError, match=message):
            parse_fault(text)


def test_demo_site_matches_default_scenario() -> None:
    sc = load_scenario()
    assert sc.site.name == load_site().name
    assert sc.schedule.name == "Glaze 1220, slow cool"
