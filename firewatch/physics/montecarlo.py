"""Monte Carlo propagation of uncertainty through the single-band correction (JCGM 101:2008).

First-order propagation (:func:`~firewatch.physics.corrections.correct_single_band`
with ``return_uncertainty=True``) treats the correction as linear over the
inputs' uncertainties. Where it is not (large u(e)/e, long wavelengths, a
background near the target) the distribution of the corrected temperature
is skewed and the linear standard uncertainty understates one side of it.
The propagation of distributions of JCGM 101:2008, GUM Supplement 1
[JCGM101]_, replaces it:

1. assign each input a probability density (6.4): with only an estimate and
   a standard uncertainty known, a Gaussian (6.4.7); emissivity and
   transmission cannot leave (0, 1], so theirs is that Gaussian restricted
   to (0, 1] (drawn by the inverse of its distribution function, so no draw
   is rejected);
2. draw M values of every input at once and evaluate the measurement model
   on all of them in one vectorised pass (7.2-7.4);
3. report the mean and standard deviation of the model values (7.6) and the
   probabilistically symmetric coverage interval from their order
   statistics (7.7), which is asymmetric about the estimate where the
   model is curved.

Draws for which the model has no value (the drawn background alone would
give more than the reading) are left out and counted; where they exceed
:data:`UNDEFINED_LIMIT` of the draws an :class:`UncertaintyWarning` says so.
Draws beyond the band table (an emissivity drawn near zero makes the ware
hotter than 4000 K) count as +/- infinity, so that an interval end can be
unbounded rather than silently short.

With M = 10^4 (the default) the interval ends scatter by roughly 2 % of
the interval's width from seed to seed; JCGM 101 7.2.2 suggests M = 10^6
for two significant digits. The result is reproducible for a given seed.

References
----------
See ``JCGM101``, ``GUM2008`` and ``JKB1994`` in docs/references.md.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy.special import ndtr, ndtri

from firewatch.physics._warnings import OutOfRangeWarning, UncertaintyWarning
from firewatch.physics.bands import TABLE_T_MAX_K, TABLE_T_MIN_K, Band
from firewatch.physics.constants import ZERO_CELSIUS
from firewatch.physics.corrections import (
    _check_uncertainty,
    _log_scene,
    _scene,
    check_fraction,
    correct_single_band,
    effective_transmission,
)
from firewatch.physics.windows import Window

__all__ = ["MonteCarloResult", "monte_carlo_single_band", "truncated_normal", "UNDEFINED_LIMIT"]

UNDEFINED_LIMIT = 0.01
"""Fraction of draws without a model value above which the result warns."""

_BLOCK = 1 << 20
"""Draws x readings evaluated together (bounds the memory of one pass)."""


@dataclass(frozen=True)
class MonteCarloResult:
    """The Monte Carlo propagation's answer; arrays have the readings' broadcast shape.

    Attributes
    ----------
    value_c : numpy.ndarray
        The correction at the inputs' estimates, degC (as :func:`correct_single_band`).
    mean_c : numpy.ndarray
        Mean of the model values over the draws, degC (JCGM 101 7.6).
    u_c : numpy.ndarray
        Their standard deviation, K (JCGM 101 7.6).
    low_c, high_c : numpy.ndarray
        The probabilistically symmetric coverage interval, degC (JCGM 101 7.7);
        +/- inf where more than its tail of the draws lies beyond the band table.
    undefined : numpy.ndarray
        Fraction of draws for which the model has no value (left out).
    draws : int
    seed : int | None
    coverage : float
    """

    value_c: NDArray[np.float64]
    mean_c: NDArray[np.float64]
    u_c: NDArray[np.float64]
    low_c: NDArray[np.float64]
    high_c: NDArray[np.float64]
    undefined: NDArray[np.float64]
    draws: int
    seed: int | None
    coverage: float


def truncated_normal(
    rng: np.random.Generator, mean: ArrayLike, sd: ArrayLike, low: float, high: float, size: tuple[int, ...]
) -> NDArray[np.float64]:
    """Draws from a Gaussian restricted to [low, high], by the inverse of its distribution function.

    ``size`` ends with the broadcast shape of ``mean`` and ``sd``; where
    ``sd`` is 0 every draw is the mean.

    Examples
    --------
    The mean of N(0.95, 0.05) cut at 1 is 0.95 - 0.05 phi(1)/Phi(1) = 0.9356,
    the truncated normal's mean [JKB1994]_:

    >>> x = truncated_normal(np.random.default_rng(1), 0.95, 0.05, 0.0, 1.0, (10000,))
    >>> bool(x.max() <= 1.0), round(float(np.mean(x)), 3)
    (True, 0.936)
    """
    mu = np.asarray(mean, dtype=float)
    sigma = np.asarray(sd, dtype=float)
    safe = np.where(sigma > 0, sigma, 1.0)
    a = ndtr((low - mu) / safe)
    b = ndtr((high - mu) / safe)
    p = a + (b - a) * rng.random(size)
    with np.errstate(divide="ignore", invalid="ignore"):
        x = mu + safe * ndtri(p)
    return np.where(sigma > 0, np.clip(x, low, high), np.broadcast_to(mu, size))


def monte_carlo_single_band(
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
    draws: int = 10_000,
    seed: int | np.random.Generator | None = 1,
    coverage: float = 0.95,
) -> MonteCarloResult:
    """The single-band correction with its uncertainty propagated by Monte Carlo (JCGM 101:2008).

    Parameters are those of :func:`correct_single_band` (the ``_u``
    arguments are standard uncertainties), and:

    Parameters
    ----------
    draws : int
        Monte Carlo trials M per reading (at least 100).
    seed : int, numpy.random.Generator or None
        Seed of the random generator (``None``: fresh entropy); a given seed
        gives the same result every time.
    coverage : float
        Coverage probability of the interval, in (0, 1).

    Returns
    -------
    MonteCarloResult

    Raises
    ------
    ValueError
        As :func:`correct_single_band`, or for fewer than 100 draws or a
        coverage outside (0, 1).

    Warns
    -----
    UncertaintyWarning
        Where more than :data:`UNDEFINED_LIMIT` of the draws have no value.

    References
    ----------
    [JCGM101]_ sections 6.4.7 (Gaussian), 7.2-7.7 (the propagation, the
    estimate, its standard uncertainty and the coverage interval).

    Examples
    --------
    >>> r = monte_carlo_single_band(1000.0, Band(0.8, 1.1), 0.5, emissivity_u=0.1)
    >>> round(float(r.value_c)), bool(r.high_c - r.value_c > r.value_c - r.low_c)
    (1082, True)
    """
    if int(draws) < 100:
        raise ValueError(f"draws must be at least 100, got {draws!r}")
    if not 0.0 < float(coverage) < 1.0:
        raise ValueError(f"coverage must be in (0, 1), got {coverage!r}")
    draws = int(draws)
    value_c = np.asarray(
        correct_single_band(indicated_c, band, emissivity, transmission, set_emissivity, set_transmission, background_c),
        dtype=float,
    )
    eps = check_fraction(emissivity, "emissivity")
    e_set = check_fraction(set_emissivity, "set emissivity")
    t_set = check_fraction(set_transmission, "set transmission")
    u_eps = _check_uncertainty(emissivity_u, "emissivity uncertainty")
    u_tau = _check_uncertainty(transmission_u, "transmission uncertainty")
    u_ind = _check_uncertainty(instrument_u_c, "instrument uncertainty")
    u_bg = _check_uncertainty(background_u_c, "background uncertainty")
    scene_band, gray = _scene(band, transmission)
    tau_eff = effective_transmission(band, transmission, np.where(np.isfinite(value_c), value_c, 1000.0))
    t_ind = np.asarray(indicated_c, dtype=float) + ZERO_CELSIUS
    has_bg = background_c is not None
    t_bg = np.asarray(background_c, dtype=float) + ZERO_CELSIUS if has_bg else np.zeros(())
    shape = np.broadcast_shapes(value_c.shape, np.shape(eps), np.shape(e_set), np.shape(t_set), np.shape(gray),
                                np.shape(tau_eff), np.shape(u_eps), np.shape(u_tau), np.shape(u_ind), np.shape(u_bg),
                                np.shape(t_bg))
    flat = {name: np.broadcast_to(v, shape).ravel() for name, v in dict(
        eps=eps, u_eps=u_eps, gray=gray, tau=tau_eff, u_tau=u_tau, t_ind=t_ind, u_ind=u_ind, settings=e_set * t_set,
        t_bg=t_bg, u_bg=u_bg, value=value_c).items()}
    n = int(np.prod(shape, dtype=int))
    rng = seed if isinstance(seed, np.random.Generator) else np.random.default_rng(seed)
    out = {k: np.full(n, np.nan) for k in ("mean", "u", "low", "high", "undefined")}
    step = max(1, _BLOCK // draws)
    for start in range(0, n, step):
        sl = slice(start, min(n, start + step))
        size = (draws, sl.stop - sl.start)
        part = {k: v[sl] for k, v in flat.items()}
        e = truncated_normal(rng, part["eps"], part["u_eps"], 1e-9, 1.0, size)
        tau = truncated_normal(rng, part["tau"], part["u_tau"], 1e-9, 1.0, size)
        ind = part["t_ind"] + part["u_ind"] * rng.standard_normal(size)
        with warnings.catch_warnings(), np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            warnings.simplefilter("ignore", OutOfRangeWarning)  # off-table draws are handled below
            log_meas = band.log_signal(np.clip(ind, TABLE_T_MIN_K, TABLE_T_MAX_K)) + np.log(part["settings"])
            s_bg = None
            if has_bg:
                bg = part["t_bg"] + part["u_bg"] * rng.standard_normal(size)
                s_bg = np.exp(scene_band.log_signal(np.clip(bg, TABLE_T_MIN_K, TABLE_T_MAX_K)))
            log_scene, _ = _log_scene(log_meas - np.log(part["gray"] * tau / part["tau"]), e, s_bg)
            t = scene_band.temperature_from_log_signal(log_scene)
        log_t, log_s = scene_band._table
        t = np.where(np.isnan(t) & (log_scene > log_s[-1]), np.inf, t)
        t = np.where(np.isnan(t) & (log_scene < log_s[0]), -np.inf, t)
        defined = ~np.isnan(t)
        finite = np.isfinite(t)
        m = defined.sum(axis=0)
        nf = finite.sum(axis=0)
        with np.errstate(invalid="ignore", divide="ignore"):
            mean = np.where(finite, t, 0.0).sum(axis=0) / nf
            sd = np.sqrt(np.square(np.where(finite, t - mean, 0.0)).sum(axis=0) / (nf - 1))
        # an infinite tail (draws beyond the table) has no mean: the interval is the answer then
        unbounded = (m > nf) | (nf < 2)
        ys = np.sort(t, axis=0)  # NaN sorts last: the m defined values come first
        # JCGM 101 7.7 over the m defined values: q = p m of them, starting at the r-th (1-based)
        q_m = np.rint(coverage * m).astype(int)
        r_m = np.maximum(1, (m - q_m + 1) // 2)
        cols = np.arange(size[1])
        low = ys[np.clip(r_m - 1, 0, draws - 1), cols]
        high = ys[np.clip(np.minimum(r_m + q_m, m) - 1, 0, draws - 1), cols]
        ok = m >= 2
        out["mean"][sl] = np.where(ok & ~unbounded, mean - ZERO_CELSIUS, np.nan)
        out["u"][sl] = np.where(ok & ~unbounded, sd, np.nan)
        out["low"][sl] = np.where(ok, low - ZERO_CELSIUS, np.nan)
        out["high"][sl] = np.where(ok, high - ZERO_CELSIUS, np.nan)
        out["undefined"][sl] = 1.0 - m / draws
    # a missing reading is missing in every answer, not an undefined draw
    missing = ~np.isfinite(flat["t_ind"]) | ~np.isfinite(flat["t_bg"])
    for k in out:
        out[k][missing] = np.nan
    worst = np.nan_to_num(out["undefined"], nan=0.0)
    if np.any(worst > UNDEFINED_LIMIT):
        warnings.warn(
            f"up to {worst.max():.1%} of the draws have no value (the drawn background alone would give more than the "
            "reading); the interval describes the rest",
            UncertaintyWarning,
            stacklevel=2,
        )
    return MonteCarloResult(
        value_c=value_c,
        mean_c=out["mean"].reshape(shape),
        u_c=out["u"].reshape(shape),
        low_c=out["low"].reshape(shape),
        high_c=out["high"].reshape(shape),
        undefined=out["undefined"].reshape(shape),
        draws=draws,
        seed=seed if isinstance(seed, int) else None,
        coverage=float(coverage),
    )
