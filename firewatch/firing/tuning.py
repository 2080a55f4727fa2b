"""Fitting a pyrometer's emissivity (and window transmission) against thermocouple references.

Only stretches where the comparison is valid are used: the reference
thermocouple healthy and in range, its rate of change slow enough that its
lag (time constant x rate) stays under ``max_lag_c``, the pyrometer in its
range, and no sensor-fault alarm active. Each rejected stretch is kept with
its reason.

The fit is robust least squares (:func:`scipy.optimize.least_squares`,
soft-L1 loss) of the reconciled pyrometer against the reference, with the
emissivity constant, or linear in temperature, and optionally a gray
transmission factor. Readings a second apart are far from independent, so
the confidence interval counts ten-minute blocks rather than readings (the
covariance is inflated by readings per block), and it adds the reference
thermocouple's own tolerance (a rectangular bound, propagated through the
fit), since no fit can be surer than its reference, and the lag allowed in
the stretches used (time constant x rate, also as a rectangular bound).

A fit is refused (the caller exits with status 1) when the data cannot
support it: no valid stretch, too few points, the reference failed, the
result at the edge of the physical range, or an interval too wide to be of
use (a closed kiln whose walls are at the ware's temperature hides the
emissivity: the cavity effect).
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field
from typing import Any, Protocol

import numpy as np
from scipy.optimize import least_squares

from firewatch.physics._warnings import FirewatchWarning
from firewatch.physics.bands import Band
from firewatch.physics.corrections import correct_single_band
from firewatch.physics.tolerances import tolerance_uncertainty
from firewatch.physics.windows import Window
from firewatch.settings.profile import Pyrometer, SiteProfile
from firewatch.transport.records import Status

__all__ = ["TuneError", "TuneData", "FitResult", "load_data", "fit", "reconcile_with"]

BLOCK_S = 600.0
MIN_POINTS = 300
MIN_BLOCKS = 3
MAX_CI_WIDTH = 0.2


class SeriesLike(Protocol):
    """One channel over the firing: times (s), values and statuses as equal-length arrays."""

    t: np.ndarray
    value: np.ndarray
    status: np.ndarray


class FiringSource(Protocol):
    """What tuning reads from a firing: a firing log's reader satisfies it (the model does not import the store)."""

    def series(self, channel: str) -> SeriesLike: ...

    def alarms(self) -> list[dict[str, Any]]: ...


class TuneError(Exception):
    """The data cannot support a fit; the message says why."""


@dataclass
class TuneData:
    """What the fit works on, for one pyrometer and its reference, over the whole firing."""

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


@dataclass
class FitResult:
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


def _runs(mask: np.ndarray) -> list[tuple[int, int]]:
    """Start and end (exclusive) of each run of True."""
    if mask.size == 0:
        return []
    d = np.diff(np.concatenate([[0], mask.astype(np.int8), [0]]))
    return list(zip(np.flatnonzero(d == 1), np.flatnonzero(d == -1)))


def load_data(reader: FiringSource, site: SiteProfile, channel: str | None = None, reference: str | None = None,
              max_rate_c_per_h: float = 90.0, max_lag_c: float = 1.5) -> TuneData:
    """Read what a fit needs and mark the valid stretches, each used or rejected with its reason."""
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
    ind = reader.series(py.name)
    ref = reader.series(tc.name)
    rate = reader.series(f"{tc.name}.rate")
    if ind.t.size == 0 or ref.t.size == 0:
        raise TuneError("the log holds no readings of the pyrometer or its reference")
    n = min(ind.t.size, ref.t.size, rate.t.size)
    t = ind.t[:n]
    background = None
    if isinstance(py.background, str):
        background = reader.series(py.background).value[:n]
    elif isinstance(py.background, float):
        background = np.full(n, py.background)
    ok_ref = (ref.status[:n] == Status.OK) & np.isfinite(ref.value[:n])
    ok_py = (ind.status[:n] == Status.OK) & np.isfinite(ind.value[:n])
    r = np.abs(np.nan_to_num(rate.value[:n], nan=np.inf))
    slow = (r <= max_rate_c_per_h) & (tc.time_constant_s * r / 3600.0 <= max_lag_c)
    faulted = np.zeros(n, dtype=bool)
    for a in reader.alarms():
        if a["kind"] == "sensor-fault" and a["channel"] in (py.name, tc.name):
            end = a["cleared_t"] if a["cleared_t"] is not None else math.inf
            faulted |= (t >= a["raised_t"]) & (t <= end)
    if not ok_ref.any():
        raise TuneError(f"the reference thermocouple {tc.name} never gave a reading")
    valid = ok_ref & ok_py & slow & ~faulted
    for a, b in _runs(valid):  # a stretch shorter than two minutes is noise at a threshold, not a hold
        if b - a < 120:
            valid[a:b] = False
    # describe each stretch where the pyrometer read: used, or why not
    windows: list[dict[str, Any]] = []
    start = float(t[0])
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
                   f"{tc.name} failed or out of range" if (~ok_ref[sub]).mean() > 0.5 else
                   f"ramping too fast (over {max_rate_c_per_h:g} °C/h, or lag over {max_lag_c:g} K)")
            windows.append({"start_s": round(float(t[a + c]) - start, 1), "end_s": round(float(t[a + d - 1]) - start, 1),
                            "points": int(d - c), "used": False, "reason": why})
    windows.sort(key=lambda w: w["start_s"])
    mean_ref = float(np.nanmean(ref.value[:n][valid])) if valid.any() else 1000.0
    u_ref = float(tolerance_uncertainty(tc.type, mean_ref, tc.tolerance_class))
    if not math.isfinite(u_ref):
        u_ref = 0.0075 * abs(mean_ref) / math.sqrt(3.0)
    band = Band.from_csv(py.band_file) if py.band_file else Band(*py.band_um)
    # during slow ramps the reference lags by its time constant x the rate, and the ware lags the walls by an
    # amount no profile states: keep that as a systematic uncertainty (a rectangular bound) rather than guess it
    lag = tc.time_constant_s * np.abs(np.nan_to_num(rate.value[:n])) / 3600.0
    u_lag = float(np.mean(lag[valid])) / math.sqrt(3.0) if valid.any() else 0.0
    data = TuneData(py, tc.name, t, ind.value[:n], ref.value[:n], background, valid, windows, band, u_ref, start)
    data.u_lag = u_lag
    return data


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
    """Fit; raise :class:`TuneError` when the data cannot support it.

    With ``fit_transmission`` the emissivity and a gray transmission factor
    are fitted together. Where they cannot be separated, two cases differ:
    if the emissivity alone is well determined, only their product is known
    and the fit is refused; if the emissivity is hidden (a closed kiln: the
    cavity effect), the transmission is what the data determine, and it is
    fitted with the emissivity held at the profile's value, as said in the
    note.
    """
    if not fit_transmission:
        return _fit(data, model, False)
    try:
        return _fit(data, model, True)
    except TuneError as joint:
        try:
            _fit(data, model, False)
        except TuneError:
            held = _fit(data, "constant", True, hold_emissivity=data.py.emissivity)
            held.note = (f"the emissivity is hidden by the cavity effect and is held at the profile's {data.py.emissivity:g}; "
                         "the transmission is what this firing determines")
            return held
        raise joint from None


def _fit(data: TuneData, model: str, fit_transmission: bool, hold_emissivity: float | None = None) -> FitResult:
    idx = np.flatnonzero(data.valid)
    if idx.size < MIN_POINTS:
        raise TuneError(f"only {idx.size} valid points (holds and slow ramps with a healthy reference); at least {MIN_POINTS} are needed")
    t = data.t[idx]
    blocks = np.unique(np.floor((t - data.start_t) / BLOCK_S))
    if blocks.size < MIN_BLOCKS:
        raise TuneError(f"the valid points span only {blocks.size} ten-minute block(s); at least {MIN_BLOCKS} are needed (a hold, or slow ramps)")
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
        raise TuneError("the fit is degenerate: the data cannot tell these parameters apart") from None
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
            raise TuneError(f"neither the emissivity nor the transmission is determined by this firing (transmission {g:.2f} ± {half_g:.2f})")
        u = data.py.emissivity_uncertainty
        raw = residual(sol.x)
        return FitResult(
            emissivity=round(hold_emissivity, 4),
            ci95=(round(hold_emissivity - 1.96 * u, 4), round(hold_emissivity + 1.96 * u, 4)),
            model="constant", transmission=round(g, 4), transmission_ci95=(round(g - half_g, 4), round(min(g + half_g, 1.0), 4)),
            points_used=int(n), blocks=int(blocks.size), windows=data.windows,
            residual_c={"mean": round(float(np.mean(raw)), 3), "sd": round(float(np.std(raw)), 3),
                        "max_abs": round(float(np.max(np.abs(raw))), 3), "trend_per_100c": 0.0},
            residuals=(ref, raw),
        )
    if fit_transmission:
        corr = cov[0, -1] / (sd[0] * sd[-1]) if sd[0] > 0 and sd[-1] > 0 else 1.0
        if abs(corr) > 0.98:
            raise TuneError(f"emissivity and transmission cannot be told apart here (correlation {corr:.3f}): only their product is "
                            "determined; fit the emissivity alone, or record with a background that differs from the ware")
    eps0 = float(sol.x[0])
    half = 1.96 * float(sd[0])
    result = FitResult(
        emissivity=round(eps0, 4),
        ci95=(round(eps0 - half, 4), round(eps0 + half, 4)),
        model=model,
        points_used=int(n),
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
    if 2 * half > MAX_CI_WIDTH or eps0 >= 0.995:
        raise TuneError(
            f"the emissivity is not determined: 95 % interval {eps0 - half:.2f}-{eps0 + half:.2f}; in a closed kiln the walls are at "
            "the ware's temperature and hide the emissivity (the cavity effect): tune with the door or a sight tube cold"
        )
    if eps0 >= 0.995 or eps0 <= 0.025:
        raise TuneError(f"the fit ran to the edge of the physical range (emissivity {eps0:.3f}); the data cannot support it")
    return result
