"""The likely cause of a divergence: one function per cause, its thresholds in one table.

Decided once, when a divergence alarm is raised, from the last hour of
10-second means (:class:`~firewatch.firing.alarms.history.History`). Each
cause function looks at the same :class:`Signals` and returns a
:class:`Verdict`: the cause it names (or ``None`` when it does not decide)
and the evidence it measured, which is stored beside the alarm whatever the
verdict. :func:`likely_cause` asks them in a fixed order and the first to
decide wins:

1. :func:`thermocouple_lag`: the divergence follows the rate of change (a
   straight-line fit explains most of it and it vanishes at rate 0), or,
   during a steady ramp with nothing to fit, the reference reads behind the
   pyrometer *and* behind another thermocouple by about a time constant
   times the rate;
2. :func:`emissivity_change`: the single-band divergence moved in a step (most
   of its change within ten minutes) while a ratio pyrometer, where there is
   one, did not (both stepping together decides ``unknown``);
3. :func:`thermocouple_drift`: the reference departs slowly from another
   thermocouple, or from both pyrometers alike;
4. :func:`window_attenuation`: the single-band pyrometer reads ever lower
   while the other pyrometer holds, or, without one, while the thermocouples
   agree with each other;

and ``unknown`` when none decides. The signatures rest on the physics: a
ratio pyrometer sees a gray change of emissivity or transmission in both
its bands alike and hardly moves (DeWitt1988, in docs/references.md);
base-metal thermocouples drift in service (Webster2021); a sheathed
thermocouple responds to first order and reads behind by its time
constant times the rate (common practice). The numbers in
:class:`CauseThresholds` are firewatch's own choices (common practice, no
source), set against the simulator's faults.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from firewatch.firing.alarms.history import BIN_S, History
from firewatch.settings.profile import SiteProfile

__all__ = [
    "CAUSES",
    "CauseThresholds",
    "THRESHOLDS",
    "Signals",
    "Measures",
    "Verdict",
    "likely_cause",
    "thermocouple_lag",
    "emissivity_change",
    "thermocouple_drift",
    "window_attenuation",
    "measure",
    "evidence_number",
]

CAUSES = ("window-attenuation", "thermocouple-drift", "emissivity-change", "thermocouple-lag", "unknown")
"""Every cause a divergence alarm can carry."""


@dataclass(frozen=True)
class CauseThresholds:
    """Every number the likely cause judges by, in one place (firewatch's own choices, no source)."""

    window_s: int = 3600
    """How far back the causes look, seconds (stored in the evidence as ``window_s``)."""
    min_means: int = 12
    """Fewest finite 10 s means of the divergence to judge at all, and of divergence with rate to fit the lag."""
    lag_min_rate_spread_c_per_h: float = 20.0
    """The lag fit needs the rate to span more than this (°C/h), else it has nothing to fit against."""
    lag_min_r2: float = 0.6
    """The straight line divergence = offset + lag x rate must explain more than this fraction of the variance."""
    lag_max_offset_fraction: float = 0.5
    """The lag fit's offset (the divergence at rate 0) must stay below this fraction of the largest divergence."""
    ramp_min_rate_c_per_h: float = 30.0
    """During a steady ramp faster than this (°C/h), a lag is judged from the thermocouple pair instead of a fit."""
    ramp_min_pair_fraction: float = 0.5
    """During a steady ramp the reference must read behind the other thermocouple by more than this fraction of the divergence."""
    ramp_max_lag_s: float = 3600.0
    """During a steady ramp the implied lag (divergence / rate) must lie between 0 and this, seconds."""
    trend_min_means: int = 6
    """Fewest finite means for a trend (a straight-line slope) to be computed."""
    trend_min_span_s: float = 600.0
    """Shortest span of those means for a trend, seconds."""
    step_mean_s: float = 120.0
    """Means over this long smooth the noise before a step is looked for, seconds."""
    step_within_s: float = 600.0
    """A step is the largest change between smoothed means this far apart, seconds."""
    step_min_means: int = 12
    """Fewest finite 10 s means to look for a step."""
    step_min_blocks: int = 6
    """Fewest smoothed means to look for a step."""
    step_end_blocks: int = 3
    """The window's total change is the mean of this many smoothed means at its end less as many at its start."""
    step_min_fraction: float = 0.6
    """A step must be more than this fraction of the window's total change to count as an emissivity change."""
    step_min_k: float = 1.5
    """A step must be larger than this, K, to count as an emissivity change."""
    step_together_fraction: float = 0.5
    """A ratio partner that stepped by more than this fraction of the step too rules emissivity out (``unknown``)."""
    trend_min_k_per_h: float = 1.0
    """A divergence trending slower than this (K/h) is no drift and no attenuation."""
    drift_pair_fraction: float = 0.5
    """The reference departing from another thermocouple faster than this fraction of the trend is drift."""
    drift_partner_fraction: float = 0.5
    """The other pyrometer departing the same way faster than this fraction of the trend is drift."""
    window_partner_max_fraction: float = 0.34
    """A single-band trend down while the other pyrometer trends less than this fraction of it is attenuation."""


THRESHOLDS = CauseThresholds()
"""The thresholds in use."""


def evidence_number(x: float | None) -> float | None:
    """A number as stored in evidence: rounded to 0.001, None when missing or not finite."""
    return None if x is None or not math.isfinite(x) else round(float(x), 3)


@dataclass(frozen=True)
class Signals:
    """What the causes of one pyrometer's divergence look at: 10 s means over the last window."""

    pyrometer: str
    single_band: bool
    """The pyrometer is a single-band one (not ratio)."""
    reference: str | None
    """The thermocouple it is compared with."""
    t: np.ndarray
    """Bin times, UTC seconds."""
    divergence: np.ndarray | None
    """Reconciled pyrometer minus reference, K (None when not kept)."""
    rate: np.ndarray | None = None
    """The control thermocouple's rate of change, °C/h."""
    other: str | None = None
    """Another thermocouple to compare the reference with."""
    pair: np.ndarray | None = None
    """Reference minus ``other``, K."""
    partner: str | None = None
    """Another pyrometer with a reference (a ratio one preferred)."""
    partner_is_ratio: bool = False
    partner_divergence: np.ndarray | None = None

    @classmethod
    def from_history(cls, site: SiteProfile, history: History, rate_name: str | None, name: str, t: float,
                     span_s: float) -> Signals:
        """The signals for pyrometer ``name`` over ``(t - span_s, t]``."""
        py = site.pyrometer(name)
        assert py is not None
        tt, h = history.window(t, span_s)
        ref = py.reference
        others = [tc.name for tc in site.thermocouples if tc.name != ref]
        other = others[0] if others else None
        pair = h[ref] - h[other] if ref and other and ref in h and other in h else None
        ratio = [p for p in site.pyrometers if p.kind == "ratio" and p.reference and p.name != name]
        single = [p for p in site.pyrometers if p.kind == "single" and p.reference and p.name != name]
        partner = (ratio or single)[0].name if (ratio or single) else None
        return cls(
            pyrometer=name,
            single_band=py.kind == "single",
            reference=ref,
            t=tt,
            divergence=h.get(f"{name}.divergence"),
            rate=h.get(rate_name) if rate_name else None,
            other=other,
            pair=pair,
            partner=partner,
            partner_is_ratio=bool(ratio),
            partner_divergence=h.get(f"{partner}.divergence") if partner else None,
        )


@dataclass(frozen=True)
class Verdict:
    """One cause function's answer."""

    cause: str | None
    """The cause it names (``unknown`` when the evidence rules every cause out), or None: not decided here."""
    reason: str = ""
    """Why, in words for the operator."""
    evidence: dict[str, Any] = field(default_factory=dict)
    """What it measured, kept with the alarm whatever the verdict."""


def trend_per_h(t: np.ndarray, y: np.ndarray, th: CauseThresholds = THRESHOLDS) -> float:
    """The slope of a straight line through ``y`` against ``t``, per hour (NaN with too few points)."""
    ok = np.isfinite(y)
    if ok.sum() < th.trend_min_means or np.ptp(t[ok]) < th.trend_min_span_s:
        return math.nan
    return float(np.polyfit(t[ok], y[ok], 1)[0] * 3600.0)


def step_fraction(t: np.ndarray, y: np.ndarray, th: CauseThresholds = THRESHOLDS) -> tuple[float, float]:
    """The largest change within ``th.step_within_s`` and that change as a fraction of the window's total change."""
    ok = np.isfinite(y)
    t, y = t[ok], y[ok]
    if y.size < th.step_min_means:
        return math.nan, math.nan
    # smoothed means take the noise out before looking for a step
    k = max(1, int(th.step_mean_s / BIN_S))
    n = y.size // k
    if n < th.step_min_blocks:
        return math.nan, math.nan
    ym = y[: n * k].reshape(n, k).mean(axis=1)
    lag = max(1, int(th.step_within_s / (k * BIN_S)))
    steps = ym[lag:] - ym[:-lag]
    if steps.size == 0:
        return math.nan, math.nan
    biggest = float(steps[np.argmax(np.abs(steps))])
    e = th.step_end_blocks
    total = float(ym[-e:].mean() - ym[:e].mean())
    return biggest, abs(biggest) / max(abs(total), 1e-9)  # 1e-9: no division by zero on a flat window


def _span_words(seconds: float) -> str:
    return "ten minutes" if seconds == 600.0 else f"{seconds / 60.0:g} minutes"


# -- the causes, in the order they are asked --------------------------------------------------
def thermocouple_lag(s: Signals, th: CauseThresholds = THRESHOLDS) -> Verdict:
    """The reference lags: the divergence follows the rate of change and vanishes at rate 0.

    A thermocouple with time constant tau reads behind by about tau x rate
    during a ramp (first-order response), so divergence against rate is a
    straight line through the origin with slope tau. During a steady ramp
    the rate has no spread to fit against; then the reference must read
    behind the pyrometer and behind another thermocouple alike.
    """
    ev: dict[str, Any] = {}
    d, rate = s.divergence, s.rate
    if d is None or rate is None:
        return Verdict(None, evidence=ev)
    ok = np.isfinite(d) & np.isfinite(rate)
    rate_now = float(rate[ok][-1]) if ok.any() else math.nan
    d_now = float(d[ok][-1]) if ok.any() else math.nan
    if ok.sum() >= th.min_means and np.ptp(rate[ok]) > th.lag_min_rate_spread_c_per_h:
        b, a = np.polyfit(rate[ok], d[ok], 1)
        pred = a + b * rate[ok]
        ss = np.sum((d[ok] - d[ok].mean()) ** 2)
        r2 = 1.0 - np.sum((d[ok] - pred) ** 2) / ss if ss > 0 else 0.0
        ev.update({"lag_r2": evidence_number(r2), "lag_s": evidence_number(b * 3600.0), "offset_k": evidence_number(a)})
        if r2 > th.lag_min_r2 and abs(a) < th.lag_max_offset_fraction * np.nanmax(np.abs(d[ok])):
            return Verdict("thermocouple-lag", f"the divergence follows the rate of change (R² {r2:.2f}, {b * 3600:.0f} s per degree/s) "
                           "and vanishes at rate 0", ev)
    # during a steady ramp a lagging thermocouple reads behind the ware (the divergence
    # has the sign of the rate) and behind the other thermocouples too
    if (math.isfinite(rate_now) and abs(rate_now) > th.ramp_min_rate_c_per_h and np.sign(d_now) == np.sign(rate_now)
            and s.pair is not None):
        pair = s.pair
        pair_now = float(pair[np.isfinite(pair)][-1]) if np.isfinite(pair).any() else math.nan
        implied = d_now / (rate_now / 3600.0)
        ev.update({"rate_c_per_h": evidence_number(rate_now), "implied_lag_s": evidence_number(implied), "pair_now_k": evidence_number(pair_now)})
        if (math.isfinite(pair_now) and np.sign(pair_now) == -np.sign(rate_now) and abs(pair_now) > th.ramp_min_pair_fraction * abs(d_now)
                and 0 < implied < th.ramp_max_lag_s):
            return Verdict("thermocouple-lag", f"during a {rate_now:+.0f} °C/h ramp {s.reference} reads {abs(d_now):.1f} K behind "
                           f"{s.pyrometer} and {abs(pair_now):.1f} K behind {s.other}: a lag of about {implied:.0f} s", ev)
    return Verdict(None, evidence=ev)


@dataclass(frozen=True)
class Measures:
    """Trends and steps of the divergence and its comparisons, shared by the causes after lag."""

    trend_k_per_h: float
    step_k: float
    step_fraction: float
    partner_trend_k_per_h: float = math.nan
    partner_step_k: float = math.nan
    pair_trend_k_per_h: float = math.nan
    evidence: dict[str, Any] = field(default_factory=dict)

    def evidence_of(self, *keys: str) -> dict[str, Any]:
        """The stored evidence under ``keys`` (those measured)."""
        return {k: self.evidence[k] for k in keys if k in self.evidence}


def measure(s: Signals, th: CauseThresholds = THRESHOLDS) -> Measures:
    """The divergence's trend and largest step, the partner pyrometer's, and the thermocouple pair's trend."""
    assert s.divergence is not None
    trend = trend_per_h(s.t, s.divergence, th)
    step, frac = step_fraction(s.t, s.divergence, th)
    ev: dict[str, Any] = {"trend_k_per_h": evidence_number(trend), "largest_10min_change_k": evidence_number(step),
                          "step_fraction": evidence_number(frac)}
    partner_trend = partner_step = math.nan
    if s.partner is not None:
        if s.partner_divergence is not None:
            partner_trend = trend_per_h(s.t, s.partner_divergence, th)
            partner_step, _ = step_fraction(s.t, s.partner_divergence, th)
        ev.update({"partner": s.partner, "partner_trend_k_per_h": evidence_number(partner_trend),
                   "partner_10min_change_k": evidence_number(partner_step)})
    pair_trend = math.nan
    if s.pair is not None:
        pair_trend = trend_per_h(s.t, s.pair, th)
        ev.update({"thermocouple_pair": f"{s.reference}-{s.other}", "pair_trend_k_per_h": evidence_number(pair_trend)})
    return Measures(trend, step, frac, partner_trend, partner_step, pair_trend, ev)


def emissivity_change(s: Signals, m: Measures, th: CauseThresholds = THRESHOLDS) -> Verdict:
    """The ware's emissivity changed: the single-band divergence stepped while a ratio pyrometer did not.

    A ratio pyrometer sees only the ratio of the emissivities in its two
    bands, so a gray change moves a single-band instrument and leaves the
    ratio one nearly alone; a step in both points elsewhere (``unknown``).
    """
    ev = m.evidence_of("largest_10min_change_k", "step_fraction", "partner_10min_change_k")
    step, frac, partner_step = m.step_k, m.step_fraction, m.partner_step_k
    if not (math.isfinite(frac) and frac > th.step_min_fraction and abs(step) > th.step_min_k):
        return Verdict(None, evidence=ev)
    if s.single_band and s.partner_is_ratio and math.isfinite(partner_step) and abs(partner_step) > th.step_together_fraction * abs(step):
        return Verdict("unknown", "both pyrometers stepped together", ev)
    reason = f"a step of {step:+.1f} K within {_span_words(th.step_within_s)}"
    if s.partner is not None and math.isfinite(partner_step):
        reason += f" while {s.partner} moved {partner_step:+.1f} K"
    return Verdict("emissivity-change", reason, ev)


def thermocouple_drift(s: Signals, m: Measures, th: CauseThresholds = THRESHOLDS) -> Verdict:
    """The reference thermocouple drifts: it departs slowly from another thermocouple, or from both pyrometers alike."""
    ev = m.evidence_of("trend_k_per_h", "pair_trend_k_per_h", "partner_trend_k_per_h")
    trend, pair_trend, partner_trend = m.trend_k_per_h, m.pair_trend_k_per_h, m.partner_trend_k_per_h
    if not (math.isfinite(trend) and abs(trend) > th.trend_min_k_per_h):
        return Verdict(None, evidence=ev)
    if math.isfinite(pair_trend) and abs(pair_trend) > th.drift_pair_fraction * abs(trend):
        return Verdict("thermocouple-drift", f"{s.reference} departs from {s.other} at {pair_trend:+.1f} K/h", ev)
    if (s.partner is not None and math.isfinite(partner_trend) and abs(partner_trend) > th.drift_partner_fraction * abs(trend)
            and np.sign(partner_trend) == np.sign(trend)):
        return Verdict("thermocouple-drift", f"{s.pyrometer} and {s.partner} both depart from {s.reference} "
                       f"({trend:+.1f} and {partner_trend:+.1f} K/h)", ev)
    return Verdict(None, evidence=ev)


def window_attenuation(s: Signals, m: Measures, th: CauseThresholds = THRESHOLDS) -> Verdict:
    """The sight path loses transmission: a single-band pyrometer reads ever lower while the others hold.

    Deposits on a window cut the radiance a single-band instrument sees, so
    it reads low and lower; a ratio instrument, seeing a gray loss in both
    bands alike, holds, and so do the thermocouples.
    """
    ev = m.evidence_of("trend_k_per_h", "partner_trend_k_per_h", "pair_trend_k_per_h")
    trend, pair_trend, partner_trend = m.trend_k_per_h, m.pair_trend_k_per_h, m.partner_trend_k_per_h
    if not (math.isfinite(trend) and abs(trend) > th.trend_min_k_per_h and s.single_band and trend < 0):
        return Verdict(None, evidence=ev)
    if s.partner is not None and math.isfinite(partner_trend):
        if abs(partner_trend) < th.window_partner_max_fraction * abs(trend):
            return Verdict("window-attenuation", f"{s.pyrometer} reads ever lower ({trend:+.1f} K/h) while {s.partner} holds "
                           f"({partner_trend:+.1f} K/h)", ev)
    elif math.isfinite(pair_trend):
        return Verdict("window-attenuation", f"{s.pyrometer} reads ever lower ({trend:+.1f} K/h) while the thermocouples agree", ev)
    return Verdict(None, evidence=ev)


def likely_cause(s: Signals, th: CauseThresholds = THRESHOLDS) -> tuple[str, dict[str, Any]]:
    """The likely cause of a divergence and its evidence (a JSON-ready dict ending with ``reason``).

    Parameters
    ----------
    s : Signals
        The pyrometer's divergence and its comparisons over the last window.
    th : CauseThresholds
        The thresholds to judge by.

    Returns
    -------
    cause : str
        One of :data:`CAUSES`.
    evidence : dict
        ``window_s``, every measure taken on the way, and ``reason``.
    """
    ev: dict[str, Any] = {"window_s": th.window_s}
    if s.divergence is None or np.isfinite(s.divergence).sum() < th.min_means:
        return "unknown", ev | {"reason": "too little history"}
    lag = thermocouple_lag(s, th)
    ev.update(lag.evidence)
    if lag.cause is not None:
        ev["reason"] = lag.reason
        return lag.cause, ev
    m = measure(s, th)
    ev.update(m.evidence)
    for judge in (emissivity_change, thermocouple_drift, window_attenuation):
        verdict = judge(s, m, th)
        ev.update(verdict.evidence)
        if verdict.cause is not None:
            ev["reason"] = verdict.reason
            return verdict.cause, ev
    ev["reason"] = "the evidence does not decide"
    return "unknown", ev
