"""Schedule progress: segments inferred from time and temperature, holds, predicted end."""

from __future__ import annotations

import numpy as np
import pytest

from firewatch.firing.progress import ProgressTracker
from firewatch.settings.schedule import load_schedule

SCHED = load_schedule(
    "p.toml",
    text='[schedule]\nstart = 20\n[[segment]]\nname = "up"\nrate = 100\ntarget = 520\nhold_min = 60\n'
    '[[segment]]\nname = "top"\nrate = 50\ntarget = 620\n[[segment]]\nname = "down"\nrate = -100\ntarget = 420\n',
)
# planned: 500/100 = 5 h, 1 h hold, 100/50 = 2 h, 200/100 = 2 h: 10 h in all (arithmetic)


def feed(tracker: ProgressTracker, t: np.ndarray, temp: np.ndarray, rate: np.ndarray, chunk: int = 997) -> dict[str, np.ndarray]:
    out: dict[str, list] = {}
    for i in range(0, t.size, chunk):
        part = tracker.update(t[i : i + chunk], temp[i : i + chunk], rate[i : i + chunk])
        for k, v in part.items():
            out.setdefault(k, []).append(v)
    return {k: np.concatenate(v) for k, v in out.items()}


def test_plan() -> None:
    assert SCHED.planned_duration_s == pytest.approx(10 * 3600)
    assert float(SCHED.planned_temperature(2.5 * 3600)) == pytest.approx(270.0)


def test_on_plan_firing() -> None:
    t = np.arange(0.0, 10.5 * 3600, 10.0)
    temp = SCHED.planned_temperature(t)
    rate = np.gradient(temp, t) * 3600
    out = feed(ProgressTracker(SCHED), t, temp, rate)
    seg = out["plan.segment"]
    assert seg[np.searchsorted(t, 4 * 3600)] == 0 and seg[np.searchsorted(t, 7 * 3600)] == 1
    assert seg[np.searchsorted(t, 9 * 3600)] == 2 and seg[-1] == 3
    hold = out["plan.hold"]
    # the hold starts within 3 degC of the target: 108 s early at 100 degC/h
    assert hold[np.searchsorted(t, 5.5 * 3600)] == pytest.approx(0.5 * 3600 + 108, abs=15)
    assert np.isnan(hold[np.searchsorted(t, 3 * 3600)])
    remaining = out["plan.remaining"]
    assert remaining[np.searchsorted(t, 3 * 3600)] == pytest.approx(7 * 3600, rel=0.02)
    assert abs(out["plan.behind"][np.searchsorted(t, 8 * 3600)]) < 120
    # within a few degrees; a ramp that ends 3 degC early (the band) starts the next segment's plan early
    assert np.nanmax(np.abs(out["plan.deviation"])) < 10.0


def test_lagging_kiln_stays_in_its_segment_and_prediction_uses_its_ability() -> None:
    # the kiln manages only 60 degC/h above 300 degC against a planned 100
    t = np.arange(0.0, 14 * 3600, 10.0)
    temp = np.where(t < 2.8 * 3600, 20 + 100 * t / 3600, 300 + 60 * (t / 3600 - 2.8))
    temp = np.minimum(temp, 520.0)
    rate = np.gradient(temp, t) * 3600
    tracker = ProgressTracker(SCHED)
    out = feed(tracker, t, temp, rate)
    at_6h = np.searchsorted(t, 6 * 3600)
    assert out["plan.segment"][at_6h] == 0  # 5 h is past the planned ramp, but the kiln has not arrived
    assert out["plan.behind"][at_6h] > 3600
    assert out["plan.deviation"][at_6h] == pytest.approx(492 - 520, abs=1)  # the plan stops at the target
    assert out["plan.deviation"][np.searchsorted(t, 4 * 3600)] == pytest.approx(372 - 420, abs=1)
    # at 4 h (temperature 372): plan says 148/100 h + 1 + 2 + 2 = 6.48 h; ability 60 degC/h gives
    # 148/60 = 2.47 h for the rest of this ramp (the "top" ramp's 50 degC/h is below the ability line)
    at_4h = np.searchsorted(t, 4 * 3600)
    assert out["plan.remaining"][at_4h] == pytest.approx((148 / 60 + 1 + 2 + 2) * 3600, rel=0.05)


def test_restart_mid_firing_skips_passed_segments() -> None:
    tracker = ProgressTracker(SCHED)
    t = np.arange(0.0, 600.0, 10.0)
    out = tracker.update(t, np.full(t.size, 610.0), np.full(t.size, 50.0))
    assert out["plan.segment"][-1] == 1  # already past 520: in the "top" ramp


# -- issue 10: no input ends the recorder; a restart resumes the schedule where the kiln is ---------------


def test_open_control_thermocouple_then_a_value_in_one_batch() -> None:
    """Issue 10: OPEN in a fresh tracker's first readings, then values in the same batch, raised
    UnboundLocalError (the prediction was computed only on every 10th reading)."""
    t = np.arange(0.0, 60.0)
    temp = np.where(t < 3, np.nan, 20.0 + t / 3600 * 100)
    out = ProgressTracker(SCHED).update(t, temp, np.full(t.size, np.nan))
    placed = np.isfinite(out["plan.segment"])
    assert not placed[:3].any()  # no temperature: no place in the schedule
    assert placed.any() and set(out["plan.segment"][placed]) == {0.0}
    # every placed reading has its prediction, the first one included
    assert np.isfinite(out["plan.remaining"][placed]).all() and np.isfinite(out["plan.behind"][placed]).all()


def _on_plan(t: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    temp = SCHED.planned_temperature(t)
    return temp, np.gradient(temp, t) * 3600


def test_silence_across_a_hold_resumes_in_the_next_ramp() -> None:
    """Issue 10 item 7: a restart after the kiln had finished a hold showed the hold starting anew."""
    tracker = ProgressTracker(SCHED)
    before = np.arange(0.0, 4.5 * 3600, 10.0)  # ramp 0 to 470 degC
    feed(tracker, before, *_on_plan(before))
    after = np.arange(6.3 * 3600, 6.6 * 3600, 10.0)  # the hold ended at 6 h; the kiln climbs the "top" ramp
    temp, _ = _on_plan(after)
    out = feed(tracker, after, temp, np.full(after.size, np.nan))  # the trailing rate is not back yet
    seg, hold = out["plan.segment"], out["plan.hold"]
    placed = np.isfinite(seg)
    assert placed[after - after[0] <= 60].any()  # placed within a minute of data
    assert set(seg[placed]) == {1.0} and np.isnan(hold[placed]).all()  # never "segment 0 holding"


def test_silence_ending_inside_a_hold_times_it_from_the_plan() -> None:
    tracker = ProgressTracker(SCHED)
    before = np.arange(0.0, 4.5 * 3600, 10.0)
    feed(tracker, before, *_on_plan(before))
    after = np.arange(5.5 * 3600, 5.6 * 3600, 10.0)
    out = feed(tracker, after, np.full(after.size, 520.0), np.full(after.size, np.nan))
    placed = np.isfinite(out["plan.segment"])
    assert set(out["plan.segment"][placed]) == {0.0}
    # at 4.5 h the kiln was 0.9 of the way up a 5 h ramp: the plan has it arrive at 5 h (arithmetic),
    # so at 5.6 h it has held for 0.6 h
    assert out["plan.hold"][-1] == pytest.approx(0.6 * 3600 - 10.0, abs=1.0)


def test_a_kiln_cooling_in_a_short_silence_is_not_moved_ahead_of_its_program() -> None:
    tracker = ProgressTracker(SCHED)
    before = np.arange(0.0, 6.6 * 3600, 10.0)  # into the "top" ramp (520 -> 620 at 50 degC/h)
    feed(tracker, before, *_on_plan(before))
    assert tracker.segment == 1
    after = np.arange(6.6 * 3600 + 600, 6.6 * 3600 + 1200, 10.0)
    temp = 545.0 - (after - after[0]) / 3600 * 100  # falling at 100 degC/h, as if the elements failed
    out = feed(tracker, after, temp, np.full(after.size, -100.0))
    # the "down" ramp fits a falling kiln, but the program needs 1.5 h more to get there: still "top"
    assert set(out["plan.segment"][np.isfinite(out["plan.segment"])]) == {1.0}


def test_started_inside_a_hold_waits_for_the_direction_then_holds() -> None:
    """Started at the hold temperature, the kiln may be holding or already climbing: the first
    readings tell (before, the tracker skipped the hold)."""
    t = np.arange(0.0, 120.0, 2.0)
    out = ProgressTracker(SCHED).update(t, np.full(t.size, 520.5), np.full(t.size, np.nan))
    seg = out["plan.segment"]
    assert np.isnan(seg[t < 30]).all()  # holding (steady) or climbing the next ramp: not yet known
    assert set(seg[t >= 30]) == {0.0} and np.isfinite(out["plan.hold"][t >= 30]).all()
    climbing = 520.5 + t / 3600 * 50
    out = ProgressTracker(SCHED).update(t, climbing, np.full(t.size, np.nan))
    assert set(out["plan.segment"][t >= 30]) == {1.0}
