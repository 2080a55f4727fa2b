"""Pyrometer corrections: single-band and ratio instruments, with uncertainty.

Single band
-----------
An instrument with its own emissivity and transmission settings e_set,
t_set reports the temperature T_ind for which the measured band signal
equals e_set t_set S(T_ind); it does no background compensation. The scene
gives

    S_meas = f [e S_w(T) + (1 - e) S_w(T_bg)],

with S_w the band signal through the clean window (the window's spectral
transmission folded into the band, :meth:`Window.through`), f a gray factor
(window fouling, or the whole transmission when it is given as a number)
and T_bg the temperature of the surroundings that the ware reflects; with
no background the reflected term is left out. :func:`correct_single_band`
solves this for T with band integrals (through the band's inversion table);
:func:`indicated_single_band` is its reverse, what the instrument would
show. :func:`wien_single_band` is the narrow-band Wien check [DeWitt1988]_,

    1/T = 1/T_ind + (lambda/c2) ln(e t / (e_set t_set)),

a check, not the method.

Ratio (two-colour)
------------------
The instrument forms R = S1/S2 of two bands and assumes an emissivity slope
k_set = e1/e2; it reports T_ind with S1(T_ind)/S2(T_ind) = R/k_set. Gray
factors cancel in R. :func:`correct_ratio` corrects to a slope k; the Wien
check is 1/T = 1/T_ind + ln(k/k_set)/(c2 (1/lambda1 - 1/lambda2)).

Uncertainty
-----------
With ``return_uncertainty=True`` the corrections also return the standard
uncertainty of the corrected temperature, by first-order propagation
[GUM2008]_ of the standard uncertainties of emissivity, transmission
(relative to its effective value), background temperature and the
instrument's own stated accuracy, with the sensitivities differentiated
from the scene equation above.

First-order propagation assumes the model is close to linear over the
inputs' uncertainties (JCGM 100 5.1.2). For a single-band correction that
fails when u(e)/e is large (T goes as an inverse power of e, more steeply
at long wavelengths), and when the background is near the target (the
emissivity's effect vanishes to first order but not its products with the
background's uncertainty). :func:`correct_single_band` therefore probes
the model at each input's estimate +/- 2 u (and at the four corners of
emissivity and background together, whose product term is added whole
since it is far from Gaussian); where the one-sided 95 % half-widths
those probes give depart from 2 u_c by more than :data:`LINEARITY_LIMIT`,
or where the model has no value within the probes, it warns with
:class:`UncertaintyWarning` naming the cause. The
remedy is the Monte Carlo propagation of JCGM 101:2008 [JCGM101]_ in
:func:`firewatch.physics.montecarlo.monte_carlo_single_band`, which
returns an asymmetric coverage interval. The probes run over slices of the
readings (:data:`_SLICE`), which keeps their many temporaries in the
cache. The band tables give numpy.interp's own doubles however they are
read (:class:`firewatch.physics.bands._Knots`), so value and uncertainty do
not depend on the way the tables were read.

Input checking: emissivity and transmission settings outside (0, 1] and
slopes <= 0 raise ``ValueError``; indicated temperatures outside the band
table (200-4000 K), and readings below what the background alone would
give, are a :class:`RangeError` for one value and NaN with an
:class:`OutOfRangeWarning` for arrays.

References
----------
See ``DeWitt1988``, ``GUM2008``, ``JCGM101`` and ``Planck1901`` in docs/references.md.
"""

from __future__ import annotations

import warnings
from functools import lru_cache
from typing import Any, Literal, overload

import numpy as np
from numpy.typing import ArrayLike, NDArray

from firewatch.physics._warnings import OutOfRangeWarning, RangeError, UncertaintyWarning, exact
from firewatch.physics.bands import _GRID, Band, _flag_outside, _Knots, _log_signals
from firewatch.physics.constants import C2, ZERO_CELSIUS
from firewatch.physics.windows import Window

__all__ = [
    "LINEARITY_LIMIT",
    "check_fraction",
    "correct_single_band",
    "indicated_single_band",
    "correct_ratio",
    "indicated_ratio",
    "effective_transmission",
    "wien_single_band",
    "wien_ratio",
]

_DT = 0.25
"""Half step, K, for slopes of ln S taken from the tables."""

LINEARITY_LIMIT = 0.15
"""Largest relative departure of the probed one-sided 95 % half-widths from 2 u_c before
:class:`UncertaintyWarning`. On a grid of bands (0.8-14 um), temperatures, emissivities and
u(e)/e up to 0.2, with and without a background near the target, every case whose Monte Carlo
interval (JCGM 101) departs from +/- 1.96 u_c by more than 20 % warns, and few that agree within
5 % do (tests/physics/test_montecarlo.py)."""


def check_fraction(value: ArrayLike, name: str) -> NDArray[np.float64]:
    """Return ``value`` as an array, raising ``ValueError`` unless every element is in (0, 1]."""
    v = np.asarray(value, dtype=float)
    bad = ~((v > 0) & (v <= 1))
    if np.any(bad):
        raise ValueError(f"{name} must be in (0, 1], got {float(v[bad].ravel()[0])!r}")
    return v


def _check_uncertainty(value: ArrayLike, name: str) -> NDArray[np.float64]:
    v = np.asarray(value, dtype=float)
    if np.any(v < 0):
        raise ValueError(f"{name} must be >= 0, got {float(v[v < 0].ravel()[0])!r}")
    return v


def _scene(band: Band, transmission: ArrayLike | Window) -> tuple[Band, NDArray[np.float64]]:
    """The band as the scene is seen (window folded in) and the remaining gray factor."""
    if isinstance(transmission, Window):
        return transmission.through(band), np.asarray(transmission.fouling, dtype=float)
    return band, check_fraction(transmission, "transmission")


def _dlog(band: Band, t_k: NDArray[np.float64]) -> NDArray[np.float64]:
    """d ln S / dT from the band table, 1/K."""
    return (band.log_signal(t_k + _DT) - band.log_signal(t_k - _DT)) / (2 * _DT)


def _to_kelvin(indicated_c: ArrayLike) -> NDArray[np.float64]:
    return np.asarray(indicated_c, dtype=float) + ZERO_CELSIUS


@overload
def correct_single_band(
    indicated_c: ArrayLike, band: Band, emissivity: ArrayLike, transmission: ArrayLike | Window = ...,
    set_emissivity: ArrayLike = ..., set_transmission: ArrayLike = ..., background_c: ArrayLike | None = ...,
    *, emissivity_u: ArrayLike = ..., transmission_u: ArrayLike = ..., instrument_u_c: ArrayLike = ...,
    background_u_c: ArrayLike = ..., return_uncertainty: Literal[False] = ..., check_linearity: bool = ...,
) -> NDArray[np.float64]: ...
@overload
def correct_single_band(
    indicated_c: ArrayLike, band: Band, emissivity: ArrayLike, transmission: ArrayLike | Window = ...,
    set_emissivity: ArrayLike = ..., set_transmission: ArrayLike = ..., background_c: ArrayLike | None = ...,
    *, emissivity_u: ArrayLike = ..., transmission_u: ArrayLike = ..., instrument_u_c: ArrayLike = ...,
    background_u_c: ArrayLike = ..., return_uncertainty: Literal[True], check_linearity: bool = ...,
) -> tuple[NDArray[np.float64], NDArray[np.float64]]: ...
def correct_single_band(
    indicated_c: ArrayLike,
    band: Band,
    emissivity: ArrayLike,
    transmission: ArrayLike | Window = 1.0,
    set_emissivity: ArrayLike = 1.0,
    set_transmission: ArrayLike = 1.0,
    background_c: ArrayLike | None = None,
    *,
    emissivity_u: ArrayLike = 0.0,
    transmission_u: ArrayLike = 0.0,
    instrument_u_c: ArrayLike = 0.0,
    background_u_c: ArrayLike = 0.0,
    return_uncertainty: bool = False,
    check_linearity: bool = True,
) -> NDArray[np.float64] | tuple[NDArray[np.float64], NDArray[np.float64]]:
    """True ware temperature from a single-band pyrometer's indicated temperature.

    Parameters
    ----------
    indicated_c : array_like
        What the instrument shows, degC.
    band : Band
        The instrument's band.
    emissivity : array_like
        The ware's emissivity in the band, (0, 1].
    transmission : array_like or Window
        The sight path's gray transmission (0, 1], or a :class:`Window`
        whose spectral transmission is folded into the band.
    set_emissivity, set_transmission : array_like
        The instrument's own settings, (0, 1].
    background_c : array_like, optional
        Temperature of the surroundings the ware reflects, degC; ``None``
        leaves the reflected term out.
    emissivity_u, transmission_u : array_like
        Standard uncertainties of the emissivity (absolute) and of the
        effective transmission (absolute).
    instrument_u_c, background_u_c : array_like
        Standard uncertainties of the indicated and background temperatures, K.
    return_uncertainty : bool
        Also return the standard uncertainty of the result.
    check_linearity : bool
        With ``return_uncertainty``, probe the model at +/- 2 u and warn
        where first-order propagation is unreliable (module notes).

    Returns
    -------
    numpy.ndarray or (numpy.ndarray, numpy.ndarray)
        Corrected temperature in degC, and with ``return_uncertainty`` its
        standard uncertainty in K.

    Raises
    ------
    ValueError
        Emissivity, transmission or settings outside (0, 1]; a negative
        uncertainty; :class:`RangeError` for one indicated value outside the
        band table or below what the background alone would give.

    Warns
    -----
    OutOfRangeWarning
        Array readings outside the table, or below the background alone.
    UncertaintyWarning
        With ``return_uncertainty``, where first-order propagation is
        unreliable (large u(e)/e, long wavelengths, background near target).

    Notes
    -----
    ================ ====== =====================
    quantity         unit   range
    ================ ====== =====================
    indicated_c      degC   -73..3727 (table)
    emissivity       1      (0, 1]
    background_c     degC   -73..3727
    result           degC   -73..3727
    ================ ====== =====================

    References
    ----------
    [DeWitt1988]_ for the measurement equation; [GUM2008]_ for propagation.

    Examples
    --------
    >>> band = Band(0.8, 1.1)
    >>> round(float(correct_single_band(1000.0, band, 1.0)), 6)
    1000.0
    """
    eps = check_fraction(emissivity, "emissivity")
    e_set = check_fraction(set_emissivity, "set emissivity")
    t_set = check_fraction(set_transmission, "set transmission")
    scene_band, gray = _scene(band, transmission)
    t_ind = _to_kelvin(indicated_c)
    log_ind = band.log_signal(t_ind)
    log_meas = log_ind + np.log(e_set * t_set)
    s_bg = None
    if background_c is not None:
        t_bg = _to_kelvin(background_c)
        s_bg = np.exp(scene_band.log_signal(t_bg))
    log_scene, below = _log_scene(log_meas - np.log(gray), eps, s_bg)
    if np.any(below):
        if below.ndim == 0:
            raise RangeError(
                f"indicated temperature (degC) {exact(float(np.asarray(indicated_c)))} lies below what the background at "
                f"{exact(float(np.asarray(background_c)))} degC alone would give with emissivity {exact(float(eps))}"
            )
        warnings.warn(
            f"{int(below.sum())} reading(s) lie below what the background alone would give; set to NaN",
            OutOfRangeWarning,
            stacklevel=2,
        )
    t = scene_band.temperature_from_log_signal(log_scene)
    _flag_outside(t, log_scene, "indicated temperature (degC)", "what the band table covers (200..4000 K) once corrected", indicated_c)
    if not return_uncertainty:
        return t - ZERO_CELSIUS

    u_eps = _check_uncertainty(emissivity_u, "emissivity uncertainty")
    u_tau = _check_uncertainty(transmission_u, "transmission uncertainty")
    u_ind = _check_uncertainty(instrument_u_c, "instrument uncertainty")
    u_bg = _check_uncertainty(background_u_c, "background uncertainty")
    s_t = np.exp(scene_band.log_signal(t))
    ds_t = s_t * _dlog(scene_band, t)  # dS_w/dT at the corrected temperature
    s_meas_gray = np.exp(log_meas) / gray
    # without a window the band is the scene's and its signal at t is s_t: not read twice
    tau_eff = gray * s_t / (s_t if scene_band is band else np.exp(band.log_signal(t)))
    terms = [
        (s_t - (0.0 if s_bg is None else s_bg)) / (eps * ds_t) * u_eps,
        s_meas_gray / (eps * ds_t) * (u_tau / tau_eff),
        s_meas_gray * _dlog(band, t_ind) / (eps * ds_t) * u_ind,
    ]
    if s_bg is not None:  # a background was given
        ds_bg = s_bg * _dlog(scene_band, t_bg)
        terms.append((1.0 - eps) * ds_bg / (eps * ds_t) * u_bg)
    u = np.sqrt(sum(np.square(x) for x in terms))
    if check_linearity:
        _check_linearity(
            band, scene_band, t, u, eps, gray, tau_eff, log_meas, t_ind, e_set * t_set,
            None if background_c is None else t_bg, u_eps, u_tau, u_ind, u_bg,
        )
    return t - ZERO_CELSIUS, u


def _log_scene(log_meas_gray: NDArray[np.float64], eps: NDArray[np.float64], s_bg: NDArray[np.float64] | None
               ) -> tuple[NDArray[np.float64], NDArray[np.bool_]]:
    """ln S_w(T) of the ware from ln(S_meas / f); NaN, and ``below`` True, where the background alone exceeds the reading."""
    if s_bg is None:
        log_scene = log_meas_gray - np.log(eps)
        return log_scene, np.zeros(np.shape(log_scene), dtype=bool)
    s_scene = (np.exp(log_meas_gray) - (1.0 - eps) * s_bg) / eps
    below = ~(s_scene > 0) & ~np.isnan(s_scene)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.log(np.where(below, np.nan, s_scene)), below


_INPUTS = ("emissivity", "transmission", "indicated temperature", "background")

_SLICE = 1 << 14
"""Readings probed at a time: the probes' temporaries (several per input) then stay in the cache."""


def _probe(
    band: Band, scene_band: Band, t: NDArray[np.float64], eps: NDArray[np.float64], u_eps: NDArray[np.float64],
    gray: NDArray[np.float64], tau_eff: NDArray[np.float64], u_tau: NDArray[np.float64], log_meas: NDArray[np.float64],
    t_ind: NDArray[np.float64], u_ind: NDArray[np.float64], settings: NDArray[np.float64],
    t_bg: NDArray[np.float64] | None, u_bg: NDArray[np.float64], shape: tuple[int, ...], active: list[bool],
) -> tuple[dict[int, tuple[NDArray[np.float64], NDArray[np.float64]]], NDArray[np.float64] | None]:
    """Departures of the corrected temperature from ``t`` (K) at the probes of :func:`_check_linearity`.

    Returns the departures at +2 u and -2 u for each ``active`` input (keyed by its index in
    ``_INPUTS``), and, where both the emissivity and the background have one, the product term: the mixed
    difference over their four corners, scaled to f_xy u_x u_y and doubled to compare with a 95 % half-width.
    All probes are solved in one pass: the scene signals are stacked, then one logarithm and one table lookup.
    """
    # inputs keep their own shapes (one number, or one per reading): the arithmetic broadcasts them
    s_m = np.exp(log_meas) / gray
    s_b = np.exp(scene_band._log_signal_at(np.log(t_bg))) if t_bg is not None else None
    e = eps
    e_hi = np.minimum(eps + 2 * u_eps, 1.0)
    e_lo = np.maximum(eps - 2 * u_eps, 1e-6)
    rows: list[tuple[Any, Any, Any]] = []  # (measured signal / gray, emissivity, background signal) per probe
    if active[0]:
        rows += [(s_m, e_hi, s_b), (s_m, e_lo, s_b)]
    if active[1]:  # the transmission kept at or below 1
        rows += [(s_m / np.minimum(1.0 + 2 * u_tau / tau_eff, 1.0 / tau_eff), e, s_b),
                 (s_m / np.maximum(1.0 - 2 * u_tau / tau_eff, 1e-6), e, s_b)]
    if active[2]:
        for sign in (1.0, -1.0):
            lm = band._log_signal_at(np.log(np.maximum(t_ind + sign * 2 * u_ind, 1.0))) + np.log(settings)
            rows.append((np.exp(lm) / gray, e, s_b))
    if active[3]:
        assert t_bg is not None
        b_hi = np.exp(scene_band._log_signal_at(np.log(t_bg + 2 * u_bg)))
        b_lo = np.exp(scene_band._log_signal_at(np.log(np.maximum(t_bg - 2 * u_bg, 1.0))))
        rows += [(s_m, e, b_hi), (s_m, e, b_lo)]
        if active[0]:
            rows += [(s_m, e_hi, b_hi), (s_m, e_hi, b_lo), (s_m, e_lo, b_hi), (s_m, e_lo, b_lo)]
    scene = np.empty((len(rows), *shape))
    for k, (m, ek, bk) in enumerate(rows):
        if bk is None:
            np.divide(m, ek, out=scene[k])
        else:
            scene[k] = (m - (1.0 - ek) * bk) / ek
    # no solution where the background alone gives more than the reading: the log is then -inf or NaN, off the table
    np.log(scene, out=scene)
    d = scene_band.temperature_from_log_signal(scene)
    d -= t
    out: dict[int, tuple[NDArray[np.float64], NDArray[np.float64]]] = {}
    k = 0
    for i, on in enumerate(active):
        if on:
            out[i] = (d[k], d[k + 1])
            k += 2
    cross = None
    if active[0] and active[3]:
        step = e_hi - e_lo
        cross = np.where(step > 0, (d[k] - d[k + 1] - d[k + 2] + d[k + 3]) * u_eps / (2.0 * step), 0.0)
    return out, cross


def _judge(
    pairs: dict[int, tuple[NDArray[np.float64], NDArray[np.float64]]], cross: NDArray[np.float64] | None,
    u: NDArray[np.float64], t: NDArray[np.float64], shape: tuple[int, ...],
) -> tuple[NDArray[np.float64], NDArray[np.bool_], NDArray[np.bool_]]:
    """The probes' largest relative departure from 2 u, where that is too large, and where the model has no value within them.

    The one-sided departures, summed in quadrature, plus the product term
    added whole, estimate the upper and lower 95 % half-widths (see
    :func:`_check_linearity`).
    """
    up = np.sqrt(sum(np.square(np.maximum(np.fmax(a, b), 0.0)) for a, b in pairs.values()))
    down = np.sqrt(sum(np.square(np.minimum(np.fmin(a, b), 0.0)) for a, b in pairs.values()))
    if cross is not None:
        up, down = up + np.abs(cross), down + np.abs(cross)  # the product term is not Gaussian (heavy tails): added whole
    two_u = 2.0 * u
    off = np.maximum(np.abs(up / two_u - 1.0), np.abs(down / two_u - 1.0))
    undefined = np.zeros(shape, dtype=bool)
    for a, b in pairs.values():
        undefined |= np.isnan(a) | np.isnan(b)
    if cross is not None:
        undefined |= np.isnan(cross)
    undefined &= np.isfinite(t)
    return off, ((off > LINEARITY_LIMIT) & (two_u > 0)) | undefined, undefined


def _check_linearity(
    band: Band, scene_band: Band, t: NDArray[np.float64], u: NDArray[np.float64], eps: NDArray[np.float64],
    gray: NDArray[np.float64], tau_eff: NDArray[np.float64], log_meas: NDArray[np.float64], t_ind: NDArray[np.float64],
    settings: NDArray[np.float64], t_bg: NDArray[np.float64] | None, u_eps: NDArray[np.float64],
    u_tau: NDArray[np.float64], u_ind: NDArray[np.float64], u_bg: NDArray[np.float64],
) -> None:
    """Warn where first-order propagation misjudges the 95 % interval (see the module notes).

    The model is evaluated at each input's estimate +/- 2 u (emissivity and
    transmission kept inside (0, 1]) and at the corners of emissivity and
    background together, in one vectorised pass. The one-sided departures,
    summed in quadrature, plus the emissivity-background product term (its
    mixed second difference, JCGM 100 5.1.2 note; added whole, as a product
    of two uncertain inputs has heavy tails), estimate the upper and lower
    95 % half-widths; they are compared with 2 u.

    The readings are probed in slices of :data:`_SLICE`, each input flattened
    to the readings' shape (or kept whole where it is one number).
    """
    active = [bool(np.any(u_eps > 0)), bool(np.any(u_tau > 0)), bool(np.any(u_ind > 0)),
              t_bg is not None and bool(np.any(u_bg > 0))]
    if not any(active):
        return
    shape = np.broadcast_shapes(t.shape, u.shape)
    size = int(np.prod(shape))

    def flat(x: NDArray[np.float64]) -> NDArray[np.float64]:
        if x.ndim == 0:
            return x
        return x.ravel() if x.shape == shape else np.broadcast_to(x, shape).ravel()

    ins = [flat(np.asarray(x, dtype=float)) for x in (t, eps, u_eps, gray, tau_eff, u_tau, log_meas, t_ind, u_ind, settings, u_bg, u)]
    bg = None if t_bg is None else flat(t_bg)

    def probe(start: int, stop: int) -> tuple[dict[int, tuple[NDArray[np.float64], NDArray[np.float64]]],
                                              NDArray[np.float64] | None, NDArray[np.float64], NDArray[np.float64]]:
        def cut(x: NDArray[np.float64]) -> NDArray[np.float64]:
            return x if x.ndim == 0 else x[start:stop]
        x = [cut(v) for v in ins]
        pairs, cross = _probe(band, scene_band, x[0], x[1], x[2], x[3], x[4], x[5], x[6], x[7], x[8], x[9],
                              None if bg is None else cut(bg), x[10], (stop - start,), active)
        return pairs, cross, x[11], x[0]

    off = np.empty(size)
    bad = np.empty(size, dtype=bool)
    undefined = np.empty(size, dtype=bool)
    with warnings.catch_warnings(), np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        warnings.simplefilter("ignore", OutOfRangeWarning)  # a probe off the table is an undefined value, counted below
        for start in range(0, size, _SLICE):
            stop = min(start + _SLICE, size)
            pairs, cross, u_part, t_part = probe(start, stop)
            off[start:stop], bad[start:stop], undefined[start:stop] = _judge(pairs, cross, u_part, t_part, (stop - start,))
    if not bad.any():
        return
    # the worst value, and the input whose probes stray furthest from a straight line there
    worst = int(np.argmax(np.where(bad, np.nan_to_num(off, nan=np.inf), -1.0)))
    start = worst - worst % _SLICE  # its slice probed again, as it was: the same values
    with warnings.catch_warnings(), np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        warnings.simplefilter("ignore", OutOfRangeWarning)
        pairs, cross, _, _ = probe(start, min(start + _SLICE, size))
    j = worst - start
    i = np.unravel_index(worst, shape)
    stray = {k: abs(float(a[j]) + float(b[j])) for k, (a, b) in pairs.items()}
    if cross is not None:
        stray[3] = max(stray.get(3, 0.0), abs(float(cross[j])))
    k = max(stray, key=lambda key: np.inf if np.isnan(stray[key]) else stray[key])
    t_i = float(np.broadcast_to(t, shape)[i]) - ZERO_CELSIUS
    if k == 0:
        ratio = float(np.broadcast_to(u_eps, shape)[i] / np.broadcast_to(eps, shape)[i])
        why = (f"u(e)/e = {ratio:.2f} at {band.centre_m * 1e6:.2g} um and {t_i:.0f} degC "
               "(T is steeply non-linear in the emissivity)")
    elif k == 3:
        assert t_bg is not None
        why = (f"the background ({float(np.broadcast_to(t_bg, shape)[i]) - ZERO_CELSIUS:.0f} degC) is near the target "
               f"({t_i:.0f} degC): the emissivity's and background's uncertainties act together")
    else:
        why = f"the {_INPUTS[k]}'s uncertainty is large for the model's curvature"
    if bool(undefined[worst]):
        why = "the model has no value within 2 u of the inputs (a reading near what the background alone gives, or an emissivity near 0); " + why
    count = f"{int(bad.sum())} of {size} values: " if len(shape) and size > 1 else ""
    warnings.warn(
        f"{count}first-order uncertainty unreliable: {why}; use the Monte Carlo propagation "
        "(monte_carlo_single_band, calc pyro --monte-carlo)",
        UncertaintyWarning,
        stacklevel=3,
    )


def effective_transmission(band: Band, transmission: ArrayLike | Window, temperature_c: ArrayLike) -> NDArray[np.float64]:
    """Band-effective transmission at a target temperature (degC): the gray value, or a window's Planck-weighted value."""
    scene_band, gray = _scene(band, transmission)
    t = _to_kelvin(temperature_c)
    if scene_band is band:
        return np.broadcast_to(gray, np.broadcast_shapes(gray.shape, t.shape)).astype(float)
    return gray * np.exp(scene_band.log_signal(t) - band.log_signal(t))


def indicated_single_band(
    true_c: ArrayLike,
    band: Band,
    emissivity: ArrayLike,
    transmission: ArrayLike | Window = 1.0,
    set_emissivity: ArrayLike = 1.0,
    set_transmission: ArrayLike = 1.0,
    background_c: ArrayLike | None = None,
) -> NDArray[np.float64]:
    """What a single-band instrument shows, degC, for ware at ``true_c``: the reverse of :func:`correct_single_band`.

    References
    ----------
    [DeWitt1988]_ measurement equation (see the module notes).

    Examples
    --------
    >>> round(float(indicated_single_band(1000.0, Band(0.8, 1.1), 0.8)), 2)
    975.51
    """
    eps = check_fraction(emissivity, "emissivity")
    e_set = check_fraction(set_emissivity, "set emissivity")
    t_set = check_fraction(set_transmission, "set transmission")
    scene_band, gray = _scene(band, transmission)
    t = _to_kelvin(true_c)
    s = eps * np.exp(scene_band.log_signal(t))
    if background_c is not None:
        s = s + (1.0 - eps) * np.exp(scene_band.log_signal(_to_kelvin(background_c)))
    log_ind = np.log(gray * s) - np.log(e_set * t_set)
    t_ind = band.temperature_from_log_signal(log_ind)
    _flag_outside(t_ind, log_ind, "true temperature (degC)", "what the band table covers (200..4000 K) once seen by the instrument", true_c)
    return t_ind - ZERO_CELSIUS


def _ratio_table(band1: Band, band2: Band) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    log_t1, log_s1 = band1._table
    _, log_s2 = band2._table
    log_r = log_s1 - log_s2
    if not np.all(np.diff(log_r) > 0):
        raise ValueError(
            f"ratio of {band1.name} to {band2.name} does not increase with temperature; "
            "band 1 must be the shorter wavelength"
        )
    return log_t1, log_r


@lru_cache(maxsize=16)
def _ratio_lookup(band1: Band, band2: Band) -> tuple[tuple[NDArray[np.float64], NDArray[np.float64]], _Knots,
                                                     tuple[NDArray[np.float64], NDArray[np.float64]]]:
    """ln R over the shared ln T knots, and the ln R knots with ln T over them (bands compare by identity)."""
    log_t, log_r = _ratio_table(band1, band2)
    knots = _Knots(log_r)
    return _GRID.slopes(log_r), knots, knots.slopes(log_t)


def _check_slope(value: ArrayLike, name: str) -> NDArray[np.float64]:
    v = np.asarray(value, dtype=float)
    bad = ~(v > 0)
    if np.any(bad):
        raise ValueError(f"{name} must be > 0, got {float(v[bad].ravel()[0])!r}")
    return v


def _log_ratio(band1: Band, band2: Band, t_k: NDArray[np.float64]) -> NDArray[np.float64]:
    s1, s2 = _log_signals((band1, band2), t_k)  # one placing on the shared knots for both bands
    return s1 - s2


@overload
def correct_ratio(
    indicated_c: ArrayLike, band1: Band, band2: Band, slope: ArrayLike, set_slope: ArrayLike = ...,
    *, slope_u: ArrayLike = ..., instrument_u_c: ArrayLike = ..., return_uncertainty: Literal[False] = ...,
) -> NDArray[np.float64]: ...
@overload
def correct_ratio(
    indicated_c: ArrayLike, band1: Band, band2: Band, slope: ArrayLike, set_slope: ArrayLike = ...,
    *, slope_u: ArrayLike = ..., instrument_u_c: ArrayLike = ..., return_uncertainty: Literal[True],
) -> tuple[NDArray[np.float64], NDArray[np.float64]]: ...
def correct_ratio(
    indicated_c: ArrayLike,
    band1: Band,
    band2: Band,
    slope: ArrayLike,
    set_slope: ArrayLike = 1.0,
    *,
    slope_u: ArrayLike = 0.0,
    instrument_u_c: ArrayLike = 0.0,
    return_uncertainty: bool = False,
) -> NDArray[np.float64] | tuple[NDArray[np.float64], NDArray[np.float64]]:
    """True ware temperature from a ratio pyrometer's indicated temperature.

    Parameters
    ----------
    indicated_c : array_like
        What the instrument shows, degC.
    band1, band2 : Band
        The two bands, band 1 the shorter wavelength.
    slope : array_like
        The ware's emissivity slope k = e1/e2 (> 0).
    set_slope : array_like
        The slope the instrument assumes (1 for a gray body).
    slope_u : array_like
        Standard uncertainty of the slope.
    instrument_u_c : array_like
        Standard uncertainty of the indicated temperature, K.
    return_uncertainty : bool
        Also return the standard uncertainty, K.

    Returns
    -------
    numpy.ndarray or (numpy.ndarray, numpy.ndarray)
        Corrected temperature, degC (and its standard uncertainty, K).

    Raises
    ------
    ValueError
        Slopes <= 0, or bands whose ratio does not rise with temperature.

    Notes
    -----
    Gray factors (fouling, smoke, a partly filled field of view) multiply
    both bands and cancel in the ratio, so they are no parameter here.

    References
    ----------
    [DeWitt1988]_ two-colour thermometry.

    Examples
    --------
    >>> b1, b2 = Band(0.75, 0.85), Band(0.95, 1.05)
    >>> round(float(correct_ratio(1300.0, b1, b2, 1.0)), 6)
    1300.0
    """
    k = _check_slope(slope, "slope")
    k_set = _check_slope(set_slope, "set slope")
    forward, knots, inverse = _ratio_lookup(band1, band2)  # numpy.interp's results on the ratio table, to the bit
    t_ind = _to_kelvin(indicated_c)
    lr_ind = _GRID.interp(np.log(t_ind), forward)[0]
    _flag_outside(lr_ind, t_ind, "indicated temperature (K)", "200..4000 K")
    lr = lr_ind + np.log(k_set) - np.log(k)
    t = np.exp(knots.interp(lr, inverse)[0])
    _flag_outside(t, lr, "indicated temperature (degC)", "what the band table covers (200..4000 K) once corrected", indicated_c)
    if not return_uncertainty:
        return t - ZERO_CELSIUS
    u_k = _check_uncertainty(slope_u, "slope uncertainty")
    u_ind = _check_uncertainty(instrument_u_c, "instrument uncertainty")
    d_t = (_log_ratio(band1, band2, t + _DT) - _log_ratio(band1, band2, t - _DT)) / (2 * _DT)
    d_ind = (_log_ratio(band1, band2, t_ind + _DT) - _log_ratio(band1, band2, t_ind - _DT)) / (2 * _DT)
    u = np.sqrt((u_k / (k * d_t)) ** 2 + (d_ind / d_t * u_ind) ** 2)
    return t - ZERO_CELSIUS, u


def indicated_ratio(
    true_c: ArrayLike,
    band1: Band,
    band2: Band,
    slope: ArrayLike,
    set_slope: ArrayLike = 1.0,
    *,
    emissivity: ArrayLike = 1.0,
    transmission: ArrayLike | Window = 1.0,
    background_c: ArrayLike | None = None,
) -> NDArray[np.float64]:
    """What a ratio instrument shows, degC, for ware at ``true_c``; without background the reverse of :func:`correct_ratio`.

    Parameters
    ----------
    slope : array_like
        The ware's emissivity slope k = e1/e2.
    emissivity : array_like
        The ware's emissivity in band 1, e1 (band 2's is e1/k); it matters
        only with a background, since gray factors cancel in the ratio.
    transmission : array_like or Window
        The sight path; a window's spectral transmission differs between
        the bands and biases the ratio like a slope.
    background_c : array_like, optional
        Temperature of the surroundings the ware reflects, degC.

    References
    ----------
    [DeWitt1988]_ two-colour thermometry, with the reflected term of the
    single-band measurement equation in each band.
    """
    k = _check_slope(slope, "slope")
    k_set = _check_slope(set_slope, "set slope")
    log_t, log_r = _ratio_table(band1, band2)
    t = _to_kelvin(true_c)
    if background_c is None and not isinstance(transmission, Window):
        lr = np.interp(np.log(t), log_t, log_r, left=np.nan, right=np.nan) + np.log(k) - np.log(k_set)
    else:
        e1 = check_fraction(emissivity, "emissivity")
        e2 = e1 / k
        if np.any(e2 > 1):
            raise ValueError("emissivity divided by slope exceeds 1 in band 2")
        scene1, gray = _scene(band1, transmission)
        scene2, _ = _scene(band2, transmission)
        s1 = e1 * np.exp(scene1.log_signal(t))
        s2 = e2 * np.exp(scene2.log_signal(t))
        if background_c is not None:
            t_bg = _to_kelvin(background_c)
            s1 = s1 + (1.0 - e1) * np.exp(scene1.log_signal(t_bg))
            s2 = s2 + (1.0 - e2) * np.exp(scene2.log_signal(t_bg))
        lr = np.log(s1) - np.log(s2) - np.log(k_set)
    t_ind = np.exp(np.interp(lr, log_r, log_t, left=np.nan, right=np.nan))
    _flag_outside(t_ind, t, "true temperature (degC)", "what the band table covers (200..4000 K) once seen by the instrument", true_c)
    return t_ind - ZERO_CELSIUS


def wien_single_band(
    indicated_k: ArrayLike, wavelength_m: float, emissivity: ArrayLike, transmission: ArrayLike = 1.0,
    set_emissivity: ArrayLike = 1.0, set_transmission: ArrayLike = 1.0,
) -> NDArray[np.float64]:
    """Narrow-band Wien correction, K: 1/T = 1/T_ind + (lambda/c2) ln(e t/(e_set t_set)). A check only.

    References
    ----------
    [DeWitt1988]_ Wien approximation of the measurement equation.
    """
    t_ind = np.asarray(indicated_k, dtype=float)
    ratio = (check_fraction(emissivity, "emissivity") * check_fraction(transmission, "transmission")) / (
        check_fraction(set_emissivity, "set emissivity") * check_fraction(set_transmission, "set transmission")
    )
    return 1.0 / (1.0 / t_ind + wavelength_m / C2 * np.log(ratio))


def wien_ratio(indicated_k: ArrayLike, wavelength1_m: float, wavelength2_m: float, slope: ArrayLike, set_slope: ArrayLike = 1.0) -> NDArray[np.float64]:
    """Wien ratio correction, K: 1/T = 1/T_ind + ln(k/k_set)/(c2 (1/lambda1 - 1/lambda2)). A check only.

    References
    ----------
    [DeWitt1988]_ two-colour Wien approximation.
    """
    t_ind = np.asarray(indicated_k, dtype=float)
    k = _check_slope(slope, "slope") / _check_slope(set_slope, "set slope")
    return 1.0 / (1.0 / t_ind + np.log(k) / (C2 * (1.0 / wavelength1_m - 1.0 / wavelength2_m)))
