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
