"""The likely cause of a divergence: one function per cause, its thresholds in one table.

Decided when a divergence alarm is raised, from the last hour of 10-second
means (:class:`~firewatch.firing.alarms.history.History`), and decided
again while the alarm's condition holds
(:class:`~firewatch.firing.alarms.learning.CauseLearner`, which asks
:func:`refuted` what contradicts a cause already decided). Each cause function
looks at the same :class:`Signals` (and the shared :class:`Measures`) and
returns a :class:`Verdict`: the cause it names, or ``None`` when it does not
decide, the evidence it measured (kept beside the alarm whatever the
verdict) and, where it could not judge, the evidence it lacked.
:func:`likely_cause` asks them in a fixed order and the first to decide
wins:

1. :func:`thermocouple_lag`: the divergence tracks the rate of change (the
   reference's own rate, which a first-order sensor lags behind by its time
   constant times the rate it sees). A
   straight line of divergence against rate explains it (R² above
   ``lag_min_r2``), its slope is a plausible time constant (at least
   ``lag_min_time_constants`` of the profile's, at most ``lag_max_s``), it
   is present from the start of the ramp and vanishes in holds. A steady
   rate leaves nothing to fit, and then lag is not named at all;
2. :func:`emissivity_change`: the divergence stepped (most of its change
   within ten minutes) while the rate held, the thermocouples held, and the
   other pyrometer moved differently (a gray step moves a single-band
   instrument and hardly a ratio one; a non-gray step moves a ratio
   instrument several times more);
3. :func:`thermocouple_drift`: the reference departs, slowly and alike, from
   this pyrometer, from the other pyrometer and from the other
   thermocouple (each one that reads);
4. :func:`window_attenuation`: a single-band pyrometer reads ever lower, a
   slow and steady fall (after taking out any drift of the reference the
   other instruments agree on) while a ratio pyrometer holds and the
   thermocouples agree;

and ``unknown`` when none decides, with a sentence naming the evidence that
was missing (a pyrometer below its range, too little history, a steady
rate) or, where nothing was missing, what was seen that fits no signature.

The signatures rest on the physics: a ratio pyrometer sees a gray change of
emissivity or transmission in both its bands alike and hardly moves, while a
change of the ratio of the two emissivities moves it by several times what
it moves a single-band one (DeWitt1988, in docs/references.md); base-metal
thermocouples drift in service (Webster2021); a sheathed thermocouple
responds to first order and reads behind by its time constant times the
rate (common practice, no source). The numbers in :class:`CauseThresholds`
are firewatch's own choices (common practice, no source), set against the
simulator's faults; those an operator may want to change are also keys of
the site profile's ``[alarms]`` table (:meth:`CauseThresholds.for_site`).
"""

from __future__ import annotations

import json
import math
from collections.abc import Callable
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np

from firewatch.firing.alarms.history import BIN_S, History
from firewatch.settings.profile import AlarmSettings, SiteProfile

__all__ = [
    "CAUSES",
    "CauseThresholds",
    "THRESHOLDS",
    "Signals",
    "Measures",
    "Verdict",
    "CauseStep",
    "likely_cause",
    "thermocouple_lag",
    "emissivity_change",
    "thermocouple_drift",
    "window_attenuation",
    "measure",
    "evidence_number",
    "because_words",
    "cause_steps",
    "cause_story",
    "cause_label",
    "earlier_causes",
    "judge",
    "refuted",
]

CAUSES = ("window-attenuation", "thermocouple-drift", "emissivity-change", "thermocouple-lag", "unknown")
"""Every cause a divergence alarm can carry."""


@dataclass(frozen=True)
class CauseThresholds:
    """Every number the likely cause judges by, in one place (firewatch's own choices, common practice, no source)."""

    window_s: int = 3600
    """How far back the causes look, seconds (stored in the evidence as ``window_s``; ``[alarms] cause_window_s``)."""
    every_s: float = 60.0
    """While a divergence alarm's condition holds, its cause is decided again this often, seconds of the firing's time
    (``[alarms] cause_every_s``)."""
    confirm: int = 3
    """A new cause replaces the current one only after this many evaluations in a row name it."""
    min_means: int = 12
    """Fewest finite 10 s means of the divergence to judge at all, and of divergence with rate to fit the lag."""
    lag_min_rate_spread_c_per_h: float = 20.0
    """The lag fit needs the rate to span more than this (°C/h); a steady rate leaves nothing to fit and lag is not named."""
    lag_min_r2: float = 0.6
    """The straight line divergence = offset + lag x rate must explain more than this fraction of the variance
    (``[alarms] lag_min_r2``)."""
    lag_max_offset_fraction: float = 0.5
    """The lag fit's offset (the divergence at rate 0) must stay below this fraction of the largest divergence."""
    lag_min_time_constants: float = 0.5
    """The fitted lag must be at least this many of the reference's time constant in the site profile."""
    lag_max_s: float = 3600.0
    """... and at most this, seconds: no sheath lags by more than an hour."""
    lag_hold_rate_c_per_h: float = 10.0
    """Slower than this (°C/h) is a hold, faster a ramp."""
    lag_hold_min_means: int = 6
    """Fewest settled 10 s means in holds for the divergence there to be judged."""
    lag_hold_settle_lags: float = 3.0
    """A hold's means count as settled this many fitted lags after the last ramp."""
    lag_hold_max_fraction: float = 0.3
    """In settled holds the mean divergence must stay below this fraction of the largest divergence."""
    lag_early_fraction: float = 0.5
    """Present from the start of the ramp: the lag implied by the earlier half of the ramp's means must be at least
    this fraction of the one implied by the later half."""
    lag_max_residual_fraction: float = 0.35
    """In the ramp, the fit's RMS residual must stay below this fraction of the mean divergence it predicts there."""
    trend_min_means: int = 6
    """Fewest finite means for a trend (a straight-line slope) to be computed."""
    trend_min_span_s: float = 600.0
    """Shortest span of those means for a trend, seconds."""
    trend_min_k_per_h: float = 1.0
    """A departure slower than this (K/h) is no drift and no attenuation."""
    trend_min_r2: float = 0.6
    """Slow and steady (drift, attenuation): a straight line in time must explain more than this fraction of the
    divergence's variance, and more than a straight line against the rate does."""
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
    step_max_rate_change_c_per_h: float = 30.0
    """Not tied to the rate: across the step the rate may change by no more than this, °C/h."""
    step_pair_max_fraction: float = 0.5
    """Across the step the thermocouples may move against each other by no more than this fraction of the step."""
    step_alike_fraction: float = 0.3
    """The other pyrometer moved alike (not an emissivity change) when its change differs from the step by less than
    this fraction of the step."""
    drift_witness_fraction: float = 0.5
    """A witness (the other pyrometer, the other thermocouple) sees the reference drift when it sees it depart at
    least this fraction of this pyrometer's departure, the same way."""
    window_partner_max_fraction: float = 0.34
    """A single-band fall is attenuation only while the other pyrometer moves less than this fraction of it."""

    @classmethod
    def for_site(cls, settings: AlarmSettings, base: CauseThresholds | None = None) -> CauseThresholds:
        """The thresholds with the site profile's ``[alarms]`` cause keys applied."""
        base = base if base is not None else THRESHOLDS
        return replace(base, window_s=int(settings.cause_window_s), every_s=float(settings.cause_every_s),
                       lag_min_r2=float(settings.lag_min_r2))


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
    """The reference's own rate of change, °C/h (the control thermocouple's where the reference's is not kept)."""
    other: str | None = None
    """Another thermocouple to compare the reference with."""
    pair: np.ndarray | None = None
    """Reference minus ``other``, K."""
    partner: str | None = None
    """Another pyrometer with a reference (a ratio one preferred)."""
    partner_is_ratio: bool = False
    partner_divergence: np.ndarray | None = None
    time_constant_s: float = 0.0
    """The reference's time constant in the site profile, seconds."""
    reference_c: np.ndarray | None = None
    """The reference's temperature, °C (to say where a pyrometer's range begins)."""
    partner_range_c: tuple[float, float] = (-math.inf, math.inf)
    """The other pyrometer's measuring range, °C."""
    end_t: float | None = None
    """The window's end, UTC seconds (the last bin's end when None)."""

    @classmethod
    def from_history(cls, site: SiteProfile, history: History, rate_name: str | None, name: str, t: float,
                     span_s: float) -> Signals:
        """The signals for pyrometer ``name`` over the complete 10 s bins before ``t``.

        ``rate_name`` is the control thermocouple's rate, taken where the
        history keeps no rate of the reference itself.

        Only bins that ended by the start of ``t``'s own bin count, so the
        answer does not depend on how the readings were cut into batches
        (the recorder's half seconds, replay's thousands of lines).
        """
        py = site.pyrometer(name)
        assert py is not None
        end = math.floor(t / BIN_S) * BIN_S
        tt, h = history.window(end, span_s)
        ref = py.reference
        others = [tc.name for tc in site.thermocouples if tc.name != ref]
        other = others[0] if others else None
        pair = h[ref] - h[other] if ref and other and ref in h and other in h else None
        ratio = [p for p in site.pyrometers if p.kind == "ratio" and p.reference and p.name != name]
        single = [p for p in site.pyrometers if p.kind == "single" and p.reference and p.name != name]
        partner = (ratio or single)[0] if (ratio or single) else None
        tc = site.thermocouple(ref) if ref else None
        rate = h.get(f"{ref}.rate") if ref else None
        if rate is None and rate_name:
            rate = h.get(rate_name)
        return cls(
            pyrometer=name,
            single_band=py.kind == "single",
            reference=ref,
            t=tt,
            divergence=h.get(f"{name}.divergence"),
            rate=rate,
            other=other,
            pair=pair,
            partner=partner.name if partner else None,
            partner_is_ratio=bool(ratio),
            partner_divergence=h.get(f"{partner.name}.divergence") if partner else None,
            time_constant_s=tc.time_constant_s if tc is not None else 0.0,
            reference_c=h.get(ref) if ref else None,
            partner_range_c=partner.range_c if partner else (-math.inf, math.inf),
            end_t=end,
        )

    @property
    def window_end(self) -> float:
        if self.end_t is not None:
            return self.end_t
        return float(self.t[-1] + BIN_S / 2) if self.t.size else 0.0

    @property
    def partner_reads(self) -> bool:
        """The other pyrometer has a divergence in the window."""
        return self.partner_divergence is not None and bool(np.isfinite(self.partner_divergence).any())

    def partner_since(self) -> float | None:
        """When the other pyrometer's latest unbroken run of values in the window began (its first bin's start)."""
        pd = self.partner_divergence
        if pd is None or pd.size == 0 or not np.isfinite(pd[-1]):
            return None
        gaps = np.flatnonzero(~np.isfinite(pd))
        first = int(gaps[-1]) + 1 if gaps.size else 0
        return float(self.t[first] - BIN_S / 2)


@dataclass(frozen=True)
class Verdict:
    """One cause function's answer."""

    cause: str | None
    """The cause it names, or None: not decided here."""
    reason: str = ""
    """Why, in words for the operator."""
    evidence: dict[str, Any] = field(default_factory=dict)
    """What it measured, kept with the alarm whatever the verdict."""
    missing: tuple[tuple[str, str], ...] = ()
    """Evidence it lacked to judge: ``(key, sentence)`` pairs (keys in :data:`MISSING_KEYS`)."""


MISSING_KEYS = ("history", "partner", "partner-step", "rate", "witness", "trend")
"""What a cause can find missing: too little history, the other pyrometer not reading, nor across a step, a steady
rate (nothing to fit a lag against), no second instrument to witness a drift, too short a span for a trend."""


# -- measures ---------------------------------------------------------------------------------
def _line(x: np.ndarray, y: np.ndarray) -> tuple[float, float, float]:
    """Least-squares slope, intercept and R² of ``y`` against ``x`` (closed form: cheaper than ``numpy.polyfit``)."""
    n = x.size
    xm, ym = float(x.sum()) / n, float(y.sum()) / n
    dx, dy = x - xm, y - ym
    sxx = float(dx @ dx)
    syy = float(dy @ dy)
    if sxx <= 0.0:
        return math.nan, float(ym), math.nan
    sxy = float(dx @ dy)
    b = sxy / sxx
    r2 = sxy * sxy / (sxx * syy) if syy > 0 else 0.0  # 1 - SS_res/SS_tot for a least-squares line
    return b, ym - b * xm, r2


def trend_per_h(t: np.ndarray, y: np.ndarray, th: CauseThresholds = THRESHOLDS) -> tuple[float, float]:
    """The slope of a straight line through ``y`` against ``t``, per hour, and its R² (NaN with too few points)."""
    ok = np.isfinite(y)
    if ok.sum() < th.trend_min_means:
        return math.nan, math.nan
    tt = t[ok]
    if tt[-1] - tt[0] < th.trend_min_span_s:
        return math.nan, math.nan
    b, _, r2 = _line(tt - tt[0], y[ok])
    return b * 3600.0, r2


def _blocks(t: np.ndarray, ys: list[np.ndarray | None], t0: float, width: float, n: int) -> np.ndarray:
    """Means of each of ``ys`` over ``n`` blocks of ``width`` seconds from ``t0``: one row per series, NaN where a block
    has no value (one ``bincount`` for all of them: this runs once a minute per open alarm)."""
    rows = len(ys)
    y = np.full((rows, t.size), np.nan)
    for r, v in enumerate(ys):
        if v is not None:
            y[r] = v
    idx = np.clip(((t - t0) // width).astype(np.int64), 0, n - 1) + (np.arange(rows) * n)[:, None]
    ok = np.isfinite(y)
    sums = np.bincount(idx[ok], weights=y[ok], minlength=rows * n)
    counts = np.bincount(idx[ok], minlength=rows * n)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(counts > 0, sums / counts, np.nan).reshape(rows, n)


def _ends(f: np.ndarray, e: int) -> float:
    """Mean of the last ``e`` of the finite block means ``f`` less the mean of the first ``e``."""
    if f.size < 2 * e:
        return math.nan
    return float(f[-e:].sum() - f[:e].sum()) / e


@dataclass(frozen=True)
class Step:
    """The largest change of a divergence within ``step_within_s``, and what the others did across it."""

    k: float = math.nan
    """The change, K."""
    fraction: float = math.nan
    """Its size as a fraction of the window's total change."""
    t: float = math.nan
    """When it happened (the boundary of the steepest block inside it), UTC seconds."""
    rate_change_c_per_h: float = math.nan
    partner_k: float = math.nan
    """The other pyrometer's change across the step, K."""
    pair_k: float = math.nan
    partner_after_only: bool = False
    """The other pyrometer read only after the step: ``partner_k`` is its divergence after the step less this
    pyrometer's before it (both are taken to have agreed with the reference before)."""


def find_step(s: Signals, th: CauseThresholds = THRESHOLDS) -> Step:
    """The divergence's largest change between smoothed means ``step_within_s`` apart, and the others' across it."""
    d = s.divergence
    if d is None or np.count_nonzero(np.isfinite(d)) < th.step_min_means:
        return Step()
    width = th.step_mean_s
    end = s.window_end
    n = math.ceil(th.window_s / width)
    t0 = end - n * width
    blocks = _blocks(s.t, [d, s.rate, s.partner_divergence, s.pair], t0, width, n)
    ym = blocks[0]
    finite = ym[np.isfinite(ym)]
    if finite.size < th.step_min_blocks:
        return Step()
    lag = max(1, round(th.step_within_s / width))
    if n <= lag:
        return Step()
    steps = ym[lag:] - ym[:-lag]
    size = np.nan_to_num(np.abs(steps), nan=-1.0)
    j = int(size.argmax())
    if size[j] < 0:
        return Step()
    biggest = float(steps[j])
    jumps = np.nan_to_num(np.abs(np.diff(ym[j : j + lag + 1])), nan=-1.0)
    k = j + int(jumps.argmax()) if jumps.max() >= 0 else j + lag // 2
    total = _ends(finite, th.step_end_blocks)
    frac = abs(biggest) / max(abs(total), 1e-9) if math.isfinite(total) else math.nan  # 1e-9: a flat window

    rate_k, partner_k, pair_k = (float(v) for v in blocks[1:, j + lag] - blocks[1:, j])
    after_only = False
    if not math.isfinite(partner_k) and s.partner_divergence is not None:
        # the other pyrometer came into range after the step: its divergence then, against this one's before
        after = blocks[2, j + lag :]
        after = after[np.isfinite(after)]
        if after.size and math.isfinite(float(ym[j])):
            partner_k, after_only = float(after[0] - ym[j]), True
    return Step(biggest, frac, t0 + (k + 1) * width, rate_k, partner_k, pair_k, after_only)


@dataclass(frozen=True)
class Measures:
    """Trends and the step of the divergence and its comparisons, shared by the causes after lag."""

    trend_k_per_h: float
    trend_r2: float
    step: Step
    rate_r2: float = math.nan
    """R² of the divergence against the rate (NaN when the rate held too steady to fit)."""
    partner_trend_k_per_h: float = math.nan
    pair_trend_k_per_h: float = math.nan
    evidence: dict[str, Any] = field(default_factory=dict)

    @property
    def step_k(self) -> float:
        return self.step.k

    @property
    def step_fraction(self) -> float:
        return self.step.fraction

    @property
    def partner_step_k(self) -> float:
        return self.step.partner_k

    def steady(self, th: CauseThresholds = THRESHOLDS) -> bool:
        """A slow, steady departure: a straight line in time explains the divergence, better than the rate does."""
        if not (math.isfinite(self.trend_r2) and self.trend_r2 > th.trend_min_r2):
            return False
        return not (math.isfinite(self.rate_r2) and self.rate_r2 >= self.trend_r2)

    def evidence_of(self, *keys: str) -> dict[str, Any]:
        """The stored evidence under ``keys`` (those measured)."""
        return {k: self.evidence[k] for k in keys if k in self.evidence}

    def stepped(self, th: CauseThresholds = THRESHOLDS) -> bool:
        """Most of the window's change came in one step, larger than ``step_min_k``."""
        st = self.step
        return math.isfinite(st.fraction) and st.fraction > th.step_min_fraction and abs(st.k) > th.step_min_k


def measure(s: Signals, th: CauseThresholds = THRESHOLDS, lag: Verdict | None = None) -> Measures:
    """The divergence's trend and largest step, the partner pyrometer's trend, and the thermocouple pair's trend.

    ``lag``, the lag verdict on the same signals, lends its fit's R² (else it is fitted here).
    """
    assert s.divergence is not None
    trend, r2 = trend_per_h(s.t, s.divergence, th)
    step = find_step(s, th)
    ev: dict[str, Any] = {"trend_k_per_h": evidence_number(trend), "trend_r2": evidence_number(r2),
                          "largest_10min_change_k": evidence_number(step.k), "step_fraction": evidence_number(step.fraction),
                          "step_t": evidence_number(step.t), "rate_change_at_step_c_per_h": evidence_number(step.rate_change_c_per_h)}
    partner_trend = math.nan
    if s.partner is not None:
        if s.partner_divergence is not None:
            partner_trend = trend_per_h(s.t, s.partner_divergence, th)[0]
        ev.update({"partner": s.partner, "partner_trend_k_per_h": evidence_number(partner_trend),
                   "partner_10min_change_k": evidence_number(step.partner_k)})
    pair_trend = math.nan
    if s.pair is not None:
        pair_trend = trend_per_h(s.t, s.pair, th)[0]
        ev.update({"thermocouple_pair": f"{s.reference}-{s.other}", "pair_trend_k_per_h": evidence_number(pair_trend),
                   "pair_10min_change_k": evidence_number(step.pair_k)})
    rate_r2 = math.nan
    if lag is not None:
        if "lag_r2" in lag.evidence and lag.evidence["lag_r2"] is not None:
            rate_r2 = float(lag.evidence["lag_r2"])
    elif s.rate is not None:
        ok = np.isfinite(s.divergence) & np.isfinite(s.rate)
        if ok.sum() >= th.min_means and np.ptp(s.rate[ok]) > th.lag_min_rate_spread_c_per_h:
            rate_r2 = _line(s.rate[ok], s.divergence[ok])[2]
    return Measures(trend, r2, step, rate_r2, partner_trend, pair_trend, ev)


def _partner_missing(s: Signals) -> tuple[str, str]:
    """Why the other pyrometer says nothing, in words."""
    lo = s.partner_range_c[0]
    where = ""
    if math.isfinite(lo):
        where = f" (it reads from {lo:g} °C"
        ref = s.reference_c
        if ref is not None and np.isfinite(ref).any():
            where += f"; {s.reference} is at {float(ref[np.isfinite(ref)][-1]):.0f} °C"
        where += ")"
    return ("partner", f"{s.partner} has not read in range in the last {_window_words(s)}{where}")


def _window_words(s: Signals) -> str:
    """The span the window's values cover, in minutes."""
    span = THRESHOLDS.window_s if not s.t.size else max(BIN_S, s.window_end - float(s.t[0]) + BIN_S / 2)
    return f"{span / 60.0:.0f} minutes"


def _span_words(seconds: float) -> str:
    return "ten minutes" if seconds == 600.0 else f"{seconds / 60.0:g} minutes"


def _same_way(a: float, b: float, fraction: float) -> bool:
    """``b`` goes the way ``a`` does, by at least ``fraction`` of it."""
    return math.isfinite(a) and math.isfinite(b) and np.sign(a) == np.sign(b) and abs(b) >= fraction * abs(a)


# -- the causes, in the order they are asked --------------------------------------------------
def thermocouple_lag(s: Signals, th: CauseThresholds = THRESHOLDS) -> Verdict:
    """The reference lags: the divergence tracks the rate of change, from the start of the ramp, and vanishes in holds.

    A thermocouple with time constant tau reads behind by about tau x rate
    during a ramp (first-order response, common practice), so divergence
    against rate is a straight line through the origin with slope tau. The
    line must explain the divergence (R²), its slope must be a plausible
    time constant for this thermocouple, the divergence must be there from
    the start of the ramp (the earlier half of the ramp implies about the
    lag the later half does) and gone in settled holds. A steady rate gives
    nothing to fit against: then lag is not named (the evidence says so).
    """
    ev: dict[str, Any] = {}
    d, rate = s.divergence, s.rate
    if d is None or rate is None:
        return Verdict(None, evidence=ev)
    ok = np.isfinite(d) & np.isfinite(rate)
    if ok.sum() < th.min_means:
        return Verdict(None, evidence=ev)
    x, y, tt = rate[ok], d[ok], s.t[ok]
    spread = float(x.max() - x.min())
    ev["rate_spread_c_per_h"] = evidence_number(spread)
    if spread <= th.lag_min_rate_spread_c_per_h:
        mean_rate = float(x.mean())
        # a lag could be behind it only if the divergence has the sign of the rate
        if abs(mean_rate) > th.lag_hold_rate_c_per_h and np.sign(y.mean()) == np.sign(mean_rate):
            words = f"the rate held at {mean_rate:+.0f} °C/h in the last {_window_words(s)}, so a lag cannot be fitted"
            return Verdict(None, evidence=ev, missing=(("rate", words),))
        return Verdict(None, evidence=ev)
    b, a, r2 = _line(x, y)
    lag_s = b * 3600.0
    ev.update({"lag_r2": evidence_number(r2), "lag_s": evidence_number(lag_s), "offset_k": evidence_number(a)})
    largest = float(np.abs(y).max())
    refused: list[str] = []
    if not r2 > th.lag_min_r2:
        refused.append(f"the rate explains too little of it (R² {r2:.2f})")
    if not th.lag_min_time_constants * s.time_constant_s <= lag_s <= th.lag_max_s or lag_s <= 0:
        refused.append(f"a lag of {lag_s:.0f} s is no time constant of {s.reference} (profile {s.time_constant_s:g} s)")
    if not abs(a) < th.lag_max_offset_fraction * largest:
        refused.append(f"it stays at {a:+.1f} K at rate 0")
    ramp = np.abs(x) >= th.lag_hold_rate_c_per_h
    pred = a + b * x
    if ramp.sum() >= 2 * th.lag_hold_min_means and lag_s > 0:
        # present from the start of the ramp: the earlier half implies the lag the later half does
        half = int(ramp.sum()) // 2
        rx, ry = x[ramp], y[ramp]
        early = float(ry[:half].sum() / rx[:half].sum() * 3600.0)
        late = float(ry[half:].sum() / rx[half:].sum() * 3600.0)
        resid = float(np.sqrt(np.mean((ry - pred[ramp]) ** 2)) / max(np.abs(pred[ramp]).mean(), 1e-9))
        ev.update({"early_lag_s": evidence_number(early), "late_lag_s": evidence_number(late),
                   "ramp_residual_fraction": evidence_number(resid)})
        if not early >= th.lag_early_fraction * late:
            refused.append(f"it was not there from the start of the ramp ({early:.0f} s of lag early, {late:.0f} s late)")
        if not resid < th.lag_max_residual_fraction:
            refused.append("it does not follow the rate within the ramp")
    if lag_s > 0:
        # vanishing in holds, once the sensor has had time to catch up
        last_ramp = np.maximum.accumulate(np.where(ramp, tt, -np.inf))
        settled = ~ramp & (tt - last_ramp > th.lag_hold_settle_lags * lag_s)
        if settled.sum() >= th.lag_hold_min_means:
            hold_k = float(np.abs(y[settled]).mean())
            ev["hold_k"] = evidence_number(hold_k)
            if not hold_k < th.lag_hold_max_fraction * largest:
                refused.append(f"it stays at {hold_k:.1f} K in the hold")
    if refused:
        ev["lag_refused"] = "; ".join(refused)
        return Verdict(None, evidence=ev)
    return Verdict("thermocouple-lag", f"the divergence follows the rate of change (R² {r2:.2f}, a lag of {lag_s:.0f} s "
                   f"against {s.time_constant_s:g} s in the profile) from the start of the ramp and vanishes at rate 0", ev)


def emissivity_change(s: Signals, m: Measures, th: CauseThresholds = THRESHOLDS) -> Verdict:
    """The ware's emissivity changed: the divergence stepped, not with the rate, and the other pyrometer moved differently.

    A gray change of emissivity moves a single-band instrument and leaves a
    ratio one nearly alone; a change of the ratio of the emissivities in its
    two bands moves a ratio instrument several times more than a
    single-band one (DeWitt1988). Either way the two move differently; both
    moving alike points to the reference instead. The rate must hold across
    the step (a lag steps with the rate) and so must the thermocouples.
    """
    ev = m.evidence_of("largest_10min_change_k", "step_fraction", "step_t", "rate_change_at_step_c_per_h",
                       "partner_10min_change_k", "pair_10min_change_k")
    st = m.step
    if not (math.isfinite(st.fraction) and st.fraction > th.step_min_fraction and abs(st.k) > th.step_min_k):
        return Verdict(None, evidence=ev)
    if math.isfinite(st.rate_change_c_per_h) and abs(st.rate_change_c_per_h) > th.step_max_rate_change_c_per_h:
        return Verdict(None, evidence=ev)  # tied to the rate
    if math.isfinite(st.pair_k) and abs(st.pair_k) > th.step_pair_max_fraction * abs(st.k):
        return Verdict(None, evidence=ev)  # the thermocouples stepped against each other
    reason = f"a step of {st.k:+.1f} K within {_span_words(th.step_within_s)}"
    if math.isfinite(st.rate_change_c_per_h):
        reason += " while the rate held"
    if s.partner is not None:
        if not math.isfinite(st.partner_k):
            words = f"{s.partner} had no reading on both sides of the step, to tell a change of the ware from one of the reference"
            return Verdict(None, evidence=ev, missing=(("partner-step", words),))
        if abs(st.partner_k - st.k) < th.step_alike_fraction * abs(st.k):
            return Verdict(None, evidence=ev)  # both alike: the reference's doing, not the ware's
        if st.partner_after_only:
            reason += f" and {s.partner}, reading only after it, stands {st.partner_k:+.1f} K from where {s.pyrometer} stood before"
        else:
            reason += f" and {s.partner} moved {st.partner_k:+.1f} K"
    else:
        reason += " (no second pyrometer to compare)"
    return Verdict("emissivity-change", reason, ev)


def _witnesses(s: Signals, m: Measures, th: CauseThresholds) -> tuple[dict[str, float], list[str]]:
    """How fast the reference departs from each other instrument that reads (K/h, positive: the reference reads higher).

    Returns the departures by instrument name (this pyrometer first) and the
    names of those that could not be judged.
    """
    seen = {s.pyrometer: -m.trend_k_per_h}
    silent: list[str] = []
    if s.partner is not None:
        if math.isfinite(m.partner_trend_k_per_h):
            seen[s.partner] = -m.partner_trend_k_per_h
        else:
            silent.append(s.partner)
    if s.other is not None:
        if math.isfinite(m.pair_trend_k_per_h):
            seen[s.other] = m.pair_trend_k_per_h
        else:
            silent.append(s.other)
    return seen, silent


def reference_drift(s: Signals, m: Measures, th: CauseThresholds = THRESHOLDS) -> float:
    """The reference's drift that the other instruments see, K/h (0 when they see none; NaN with no witness).

    Where the other thermocouple and the other pyrometer both read and agree
    (within ``drift_witness_fraction``) their mean is taken; where they
    disagree, the thermocouples compared directly decide (a pyrometer's own
    trend over a short stretch is the noisier witness); one that reads alone
    is taken as it is.
    """
    seen, _ = _witnesses(s, m, th)
    pair = seen.get(s.other) if s.other is not None else None
    others = [v for k, v in seen.items() if k != s.pyrometer]
    if not others:
        return math.nan
    if not any(abs(v) > th.trend_min_k_per_h for v in others):
        return 0.0
    if len(others) == 2:
        a, b = others
        if _same_way(max(a, b, key=abs), min(a, b, key=abs), th.drift_witness_fraction):
            return (a + b) / 2.0
        assert pair is not None
        return pair if abs(pair) > th.trend_min_k_per_h else 0.0
    return others[0]


def thermocouple_drift(s: Signals, m: Measures, th: CauseThresholds = THRESHOLDS) -> Verdict:
    """The reference thermocouple drifts: it departs slowly, and alike, from this pyrometer and from every other instrument.

    Base-metal thermocouples drift in service (Webster2021). A drifting
    reference departs from both pyrometers and from the other thermocouple
    at the same rate; each that reads is a witness, and every witness must
    see it (at least ``drift_witness_fraction`` of this pyrometer's
    departure, the same way). With no witness, nothing tells a drift from a
    change at the pyrometer.
    """
    ev = m.evidence_of("trend_k_per_h", "trend_r2", "pair_trend_k_per_h", "partner_trend_k_per_h")
    own = -m.trend_k_per_h
    if not (math.isfinite(own) and abs(own) > th.trend_min_k_per_h):
        return Verdict(None, evidence=ev)
    if m.stepped(th) or not m.steady(th):
        return Verdict(None, evidence=ev)  # a step, or not slow and steady, or tied to the rate
    seen, silent = _witnesses(s, m, th)
    witnesses = {k: v for k, v in seen.items() if k != s.pyrometer}
    if not witnesses:
        what = " or ".join(silent) if silent else "second thermocouple or pyrometer"
        return Verdict(None, evidence=ev, missing=(("witness", f"no {what} reading to tell whether {s.reference} itself moved"),))
    if not all(_same_way(own, v, th.drift_witness_fraction) for v in witnesses.values()):
        return Verdict(None, evidence=ev)
    words = ", ".join(f"{k} ({v:+.1f} K/h)" for k, v in seen.items())
    return Verdict("thermocouple-drift", f"{s.reference} departs alike from {words}", ev)


def window_attenuation(s: Signals, m: Measures, th: CauseThresholds = THRESHOLDS) -> Verdict:
    """The sight path loses transmission: a single-band pyrometer reads ever lower, slowly and steadily, while the others hold.

    Deposits on a window cut the radiance a single-band instrument sees, so
    it reads low and lower; a ratio instrument, seeing a gray loss in both
    bands alike, holds (DeWitt1988), and so do the thermocouples. A drift of
    the reference that the other instruments agree on is taken out first,
    so that fouling and drift together are told apart.
    """
    ev = m.evidence_of("trend_k_per_h", "trend_r2", "partner_trend_k_per_h", "pair_trend_k_per_h")
    trend = m.trend_k_per_h
    if not (s.single_band and math.isfinite(trend) and trend < -th.trend_min_k_per_h):
        return Verdict(None, evidence=ev)
    if m.stepped(th) or not m.steady(th):
        return Verdict(None, evidence=ev)  # a step, or not a slow and steady fall, or tied to the rate
    if s.partner_is_ratio and not math.isfinite(m.partner_trend_k_per_h):
        if not s.partner_reads:
            return Verdict(None, evidence=ev, missing=(_partner_missing(s),))
        since = s.partner_since()
        read = f" for only {(s.window_end - since) / 60.0:.0f} minutes" if since is not None else " too little"
        words = f"{s.partner} has read in range{read} (a trend takes {th.trend_min_span_s / 60.0:.0f})"
        return Verdict(None, evidence=ev, missing=(("partner", words),))
    drift = reference_drift(s, m, th)
    if not math.isfinite(drift):
        return Verdict(None, evidence=ev, missing=(("witness", "no second pyrometer or thermocouple to compare with"),))
    own = trend + drift  # this pyrometer's own fall, the reference's drift taken out
    ev["drift_k_per_h"] = evidence_number(drift)
    ev["own_fall_k_per_h"] = evidence_number(own)
    if not own < -th.trend_min_k_per_h or abs(drift) > abs(own):
        return Verdict(None, evidence=ev)
    taken = f" after taking out {s.reference}'s drift of {drift:+.1f} K/h" if drift != 0.0 else ""
    if s.partner is not None and math.isfinite(m.partner_trend_k_per_h):
        partner_own = m.partner_trend_k_per_h + drift
        if abs(partner_own) < th.window_partner_max_fraction * abs(own):
            return Verdict("window-attenuation", f"{s.pyrometer} reads ever lower ({own:+.1f} K/h{taken}) while {s.partner} "
                           f"holds ({partner_own:+.1f} K/h)", ev)
        return Verdict(None, evidence=ev)
    if math.isfinite(m.pair_trend_k_per_h):
        return Verdict("window-attenuation", f"{s.pyrometer} reads ever lower ({own:+.1f} K/h{taken}) while the "
                       "thermocouples agree", ev)
    return Verdict(None, evidence=ev)


@dataclass(frozen=True)
class Judgement:
    """What :func:`judge` found: the cause, its evidence, and the measures on the way (for :func:`refuted`)."""

    cause: str
    evidence: dict[str, Any]
    lag: Verdict | None = None
    measures: Measures | None = None


def likely_cause(s: Signals, th: CauseThresholds = THRESHOLDS) -> tuple[str, dict[str, Any]]:
    """The likely cause of a divergence and its evidence (a JSON-ready dict ending with ``reason``).

    The causes are asked in order and the first to decide wins; ``unknown``
    names the evidence that was missing (a sentence in ``reason``, the keys
    in ``missing``), or says what was seen that fits no signature.

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
        ``window_s``, every measure taken on the way, ``missing`` (the keys of
        the evidence that was lacking, for ``unknown``) and ``reason``.
    """
    j = judge(s, th)
    return j.cause, j.evidence


def judge(s: Signals, th: CauseThresholds = THRESHOLDS) -> Judgement:
    """:func:`likely_cause` with the measures it took (see there)."""
    ev: dict[str, Any] = {"window_s": th.window_s}
    n = 0 if s.divergence is None else int(np.isfinite(s.divergence).sum())
    if n < th.min_means:
        return Judgement("unknown", ev | {"missing": ["history"], "reason": f"the evidence does not decide: only "
                         f"{n * BIN_S / 60.0:.1f} minutes of divergence history (it takes {th.min_means * BIN_S / 60.0:.0f})"})
    missing: list[tuple[str, str]] = []
    lag = thermocouple_lag(s, th)
    ev.update(lag.evidence)
    missing += lag.missing
    if lag.cause is not None:
        ev["reason"] = lag.reason
        return Judgement(lag.cause, ev, lag)
    m = measure(s, th, lag)
    ev.update(m.evidence)
    if s.partner is not None and not s.partner_reads:
        missing.append(_partner_missing(s))
    for judge in (emissivity_change, thermocouple_drift, window_attenuation):
        verdict = judge(s, m, th)
        ev.update(verdict.evidence)
        missing += verdict.missing
        if verdict.cause is not None:
            ev["reason"] = verdict.reason
            return Judgement(verdict.cause, ev, lag, m)
    if not math.isfinite(m.trend_k_per_h):
        words = f"the divergence has too short a stretch of values for a trend (it takes {th.trend_min_span_s / 60.0:.0f} minutes)"
        missing.append(("trend", words))
    keys = list(dict.fromkeys(k for k, _ in missing))
    sentences = list(dict.fromkeys(w for _, w in missing))
    if sentences:
        ev["missing"] = keys
        ev["reason"] = "the evidence does not decide: " + "; ".join(sentences)
    else:
        ev["missing"] = []
        ev["reason"] = ("no signature fits: " + (ev.get("lag_refused") or "the rate does not explain it")
                        + f"; no step (largest ten-minute change {m.step_k:+.1f} K); trend {m.trend_k_per_h:+.1f} K/h")
    return Judgement("unknown", ev, lag, m)


def refuted(cause: str, j: Judgement, s: Signals, th: CauseThresholds = THRESHOLDS) -> str | None:
    """Why the evidence now contradicts ``cause``, in words, or None when it does not.

    A decided cause stays until the evidence contradicts it: a cause that
    merely cannot be judged any more (the step has left the window, the
    rate holds steady) is not contradicted. ``unknown`` is never
    contradicted (any decided cause replaces it). A divergence that the
    rate explains (lag decided) contradicts every other cause.
    """
    if cause == "unknown" or cause == j.cause:
        return None
    if j.cause == "thermocouple-lag":
        return "the divergence came to follow the rate"
    m = j.measures if j.measures is not None else (measure(s, th) if s.divergence is not None else None)
    if m is None:
        return None
    st = m.step
    stepped = m.stepped(th)
    held = stepped and math.isfinite(st.rate_change_c_per_h) and abs(st.rate_change_c_per_h) <= th.step_max_rate_change_c_per_h
    with_rate = math.isfinite(m.rate_r2) and math.isfinite(m.trend_r2) and m.rate_r2 >= m.trend_r2
    if cause == "thermocouple-lag":
        refused = j.lag.evidence.get("lag_refused") if j.lag is not None else None
        if refused:
            return f"the divergence stopped following the rate ({refused})"
        if held:
            return f"a step of {st.k:+.1f} K came while the rate held"
        return None
    if cause == "emissivity-change":
        if stepped and not held and math.isfinite(st.rate_change_c_per_h):
            return "its step came with a change of the rate"
        if stepped and math.isfinite(st.partner_k) and abs(st.partner_k - st.k) < th.step_alike_fraction * abs(st.k):
            return f"{s.partner} stepped alike"
        return None
    if held and j.cause == "emissivity-change":
        return f"a step of {st.k:+.1f} K came while the rate held"
    if cause == "thermocouple-drift":
        if with_rate:
            return "the departure turned out to follow the rate"
        own = -m.trend_k_per_h
        seen, _ = _witnesses(s, m, th)
        quiet = [k for k, v in seen.items() if k != s.pyrometer and abs(v) < th.trend_min_k_per_h]
        if math.isfinite(own) and abs(own) > th.trend_min_k_per_h and m.steady(th) and quiet:
            return f"{' and '.join(quiet)} saw {s.reference} hold"
        return None
    if cause == "window-attenuation":
        if with_rate:
            return "the fall turned out to follow the rate"
        if math.isfinite(m.trend_k_per_h) and m.trend_k_per_h > th.trend_min_k_per_h and m.steady(th):
            return "the divergence turned to rise"
        drift = reference_drift(s, m, th)
        if not math.isfinite(drift):
            drift = 0.0
        if (s.partner_is_ratio and math.isfinite(m.partner_trend_k_per_h) and m.steady(th)
                and _same_way(m.trend_k_per_h + drift, m.partner_trend_k_per_h + drift, th.window_partner_max_fraction)
                and abs(m.trend_k_per_h + drift) > th.trend_min_k_per_h):
            return f"{s.partner} fell alike"
        return None
    return None


# -- a cause that changed: what the log keeps and what the screens say --------------------------
def because_words(old_cause: str, old_evidence: dict[str, Any] | None, s: Signals, new_cause: str,
                  raised_t: float | None = None) -> tuple[str, float | None]:
    """What turned ``unknown`` into ``new_cause``, in words, and when (None: at the re-evaluation itself).

    The earlier verdict's missing evidence names what was awaited; the
    first of those that the new signals hold is the answer: ``py2 came into
    range`` at the start of its run of values (when that run began after
    the alarm was raised), else ``py2 had read in range long enough``.
    """
    relevant = {"thermocouple-lag": ("history", "rate"), "emissivity-change": ("history", "partner", "partner-step"),
                "thermocouple-drift": ("history", "partner", "witness", "trend"),
                "window-attenuation": ("history", "partner", "witness", "trend")}.get(new_cause, MISSING_KEYS)
    missing = [k for k in (old_evidence or {}).get("missing") or [] if k in relevant]
    uses_partner = new_cause in ("emissivity-change", "thermocouple-drift", "window-attenuation")
    partner_news = uses_partner and s.partner_reads and ("partner" in missing or "partner-step" in missing or not missing)
    if partner_news and s.partner is not None:
        since = s.partner_since()
        if since is not None and (raised_t is None or since >= raised_t):
            return f"{s.partner} came into range", since
        if "partner" in missing or "partner-step" in missing:
            return f"{s.partner} had read in range long enough", None
    for key in missing:
        if key == "history":
            return "enough history had gathered", None
        if key == "rate":
            return "the rate changed", None
        if key in ("witness", "trend"):
            return "the other instruments could be compared", None
    if old_cause == "unknown":
        return "the evidence decided", None
    return "the evidence changed", None


@dataclass(frozen=True)
class CauseStep:
    """One change of an alarm's likely cause, as logged (``alarm_state`` row with state ``cause-changed``)."""

    t: float
    """When the change was logged, UTC seconds."""
    was: str
    """The cause before."""
    cause: str
    """The cause after."""
    because: str = ""
    """What changed it, in words."""
    because_t: float | None = None
    """When that happened, UTC seconds (None: at ``t``)."""
    reason: str = ""
    """The new cause's reason."""
    was_reason: str = ""
    """The earlier cause's reason."""
    evidence: dict[str, Any] | None = None
    was_evidence: dict[str, Any] | None = None

    @property
    def when(self) -> float:
        return self.t if self.because_t is None else self.because_t

    def detail(self) -> str:
        """The ``alarm_state.detail`` text: JSON (docs/log-format.md)."""
        return json.dumps({"was": self.was, "cause": self.cause, "because": self.because, "because_t": self.because_t,
                           "reason": self.reason, "evidence": self.evidence, "was_evidence": self.was_evidence})

    @classmethod
    def from_detail(cls, t: float, detail: str) -> CauseStep | None:
        """Read a logged change back (None when the text is not one)."""
        try:
            d = json.loads(detail)
        except (TypeError, ValueError):
            return None
        if not isinstance(d, dict) or "cause" not in d or "was" not in d:
            return None
        ev, was_ev = d.get("evidence"), d.get("was_evidence")
        bt = d.get("because_t")
        return cls(float(t), str(d["was"]), str(d["cause"]), str(d.get("because") or ""),
                   float(bt) if isinstance(bt, (int, float)) else None, str((ev or {}).get("reason", "")) if isinstance(ev, dict) else "",
                   str((was_ev or {}).get("reason", "")) if isinstance(was_ev, dict) else "",
                   ev if isinstance(ev, dict) else None, was_ev if isinstance(was_ev, dict) else None)

    def words(self, clock: Callable[[float], str]) -> str:
        """``unknown until py2 came into range at 11:42``."""
        return f"{self.was} until {self.because + ' at ' if self.because else ''}{clock(self.when)}"


def cause_steps(states: list[dict[str, Any]] | list[tuple[float, str, str]]) -> list[CauseStep]:
    """The cause changes among an alarm's logged states (dicts with ``t``, ``state``, ``detail``, or tuples), oldest first."""
    out: list[CauseStep] = []
    for s in states:
        t, state, detail = (s["t"], s["state"], s["detail"]) if isinstance(s, dict) else s
        if state == "cause-changed":
            step = CauseStep.from_detail(float(t), detail)
            if step is not None:
                out.append(step)
    return sorted(out, key=lambda c: c.t)


def earlier_causes(raised_t: float, steps: list[CauseStep], start: float | None) -> list[dict[str, Any]]:
    """An alarm's earlier causes, oldest first, as ``inspect --json`` and ``replay --headless --json`` give them.

    Each holds the ``cause``, the seconds since the firing's ``start`` it held
    from (``since_s``) and until (``until_s``), what ended it (``because``,
    ``because_s``: when that happened), its ``reason`` and ``evidence``.
    """
    def rel(t: float | None) -> float | None:
        return None if t is None or start is None else round(t - start, 3)

    out: list[dict[str, Any]] = []
    since = raised_t
    for step in steps:
        out.append({"cause": step.was, "since_s": rel(since), "until_s": rel(step.t), "because": step.because,
                    "because_s": rel(step.when), "reason": step.was_reason, "evidence": step.was_evidence})
        since = step.t
    return out


def cause_label(cause: str | None, steps: list[CauseStep]) -> str:
    """The cause for a narrow column: ``window-attenuation (was unknown)``."""
    if not cause:
        return ""
    return f"{cause} (was {steps[-1].was})" if steps else cause


def cause_story(cause: str | None, steps: list[CauseStep], clock: Callable[[float], str]) -> str:
    """The cause and how it came to be: ``window-attenuation, was unknown until py2 came into range at 11:42``.

    ``clock`` turns a UTC time into the words the screen uses for it.
    """
    if not cause:
        return ""
    if not steps:
        return cause
    return f"{cause}, was " + ", before that ".join(step.words(clock) for step in reversed(steps))
