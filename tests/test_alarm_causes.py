"""The likely cause of a divergence, one cause function at a time, on constructed signals.

Every signal here is built by hand (10 s means over one hour); the expected
verdicts follow from the construction and the signatures in
firewatch/firing/alarms/causes.py. Numbers are constructed, not measured
(common practice, no source) unless a comment says otherwise.
"""

from __future__ import annotations

import ast
import dataclasses
import datetime as dt
import inspect
import itertools
import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from firewatch.firing.alarms import causes
from firewatch.firing.alarms.causes import (
    CauseStep,
    CauseThresholds,
    Signals,
    because_words,
    cause_label,
    cause_steps,
    cause_story,
    earlier_causes,
    emissivity_change,
    judge,
    likely_cause,
    measure,
    refuted,
    thermocouple_drift,
    thermocouple_lag,
    window_attenuation,
)
from firewatch.settings.profile import load_site

T = 1_000_000.0 + np.arange(360) * 10.0 + 5.0  # one hour of 10 s means (bin centres)
END = T[-1] + 5.0
H = (T - T[0]) / 3600.0  # hours into the window
MIN = H * 60.0  # minutes into the window
NOISE = np.random.default_rng(3).normal(0.0, 0.05, T.size)


def signals(divergence: np.ndarray, *, rate: float | np.ndarray = 0.0, pair: np.ndarray | None = None,
            partner: np.ndarray | None = None, partner_is_ratio: bool = True, single_band: bool = True,
            time_constant_s: float = 60.0, no_pair: bool = False, partner_configured: bool | None = None,
            reference_c: float = 900.0) -> Signals:
    configured = partner is not None if partner_configured is None else partner_configured
    return Signals(
        pyrometer="py1", single_band=single_band, reference="tc2", t=T, divergence=divergence,
        rate=np.broadcast_to(np.asarray(rate, dtype=float), T.shape).copy(),
        other=None if no_pair else "tc1", pair=None if no_pair else (np.zeros(T.size) + NOISE if pair is None else pair),
        partner="py2" if configured else None, partner_is_ratio=partner_is_ratio and configured,
        partner_divergence=partner if configured else None, time_constant_s=time_constant_s,
        reference_c=np.full(T.size, reference_c), partner_range_c=(700.0, 1800.0), end_t=END,
    )


# -- lag --------------------------------------------------------------------------------------
def test_lag_follows_the_rate_and_vanishes_at_rate_zero() -> None:
    # a first-order sensor with time constant 300 s reads behind by 300 s x rate (common practice)
    rate = np.where((H > 0.25) & (H < 0.75), 120.0, 0.0)
    s = signals(300.0 * rate / 3600.0 + NOISE, rate=rate)
    v = thermocouple_lag(s)
    assert v.cause == "thermocouple-lag" and "follows the rate of change" in v.reason
    assert v.evidence["lag_s"] == pytest.approx(300.0, rel=0.02)  # the constructed 300 s
    assert abs(v.evidence["offset_k"]) < 0.1 and v.evidence["lag_r2"] > 0.99
    assert v.evidence["hold_k"] < 0.1  # the settled hold after the ramp
    assert likely_cause(s)[0] == "thermocouple-lag"


def test_lag_refused_when_the_divergence_stays_at_rate_zero() -> None:
    rate = np.where((H > 0.25) & (H < 0.75), 120.0, 0.0)
    # a 12 K offset: more than half the largest divergence (22 K), which no lag explains
    s = signals(12.0 + 300.0 * rate / 3600.0 + NOISE, rate=rate)
    v = thermocouple_lag(s)
    assert v.cause is None and v.evidence["offset_k"] == pytest.approx(12.0, abs=0.1)
    assert "at rate 0" in v.evidence["lag_refused"]


def test_a_steady_ramp_leaves_nothing_to_fit_and_lag_is_not_named() -> None:
    # issue 12: 150 degC/h throughout and a constant divergence: nothing ties it to the rate
    s = signals(np.full(T.size, 6.0) + NOISE, rate=150.0, pair=np.full(T.size, -5.0))
    v = thermocouple_lag(s)
    assert v.cause is None
    assert v.missing == (("rate", "the rate held at +150 °C/h in the last 60 minutes, so a lag cannot be fitted"),)
    cause, ev = likely_cause(s)
    assert cause == "unknown" and ev["missing"][0] == "rate"
    assert ev["reason"].startswith("the evidence does not decide: the rate held at +150 °C/h")


def test_issue_12_emissivity_step_during_a_steady_ramp_is_not_lag() -> None:
    # issue 12: a hold, then a steady 200 degC/h ramp with no divergence for 31 minutes, then a step of +8 K.
    # Main named this thermocouple-lag with a rate fit of R² 0.13.
    rate = np.where(MIN >= 19.0, 200.0, 0.0)
    d = np.where(MIN >= 50.0, 8.0, 0.0) + NOISE
    s = signals(d, rate=rate, partner=NOISE.copy())
    lag = thermocouple_lag(s)
    assert lag.cause is None
    assert lag.evidence["lag_r2"] < 0.6  # the rate explains little of it
    assert "not there from the start of the ramp" in lag.evidence["lag_refused"]
    cause, ev = likely_cause(s)
    assert cause == "emissivity-change", ev
    assert ev["reason"].startswith("a step of +8.0 K within ten minutes while the rate held and py2 moved")
    assert ev["step_t"] == pytest.approx(T[0] - 5.0 + 50 * 60.0, abs=120.0)  # the constructed step, within one block


def test_lag_needs_a_slope_that_is_a_time_constant() -> None:
    rate = np.where((H > 0.25) & (H < 0.75), 120.0, 0.0)
    # the ware lagging the walls: the divergence has the opposite sign of the rate
    behind = thermocouple_lag(signals(-300.0 * rate / 3600.0 + NOISE, rate=rate))
    assert behind.cause is None and "no time constant" in behind.evidence["lag_refused"]
    # a fitted lag far below the profile's time constant (10 s against 600 s) is not this sensor's lag
    small = thermocouple_lag(signals(10.0 * rate / 3600.0 + NOISE * 0.01, rate=rate, time_constant_s=600.0))
    assert small.cause is None and "no time constant of tc2 (profile 600 s)" in small.evidence["lag_refused"]


def test_lag_must_vanish_in_a_settled_hold() -> None:
    rate = np.where(H < 0.5, 120.0, 0.0)
    # during the ramp 300 s x rate = 10 K, and in the hold it stays at 6 K long after the sensor settled
    d = np.where(H < 0.5, 10.0, 6.0) + NOISE
    v = thermocouple_lag(signals(d, rate=rate))
    assert v.cause is None and "stays at 6.0 K in the hold" in v.evidence["lag_refused"]


# -- emissivity change --------------------------------------------------------------------------
def test_emissivity_step_while_the_ratio_pyrometer_holds() -> None:
    step = np.where(H > 0.5, 6.0, 0.0)
    s = signals(step + NOISE, partner=NOISE.copy())
    v = emissivity_change(s, measure(s))
    assert v.cause == "emissivity-change" and v.reason.startswith("a step of +6.0 K within ten minutes while the rate held and py2 moved")
    assert likely_cause(s)[0] == "emissivity-change"


def test_a_non_gray_step_moves_the_ratio_pyrometer_more() -> None:
    # the ratio instrument's alarm: it stepped +12 K while the single-band one moved +1 K
    # (a change of e1/e2 costs a ratio instrument several times what it costs a single band: DeWitt1988)
    s = signals(np.where(H > 0.5, 12.0, 0.0) + NOISE, partner=np.where(H > 0.5, 1.0, 0.0) + NOISE,
                single_band=False, partner_is_ratio=False)
    cause, ev = likely_cause(s)
    assert cause == "emissivity-change" and "py2 moved +1.0 K" in ev["reason"]


def test_both_pyrometers_stepping_alike_is_no_emissivity_change() -> None:
    step = np.where(H > 0.5, 6.0, 0.0)
    s = signals(step + NOISE, partner=step + NOISE)
    assert emissivity_change(s, measure(s)).cause is None
    cause, ev = likely_cause(s)
    assert cause == "unknown" and ev["reason"].startswith("no signature fits: ")
    assert "largest ten-minute change +6.0 K" in ev["reason"]


def test_a_step_with_the_rate_is_no_emissivity_change() -> None:
    # the divergence jumps when the rate does (80 -> 160 degC/h): tied to the rate
    rate = np.where(H > 0.5, 160.0, 80.0)
    s = signals(np.where(H > 0.5, 6.0, 0.0) + NOISE, rate=rate, partner=NOISE.copy())
    m = measure(s)
    assert m.step.rate_change_c_per_h == pytest.approx(80.0, abs=1.0)
    assert emissivity_change(s, m).cause is None


def test_a_step_the_thermocouples_share_is_no_emissivity_change() -> None:
    s = signals(np.where(H > 0.5, 6.0, 0.0) + NOISE, pair=np.where(H > 0.5, -6.0, 0.0) + NOISE, partner=NOISE.copy())
    assert emissivity_change(s, measure(s)).cause is None


def test_a_partner_that_reads_only_after_the_step_still_tells() -> None:
    partner = np.where(MIN > 40.0, 0.2, np.nan) + NOISE  # comes into range 10 minutes after the step, near 0
    s = signals(np.where(MIN > 30.0, 9.0, 0.0) + NOISE, partner=partner)
    cause, ev = likely_cause(s)
    assert cause == "emissivity-change"
    assert "py2, reading only after it, stands +0.2 K from where py1 stood before" in ev["reason"]


def test_a_partner_silent_across_the_step_is_missing_evidence() -> None:
    s = signals(np.where(H > 0.5, 6.0, 0.0) + NOISE, partner=np.full(T.size, np.nan), partner_configured=True)
    cause, ev = likely_cause(s)
    assert cause == "unknown" and "partner" in ev["missing"] and "partner-step" in ev["missing"]
    assert "py2 has not read in range in the last 60 minutes (it reads from 700 °C; tc2 is at 900 °C)" in ev["reason"]


# -- drift --------------------------------------------------------------------------------------
def test_drift_when_the_reference_departs_from_every_instrument() -> None:
    # tc2 drifts up 4 K/h: both divergences fall 4 K/h and tc2 - tc1 rises 4 K/h
    s = signals(-4.0 * H + NOISE, pair=4.0 * H + NOISE, partner=-4.0 * H + NOISE)
    m = measure(s)
    assert m.trend_k_per_h == pytest.approx(-4.0, abs=0.1) and m.pair_trend_k_per_h == pytest.approx(4.0, abs=0.1)
    v = thermocouple_drift(s, m)
    assert v.cause == "thermocouple-drift" and v.reason.startswith("tc2 departs alike from py1 (+4.0 K/h), py2 (+4.0 K/h), tc1 (+4.0 K/h)")


def test_drift_with_one_witness_reading() -> None:
    # py2 below its range: tc1 alone witnesses the drift
    s = signals(-4.0 * H + NOISE, pair=4.0 * H + NOISE, partner=np.full(T.size, np.nan), partner_configured=True)
    v = thermocouple_drift(s, measure(s))
    assert v.cause == "thermocouple-drift" and v.reason == "tc2 departs alike from py1 (+4.0 K/h), tc1 (+4.0 K/h)"


def test_drift_needs_a_witness() -> None:
    s = signals(-4.0 * H + NOISE, no_pair=True)
    v = thermocouple_drift(s, measure(s))
    assert v.cause is None and v.missing == (("witness", "no second thermocouple or pyrometer reading to tell whether tc2 itself moved"),)


def test_drift_refused_when_a_witness_sees_none() -> None:
    # the other thermocouple agrees with tc2 throughout: tc2 did not move
    s = signals(-4.0 * H + NOISE, partner=-4.0 * H + NOISE)
    assert thermocouple_drift(s, measure(s)).cause is None


def test_a_departure_that_follows_the_rate_is_no_drift() -> None:
    rate = 40.0 + 80.0 * H  # the rate climbs with time, and the divergence with it
    d = -(60.0 * rate / 3600.0) * 3.0 + NOISE
    s = signals(d, rate=rate, pair=-d, partner=d.copy())
    m = measure(s)
    assert m.rate_r2 >= m.trend_r2
    assert thermocouple_drift(s, m).cause is None


# -- window attenuation -------------------------------------------------------------------------
def test_window_attenuation_with_and_without_a_partner() -> None:
    s = signals(-5.0 * H + NOISE, partner=NOISE.copy())
    v = window_attenuation(s, measure(s))
    assert v.cause == "window-attenuation" and v.reason == "py1 reads ever lower (-5.0 K/h) while py2 holds (+0.0 K/h)"
    alone = signals(-5.0 * H + NOISE)
    v = window_attenuation(alone, measure(alone))
    assert v.cause == "window-attenuation" and v.reason.endswith("while the thermocouples agree")
    assert likely_cause(alone)[0] == "window-attenuation"


def test_window_attenuation_waits_for_the_ratio_pyrometer() -> None:
    # issue 12: fouling seen while the ratio instrument is below its range: unknown, naming it
    s = signals(-5.0 * H + NOISE, partner=np.full(T.size, np.nan), partner_configured=True, reference_c=640.0)
    v = window_attenuation(s, measure(s))
    words = "py2 has not read in range in the last 60 minutes (it reads from 700 °C; tc2 is at 640 °C)"
    assert v.cause is None and v.missing == (("partner", words),)
    cause, ev = likely_cause(s)
    assert cause == "unknown" and ev["missing"] == ["partner"]
    # ... and the partner reading for only five minutes is not yet enough for its trend
    short = signals(-5.0 * H + NOISE, partner=np.where(MIN > 55.0, 0.0, np.nan) + NOISE)
    cause, ev = likely_cause(short)
    assert cause == "unknown" and "py2 has read in range for only 5 minutes (a trend takes 10)" in ev["reason"]


def test_window_attenuation_with_a_drift_taken_out() -> None:
    # fouling -5 K/h on py1 and tc2 drifting up 3 K/h: py1 -8 K/h, py2 -3 K/h, tc2 - tc1 +3 K/h
    s = signals(-8.0 * H + NOISE, pair=3.0 * H + NOISE, partner=-3.0 * H + NOISE)
    m = measure(s)
    assert thermocouple_drift(s, m).cause is None  # py2 departs less than half as fast as py1: not the drift alone
    v = window_attenuation(s, m)
    assert v.cause == "window-attenuation"
    assert v.reason == "py1 reads ever lower (-5.0 K/h after taking out tc2's drift of +3.0 K/h) while py2 holds (+0.0 K/h)"
    assert v.evidence["drift_k_per_h"] == pytest.approx(3.0, abs=0.05)


def test_window_attenuation_needs_a_slow_steady_fall_on_a_single_band_instrument() -> None:
    ratio = signals(-5.0 * H + NOISE, partner=NOISE.copy(), single_band=False)
    assert window_attenuation(ratio, measure(ratio)).cause is None
    rising = signals(5.0 * H + NOISE, partner=NOISE.copy())
    assert window_attenuation(rising, measure(rising)).cause is None
    wobbly = signals(-5.0 * H + 4.0 * np.sin(H * 40.0), partner=NOISE.copy())  # falls, but not steadily
    assert window_attenuation(wobbly, measure(wobbly)).cause is None
    assert likely_cause(ratio)[0] == "unknown"


# -- unknown -----------------------------------------------------------------------------------
def test_too_little_history_is_unknown_with_a_sentence() -> None:
    d = np.full(T.size, np.nan)
    d[-5:] = 9.0
    cause, ev = likely_cause(signals(d))
    assert (cause, ev) == ("unknown", {"window_s": 3600, "missing": ["history"],
                                       "reason": "the evidence does not decide: only 0.8 minutes of divergence history (it takes 2)"})


@settings(max_examples=60, deadline=None)
@given(st.lists(st.floats(-30, 30), min_size=4, max_size=4), st.lists(st.floats(-200, 200), min_size=3, max_size=3),
       st.booleans(), st.booleans(), st.booleans())
def test_unknown_always_says_why(shape, rates, with_partner, with_pair, single) -> None:
    # any signals at all: unknown comes with a sentence, naming missing evidence or what fits no signature
    a, b, c, step = shape
    d = a + b * H + c * np.sin(H * 9.0) + np.where(H > 0.6, step, 0.0) + NOISE
    rate = np.interp(H, [0.0, 0.5, 1.0], rates)
    s = signals(d, rate=rate, partner=(d * 0.3 if with_partner else None), no_pair=not with_pair, single_band=single)
    cause, ev = likely_cause(s)
    assert cause in causes.CAUSES and ev["reason"]
    if cause == "unknown":
        assert ev["reason"].startswith(("the evidence does not decide: ", "no signature fits: "))
        assert isinstance(ev["missing"], list)
        assert bool(ev["missing"]) == ev["reason"].startswith("the evidence does not decide: ")


# -- the evidence and the thresholds ---------------------------------------------------------------
def test_evidence_keeps_every_measure_in_the_order_taken() -> None:
    # the stored JSON keeps this order (regression value: the order of the code, issue 12)
    s = signals(np.where(H > 0.5, 6.0, 0.0) + NOISE, rate=np.where(H < 0.25, 60.0, 0.0), partner=NOISE.copy())
    cause, ev = likely_cause(s)
    assert cause == "emissivity-change"
    assert list(ev) == ["window_s", "rate_spread_c_per_h", "lag_r2", "lag_s", "offset_k", "lag_refused", "trend_k_per_h",
                        "trend_r2", "largest_10min_change_k",
                        "step_fraction", "step_t", "rate_change_at_step_c_per_h", "partner", "partner_trend_k_per_h",
                        "partner_10min_change_k", "thermocouple_pair", "pair_trend_k_per_h", "pair_10min_change_k", "reason"]


def test_thresholds_decide() -> None:
    s = signals(np.where(H > 0.5, 6.0, 0.0) + NOISE, partner=NOISE.copy())
    assert likely_cause(s)[0] == "emissivity-change"
    # a step smaller than the threshold is no emissivity change
    assert likely_cause(s, dataclasses.replace(causes.THRESHOLDS, step_min_k=10.0))[0] != "emissivity-change"
    with pytest.raises(dataclasses.FrozenInstanceError):
        causes.THRESHOLDS.step_min_k = 10.0  # type: ignore[misc]
    # lag's R² threshold decides a fit of R² about 0.8 (regression value of this construction)
    rate = np.where((H > 0.25) & (H < 0.75), 120.0, 0.0)
    noisy = signals(300.0 * rate / 3600.0 + np.random.default_rng(5).normal(0.0, 2.5, T.size), rate=rate)
    r2 = thermocouple_lag(noisy).evidence["lag_r2"]
    assert 0.7 < r2 < 0.9
    assert thermocouple_lag(noisy, dataclasses.replace(causes.THRESHOLDS, lag_min_r2=0.95)).cause is None


def test_operators_set_the_cause_window_cadence_and_lag_r2_in_the_site_profile() -> None:
    site = load_site(text=load_site().text.replace("frozen_s = 900", "frozen_s = 900\ncause_window_s = 1800\n"
                                                                     "cause_every_s = 120\nlag_min_r2 = 0.8"))
    th = CauseThresholds.for_site(site.alarms)
    assert (th.window_s, th.every_s, th.lag_min_r2) == (1800, 120.0, 0.8)
    assert th.step_min_k == causes.THRESHOLDS.step_min_k  # the rest as they were
    from firewatch.firing.alarms import AlarmEngine

    assert AlarmEngine(site).thresholds == th


def test_every_threshold_has_a_docstring() -> None:
    tree = ast.parse(inspect.getsource(CauseThresholds))
    body = tree.body[0].body  # type: ignore[attr-defined]
    documented = {
        stmt.target.id
        for stmt, nxt in itertools.pairwise(body)
        if isinstance(stmt, ast.AnnAssign) and isinstance(nxt, ast.Expr) and isinstance(nxt.value, ast.Constant) and isinstance(nxt.value.value, str)
    }
    fields = {f.name for f in dataclasses.fields(CauseThresholds)}
    assert fields == documented and len(fields) >= 30
    assert all(not math.isnan(float(getattr(causes.THRESHOLDS, f))) for f in fields)


# -- what contradicts a decided cause ----------------------------------------------------------------
def test_a_step_while_the_rate_holds_contradicts_lag() -> None:
    rate = np.full(T.size, 120.0)
    s = signals(20.0 + np.where(H > 0.7, -15.0, 0.0) + NOISE, rate=rate, partner=NOISE.copy())
    j = judge(s)
    assert j.cause == "emissivity-change"
    assert refuted("thermocouple-lag", j, s) == "a step of -15.0 K came while the rate held"


def test_a_cause_that_cannot_be_judged_any_more_stands() -> None:
    # lag during a steady ramp: nothing to fit, nothing contradicts it
    s = signals(np.full(T.size, 20.0) + 1.5 * H + NOISE, rate=120.0, pair=-1.5 * H + NOISE, partner=np.full(T.size, 0.0) + NOISE)
    assert refuted("thermocouple-lag", judge(s), s) is None
    # an emissivity step that has left the window
    flat = signals(np.full(T.size, 9.0) + NOISE, partner=NOISE.copy())
    assert refuted("emissivity-change", judge(flat), flat) is None
    assert refuted("unknown", judge(flat), flat) is None


def test_witnesses_that_see_the_reference_hold_contradict_drift() -> None:
    s = signals(-5.0 * H + NOISE, partner=NOISE.copy())
    j = judge(s)
    assert j.cause == "window-attenuation"
    assert refuted("thermocouple-drift", j, s) == "py2 and tc1 saw tc2 hold"


def test_the_ratio_pyrometer_falling_alike_contradicts_attenuation() -> None:
    s = signals(-5.0 * H + NOISE, partner=-5.0 * H + NOISE, pair=NOISE.copy())
    assert refuted("window-attenuation", judge(s), s) == "py2 fell alike"


# -- the story of a cause that changed ---------------------------------------------------------------
def test_because_names_what_was_awaited() -> None:
    partner = np.where(MIN >= 20.0, 0.0, np.nan) + NOISE  # py2 in range from minute 20
    s = signals(-5.0 * H + NOISE, partner=partner)
    words, when = because_words("unknown", {"missing": ["partner"]}, s, "window-attenuation", raised_t=float(T[0]))
    assert words == "py2 came into range" and when == pytest.approx(T[0] - 5.0 + 20 * 60.0)
    # it came into range before the alarm: it had read long enough
    assert because_words("unknown", {"missing": ["partner"]}, s, "window-attenuation", raised_t=float(T[-1])) == \
        ("py2 had read in range long enough", None)
    assert because_words("unknown", {"missing": ["rate", "partner"]}, s, "thermocouple-lag") == ("the rate changed", None)
    assert because_words("unknown", {"missing": ["history"]}, s, "thermocouple-lag") == ("enough history had gathered", None)


def test_the_story_as_the_screen_and_the_log_keep_it() -> None:
    t1 = 1_773_488_520.0  # 2026-03-14 11:42:00 UTC (Python's datetime)
    step = CauseStep(t1 + 600.0, "unknown", "window-attenuation", "py2 came into range", t1, "py1 reads ever lower",
                     "the evidence does not decide", {"reason": "py1 reads ever lower"}, {"reason": "the evidence does not decide"})
    again = CauseStep.from_detail(step.t, step.detail())
    assert again == step

    def hhmm(t: float) -> str:
        return dt.datetime.fromtimestamp(t, dt.UTC).strftime("%H:%M")

    assert cause_story("window-attenuation", [step], hhmm) == "window-attenuation, was unknown until py2 came into range at 11:42"
    assert cause_label("window-attenuation", [step]) == "window-attenuation (was unknown)"
    assert cause_story("emissivity-change", [], hhmm) == "emissivity-change"
    later = CauseStep(t1 + 7200.0, "window-attenuation", "thermocouple-drift", "py2 fell alike")
    assert cause_story("thermocouple-drift", [step, later], hhmm) == (
        "thermocouple-drift, was window-attenuation until py2 fell alike at 13:42, before that unknown until py2 came "
        "into range at 11:42")
    states = [{"t": step.t, "state": "cause-changed", "detail": step.detail()}, {"t": 0.0, "state": "normal", "detail": "x"}]
    assert cause_steps(states) == [step]
    assert earlier_causes(t1 - 1800.0, [step], t1 - 3600.0) == [
        {"cause": "unknown", "since_s": 1800.0, "until_s": 4200.0, "because": "py2 came into range", "because_s": 3600.0,
         "reason": "the evidence does not decide", "evidence": {"reason": "the evidence does not decide"}}]
    assert CauseStep.from_detail(0.0, "not json") is None and CauseStep.from_detail(0.0, '{"x": 1}') is None
