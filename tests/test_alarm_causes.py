"""The likely cause of a divergence, one cause function at a time, on constructed signals.

Every signal here is built by hand (10 s means over one hour); the expected
verdicts follow from the construction and the signatures in
firewatch/firing/alarms/causes.py. Numbers are constructed, not measured
(common practice, no source) unless a comment says otherwise.
"""

from __future__ import annotations

import ast
import dataclasses
import inspect
import itertools
import math

import numpy as np
import pytest

from firewatch.firing.alarms import causes
from firewatch.firing.alarms.causes import (
    CauseThresholds,
    Signals,
    emissivity_change,
    likely_cause,
    measure,
    thermocouple_drift,
    thermocouple_lag,
    window_attenuation,
)

T = 1_000_000.0 + np.arange(360) * 10.0  # one hour of 10 s means
H = (T - T[0]) / 3600.0  # hours into the window
NOISE = np.random.default_rng(3).normal(0.0, 0.05, T.size)


def signals(divergence: np.ndarray, *, rate: float | np.ndarray = 0.0, pair: np.ndarray | None = None,
            partner: np.ndarray | None = None, partner_is_ratio: bool = True, single_band: bool = True) -> Signals:
    return Signals(
        pyrometer="py1", single_band=single_band, reference="tc2", t=T, divergence=divergence,
        rate=np.broadcast_to(np.asarray(rate, dtype=float), T.shape).copy(),
        other="tc1", pair=np.zeros(T.size) + NOISE if pair is None else pair,
        partner=None if partner is None else "py2", partner_is_ratio=partner_is_ratio and partner is not None,
        partner_divergence=partner,
    )


def test_lag_follows_the_rate_and_vanishes_at_rate_zero() -> None:
    # a first-order sensor with time constant 300 s reads behind by 300 s x rate (common practice)
    rate = np.where((H > 0.25) & (H < 0.75), 120.0, 0.0)
    s = signals(300.0 * rate / 3600.0 + NOISE, rate=rate)
    v = thermocouple_lag(s)
    assert v.cause == "thermocouple-lag" and "follows the rate of change" in v.reason
    assert v.evidence["lag_s"] == pytest.approx(300.0, rel=0.02)  # the constructed 300 s
    assert abs(v.evidence["offset_k"]) < 0.1 and v.evidence["lag_r2"] > 0.99
    assert likely_cause(s)[0] == "thermocouple-lag"


def test_lag_refused_when_the_divergence_stays_at_rate_zero() -> None:
    rate = np.where((H > 0.25) & (H < 0.75), 120.0, 0.0)
    # a 12 K offset: more than half the largest divergence (22 K), which no lag explains
    s = signals(12.0 + 300.0 * rate / 3600.0 + NOISE, rate=rate)
    v = thermocouple_lag(s)
    assert v.cause is None and v.evidence["offset_k"] == pytest.approx(12.0, abs=0.1)


def test_lag_during_a_steady_ramp_from_the_thermocouple_pair() -> None:
    # 150 degC/h throughout: nothing to fit; tc2 reads 6 K behind py1 and 5 K behind tc1
    s = signals(np.full(T.size, 6.0) + NOISE, rate=150.0, pair=np.full(T.size, -5.0))
    v = thermocouple_lag(s)
    assert v.cause == "thermocouple-lag" and "a lag of about 144 s" in v.reason  # 6 K / (150 K/3600 s) = 144 s
    assert v.evidence["implied_lag_s"] == pytest.approx(144.0, abs=3.0)


def test_emissivity_step_while_the_ratio_pyrometer_holds() -> None:
    step = np.where(H > 0.5, 6.0, 0.0)
    s = signals(step + NOISE, partner=NOISE.copy())
    v = emissivity_change(s, measure(s))
    assert v.cause == "emissivity-change" and v.reason.startswith("a step of +6.0 K within ten minutes while py2 moved")
    assert likely_cause(s)[0] == "emissivity-change"


def test_both_pyrometers_stepping_together_decides_unknown() -> None:
    step = np.where(H > 0.5, 6.0, 0.0)
    s = signals(step + NOISE, partner=step + NOISE)
    v = emissivity_change(s, measure(s))
    assert (v.cause, v.reason) == ("unknown", "both pyrometers stepped together")
    assert likely_cause(s) == ("unknown", likely_cause(s)[1]) and likely_cause(s)[1]["reason"] == "both pyrometers stepped together"


def test_drift_when_the_reference_departs_from_the_other_thermocouple() -> None:
    # tc2 drifts down 4 K/h: the divergence (py1 - tc2) rises 4 K/h, tc2 - tc1 falls 4 K/h
    s = signals(4.0 * H + NOISE, pair=-4.0 * H + NOISE, partner=4.0 * H + NOISE)
    m = measure(s)
    assert m.trend_k_per_h == pytest.approx(4.0, abs=0.1) and m.pair_trend_k_per_h == pytest.approx(-4.0, abs=0.1)
    v = thermocouple_drift(s, m)
    assert v.cause == "thermocouple-drift" and v.reason == "tc2 departs from tc1 at -4.0 K/h"


def test_drift_when_both_pyrometers_depart_alike() -> None:
    s = signals(4.0 * H + NOISE, partner=3.5 * H + NOISE)  # thermocouples agree; both pyrometers move away from tc2
    v = thermocouple_drift(s, measure(s))
    assert v.cause == "thermocouple-drift" and v.reason.startswith("py1 and py2 both depart from tc2")


def test_window_attenuation_with_and_without_a_partner() -> None:
    s = signals(-5.0 * H + NOISE, partner=NOISE.copy())
    v = window_attenuation(s, measure(s))
    assert v.cause == "window-attenuation" and "while py2 holds" in v.reason
    alone = signals(-5.0 * H + NOISE)
    v = window_attenuation(alone, measure(alone))
    assert v.cause == "window-attenuation" and v.reason.endswith("while the thermocouples agree")
    assert likely_cause(alone)[0] == "window-attenuation"


def test_window_attenuation_needs_a_single_band_instrument_reading_low() -> None:
    ratio = signals(-5.0 * H + NOISE, partner=NOISE.copy(), single_band=False)
    assert window_attenuation(ratio, measure(ratio)).cause is None
    rising = signals(5.0 * H + NOISE, partner=NOISE.copy())
    assert window_attenuation(rising, measure(rising)).cause is None
    assert likely_cause(ratio) == ("unknown", likely_cause(ratio)[1])


def test_too_little_history_is_unknown() -> None:
    d = np.full(T.size, np.nan)
    d[-5:] = 9.0
    cause, ev = likely_cause(signals(d))
    assert (cause, ev) == ("unknown", {"window_s": 3600, "reason": "too little history"})


def test_evidence_keeps_every_measure_in_the_order_taken() -> None:
    # the stored JSON keeps this order (regression value: the order of the code before the split, issue 11)
    s = signals(np.where(H > 0.5, 6.0, 0.0) + NOISE, rate=np.where(H < 0.25, 60.0, 0.0), partner=NOISE.copy())
    cause, ev = likely_cause(s)
    assert cause == "emissivity-change"
    assert list(ev) == ["window_s", "lag_r2", "lag_s", "offset_k", "trend_k_per_h", "largest_10min_change_k", "step_fraction",
                        "partner", "partner_trend_k_per_h", "partner_10min_change_k", "thermocouple_pair", "pair_trend_k_per_h", "reason"]


def test_thresholds_decide() -> None:
    s = signals(np.where(H > 0.5, 6.0, 0.0) + NOISE, partner=NOISE.copy())
    assert likely_cause(s)[0] == "emissivity-change"
    # a step smaller than the threshold is no emissivity change
    assert likely_cause(s, dataclasses.replace(causes.THRESHOLDS, step_min_k=10.0))[0] != "emissivity-change"
    with pytest.raises(dataclasses.FrozenInstanceError):
        causes.THRESHOLDS.step_min_k = 10.0  # type: ignore[misc]


def test_every_threshold_has_a_docstring() -> None:
    tree = ast.parse(inspect.getsource(CauseThresholds))
    body = tree.body[0].body  # type: ignore[attr-defined]
    documented = {
        stmt.target.id
        for stmt, nxt in itertools.pairwise(body)
        if isinstance(stmt, ast.AnnAssign) and isinstance(nxt, ast.Expr) and isinstance(nxt.value, ast.Constant) and isinstance(nxt.value.value, str)
    }
    fields = {f.name for f in dataclasses.fields(CauseThresholds)}
    assert fields == documented and len(fields) >= 20
    assert all(not math.isnan(float(getattr(causes.THRESHOLDS, f))) for f in fields)
