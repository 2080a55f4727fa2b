"""Setting a pyrometer from thermocouple references: the instrument setting, and the ware's emissivity.

Two questions, two answers:

* **The instrument setting** answers the operator's question: which
  emissivity, dialled into the instrument with its transmission setting
  left as it is, makes it read what the reference thermocouple reads? The
  instrument shows T_ind with e_set t_set S(T_ind) = S_meas; with a setting
  e' it would show T' with e' t_set S(T') = S_meas, so T' = T_ref needs

      e' = e_set S(T_ind) / S(T_ref)

  reading by reading, with S the band signal of the instrument's own band
  (:mod:`firewatch.physics.bands`; [DeWitt1988]_ measurement equation).
  No fit is needed and it always has an answer where a valid stretch
  exists, whatever the kiln: in a closed kiln it absorbs the window, the
  reflections and the ware's emissivity together. Where the firing holds
  at its top temperature the setting is the one for that hold (where the
  instrument matters most); the values at the other stretches are listed
  beside it, so that a drift with temperature shows.
* **The ware's emissivity** answers the physicist's: the emissivity of the
  ware itself, separated from the window and the reflected background by
  the measurement equation. It is a robust least-squares fit
  (:func:`scipy.optimize.least_squares`, soft-L1 loss) of the reconciled
  pyrometer against the reference, with the emissivity constant or linear
  in temperature, and optionally a gray transmission factor. It can only
  be found where the background differs from the ware: in a closed kiln
  the walls are at the ware's temperature and hide it (the cavity effect),
  and then :class:`EmissivityHidden` says why in one sentence.

Only stretches where the comparison is valid are used: the reference
thermocouple healthy and in range, its rate of change slow enough that its
lag (time constant x rate) stays under ``max_lag_c``, the pyrometer in its
range, and no sensor-fault alarm active. Each rejected stretch is kept with
its reason. When no stretch is usable (a failed reference, no hold or slow
ramp, too few points) :class:`TuneError` says which, and there is no
answer at all.

Uncertainty. Readings a second apart are far from independent, so both
answers count ten-minute blocks rather than readings, and both add the
reference thermocouple's own tolerance and the lag allowed in the
stretches used as common-mode rectangular bounds ([GUM2008]_ 4.3.7), since
no answer can be surer than its reference. The 95 % intervals are +/- 1.96
combined standard uncertainties.

References
----------
See ``DeWitt1988`` and ``GUM2008`` in docs/references.md.
"""

from __future__ import annotations

import functools
import math
import warnings
from dataclasses import dataclass, field
from typing import Any, Protocol

import numpy as np
from scipy.optimize import least_squares

from firewatch.firing.rates import TrailingSlope
from firewatch.physics._warnings import FirewatchWarning
from firewatch.physics.bands import Band
from firewatch.physics.corrections import correct_single_band
from firewatch.physics.tolerances import tolerance_uncertainty
from firewatch.physics.windows import Window
from firewatch.settings.profile import Pyrometer, SiteProfile, Thermocouple
from firewatch.transport.records import Status

__all__ = [
    "TuneError", "EmissivityHidden", "TuneData", "FitResult", "InstrumentSetting", "TuneResult",
    "load_data", "fit", "instrument_setting", "tune", "reconcile_with", "interval_text",
]

BLOCK_S = 600.0
MIN_POINTS = 300
MIN_BLOCKS = 3
MAX_CI_WIDTH = 0.2
"""Widest 95 % interval of the ware's emissivity still worth reporting."""
HOLD_RATE_C_PER_H = 10.0
"""A stretch whose reference changes slower than this (median |rate|) is a hold."""
TOP_HOLD_BAND_C = 15.0
"""A hold within this of the firing's highest reference temperature is the hold at the top."""
RAMP_PIECE_C = 100.0
"""A slow ramp is listed in pieces spanning at most this much of the reference's temperature."""
READ_WINDOW_S = 6 * 3600.0
"""The log is read this much of the firing at a time (issue 15), so that what tuning holds is what it keeps: at
1 Hz a window's read holds a few MB for a moment; shorter windows mean more queries for the same rows."""
FIT_POINTS = 10_000
"""The ware's fit uses at most this many valid readings, evenly spaced (neighbours a second apart add nothing
independent; the interval counts ten-minute blocks either way)."""
CAVITY_BAND_C = 50.0
"""A background within this of the reference (median, valid stretches) hides the ware's emissivity."""


class SeriesLike(Protocol):
    """One channel over the firing: times (s), values and statuses as equal-length arrays."""

    t: np.ndarray
    value: np.ndarray
    status: np.ndarray


class FiringSource(Protocol):
    """What tuning reads from a firing: a firing log's reader satisfies it (the model does not import the store)."""

    def series(self, channel: str, start_t: float | None = None, end_t: float | None = None) -> SeriesLike:
        """One channel's readings, all of them or those from ``start_t`` to ``end_t`` (inclusive)."""

    def alarms(self) -> list[dict[str, Any]]: ...

    def firing(self) -> dict[str, Any]:
        """The firing's record: ``started_t`` and ``ended_t`` (s) place the windows the log is read in."""


class TuneError(Exception):
    """No stretch of the firing is usable; the message says which condition failed."""


class EmissivityHidden(TuneError):
    """The firing is usable but cannot separate the ware's emissivity; the message is one sentence saying why."""


@dataclass
class TuneData:
    """What both answers work on, for one pyrometer and its reference, over the span where the pyrometer read.

    ``t``, ``indicated``, ``ref``, ``background``, ``valid`` and ``rate`` are aligned arrays, one element per
    reading set; ``start_t`` is the firing's first reading (times in ``windows`` are counted from it).
    """

    py: Pyrometer
    reference: str
    t: np.ndarray
    indicated: np.ndarray
    ref: np.ndarray
    background: np.ndarray | None
    valid: np.ndarray
    windows: list[dict[str, Any]]
    band: Band
    u_ref: float
    start_t: float
    u_lag: float = 0.0
    rate: np.ndarray | None = None
    """The reference's rate of change, degC/h."""
    tc: Thermocouple | None = None
    """The reference thermocouple (its type and tolerance class give the common-mode uncertainty)."""


@dataclass
class FitResult:
    """The ware's emissivity (constant, or linear in temperature) and optionally a transmission factor, fitted."""

    emissivity: float
    ci95: tuple[float, float]
    model: str
    slope_per_100c: float | None = None
    transmission: float | None = None
    transmission_ci95: tuple[float, float] | None = None
    points_used: int = 0
    blocks: int = 0
    windows: list[dict[str, Any]] = field(default_factory=list)
    residual_c: dict[str, float] = field(default_factory=dict)
    model_fits: bool = True
    note: str = ""
    residuals: tuple[np.ndarray, np.ndarray] | None = None
    emissivity_held: bool = False
    """The emissivity was held at the profile's value (hidden) while the transmission was fitted."""


@dataclass
class InstrumentSetting:
    """The emissivity to dial into the instrument so that it reads the reference."""

    emissivity: float
    ci95: tuple[float, float]
    basis: str
    """Where it comes from: "the hold at 1200 °C (9.97 h to 10.97 h), the firing's top" or "all valid stretches (...)"."""
    points: int
    by_stretch: list[dict[str, Any]] = field(default_factory=list)
    """One entry per valid stretch: start_s, end_s, ref_c, hold, emissivity, ci95, points (and basis: True on the one used)."""
    note: str = ""


@dataclass
class TuneResult:
    """Both answers: the instrument setting always; the ware's emissivity, or why it is hidden."""

    instrument: InstrumentSetting
    ware: FitResult | None
    hidden_reason: str | None
    data: TuneData


def _runs(mask: np.ndarray) -> list[tuple[int, int]]:
    """Start and end (exclusive) of each run of True."""
    if mask.size == 0:
        return []
    d = np.diff(np.concatenate([[0], mask.astype(np.int8), [0]]))
    return list(zip(np.flatnonzero(d == 1), np.flatnonzero(d == -1)))


def load_data(reader: FiringSource, site: SiteProfile, channel: str | None = None, reference: str | None = None,
              max_rate_c_per_h: float = 90.0, max_lag_c: float = 1.5, window_s: float = READ_WINDOW_S) -> TuneData:
    """Read what a fit needs and mark the valid stretches, each used or rejected with its reason.

    The log is read ``window_s`` of firing at a time (issue 15), in two passes: the pyrometer alone, to find
    the span where it read, then the pyrometer, its reference and its background over that span, aligned and
    judged window by window. Only the aligned values over that span are kept, so memory follows the span
    where the pyrometer read, not the length of the log. The answer is the one a single read of each whole
    series gives (``window_s=math.inf`` reads that way): readings are matched by time, which a window
    boundary does not split, and the reference's rate is the recorder's trailing slope carried across
    windows (its cumulative sums, over a window rather than the whole span, round differently: by a few
    micro-kelvin per hour on a 17 h firing).
    """
    singles = [p for p in site.pyrometers if p.kind == "single"]
    py = site.pyrometer(channel) if channel else (singles[0] if singles else None)
    if py is None:
        raise TuneError(f"no single-band pyrometer {channel!r} in the site profile" if channel else "the site has no single-band pyrometer to tune")
    if py.kind != "single":
        raise TuneError(f"{py.name} is a ratio pyrometer; tuning fits a single-band instrument's emissivity")
    ref_name = reference or py.reference or (site.reference.name if site.reference else None)
    tc = site.thermocouple(ref_name) if ref_name else None
    if tc is None:
        raise TuneError(f"no reference thermocouple {ref_name!r} in the site profile")
    band = _band(py.band_file, tuple(py.band_um))
    # build the band's inversion tables (the window's folded in) before reading the log: building one takes a
    # few tens of MB for a moment, and that moment should not come on top of what the reading holds (issue 15)
    for seen in (band, Window(py.window).through(band)) if py.window else (band,):
        seen.log_signal(np.array([1273.15]))
    firing = reader.firing()
    first, last = firing.get("started_t"), firing.get("ended_t")
    # pass 1: where the pyrometer read. The firing record's start and end only place the window edges; the first
    # and last windows are open-ended, so a reading outside them is still read.
    start: float | None = None
    first_ok = last_ok = last_t = math.nan
    counts: list[tuple[float | None, float | None, int]] = []
    for a, b, closed in _windows(None, None, first, last, window_s):
        t, v, s = _read(reader, py.name, a, b, closed)
        counts.append((a, b, t.size))
        if t.size == 0:
            continue
        if start is None:
            start = float(t[0])
        last_t = float(t[-1])
        ok = np.flatnonzero((s == Status.OK) & np.isfinite(v))
        if ok.size:
            first_ok = float(t[ok[0]]) if math.isnan(first_ok) else first_ok
            last_ok = float(t[ok[-1]])
    if start is None:
        raise TuneError(f"the log holds no readings of {py.name}")
    # Only while the pyrometer reads can a stretch be valid: read the other channels over that span alone
    # (with the rate's window before it), which on a long firing is a fraction of the log.
    if not math.isnan(first_ok):
        lo, hi = first_ok - site.alarms.rate_window_s, last_ok
    else:
        lo, hi = start, last_t
    # a pyrometer that never read leaves no stretch to keep: the reference is still read, for its own refusals
    keep = not math.isnan(first_ok)
    # at most this many aligned readings: the pyrometer's in the first pass's windows that meet the span
    room = sum(n for a, b, n in counts if (a is None or a <= hi) and (b is None or b >= lo)) if keep else 0
    buf = _Buffers(room, background=isinstance(py.background, (str, float)))
    faults = [(alarm["raised_t"], alarm["cleared_t"] if alarm["cleared_t"] is not None else math.inf)
              for alarm in reader.alarms() if alarm["kind"] == "sensor-fault" and alarm["channel"] in (py.name, tc.name)]
    # the reference's rate as the recorder computes it (the same trailing slope over the site's window),
    # from the readings already read rather than another series from the log
    slope = TrailingSlope(site.alarms.rate_window_s)
    any_ref = any_ok_ref = False
    # pass 2: the pyrometer, its reference and its background over the span, a window at a time
    for a, b, closed in _windows(lo, hi, lo, hi, window_s):
        ind_t, ind_v, ind_s = _read(reader, py.name, a, b, closed)
        ref_t, ref_v, ref_s = _read(reader, tc.name, a, b, closed)
        any_ref = any_ref or ref_t.size > 0
        pick_ind, pick_ref = _align(ind_t, ref_t)
        t = ind_t[pick_ind]
        n = t.size
        ind_value, ref_value = ind_v[pick_ind], ref_v[pick_ref]
        background: np.ndarray | None = None
        if isinstance(py.background, str):
            bg_t, bg_v, _ = _read(reader, py.background, a, b, closed)
            background = np.full(n, np.nan)
            at_bg, at_t = _align(bg_t, t)
            background[at_t] = bg_v[at_bg]
        elif isinstance(py.background, float):
            background = np.full(n, py.background)
        ok_ref = (ref_s[pick_ref] == Status.OK) & np.isfinite(ref_value)
        ok_py = (ind_s[pick_ind] == Status.OK) & np.isfinite(ind_value)
        rate = slope.update(t, np.where(ok_ref, ref_value, np.nan)) * 3600.0
        r = np.abs(np.nan_to_num(rate, nan=np.inf))
        slow = (r <= max_rate_c_per_h) & (tc.time_constant_s * r / 3600.0 <= max_lag_c)
        faulted = np.zeros(n, dtype=bool)
        for raised, cleared in faults:
            faulted |= (t >= raised) & (t <= cleared)
        any_ok_ref = any_ok_ref or bool(ok_ref.any())
        if keep:
            buf.add(t, ind_value, ref_value, background, rate, ok_py, ok_ref, slow, faulted)
    if not any_ref:
        raise TuneError(f"the log holds no readings of the reference thermocouple {tc.name} while {py.name} read")
    t, ind_value, ref_value, background, rate_c_per_h, ok_py, ok_ref, slow, faulted = buf.arrays()
    if not any_ok_ref:
        raise TuneError(f"the reference thermocouple {tc.name} gave no reading while {py.name} read, so no stretch is usable")
    valid = ok_ref & ok_py & slow & ~faulted
    for a_, b_ in _runs(valid):  # a stretch shorter than two minutes is noise at a threshold, not a hold
        if b_ - a_ < 120:
            valid[a_:b_] = False
    windows = _describe(t, start, ok_py, valid, ok_ref, faulted, tc.name, max_rate_c_per_h, max_lag_c)
    mean_ref = float(np.nanmean(ref_value[valid])) if valid.any() else 1000.0
    u_ref = float(tolerance_uncertainty(tc.type, mean_ref, tc.tolerance_class))
    if not math.isfinite(u_ref):
        u_ref = 0.0075 * abs(mean_ref) / math.sqrt(3.0)
    # during slow ramps the reference lags by its time constant x the rate, and the ware lags the walls by an
    # amount no profile states: keep that as a systematic uncertainty (a rectangular bound) rather than guess it
    lag = tc.time_constant_s * np.abs(np.nan_to_num(rate_c_per_h[valid])) / 3600.0
    u_lag = float(np.mean(lag)) / math.sqrt(3.0) if valid.any() else 0.0
    data = TuneData(py, tc.name, t, ind_value, ref_value, background, valid, windows, band, u_ref, start)
    data.u_lag = u_lag
    data.rate = rate_c_per_h
    data.tc = tc
    return data


def _describe(t: np.ndarray, start: float, ok_py: np.ndarray, valid: np.ndarray, ok_ref: np.ndarray, faulted: np.ndarray,
              tc_name: str, max_rate_c_per_h: float, max_lag_c: float) -> list[dict[str, Any]]:
    """Each stretch where the pyrometer read: used, or why not (times in seconds from ``start``)."""
    windows: list[dict[str, Any]] = []
    for a, b in _runs(ok_py):
        seg = slice(a, b)
        # split the pyrometer's stretch into its valid and invalid runs
        for c, d in _runs(valid[seg]):
            windows.append({"start_s": round(float(t[a + c]) - start, 1), "end_s": round(float(t[a + d - 1]) - start, 1),
                            "points": int(d - c), "used": True, "reason": "hold or slow ramp, thermocouple healthy"})
        for c, d in _runs(~valid[seg]):
            if d - c < 60:
                continue
            sub = slice(a + c, a + d)
            why = ("a sensor-fault alarm was active" if faulted[sub].mean() > 0.5 else
                   f"{tc_name} failed or out of range" if (~ok_ref[sub]).mean() > 0.5 else
                   f"ramping too fast (over {max_rate_c_per_h:g} °C/h, or lag over {max_lag_c:g} K)")
            windows.append({"start_s": round(float(t[a + c]) - start, 1), "end_s": round(float(t[a + d - 1]) - start, 1),
                            "points": int(d - c), "used": False, "reason": why})
    windows.sort(key=lambda w: w["start_s"])
    return windows


def _windows(lo: float | None, hi: float | None, first: float | None, last: float | None,
             window_s: float) -> list[tuple[float | None, float | None, bool]]:
    """Time windows ``(a, b, closed)`` from ``lo`` to ``hi`` (None: unbounded), with edges every ``window_s`` from ``first``.

    Each window holds ``a <= t < b``, except the last (``closed``), which holds ``t <= b``: every reading falls
    in exactly one window. Without ``first`` and ``last`` (a firing record that lacks them) or with an infinite
    ``window_s`` there is one window, the whole span.
    """
    if first is None or last is None or not (math.isfinite(window_s) and math.isfinite(first) and math.isfinite(last)):
        return [(lo, hi, True)]
    n = max(1, math.ceil((last - first) / window_s))
    edges: list[float | None] = [lo, *(first + k * window_s for k in range(1, n)), hi]
    return [(a, b, k == n - 1) for k, (a, b) in enumerate(zip(edges[:-1], edges[1:]))]


def _read(reader: FiringSource, channel: str, a: float | None, b: float | None,
          closed: bool) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """One window's readings of a channel (times, values, statuses); see :func:`_windows` for its ends."""
    s = reader.series(channel, a, b)
    if closed or b is None:
        return s.t, s.value, s.status
    keep = s.t < b  # the next window starts at b and holds a reading there
    return s.t[keep], s.value[keep], s.status[keep]


class _Buffers:
    """The aligned arrays over the span, filled window by window into room reserved once (no copies as they grow)."""

    def __init__(self, room: int, background: bool) -> None:
        self.n = 0
        self.f = np.empty((5 if background else 4, room))
        """Rows: times, indicated, reference, rate (degC/h), and the background where there is one."""
        self.flags = np.empty((4, room), dtype=bool)
        """Rows: pyrometer OK, reference OK, slow enough, no sensor fault active."""

    def add(self, t: np.ndarray, indicated: np.ndarray, ref: np.ndarray, background: np.ndarray | None, rate: np.ndarray,
            ok_py: np.ndarray, ok_ref: np.ndarray, slow: np.ndarray, faulted: np.ndarray) -> None:
        end = self.n + t.size
        if end > self.f.shape[1]:  # more than the first pass counted (a recorder still writing): grow
            more = max(end, 2 * self.f.shape[1])
            self.f = np.concatenate([self.f[:, :self.n], np.empty((self.f.shape[0], more - self.n))], axis=1)
            self.flags = np.concatenate([self.flags[:, :self.n], np.empty((4, more - self.n), dtype=bool)], axis=1)
        rows = [t, indicated, ref, rate] + ([background] if background is not None else [])
        for i, row in enumerate(rows):
            self.f[i, self.n:end] = row
        for i, row in enumerate((ok_py, ok_ref, slow, faulted)):
            self.flags[i, self.n:end] = row
        self.n = end

    def arrays(self) -> tuple[Any, ...]:
        """t, indicated, ref, background (or None), rate, ok_py, ok_ref, slow, faulted.

        Views of the filled part (each row is contiguous); the unfilled room is at most the readings of the
        first pass's windows at the span's two ends.
        """
        f, flags, n = self.f, self.flags, self.n
        background = f[4, :n] if f.shape[0] == 5 else None
        return f[0, :n], f[1, :n], f[2, :n], background, f[3, :n], flags[0, :n], flags[1, :n], flags[2, :n], flags[3, :n]


@functools.lru_cache(maxsize=16)
def _band(band_file: str | None, band_um: tuple[float, float]) -> Band:
    """The instrument's band, kept between calls: its inversion table (and a window's, folded in) is built once."""
    return Band.from_csv(band_file) if band_file else Band(*band_um)


def _align(a: np.ndarray, b: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Indices into two increasing time arrays that pick their common times (the samples both channels have)."""
    if a.size == b.size and np.array_equal(a, b):
        every = np.arange(a.size)
        return every, every
    _, ia, ib = np.intersect1d(a, b, assume_unique=True, return_indices=True)
    return ia, ib


def interval_text(ci: tuple[float, float], digits: int = 3) -> str:
    """An interval as people read it: ``0.921 to 0.939`` (never a dash, which reads as a minus sign)."""
    return f"{ci[0]:.{digits}f} to {ci[1]:.{digits}f}"


def check_usable(data: TuneData) -> None:
    """Raise :class:`TuneError` saying which condition failed when no stretch of the firing is usable."""
    n_valid = int(np.count_nonzero(data.valid))
    name, ref = data.py.name, data.reference
    if n_valid == 0:
        read = [w for w in data.windows if not w["used"]]
        lo, hi = data.py.range_c
        if not read:
            raise TuneError(f"{name} never read in its range ({lo:g} to {hi:g} °C), so no stretch is usable")
        worst = max(read, key=lambda w: w["points"])
        if "failed or out of range" in worst["reason"]:
            raise TuneError(f"the reference thermocouple {ref} failed or was out of range while {name} read "
                            f"(from {worst['start_s'] / 3600:.2f} h), so no stretch is usable")
        if "sensor-fault" in worst["reason"]:
            raise TuneError(f"a sensor-fault alarm was active whenever {name} read, so no stretch is usable")
        raise TuneError("no hold or slow ramp while the pyrometer read: every stretch ramped too fast "
                        "(over the allowed rate, or the reference's lag over the limit), so no stretch is usable")
    if n_valid < MIN_POINTS:
        raise TuneError(f"only {n_valid} valid points (holds and slow ramps with a healthy reference); at least {MIN_POINTS} are needed")
    blocks = np.unique(np.floor((data.t[data.valid] - data.start_t) / BLOCK_S))
    if blocks.size < MIN_BLOCKS:
        raise TuneError(f"the valid points span only {blocks.size} ten-minute block(s); at least {MIN_BLOCKS} are needed (a hold, or slow ramps)")


def _dlog_band(band: Band, t_c: np.ndarray | float) -> np.ndarray:
    """d ln S / dT of the instrument's band at t_c (degC), 1/K."""
    t_k = np.asarray(t_c, dtype=float) + 273.15
    return (band.log_signal(t_k + 0.25) - band.log_signal(t_k - 0.25)) / 0.5


def _setting_estimate(data: TuneData, idx: np.ndarray, log_e: np.ndarray) -> tuple[float, tuple[float, float]]:
    """The setting over the points ``idx`` (ln e' per point given) and its 95 % interval.

    The estimate is the mean of ln e'. Its standard uncertainty combines the scatter of ten-minute block
    means (the readings within a block are not independent) with the reference's tolerance and the allowed
    lag at the stretch's temperature, both common-mode and rectangular, carried into ln e' by d ln S/dT.
    """
    mean = float(np.mean(log_e))
    blocks = np.floor((data.t[idx] - data.start_t) / BLOCK_S)
    labels, inverse = np.unique(blocks, return_inverse=True)
    nb = labels.size
    if nb >= MIN_BLOCKS:
        block_means = np.bincount(inverse, weights=log_e) / np.bincount(inverse)
        u_stat = float(np.std(block_means, ddof=1)) / math.sqrt(nb)
    else:  # too few blocks to see their scatter: no credit for averaging within a block
        u_stat = float(np.std(log_e, ddof=1)) / math.sqrt(nb) if log_e.size > 1 else 0.0
    ref_c = float(np.mean(data.ref[idx]))
    u_ref = data.u_ref
    if data.tc is not None:
        u = float(tolerance_uncertainty(data.tc.type, ref_c, data.tc.tolerance_class))
        # outside its class's range, take 0.75 % of reading as the bound (common practice, no source)
        u_ref = u if math.isfinite(u) else 0.0075 * abs(ref_c) / math.sqrt(3.0)
    u_lag = 0.0
    if data.rate is not None and data.tc is not None:
        lag = data.tc.time_constant_s * np.abs(np.nan_to_num(data.rate[idx])) / 3600.0
        u_lag = float(np.mean(lag)) / math.sqrt(3.0)
    slope = float(_dlog_band(data.band, ref_c))
    u_ln = math.sqrt(u_stat**2 + (slope * u_ref) ** 2 + (slope * u_lag) ** 2)
    value = math.exp(mean)
    return value, (value * math.exp(-1.96 * u_ln), value * math.exp(1.96 * u_ln))


def _mask(n: int, idx: np.ndarray) -> np.ndarray:
    """A boolean mask of length ``n``, True at ``idx``."""
    mask = np.zeros(n, dtype=bool)
    mask[idx] = True
    return mask


def _stretches(data: TuneData, mask: np.ndarray) -> list[tuple[int, int, bool]]:
    """The valid readings cut into stretches: holds and ramps apart, ramps in pieces of at most RAMP_PIECE_C.

    Each is ``(start, end, hold)`` as indices into the firing (end exclusive). A flicker of the hold/ramp class
    shorter than five minutes joins the piece before it (the approach to a hold, noise at the threshold).
    """
    rate = np.abs(np.nan_to_num(data.rate, nan=np.inf)) if data.rate is not None else np.zeros(data.t.size)
    hold = rate <= HOLD_RATE_C_PER_H
    out: list[tuple[int, int, bool]] = []
    for a, b in _runs(mask):
        pieces: list[list[Any]] = []
        for c, d in sorted(_runs(hold[a:b]) + _runs(~hold[a:b])):
            if pieces and (d - c < 300 or pieces[-1][1] - pieces[-1][0] < 300):
                pieces[-1][1] = a + d
                if d - c >= 300:
                    pieces[-1][2] = bool(hold[a + c])
            else:
                pieces.append([a + c, a + d, bool(hold[a + c])])
        for c, d, is_hold in pieces:
            span = float(np.ptp(data.ref[c:d])) if d > c else 0.0
            parts = 1 if is_hold else max(1, math.ceil(span / RAMP_PIECE_C))
            edges = np.linspace(c, d, parts + 1).astype(int)
            out.extend((int(e0), int(e1), is_hold) for e0, e1 in zip(edges[:-1], edges[1:]) if e1 > e0)
    return out


def instrument_setting(data: TuneData) -> InstrumentSetting:
    """The emissivity setting that makes the instrument read the reference (see the module notes).

    Raises
    ------
    TuneError
        When no stretch is usable.
    """
    check_usable(data)
    py = data.py
    idx = np.flatnonzero(data.valid)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", FirewatchWarning)
        log_e = (math.log(py.set_emissivity) + data.band.log_signal(data.indicated[idx] + 273.15)
                 - data.band.log_signal(data.ref[idx] + 273.15))
    finite = np.isfinite(log_e)
    idx, log_e = idx[finite], log_e[finite]
    if idx.size == 0:
        raise TuneError(f"{py.name} and {data.reference} never gave a comparable pair of readings")
    top_c = float(np.nanmax(data.ref[np.isfinite(data.ref)])) if np.isfinite(data.ref).any() else math.nan
    position = np.full(data.t.size, -1)
    position[idx] = np.arange(idx.size)
    stretches: list[dict[str, Any]] = []
    top: int | None = None
    for a, b, hold in _stretches(data, _mask(data.t.size, idx)):
        sel = position[a:b]
        sel = sel[sel >= 0]
        e, ci = _setting_estimate(data, idx[sel], log_e[sel])
        ref_c = float(np.mean(data.ref[a:b]))
        entry: dict[str, Any] = {"start_s": round(float(data.t[a]) - data.start_t, 1), "end_s": round(float(data.t[b - 1]) - data.start_t, 1),
                 "ref_c": round(ref_c, 1), "hold": hold, "emissivity": round(e, 4),
                 "ci95": [round(ci[0], 4), round(ci[1], 4)], "points": int(sel.size)}
        stretches.append(entry)
        if hold and ref_c >= top_c - TOP_HOLD_BAND_C and (top is None or sel.size > stretches[top]["points"]):
            top = len(stretches) - 1
    if top is not None:
        entry = stretches[top]
        value, ci = entry["emissivity"], (entry["ci95"][0], entry["ci95"][1])
        basis = (f"the hold at {entry['ref_c']:.0f} °C ({entry['start_s'] / 3600:.2f} h to "
                 f"{entry['end_s'] / 3600:.2f} h), the firing's top")
        points = entry["points"]
        entry["basis"] = True
    else:
        value, ci = _setting_estimate(data, idx, log_e)
        basis = "all valid stretches (the firing has no hold at its top temperature)"
        points = int(idx.size)
    note = ""
    if value > 1.0:
        note = (f"a setting above 1 ({value:.3f}) cannot be dialled in: even at 1.00 {py.name} reads above {data.reference}; "
                "look for reflections from hotter surroundings, a reference reading low, or an instrument out of calibration")
    return InstrumentSetting(emissivity=round(value, 4), ci95=(round(ci[0], 4), round(ci[1], 4)), basis=basis,
                             points=points, by_stretch=stretches, note=note)


def tune(data: TuneData, model: str = "constant", fit_transmission: bool = False) -> TuneResult:
    """Both answers: the instrument setting, and the ware's emissivity or why the firing hides it.

    Raises
    ------
    TuneError
        Only when no stretch is usable; a hidden emissivity is an answer, not an error.
    """
    setting = instrument_setting(data)
    ware: FitResult | None = None
    hidden: str | None = None
    try:
        ware = fit(data, model, fit_transmission)
    except EmissivityHidden as exc:
        hidden = str(exc)
    if ware is not None and ware.emissivity_held:
        hidden = _hidden_sentence(data, None)
    return TuneResult(instrument=setting, ware=ware, hidden_reason=hidden, data=data)


def _cavity(data: TuneData) -> bool:
    """The background is near the ware's temperature over the valid stretches: it hides the emissivity."""
    if data.background is None or not data.valid.any():
        return False
    gap = np.abs(data.background[data.valid] - data.ref[data.valid])
    return bool(np.nanmedian(gap) < CAVITY_BAND_C)


def _hidden_sentence(data: TuneData, ci: tuple[float, float] | None) -> str:
    """Why the ware's emissivity is not determined, in one sentence."""
    allowed = "" if ci is None else f"anything from {interval_text((max(ci[0], 0.0), min(ci[1], 1.0)), 2)} fits"
    if _cavity(data):
        return (f"the walls that {data.py.name} sees reflected in the ware are at nearly its temperature and hide its "
                f"emissivity (the cavity effect{'; ' + allowed if allowed else ''}); "
                "tune with a cold sight tube or the door open to find it")
    return (f"this firing does not determine the ware's emissivity ({allowed + '; ' if allowed else ''}its 95 % interval is "
            f"wider than {MAX_CI_WIDTH:g}); longer holds, or holds at more than one temperature, would narrow it")


def reconcile_with(data: TuneData, emissivity: np.ndarray | float, gray: float = 1.0, points: np.ndarray | None = None) -> np.ndarray:
    """The pyrometer's reconciled temperature (degC) with another emissivity (and gray factor)."""
    py = data.py
    sel = slice(None) if points is None else points
    transmission: Any = Window(py.window, fouling=py.fouling * gray) if py.window else min(py.transmission * gray, 1.0)
    bg = None if data.background is None else data.background[sel]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", FirewatchWarning)
        return correct_single_band(data.indicated[sel], data.band, np.clip(emissivity, 1e-3, 1.0), transmission,
                                   py.set_emissivity, py.set_transmission, bg)


def fit(data: TuneData, model: str = "constant", fit_transmission: bool = False) -> FitResult:
    """Fit the ware's emissivity; raise :class:`EmissivityHidden` when the firing cannot separate it.

    With ``fit_transmission`` the emissivity and a gray transmission factor
    are fitted together. Where they cannot be separated, two cases differ:
    if the emissivity alone is well determined, only their product is known
    and the fit is refused; if the emissivity is hidden (a closed kiln: the
    cavity effect), the transmission is what the data determine, and it is
    fitted with the emissivity held at the profile's value, as said in the
    note (and ``emissivity_held`` is set).

    Raises
    ------
    TuneError
        When no stretch is usable (:class:`EmissivityHidden`, a subclass,
        when the stretches are usable but cannot separate the emissivity).
    """
    check_usable(data)
    if not fit_transmission:
        return _fit(data, model, False)
    try:
        return _fit(data, model, True)
    except EmissivityHidden as joint:
        try:
            _fit(data, model, False)
        except EmissivityHidden:
            held = _fit(data, "constant", True, hold_emissivity=data.py.emissivity)
            held.note = (f"the emissivity is hidden by the cavity effect and is held at the profile's {data.py.emissivity:g}; "
                         "the transmission is what this firing determines")
            return held
        raise joint from None


def _fit(data: TuneData, model: str, fit_transmission: bool, hold_emissivity: float | None = None) -> FitResult:
    check_usable(data)
    idx = np.flatnonzero(data.valid)
    n_valid = idx.size
    if idx.size > FIT_POINTS:
        idx = idx[:: math.ceil(idx.size / FIT_POINTS)]
    t = data.t[idx]
    blocks = np.unique(np.floor((t - data.start_t) / BLOCK_S))
    ref = data.ref[idx]
    scale_t = (ref - 1000.0) / 100.0

    def unpack(p: np.ndarray) -> tuple[np.ndarray, float]:
        if hold_emissivity is not None:
            return np.full(ref.size, hold_emissivity), p[0]
        eps = p[0] + (p[1] * scale_t if model == "linear" else 0.0)
        gray = p[-1] if fit_transmission else 1.0
        return eps, gray

    def residual(p: np.ndarray) -> np.ndarray:
        eps, gray = unpack(p)
        rec = reconcile_with(data, eps, gray, idx)
        return np.nan_to_num(rec - ref, nan=50.0)

    if hold_emissivity is not None:
        p0, lower, upper = [0.95], [0.05], [1.0]
    else:
        p0 = [data.py.emissivity] + ([0.0] if model == "linear" else []) + ([0.95] if fit_transmission else [])
        lower = [0.02] + ([-0.5] if model == "linear" else []) + ([0.05] if fit_transmission else [])
        upper = [1.0] + ([0.5] if model == "linear" else []) + ([1.0] if fit_transmission else [])
    sol = least_squares(residual, p0, bounds=(lower, upper), loss="soft_l1", f_scale=1.0, x_scale="jac")
    res = sol.fun
    jac = sol.jac
    n, k = res.size, len(p0)
    dof = max(n - k, 1)
    s2 = float(np.sum(res**2) / dof)
    try:
        cov = np.linalg.inv(jac.T @ jac) * s2
    except np.linalg.LinAlgError:
        raise EmissivityHidden("the fit is degenerate: this firing cannot tell these parameters apart") from None
    # readings within a block are not independent: count blocks, not readings
    cov *= n / blocks.size
    # the reference's own tolerance moves every residual alike: propagate it through the fit
    for common in (data.u_ref, data.u_lag):
        shift = np.linalg.lstsq(jac, np.full(n, common), rcond=None)[0]
        cov += np.outer(shift, shift)
    sd = np.sqrt(np.clip(np.diag(cov), 0.0, None))
    if hold_emissivity is not None:
        g, half_g = float(sol.x[0]), 1.96 * float(sd[0])
        if 2 * half_g > MAX_CI_WIDTH:
            raise EmissivityHidden(f"neither the ware's emissivity nor the window's transmission is determined by this firing "
                                   f"(transmission {interval_text((max(g - half_g, 0.0), min(g + half_g, 1.0)), 2)})")
        u = data.py.emissivity_uncertainty
        raw = residual(sol.x)
        return FitResult(
            emissivity=round(hold_emissivity, 4),
            ci95=(round(hold_emissivity - 1.96 * u, 4), round(hold_emissivity + 1.96 * u, 4)),
            model="constant", transmission=round(g, 4), transmission_ci95=(round(g - half_g, 4), round(min(g + half_g, 1.0), 4)),
            points_used=int(n_valid), blocks=int(blocks.size), windows=data.windows,
            residual_c={"mean": round(float(np.mean(raw)), 3), "sd": round(float(np.std(raw)), 3),
                        "max_abs": round(float(np.max(np.abs(raw))), 3), "trend_per_100c": 0.0},
            residuals=(ref, raw), emissivity_held=True,
        )
    if fit_transmission:
        corr = cov[0, -1] / (sd[0] * sd[-1]) if sd[0] > 0 and sd[-1] > 0 else 1.0
        if abs(corr) > 0.98:
            raise EmissivityHidden(f"the ware's emissivity and the window's transmission cannot be told apart here (correlation "
                                   f"{corr:.3f}): only their product is determined; fit the emissivity alone")
    eps0 = float(sol.x[0])
    half = 1.96 * float(sd[0])
    result = FitResult(
        emissivity=round(eps0, 4),
        ci95=(round(eps0 - half, 4), round(eps0 + half, 4)),
        model=model,
        points_used=int(n_valid),
        blocks=int(blocks.size),
        windows=data.windows,
    )
    if model == "linear":
        result.slope_per_100c = round(float(sol.x[1]), 5)
    if fit_transmission:
        result.transmission = round(float(sol.x[-1]), 4)
        result.transmission_ci95 = (round(float(sol.x[-1] - 1.96 * sd[-1]), 4), round(float(sol.x[-1] + 1.96 * sd[-1]), 4))
    raw = residual(sol.x)
    trend = float(np.polyfit(ref, raw, 1)[0] * 100.0) if np.ptp(ref) > 50 else 0.0
    result.residual_c = {
        "mean": round(float(np.mean(raw)), 3),
        "sd": round(float(np.std(raw)), 3),
        "max_abs": round(float(np.max(np.abs(raw))), 3),
        "trend_per_100c": round(trend, 3),
    }
    result.residuals = (ref, raw)
    if model == "constant" and abs(trend) > max(0.5, 2 * result.residual_c["sd"] / max(np.ptp(ref) / 100.0, 1.0)):
        result.model_fits = False
        result.note = f"the residuals trend by {trend:+.2f} K per 100 °C: a constant emissivity does not fit; try --model linear"
    if 2 * half > MAX_CI_WIDTH or (eps0 >= 0.995 and _cavity(data)):
        raise EmissivityHidden(_hidden_sentence(data, (eps0 - half, eps0 + half)))
    if eps0 >= 0.995 or eps0 <= 0.025:
        raise EmissivityHidden(f"the fit of the ware's emissivity runs to the edge of the physical range ({eps0:.3f}), "
                               "so this firing cannot support it")
    return result
