"""Planck's law and its limits against CODATA constants and a heat-transfer handbook table."""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
from scipy import constants as sc
from scipy.integrate import quad
from scipy.optimize import brentq, minimize_scalar

from firewatch.physics.constants import C1L, C2, C2_ITS90, SIGMA, WIEN_B
from firewatch.physics.planck import (
    blackbody_fraction,
    planck_radiance,
    rayleigh_jeans_radiance,
    total_radiance,
    wien_radiance,
)

# Mechanical Engineers' Handbook vol. 4 (Kutz, ed.), table "Radiation function
# F0-lambdaT", four figures: lambda T in um K.
DATA_BLACKBODY_FRACTION = [
    (1000.0, 0.3207e-3),
    (2000.0, 0.06673),
    (3000.0, 0.2732),
    (5000.0, 0.6337),
    (10000.0, 0.9142),
]


def test_radiation_constants_are_codata() -> None:
    # CODATA 2018 (Tiesinga et al., Rev. Mod. Phys. 93, 025010, 2021; exact under the 2019 SI).
    assert C1L == pytest.approx(1.191042972e-16, rel=1e-9)
    assert C2 == pytest.approx(1.438776877e-2, rel=1e-9)
    assert SIGMA == sc.Stefan_Boltzmann
    assert WIEN_B == pytest.approx(2.897771955e-3, rel=1e-9)  # CODATA, scipy.constants


def test_the_constants_written_out_are_scipys_to_the_bit() -> None:
    """firewatch writes h, c and k as the 2019 SI defines them rather than importing scipy.constants at every start
    (issue 15); each value is the reference library's exactly (scipy.constants, CODATA 2018)."""
    from firewatch.physics import constants

    assert (constants.H, constants.C, constants.K_B) == (sc.h, sc.c, sc.k)
    assert (constants.SIGMA, constants.WIEN_B, constants.ZERO_CELSIUS) == (sc.Stefan_Boltzmann, sc.Wien, sc.zero_Celsius)
    x = constants.WIEN_X  # the root of x = 5 (1 - exp(-x)), to rounding
    assert abs(x - 5.0 * (1.0 - math.exp(-x))) < 4 * math.ulp(x)


@pytest.mark.parametrize(("lambda_t_um_k", "fraction"), DATA_BLACKBODY_FRACTION)
def test_fraction_by_integrating_planck_matches_handbook(lambda_t_um_k: float, fraction: float) -> None:
    t = 1000.0
    lam = lambda_t_um_k * 1e-6 / t
    emitted, _ = quad(lambda x: float(planck_radiance(x, t)), 1e-9, lam, epsrel=1e-12, limit=200)
    value = emitted / float(total_radiance(t))
    assert value == pytest.approx(fraction, rel=6e-4)  # four figures


@pytest.mark.parametrize(("lambda_t_um_k", "fraction"), DATA_BLACKBODY_FRACTION)
def test_fraction_series_matches_handbook(lambda_t_um_k: float, fraction: float) -> None:
    assert float(blackbody_fraction(lambda_t_um_k * 1e-6)) == pytest.approx(fraction, rel=6e-4)


@pytest.mark.parametrize("t", [300.0, 1273.15, 3000.0])
def test_integral_over_all_wavelengths_is_stefan_boltzmann(t: float) -> None:
    # Stefan-Boltzmann: pi * integral L d lambda = sigma T^4, sigma from scipy.constants (CODATA).
    peak = WIEN_B / t
    parts = [(1e-8 * peak, peak), (peak, 10 * peak), (10 * peak, 1e4 * peak)]
    total = sum(quad(lambda x: float(planck_radiance(x, t)), a, b, epsrel=1e-13, limit=400)[0] for a, b in parts)
    assert np.pi * total == pytest.approx(sc.Stefan_Boltzmann * t**4, rel=1e-9)


@pytest.mark.parametrize("t", [500.0, 1500.0, 2500.0])
def test_peak_obeys_wien_displacement(t: float) -> None:
    guess = 2898.0 / t  # um, bracket around the expected peak
    res = minimize_scalar(
        lambda x: -float(planck_radiance(x * 1e-6, t)), bracket=(0.5 * guess, guess, 2.0 * guess), tol=1e-12
    )
    assert res.x * 1e-6 * t == pytest.approx(sc.Wien, rel=1e-7)  # CODATA b, scipy.constants


def test_long_wavelength_limit_is_rayleigh_jeans() -> None:
    # Planck/RJ = x/(e^x - 1) -> 1 - x/2 for x = c2/(lambda T) -> 0 (series of Planck's law).
    t = 1000.0
    lam = np.array([1e-3, 1e-2, 1e-1])  # 1 mm .. 10 cm
    x = C2 / (lam * t)
    ratio = planck_radiance(lam, t) / rayleigh_jeans_radiance(lam, t)
    np.testing.assert_allclose(ratio, 1.0 - x / 2.0, rtol=0, atol=x.max() ** 2)
    assert abs(ratio[-1] - 1.0) < 1e-4


def test_short_wavelength_limit_is_wien() -> None:
    # Wien is within 1 % of Planck below lambda T = 3000 um K (common practice, no source).
    lt = np.linspace(200.0, 3000.0, 50) * 1e-6
    lam = lt / 1500.0
    np.testing.assert_array_less(1.0 - wien_radiance(lam, 1500.0) / planck_radiance(lam, 1500.0), 0.01)


def test_its90_second_constant_effect() -> None:
    # T inverted from a radiance scales with c2: using ITS-90's c2 = 0.014388 m K
    # instead of CODATA's moves T by +1.6e-5 T, 0.02 K at 1000 degC (the ratio of the two c2 values,
    # Preston-Thomas, Metrologia 27, 1990, and CODATA 2018).
    lam, t = 0.65e-6, 1273.15
    radiance = float(planck_radiance(lam, t))

    def invert(c2: float) -> float:
        return brentq(lambda x: C1L / (lam**5 * np.expm1(c2 / (lam * x))) - radiance, 500.0, 3000.0, xtol=1e-12)

    shift = invert(C2_ITS90) - invert(C2)
    assert shift / t == pytest.approx(C2_ITS90 / C2 - 1.0, rel=1e-6)
    assert shift == pytest.approx(0.0206, abs=0.0005)


@pytest.mark.parametrize(("lam_shape", "t_shape", "out"), [((), (), ()), ((5,), (), (5,)), ((3, 1), (4,), (3, 4))])
def test_shapes(lam_shape, t_shape, out) -> None:
    assert planck_radiance(np.full(lam_shape, 1e-6), np.full(t_shape, 1000.0)).shape == out


@pytest.mark.parametrize("bad", [0.0, -1e-6])
def test_impossible_wavelength_raises(bad: float) -> None:
    with pytest.raises(ValueError, match="wavelength must be > 0"):
        planck_radiance(bad, 1000.0)


@pytest.mark.parametrize("bad", [0.0, -5.0])
def test_impossible_temperature_raises(bad: float) -> None:
    with pytest.raises(ValueError, match="temperature must be > 0 K"):
        planck_radiance(1e-6, bad)


def test_nan_and_extremes_do_not_crash() -> None:
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        out = planck_radiance(np.array([1e-6, 1e-6, 1e-9]), np.array([np.nan, np.inf, 300.0]))
    assert np.isnan(out[0]) and np.isinf(out[1]) and out[2] == 0.0
