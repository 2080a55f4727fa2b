"""Black-body spectral radiance and its classical limits.

Planck's law [Planck1901]_ in the form for spectral radiance per unit
wavelength,

    L(lambda, T) = c1L lambda^-5 / (exp(c2 / (lambda T)) - 1),

with c1L = 2hc^2 and c2 = hc/k from :mod:`firewatch.physics.constants`.
Its Wien (short-wavelength) and Rayleigh-Jeans (long-wavelength) limits are
given beside it, and the black-body fraction F(0 -> lambda T) used by heat
transfer handbooks [Kutz2015]_ as a series [Siegel2002]_.

References
----------
See ``Planck1901``, ``Kutz2015`` and ``Siegel2002`` in docs/references.md.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

from firewatch.physics.constants import C1L, C2, K_B, SIGMA, C

__all__ = [
    "check_wavelength",
    "check_temperature",
    "planck_radiance",
    "wien_radiance",
    "rayleigh_jeans_radiance",
    "blackbody_fraction",
    "total_radiance",
]


def check_wavelength(wavelength_m: ArrayLike) -> NDArray[np.float64]:
    """Return wavelengths as a float array, raising ``ValueError`` for any value <= 0."""
    lam = np.asarray(wavelength_m, dtype=float)
    if np.any(lam <= 0):
        raise ValueError(f"wavelength must be > 0 m, got {float(lam[lam <= 0].ravel()[0])!r}")
    return lam


def check_temperature(temperature_k: ArrayLike) -> NDArray[np.float64]:
    """Return temperatures as a float array, raising ``ValueError`` for any value <= 0 K."""
    t = np.asarray(temperature_k, dtype=float)
    if np.any(t <= 0):
        raise ValueError(f"temperature must be > 0 K, got {float(t[t <= 0].ravel()[0])!r}")
    return t


def planck_radiance(wavelength_m: ArrayLike, temperature_k: ArrayLike) -> NDArray[np.float64]:
    """Black-body spectral radiance per unit wavelength.

    Parameters
    ----------
    wavelength_m : array_like
        Wavelength in vacuum, m.
    temperature_k : array_like
        Temperature, K.

    Returns
    -------
    numpy.ndarray
        Spectral radiance, W sr^-1 m^-3, broadcast shape of the inputs.

    Raises
    ------
    ValueError
        If any wavelength or temperature is <= 0.

    Notes
    -----
    ``expm1`` keeps the long-wavelength limit accurate; at very short
    lambda T the exponential overflows to inf and the radiance is 0, which
    is the correct limit. NaN propagates.

    ============== ============ ============
    quantity       unit         range
    ============== ============ ============
    wavelength_m   m            > 0
    temperature_k  K            > 0
    result         W sr-1 m-3   >= 0
    ============== ============ ============

    References
    ----------
    [Planck1901]_

    Examples
    --------
    >>> f"{float(planck_radiance(1e-6, 1273.15)):.4e}"
    '1.4723e+09'
    """
    lam = check_wavelength(wavelength_m)
    t = check_temperature(temperature_k)
    with np.errstate(over="ignore", divide="ignore"):
        return C1L / (lam**5 * np.expm1(C2 / (lam * t)))


def wien_radiance(wavelength_m: ArrayLike, temperature_k: ArrayLike) -> NDArray[np.float64]:
    """Wien's approximation c1L lambda^-5 exp(-c2/(lambda T)), within 1 % of Planck below lambda T = 3000 um K.

    References
    ----------
    [Planck1901]_ short-wavelength limit.
    """
    lam = check_wavelength(wavelength_m)
    t = check_temperature(temperature_k)
    return C1L / lam**5 * np.exp(-C2 / (lam * t))


def rayleigh_jeans_radiance(wavelength_m: ArrayLike, temperature_k: ArrayLike) -> NDArray[np.float64]:
    """Rayleigh-Jeans limit 2 c k T / lambda^4, Planck's law as lambda T -> infinity.

    References
    ----------
    [Planck1901]_ long-wavelength limit.
    """
    lam = check_wavelength(wavelength_m)
    t = check_temperature(temperature_k)
    return 2.0 * C * K_B * t / lam**4


def total_radiance(temperature_k: ArrayLike) -> NDArray[np.float64]:
    """Radiance integrated over all wavelengths, sigma T^4 / pi (Stefan-Boltzmann law), W sr^-1 m^-2."""
    t = check_temperature(temperature_k)
    return SIGMA * t**4 / np.pi


def blackbody_fraction(lambda_t_m_k: ArrayLike, terms: int = 60) -> NDArray[np.float64]:
    """Fraction of black-body emission below wavelength lambda at temperature T, F(0 -> lambda T).

    Parameters
    ----------
    lambda_t_m_k : array_like
        The product lambda T, m K (> 0).
    terms : int
        Terms of the series; 60 gives full double precision for
        lambda T >= 500 um K and beyond.

    Returns
    -------
    numpy.ndarray
        The fraction, 0..1.

    Notes
    -----
    Series [Siegel2002]_: with x = c2/(lambda T),
    F = (15/pi^4) sum_n (e^{-n x}/n) (x^3 + 3x^2/n + 6x/n^2 + 6/n^3).

    References
    ----------
    [Siegel2002]_, tabulated in [Kutz2015]_.
    """
    lt = np.asarray(lambda_t_m_k, dtype=float)
    if np.any(lt <= 0):
        raise ValueError(f"lambda*T must be > 0 m K, got {float(lt[lt <= 0].ravel()[0])!r}")
    x = C2 / lt
    n = np.arange(1, terms + 1, dtype=float).reshape((terms,) + (1,) * x.ndim)
    series = np.exp(-n * x) / n * (x**3 + 3 * x**2 / n + 6 * x / n**2 + 6 / n**3)
    fraction: NDArray[np.float64] = 15.0 / np.pi**4 * series.sum(axis=0)  # numpy's stubs type float ufunc results as Any
    return fraction
