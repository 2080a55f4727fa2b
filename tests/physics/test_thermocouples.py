"""ITS-90 thermocouple functions against NIST Monograph 175 and a registry reference library."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from firewatch.physics._warnings import OutOfRangeWarning, RangeError
from firewatch.physics.thermocouples import (
    TYPES,
    emf_range,
    emf_to_temperature,
    inverse_error_band,
    inverse_polynomial,
    seebeck,
    temperature_range,
    temperature_to_emf,
)

# (type, degC, mV) -- NIST Monograph 175 reference tables, 0 degC reference junction.
DATA_NIST_TABLE = [
    # NIST Monograph 175 (Burns et al. 1993), reference tables:
    ("K", 1000.0, 41.276),
    ("K", -100.0, -3.554),
    ("S", 1000.0, 9.587),
    ("R", 1000.0, 10.506),
    ("B", 1000.0, 4.834),
    ("N", 1000.0, 36.256),
    ("J", 700.0, 39.132),
    ("T", 300.0, 14.862),
    ("E", 900.0, 68.787),
    # NIST Monograph 175 tables, from memory:
    ("K", 100.0, 4.096),
    ("K", 300.0, 12.209),
    # EMF limits printed with the NIST SRD 60 inverse coefficients, which are
    # the Monograph 175 table values at the ends of those ranges (type S
    # left out: its printed limits are not table values):
    ("K", -200.0, -5.891),
    ("K", 500.0, 20.644),
    ("K", 1372.0, 54.886),
    ("J", -210.0, -8.095),
    ("J", 760.0, 42.919),
    ("J", 1200.0, 69.553),
    ("E", -200.0, -8.825),
    ("E", 1000.0, 76.373),
    ("N", -200.0, -3.990),
    ("N", 600.0, 20.613),
    ("N", 1300.0, 47.513),
    ("T", -200.0, -5.603),
    ("T", 400.0, 20.872),
    ("R", -50.0, -0.226),
    ("R", 250.0, 1.923),
    ("R", 1200.0, 13.228),
    ("R", 1664.5, 19.739),
    ("R", 1768.1, 21.103),
    ("B", 250.0, 0.291),
    ("B", 700.0, 2.431),
    ("B", 1820.0, 13.820),
]

TABLE_ROUNDING_MV = 0.0005
"""Half the tables' last digit (0.001 mV): common practice, no source."""


@pytest.mark.parametrize(("tc_type", "t_c", "emf_mv"), DATA_NIST_TABLE)
def test_forward_matches_nist_table(tc_type: str, t_c: float, emf_mv: float) -> None:
    assert abs(float(temperature_to_emf(t_c, tc_type)) - emf_mv) <= TABLE_ROUNDING_MV + 1e-12


@pytest.mark.parametrize(("tc_type", "t_c", "emf_mv"), DATA_NIST_TABLE)
def test_inverse_of_rounded_table_value(tc_type: str, t_c: float, emf_mv: float) -> None:
    # A table value rounded to 0.001 mV, inverted exactly, is off by at most
    # half a digit over the Seebeck coefficient (0.013 degC for K, 0.06 for B
    # at 1000 degC; the Seebeck coefficients from NIST Monograph 175's reference functions).
    t = float(emf_to_temperature(emf_mv, tc_type))
    allowed = TABLE_ROUNDING_MV / abs(float(seebeck(t_c, tc_type))) + 1e-6
    assert abs(t - t_c) <= allowed


def test_rounding_sizes_quoted_by_design_notes() -> None:
    # half a table digit (0.0005 mV) over the Seebeck coefficient of NIST Monograph 175's functions at 1000 degC:
    # 0.0005/0.039 = 0.013 degC (K) and 0.0005/0.0091 = 0.055 degC (B), from rounding alone (common practice, no source).
    assert abs(float(emf_to_temperature(41.276, "K")) - 1000.0) <= 0.013
    assert abs(float(emf_to_temperature(4.834, "B")) - 1000.0) <= 0.06


@pytest.mark.parametrize("tc_type", TYPES)
def test_published_inverse_polynomial_within_error_band(tc_type: str) -> None:
    # NIST SRD 60 / Monograph 175 publish an error band for each inverse range.
    earlier: list[tuple[float, float]] = []
    for rng in inverse_error_band(tc_type):
        t = np.linspace(rng["t_min_c"], rng["t_max_c"], 2001)
        e = temperature_to_emf(t, tc_type)
        err = inverse_polynomial(e, tc_type) - t
        # inverse_polynomial takes the first range that holds an EMF (R and S
        # ranges overlap), so judge each range on the points it evaluates
        own = (e >= rng["emf_min_mv"]) & (e <= rng["emf_max_mv"])
        for lo, hi in earlier:
            own &= ~((e >= lo) & (e <= hi))
        earlier.append((rng["emf_min_mv"], rng["emf_max_mv"]))
        bound = max(abs(rng["error_low_c"]), abs(rng["error_high_c"])) + 0.001  # 0.001: the bands' last digit
        assert np.max(np.abs(err[own])) <= bound, (tc_type, rng)


@pytest.mark.parametrize("tc_type", TYPES)
def test_refined_inverse_round_trip(tc_type: str) -> None:
    e0, e1 = emf_range(tc_type)
    lo = float(emf_to_temperature(e0, tc_type))
    hi = float(emf_to_temperature(e1, tc_type))
    t = np.linspace(lo, hi, 5001)
    back = emf_to_temperature(temperature_to_emf(t, tc_type), tc_type)
    np.testing.assert_allclose(back, t, atol=1e-6)  # module promise: 1e-6 degC


@pytest.mark.parametrize("tc_type", TYPES)
def test_agrees_with_registry_library_over_whole_range(tc_type: str) -> None:
    # thermocouple-its90 (PyPI, verified against all 12,026 NIST table points).
    its90 = pytest.importorskip("thermocouple_its90")
    ref = its90.get(tc_type)
    t_lo, t_hi = temperature_range(tc_type)
    t = np.linspace(t_lo, t_hi, 400)
    ours = temperature_to_emf(t, tc_type)
    theirs = np.array([ref.emf(float(x)) for x in t])
    np.testing.assert_allclose(ours, theirs, atol=1e-9)
    e_lo, e_hi = emf_range(tc_type)
    r_lo, r_hi = ref.invertible_emf_range
    e = np.linspace(max(e_lo, r_lo), min(e_hi, r_hi), 400)
    ours_t = emf_to_temperature(e, tc_type)
    theirs_t = np.array([ref.temperature(float(x)) for x in e])
    np.testing.assert_allclose(ours_t, theirs_t, atol=1e-4)


def test_cold_junction_compensation() -> None:
    # E_total = E_meas + E(t_cj): a K junction at 1000 degC read at a 25 degC
    # cold junction shows 41.276 - 1.000 mV (NIST Monograph 175: K 25 degC = 1.000 mV).
    assert float(temperature_to_emf(25.0, "K")) == pytest.approx(1.000, abs=TABLE_ROUNDING_MV)
    t = float(emf_to_temperature(41.276 - 1.000, "K", cold_junction_c=25.0))
    assert t == pytest.approx(1000.0, abs=0.03)


def test_cold_junction_broadcasts() -> None:
    emf = np.array([[10.0], [20.0]])
    cj = np.array([0.0, 20.0, 30.0])
    assert emf_to_temperature(emf, "K", cj).shape == (2, 3)


def test_type_b_has_no_inverse_below_250_c() -> None:
    # Type B is not single-valued below about 42 degC; NIST gives no inverse below 250 degC.
    with pytest.raises(RangeError, match="type B"):
        emf_to_temperature(0.1, "B")


def test_out_of_range_scalar_raises_and_array_gives_nan() -> None:
    with pytest.raises(RangeError, match=r"type K .* 60 is outside"):
        emf_to_temperature(60.0, "K")
    with pytest.raises(RangeError, match="1500 is outside"):
        temperature_to_emf(1500.0, "K")
    with pytest.warns(OutOfRangeWarning, match="1 of 3"):
        out = emf_to_temperature([10.0, 60.0, 20.0], "K")
    assert np.isnan(out[1]) and not np.isnan(out[[0, 2]]).any()


def test_range_messages_quote_the_exact_value() -> None:
    # issue 12: the message rounded the value it rejected ("1372 is outside -270..1372");
    # the range ends are NIST Monograph 175's (type K: -270 to 1372 degC)
    with pytest.raises(RangeError, match=r"1372\.0001 is outside -270\.\.1372 degC"):
        temperature_to_emf(1372.0001, "K")
    with pytest.raises(RangeError, match=r"-270\.00000001 is outside"):
        temperature_to_emf(-270.00000001, "K")
    with pytest.raises(RangeError, match=r"54\.8871 is outside"):
        emf_to_temperature(54.8871, "K")
    with pytest.raises(RangeError, match=r"\b2000 is outside"):
        temperature_to_emf(2000.0, "K")  # a whole number reads without a trailing .0


def test_nan_input_is_nan_without_warning() -> None:
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert np.isnan(emf_to_temperature(np.array([np.nan]), "K")).all()
        assert np.isnan(temperature_to_emf(np.nan, "K"))


def test_unknown_type() -> None:
    with pytest.raises(ValueError, match="unknown thermocouple type 'Q'"):
        temperature_to_emf(100.0, "Q")


@pytest.mark.parametrize("shape", [(), (3,), (2, 3), (2, 2, 2)])
def test_shapes(shape: tuple[int, ...]) -> None:
    t = np.full(shape, 500.0)
    assert temperature_to_emf(t, "N").shape == shape
    assert emf_to_temperature(np.full(shape, 10.0), "N").shape == shape


@settings(max_examples=200, deadline=None)
@given(st.sampled_from(TYPES), st.floats(0.0, 1.0))
def test_property_round_trip(tc_type: str, frac: float) -> None:
    lo, hi = emf_range(tc_type)
    e = lo + frac * (hi - lo)
    assert float(temperature_to_emf(emf_to_temperature(e, tc_type), tc_type)) == pytest.approx(e, abs=1e-8)


def _reference_forward(t: np.ndarray, tc_type: str, slope: bool = False) -> np.ndarray:
    """E(t), or dE/dt, written straight from the published form (NIST Monograph 175 section 4: a polynomial
    per range, type K's exponential term above 0 degC), ``polyval`` and ``polyder`` per call as before issue 15."""
    from firewatch.physics._its90_data import FORWARD

    out = np.full(t.shape, np.nan)
    for t0, t1, coeffs, expo in FORWARD[tc_type]:
        mask = (t >= t0) & (t <= t1) & np.isnan(out)
        tm = t[mask]
        c = np.asarray(coeffs)
        if slope:
            e = np.polynomial.polynomial.polyval(tm, np.polynomial.polynomial.polyder(c))
        else:
            e = np.polynomial.polynomial.polyval(tm, c)
        if expo is not None:
            g = expo[0] * np.exp(expo[1] * (tm - expo[2]) ** 2)
            e = e + (g * 2.0 * expo[1] * (tm - expo[2]) if slope else g)
        out[mask] = e
    return out


@pytest.mark.parametrize("tc_type", TYPES)
def test_forward_with_derivatives_made_once_is_the_published_form_to_the_bit(tc_type: str) -> None:
    # issue 15: the derivative coefficients are made once per type, not per call; E(t) must not move
    lo, hi = temperature_range(tc_type)
    t = np.concatenate([np.linspace(lo, hi, 4001), [lo, hi, 0.0, np.nan]])
    assert temperature_to_emf(t, tc_type).view(np.int64).tolist() == _reference_forward(t, tc_type).view(np.int64).tolist()
    assert seebeck(t, tc_type).view(np.int64).tolist() == _reference_forward(t, tc_type, slope=True).view(np.int64).tolist()


@pytest.mark.parametrize("tc_type", TYPES)
def test_stacked_channels_convert_as_one_call_per_channel_to_the_bit(tc_type: str) -> None:
    # issue 15: the pipeline converts every thermocouple of a type in one call over the channels stacked
    # row by row; each row must come out exactly as that channel converted alone (regression check, no
    # external value involved)
    rng = np.random.default_rng(15)
    e_lo, e_hi = emf_range(tc_type)
    channels, n = 7, 300
    emf = rng.uniform(e_lo - 0.5, e_hi + 0.5, (channels, n))  # some readings past either end
    emf[1, ::13] = np.nan  # missing readings
    emf[2] = e_hi  # the top end itself
    cold = rng.uniform(0.0, 40.0, (channels, n))
    emf = emf - _reference_forward(cold, tc_type) * (rng.uniform(size=(channels, n)) < 0.5)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", OutOfRangeWarning)
        stacked = emf_to_temperature(emf, tc_type, cold)
        rows = [emf_to_temperature(emf[i], tc_type, cold[i]) for i in range(channels)]
    assert np.isfinite(stacked).sum() > channels * n // 2  # most readings are in range
    for i in range(channels):
        assert stacked[i].view(np.int64).tolist() == rows[i].view(np.int64).tolist(), i
