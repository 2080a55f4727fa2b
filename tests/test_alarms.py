"""The alarm engine: debouncing, the ISA-18.2 lifecycle state by state, and sensor conditions."""

from __future__ import annotations

import numpy as np
import pytest

from firewatch.firing.alarms import AlarmEngine, Debounce
from firewatch.settings.profile import load_site
from firewatch.transport.records import Status

SITE = load_site()  # demo site: over_temperature_c = 1260, no_data_s = 30, frozen_s = 900


def batch(t0: float, n: int, temp: float | np.ndarray, **overrides):
    """Arrays for the demo site's channels: every thermocouple and pyrometer at ``temp``, all valid."""
    times = t0 + np.arange(n, dtype=float)
    temp = np.broadcast_to(np.asarray(temp, dtype=float), (n,)).copy()
    values: dict[str, np.ndarray] = {}
    status: dict[str, np.ndarray] = {}
    noise = np.random.default_rng(int(t0)).normal(0, 0.05, n)
    for tc in SITE.thermocouples:
        values[tc.name] = temp + noise
        values[f"{tc.name}.rate"] = np.zeros(n)
    for py in SITE.pyrometers:
        values[py.name] = temp + noise
        values[f"{py.name}.reconciled"] = temp + noise
        values[f"{py.name}.u"] = np.full(n, 1.5)
        values[f"{py.name}.divergence"] = np.zeros(n)
        values[f"{py.name}.allowed"] = np.full(n, 6.0)
    values["cj"] = np.full(n, 24.0)
    for k, v in overrides.items():
        values[k.replace("__", ".")] = np.broadcast_to(np.asarray(v, dtype=float), (n,)).copy()
    for k, v in values.items():
        status[k] = np.where(np.isfinite(v), int(Status.OK), int(Status.MISSING))
    return times, values, status


def states(engine: AlarmEngine) -> list[tuple[str, str]]:
    return [(tr.alarm.kind, tr.state) for tr in engine.transitions]


def test_debounce_and_hysteresis_across_batches() -> None:
    d = Debounce(on_s=10, off_s=5)
    t = np.arange(0.0, 100.0)
    bad = (t > 20) & (t < 60)
    assert d.process(t[:25], bad[:25], ~bad[:25]) == []
    assert d.process(t[25:], bad[25:], ~bad[25:]) == [(31.0, True), (65.0, False)]
    # a flicker shorter than the debounce never raises
    d2 = Debounce(on_s=10)
    flicker = (t % 8) < 4
    assert d2.process(t, flicker, ~flicker) == []
    # neither bad nor clear (a missing value) holds the state
    d3 = Debounce(on_s=0, off_s=0)
    assert d3.process(t[:3], np.array([True, False, False]), np.array([False, False, False])) == [(0.0, True)]
    assert d3.active


def test_raise_acknowledge_clear() -> None:
    e = AlarmEngine(SITE)
    e.evaluate(*batch(0, 60, 1200.0))
    assert e.transitions == []
    e.evaluate(*batch(60, 60, 1270.0))  # above 1260 for more than the 10 s debounce
    alarm = e.active[0]
    assert (alarm.kind, alarm.priority, alarm.state) == ("over-temperature", "high", "active-unacknowledged")
    assert alarm.raised_t == pytest.approx(70.0)
    e.acknowledge(alarm.id, 130.0)
    assert alarm.state == "active-acknowledged"
    e.evaluate(*batch(130, 100, 1240.0))  # below 1255 for 30 s clears
    assert alarm.state == "normal" and alarm.cleared_t == pytest.approx(160.0)
    assert states(e) == [("over-temperature", s) for s in ("active-unacknowledged", "active-acknowledged", "normal")]
    assert e.active == []


def test_return_to_normal_unacknowledged_then_acknowledge() -> None:
    e = AlarmEngine(SITE)
    e.evaluate(*batch(0, 60, 1270.0))
    e.evaluate(*batch(60, 60, 1200.0))
    alarm = next(iter(e.alarms.values()))
    assert alarm.state == "returned-unacknowledged" and alarm.annunciated
    e.evaluate(*batch(120, 60, 1275.0))  # active again before anyone looked
    assert alarm.state == "active-unacknowledged" and len(e.alarms) == 1
    e.evaluate(*batch(180, 60, 1200.0))
    e.acknowledge(alarm.id, 300.0)
    assert alarm.state == "normal"
    assert "nothing to acknowledge" in e.acknowledge(alarm.id, 301.0)


def test_latching() -> None:
    site = load_site(text=SITE.text.replace("frozen_s = 900", 'frozen_s = 900\nlatching = ["over-temperature"]'))
    e = AlarmEngine(site)
    e.evaluate(*batch(0, 60, 1270.0))
    alarm = next(iter(e.alarms.values()))
    e.acknowledge(alarm.id, 61.0)
    e.evaluate(*batch(61, 100, 1200.0))
    assert alarm.state == "latched"  # acknowledged while active, yet it waits for an acknowledge after it cleared
    e.acknowledge(alarm.id, 200.0)
    assert alarm.state == "normal"


def test_shelving_with_reason_and_expiry() -> None:
    e = AlarmEngine(SITE)
    e.evaluate(*batch(0, 60, 1270.0))
    alarm = next(iter(e.alarms.values()))
    with pytest.raises(ValueError, match="needs a reason"):
        e.shelve(alarm.id, 60.0, "  ", 600.0)
    with pytest.raises(ValueError, match="expire after now"):
        e.shelve(alarm.id, 60.0, "thermocouple being replaced", 30.0)
    e.shelve(alarm.id, 60.0, "thermocouple being replaced", 600.0)
    assert alarm.state == "shelved" and not alarm.annunciated
    e.evaluate(*batch(60, 100, 1272.0))
    assert alarm.state == "shelved"
    e.tick(600.0)  # the shelf expires with the condition still present
    assert alarm.state == "active-unacknowledged"
    e.shelve(alarm.id, 601.0, "known, waiting for the cooling", 1200.0)
    e.evaluate(*batch(700, 100, 1200.0))  # clears while shelved
    e.unshelve(alarm.id, 900.0)
    assert alarm.state == "normal"
    assert [tr.state for tr in e.transitions if tr.alarm is alarm] == [
        "active-unacknowledged", "shelved", "active-unacknowledged", "shelved", "normal",
    ]


def test_thermocouple_open_and_pyrometer_below_range() -> None:
    e = AlarmEngine(SITE)
    times, values, status = batch(0, 120, 900.0)
    status["tc2"][30:] = int(Status.OPEN)
    values["tc2"][30:] = np.nan
    status["py1"][:] = int(Status.UNDER)  # py1's range starts at 550 degC while the kiln is at 900
    values["py1"][:] = np.nan
    e.evaluate(times, values, status)
    got = {(a.kind, a.channel_name, a.cause): a for a in e.alarms.values()}
    assert got[("sensor-fault", "tc2", "open-circuit")].raised_t == pytest.approx(35.0)
    assert got[("sensor-fault", "tc2", "open-circuit")].priority == "high"  # the reference thermocouple
    assert got[("sensor-fault", "py1", "below-range")].raised_t == pytest.approx(60.0)


def test_pyrometer_below_range_when_kiln_is_cool_is_normal() -> None:
    e = AlarmEngine(SITE)
    times, values, status = batch(0, 300, 300.0)
    status["py1"][:] = int(Status.UNDER)
    values["py1"][:] = np.nan
    e.evaluate(times, values, status)
    assert e.alarms == {}


def test_frozen_value() -> None:
    e = AlarmEngine(SITE)
    for k in range(12):
        times, values, status = batch(k * 100, 100, 800.0)
        values["tc1"][:] = 800.0  # exactly the same value: a stuck converter
        e.evaluate(times, values, status)
    frozen = [a for a in e.alarms.values() if a.cause == "frozen"]
    assert len(frozen) == 1 and frozen[0].channel_name == "tc1" and frozen[0].raised_t == pytest.approx(900.0)


def test_a_value_that_goes_missing_is_not_frozen_whatever_the_batch() -> None:
    """Issue 13: a thermocouple that opens mid-batch read as frozen when the batch ran on past frozen_s."""
    for size in (100, 2000):  # the same readings in short batches (live) and long ones (sim --to-log, Modbus lock-step)
        e = AlarmEngine(SITE)
        for k in range(0, 3000, size):
            times, values, status = batch(k, size, 800.0 + np.arange(k, k + size) * 0.01)
            gone = times >= 1000.0
            values["tc1"][gone] = np.nan
            status["tc1"][gone] = int(Status.OPEN)
            e.evaluate(times, values, status)
        assert [a.cause for a in e.alarms.values() if a.channel_name == "tc1"] == ["open-circuit"], size


def test_no_data_from_a_gap_and_from_silence() -> None:
    e = AlarmEngine(SITE)
    e.evaluate(*batch(0, 10, 800.0))
    e.evaluate(*batch(100, 10, 800.0))  # 91 s without readings
    a = next(a for a in e.alarms.values() if a.kind == "no-data")
    assert a.raised_t == pytest.approx(39.0) and a.cleared_t == pytest.approx(100.0)
    e.tick(150.0)  # the line goes quiet: the recorder's clock keeps ticking
    # the same alarm, not yet acknowledged, becomes active again (ISA-18.2)
    assert a.condition and a.state == "active-unacknowledged"
    assert [(tr.t, tr.state) for tr in e.transitions if tr.alarm is a][-1] == (139.0, "active-unacknowledged")


def test_divergence_needs_its_debounce() -> None:
    e = AlarmEngine(SITE)  # divergence debounce 180 s
    e.evaluate(*batch(0, 170, 1000.0, py1__divergence=9.0))
    assert not [a for a in e.alarms.values() if a.kind == "divergence"]
    e.evaluate(*batch(170, 100, 1000.0, py1__divergence=9.0))
    div = [a for a in e.alarms.values() if a.kind == "divergence"]
    assert len(div) == 1 and div[0].raised_t == pytest.approx(180.0) and div[0].cause == "unknown"
    e.evaluate(*batch(270, 200, 1000.0, py1__divergence=5.0))  # between clear_k and k: hysteresis holds it
    assert div[0].condition
    e.evaluate(*batch(470, 200, 1000.0, py1__divergence=1.0))  # below clear_k x u for 60 s
    assert not div[0].condition and div[0].cleared_t == pytest.approx(530.0)
