"""Pyrometer corrections: the Wien checks, design-note figures and properties (hypothesis)."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from hypothesis import assume, given, settings
from hypothesis import strategies as st
from scipy.optimize import brentq

from firewatch.physics._warnings import OutOfRangeWarning, RangeError
from firewatch.physics.bands import Band
from firewatch.physics.corrections import (
    correct_ratio,
    correct_single_band,
    effective_transmission,
    indicated_ratio,
    indicated_single_band,
    wien_ratio,
    wien_single_band,
)
from firewatch.physics.windows import Window

K0 = 273.15
SI_BAND = Band(0.8, 1.1)
NARROW = Band(0.6495, 0.6505)
R1, R2 = Band(0.945, 0.955), Band(1.045, 1.055)


def test_narrow_band_agrees_with_wien_at_small_lambda_t() -> None:
    # lambda T ~ 1000 um K: Wien within 1e-6 of Planck (common practice, no source);
    # the remaining difference is the band's width around its centre.
    for eps in (0.3, 0.6, 0.9):
        band_c = float(correct_single_band(1000.0, NARROW, eps))
        wien_c = float(wien_single_band(1000.0 + K0, NARROW.centre_m, eps)) - K0
        assert abs(band_c - wien_c) < 0.02


def test_band_result_departs_from_wien_as_band_widens() -> None:
    # Departure (K) at 1500 degC, emissivity 0.7, bands centred on 1 um. Regression
    # values of this code, shown to size the effect: about 0.1, 1.2 and 4.9 K for
    # widths 0.1, 0.3 and 0.6 um.
    departures = []
    for width in (0.1, 0.3, 0.6):
        band = Band(1.0 - width / 2, 1.0 + width / 2)
        band_c = float(correct_single_band(1500.0, band, 0.7))
        wien_c = float(wien_single_band(1500.0 + K0, band.centre_m, 0.7)) - K0
        departures.append(band_c - wien_c)
    assert departures[0] < departures[1] < departures[2]
    np.testing.assert_allclose(departures, [0.106, 1.205, 4.894], atol=0.01)


def test_wien_fails_at_thermal_wavelengths() -> None:
    # Wien fails at 8 um and 1000 degC (common practice, no source: "about 23 K out"; for
    # emissivity 0.9 this code finds about 28 K, a regression value).
    band = Band(7.995, 8.005)
    band_c = float(correct_single_band(1000.0, band, 0.9))
    wien_c = float(wien_single_band(1000.0 + K0, 8e-6, 0.9)) - K0
    assert abs(wien_c - band_c) > 10.0


@pytest.mark.parametrize(("lam", "expected"), [(0.9, 1.0), (1.6, 1.8), (8.0, 7.0)])
def test_one_percent_emissivity_sensitivity(lam: float, expected: float) -> None:
    # the sensitivity dT/T = (lambda T/c2) de/e (DeWitt & Nutter 1988) with exact Planck: a 1 % emissivity error costs about
    # 1.0 K at 0.9 um, 1.8 K at 1.6 um and 7 K at 8 um, at 1000 degC.
    band = Band(lam - 0.005, lam + 0.005)
    err = float(correct_single_band(1000.0, band, 0.99)) - 1000.0
    assert err == pytest.approx(expected, rel=0.05)


def test_ratio_slope_error_costs_about_ten_times() -> None:
    # the Wien ratio form (DeWitt & Nutter 1988): a 1 % slope error at 0.95/1.05 um and 1000 degC costs about 11 K.
    err = 1000.0 - float(correct_ratio(1000.0, R1, R2, 1.01))
    assert err == pytest.approx(11.0, abs=0.5)
    single = float(correct_single_band(1000.0, Band(0.995, 1.005), 0.99)) - 1000.0
    assert 8 < err / single < 14


def test_ratio_agrees_with_wien() -> None:
    got = float(correct_ratio(1300.0, R1, R2, 1.03)) + K0
    wien = float(wien_ratio(1300.0 + K0, R1.centre_m, R2.centre_m, 1.03))
    assert got == pytest.approx(wien, abs=0.1)


def _instrument_from_signals(s1: float, s2: float) -> float:
    """A ratio instrument built from quadrature signals alone (brentq), degC."""
    target = s1 / s2
    return brentq(lambda t: float(R1.signal(t) / R2.signal(t)) - target, 300.0, 3500.0, xtol=1e-10) - K0


def test_gray_attenuation_leaves_ratio_unchanged_single_band_drops() -> None:
    true_k, eps = 1200.0 + K0, 0.9
    clean = _instrument_from_signals(eps * float(R1.signal(true_k)), eps * float(R2.signal(true_k)))
    for gray in (0.9, 0.6, 0.3):  # fouled window, smoke, a partly filled field of view
        fouled = _instrument_from_signals(gray * eps * float(R1.signal(true_k)), gray * eps * float(R2.signal(true_k)))
        assert fouled == pytest.approx(clean, abs=1e-6)
        single = float(indicated_single_band(1200.0, SI_BAND, eps, gray))
        assert single < float(indicated_single_band(1200.0, SI_BAND, eps, 1.0)) - 5.0
    # and the ratio formula itself has no gray parameter to move
    assert float(indicated_ratio(1200.0, R1, R2, 1.0)) == pytest.approx(1200.0, abs=1e-3)


def test_background_cavity_effect() -> None:
    # With walls at the ware temperature the ware looks black whatever its
    # emissivity (the cavity effect; DeWitt & Nutter 1988).
    shown = float(indicated_single_band(1100.0, SI_BAND, 0.4, background_c=1100.0))
    assert shown == pytest.approx(1100.0, abs=1e-3)
    assert float(correct_single_band(shown, SI_BAND, 0.4, background_c=1100.0)) == pytest.approx(1100.0, abs=1e-3)


def test_reading_below_background_is_nan_with_warning() -> None:
    with pytest.warns(OutOfRangeWarning, match="below what the background"):
        out = correct_single_band(np.array([900.0, 1200.0]), SI_BAND, 0.5, background_c=1150.0)
    assert np.isnan(out[0]) and np.isfinite(out[1])


def test_single_reading_below_background_raises() -> None:
    # issue 12: the README promises a ValueError for a single out-of-range value, and a reading below
    # its background returned NaN; now one value raises RangeError (a ValueError) naming the values
    with pytest.raises(RangeError, match=r"indicated temperature \(degC\) 900 lies below what the background at 1150 degC"):
        correct_single_band(900.0, SI_BAND, 0.5, background_c=1150.0)
    with pytest.raises(ValueError, match="below what the background"):
        correct_single_band(900.0, SI_BAND, 0.5, background_c=1150.0, emissivity_u=0.02, return_uncertainty=True)


def test_uncertainty_matches_numerical_derivatives() -> None:
    kw = dict(band=SI_BAND, transmission=Window("fused-silica"), background_c=900.0)
    t, u = correct_single_band(1150.0, emissivity=0.8, emissivity_u=0.02, return_uncertainty=True, **kw)
    h = 1e-3
    d_eps = (correct_single_band(1150.0, emissivity=0.8 + h, **kw) - correct_single_band(1150.0, emissivity=0.8 - h, **kw)) / (2 * h)
    assert float(u) == pytest.approx(abs(float(d_eps)) * 0.02, rel=0.02)
    _, u_ind = correct_single_band(1150.0, emissivity=0.8, instrument_u_c=2.0, return_uncertainty=True, **kw)
    d_ind = (correct_single_band(1151.0, emissivity=0.8, **kw) - correct_single_band(1149.0, emissivity=0.8, **kw)) / 2.0
    assert float(u_ind) == pytest.approx(abs(float(d_ind)) * 2.0, rel=0.02)
    _, u_zero = correct_single_band(1150.0, emissivity=0.8, return_uncertainty=True, **kw)
    assert float(u_zero) == 0.0
    _, u_k = correct_ratio(1300.0, R1, R2, 1.0, slope_u=0.01, return_uncertainty=True)
    d_k = (correct_ratio(1300.0, R1, R2, 1.001) - correct_ratio(1300.0, R1, R2, 0.999)) / 0.002
    assert float(u_k) == pytest.approx(abs(float(d_k)) * 0.01, rel=0.02)


def test_transmission_uncertainty_is_relative_to_effective_value() -> None:
    # A 1 % transmission error costs the same as a 1 % emissivity error without background
    # (they multiply in the measurement equation: common practice, no source).
    _, u_tau = correct_single_band(1000.0, SI_BAND, 1.0, 0.8, transmission_u=0.008, return_uncertainty=True)
    _, u_eps = correct_single_band(1000.0, SI_BAND, 0.8, 1.0, emissivity_u=0.008, return_uncertainty=True)
    assert float(u_tau) == pytest.approx(float(u_eps), rel=1e-3)


def test_effective_transmission() -> None:
    assert float(effective_transmission(SI_BAND, 0.7, 1000.0)) == 0.7
    w = float(effective_transmission(SI_BAND, Window("sapphire", fouling=0.5), 1000.0))
    assert w == pytest.approx(0.5 * 0.860, abs=0.002)  # sapphire ~0.860 at 0.9 um: 2n/(n^2+1), Malitson & Dodge 1972 (from memory)


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [
        ({"emissivity": 0.0}, r"emissivity must be in \(0, 1\], got 0.0"),
        ({"emissivity": 1.2}, r"emissivity must be in \(0, 1\], got 1.2"),
        ({"emissivity": np.nan}, r"emissivity must be in \(0, 1\]"),
        ({"emissivity": 0.9, "set_emissivity": -1}, r"set emissivity must be in \(0, 1\]"),
        ({"emissivity": 0.9, "transmission": 0.0}, r"transmission must be in \(0, 1\]"),
        ({"emissivity": 0.9, "emissivity_u": -0.1, "return_uncertainty": True}, "must be >= 0"),
    ],
)
def test_impossible_input_raises(kwargs: dict, message: str) -> None:
    with pytest.raises(ValueError, match=message):
        correct_single_band(1000.0, SI_BAND, **kwargs)


def test_ratio_bad_input() -> None:
    with pytest.raises(ValueError, match="slope must be > 0"):
        correct_ratio(1000.0, R1, R2, 0.0)
    with pytest.raises(ValueError, match="band 1 must be the shorter"):
        correct_ratio(1000.0, R2, R1, 1.0)


def test_out_of_table_and_nan() -> None:
    with pytest.raises(RangeError):
        correct_single_band(5000.0, SI_BAND, 0.9)
    with pytest.warns(OutOfRangeWarning):
        out = correct_single_band(np.array([1000.0, 5000.0]), SI_BAND, 0.9)
    assert np.isnan(out[1])
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert np.isnan(correct_single_band(np.array([np.nan]), SI_BAND, 0.9)).all()


def test_shapes_broadcast() -> None:
    t = np.linspace(800, 1200, 5)[:, None]
    eps = np.array([0.5, 0.7, 0.9])
    assert correct_single_band(t, SI_BAND, eps).shape == (5, 3)
    out, u = correct_single_band(t, SI_BAND, eps, emissivity_u=0.01, return_uncertainty=True)
    assert out.shape == u.shape == (5, 3)
    assert correct_ratio(t, R1, R2, eps[None, :] + 0.5).shape == (5, 3)


temps = st.floats(300.0, 2200.0)
fractions = st.floats(0.05, 1.0)


@settings(max_examples=150, deadline=None)
@given(temps, fractions, fractions)
def test_property_own_settings_return_the_reading(t: float, eps: float, tau: float) -> None:
    got = float(correct_single_band(t, SI_BAND, eps, tau, set_emissivity=eps, set_transmission=tau))
    assert got == pytest.approx(t, abs=1e-6)


@settings(max_examples=150, deadline=None)
@given(temps, fractions, fractions, st.one_of(st.none(), st.floats(20.0, 1500.0)), st.booleans())
def test_property_correction_and_reverse_compose_to_identity(t, eps, e_set, bg, window) -> None:
    transmission = Window("fused-silica", fouling=0.8) if window else 0.8
    try:
        shown = float(indicated_single_band(t, SI_BAND, eps, transmission, set_emissivity=e_set, background_c=bg))
    except RangeError:  # the instrument would read beyond the band table's 4000 K
        assume(False)
    assume(np.isfinite(shown) and 150.0 < shown < 3400.0)
    back = float(correct_single_band(shown, SI_BAND, eps, transmission, set_emissivity=e_set, background_c=bg))
    assert back == pytest.approx(t, abs=0.01)


@settings(max_examples=150, deadline=None)
@given(temps, st.floats(0.05, 0.95), st.floats(0.001, 0.05), st.one_of(st.none(), st.floats(20.0, 250.0)))
def test_property_more_emissivity_never_raises_corrected(t, eps, step, bg) -> None:
    try:
        lo = float(correct_single_band(t, SI_BAND, eps, background_c=bg))
        hi = float(correct_single_band(t, SI_BAND, min(eps + step, 1.0), background_c=bg))
    except RangeError:  # correction beyond the band table's 4000 K
        assume(False)
    assert hi <= lo + 1e-9


@settings(max_examples=100, deadline=None)
@given(st.floats(600.0, 2500.0), st.floats(0.8, 1.25))
def test_property_ratio_round_trip(t: float, k: float) -> None:
    try:
        shown = float(indicated_ratio(t, R1, R2, k))
    except RangeError:  # beyond the band table's 4000 K
        assume(False)
    assert float(correct_ratio(shown, R1, R2, k)) == pytest.approx(t, abs=0.01)
