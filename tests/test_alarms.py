"""The alarm engine: debouncing, the ISA-18.2 lifecycle state by state, sensor conditions, and causes that learn."""

from __future__ import annotations

import dataclasses
import json

import numpy as np
import pytest

from firewatch.firing.alarms import AlarmEngine, Debounce, causes
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


# -- causes that learn (issue 12 item 2) --------------------------------------------------------------
def fouling_firing(t0: float = 0.0, seconds: int = 7200, partner_from_s: float = 3600.0):
    """py1 falling 5 K/h from -8 K at a steady 900 degC, py2 (ratio) below its range until ``partner_from_s``:
    arrays for the demo site, one reading set a second (constructed, common practice, no source)."""
    times, values, status = batch(t0, seconds, 900.0)
    h = (times - t0) / 3600.0
    rng = np.random.default_rng(9)
    values["py1.divergence"] = -8.0 - 5.0 * h + rng.normal(0.0, 0.05, times.size)
    values["py2.divergence"] = np.where(times - t0 >= partner_from_s, rng.normal(0.0, 0.05, times.size), np.nan)
    for k in ("py1.divergence", "py2.divergence"):
        status[k] = np.where(np.isfinite(values[k]), int(Status.OK), int(Status.MISSING))
    return times, values, status


def run_in_batches(engine: AlarmEngine, arrays, size: int) -> None:
    times, values, status = arrays
    for i in range(0, times.size, size):
        sl = slice(i, i + size)
        engine.evaluate(times[sl], {k: v[sl] for k, v in values.items()}, {k: v[sl] for k, v in status.items()})


def cause_changes(engine: AlarmEngine) -> list[tuple[float, str, str]]:
    return [(tr.t, tr.alarm.channel, tr.detail) for tr in engine.transitions if tr.state == "cause-changed"]


def test_a_cause_learns_when_the_ratio_pyrometer_comes_into_range() -> None:
    # issue 12 item 2: raised unknown while py2 is below its range, window-attenuation once it reads
    e = AlarmEngine(SITE)
    run_in_batches(e, fouling_firing(), 600)
    (alarm,) = [a for a in e.alarms.values() if a.kind == "divergence"]
    assert alarm.raised_t == pytest.approx(180.0)  # the 180 s debounce
    assert alarm.cause == "window-attenuation" and alarm.state == "active-unacknowledged"
    (step,) = alarm.cause_steps
    assert (step.was, step.cause, step.because, step.because_t) == ("unknown", "window-attenuation", "py2 came into range", 3600.0)
    assert "py2 has not read in range" in step.was_reason
    # a trend of py2 takes ten minutes of its readings, then three evaluations a minute apart confirm it
    assert 3600.0 + 600.0 < step.t <= 3600.0 + 600.0 + 4 * 60.0
    assert step.t % 60.0 == 0.0  # on the grid
    # the change is a transition of its own, which leaves the ISA-18.2 state alone
    assert [tr.state for tr in e.transitions if tr.alarm is alarm] == ["active-unacknowledged", "cause-changed"]
    assert alarm.state == "active-unacknowledged"
    assert json.loads(next(tr for tr in e.transitions if tr.state == "cause-changed").detail)["was"] == "unknown"


def test_the_same_causes_whatever_the_batches() -> None:
    # the recorder's half-second batches and replay's thousands of lines evaluate at the same moments
    changes = []
    for size in (1, 7, 600, 3000, 7200):
        e = AlarmEngine(SITE)
        run_in_batches(e, fouling_firing(), size)
        changes.append((cause_changes(e), [(a.raised_t, a.cause, a.evidence) for a in e.alarms.values()]))
    assert all(c == changes[0] for c in changes[1:])
    assert len(changes[0][0]) == 1


def test_a_new_cause_needs_confirming_and_never_returns_to_unknown() -> None:
    th = dataclasses.replace(causes.THRESHOLDS, confirm=30)
    e = AlarmEngine(SITE, thresholds=th)
    run_in_batches(e, fouling_firing(), 600)
    (alarm,) = [a for a in e.alarms.values() if a.kind == "divergence"]
    assert alarm.cause_steps[0].t > 3600.0 + 600.0 + 29 * 60.0  # thirty evaluations in a row
    # py2 falls below its range again: the decided cause stands (the evidence that decided it stays true)
    e2 = AlarmEngine(SITE)
    arrays = fouling_firing()
    times, values, status = arrays
    late = times >= 6000.0
    values["py2.divergence"][late] = np.nan
    status["py2.divergence"][late] = int(Status.MISSING)
    run_in_batches(e2, arrays, 600)
    (alarm2,) = [a for a in e2.alarms.values() if a.kind == "divergence"]
    assert alarm2.cause == "window-attenuation" and len(alarm2.cause_steps) == 1


def test_causes_are_decided_again_only_while_the_condition_holds() -> None:
    e = AlarmEngine(SITE)
    times, values, status = fouling_firing(seconds=3600, partner_from_s=10_000.0)
    values["py1.divergence"][times >= 1800.0] = 0.0  # clears 60 s after (the clear debounce)
    run_in_batches(e, (times, values, status), 600)
    (alarm,) = [a for a in e.alarms.values() if a.kind == "divergence"]
    assert alarm.cleared_t == pytest.approx(1860.0)
    # one evaluation a minute from the first grid time after the raise (240 s) until the clear
    assert e.learner.evaluations == len(range(240, 1860, 60))


def part(arrays, keep: np.ndarray):
    times, values, status = arrays
    return times[keep], {k: v[keep] for k, v in values.items()}, {k: v[keep] for k, v in status.items()}


def test_a_restored_alarm_goes_on_learning() -> None:
    first = AlarmEngine(SITE)
    arrays = fouling_firing()
    head = arrays[0] < 1200.0
    run_in_batches(first, part(arrays, head), 600)
    (alarm,) = [a for a in first.alarms.values() if a.kind == "divergence"]
    assert alarm.cause == "unknown"
    # a recorder restarted on the log: the alarm comes back from it, the history starts empty
    second = AlarmEngine(SITE)
    from firewatch.firing.alarms import Alarm

    second.restore(Alarm(alarm.id, alarm.kind, alarm.channel, alarm.priority, alarm.raised_t, alarm.message, alarm.cause,
                         alarm.evidence, state=alarm.state))
    run_in_batches(second, part(arrays, ~head), 600)
    assert second.alarms[alarm.id].cause == "window-attenuation"
    assert second.learner.evaluations > 0
