"""Band integrals and their fast inversion against adaptive quadrature (scipy.integrate)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.integrate import quad

from firewatch.physics import bands
from firewatch.physics._warnings import OutOfRangeWarning, RangeError
from firewatch.physics.bands import _GRID, Band, _Knots
from firewatch.physics.planck import planck_radiance

BANDS = [(0.65, 0.66), (0.8, 1.1), (0.95, 1.05), (1.5, 1.7), (8.0, 14.0)]
"""Typical instrument bands, um (common practice, no source)."""

INVERSION_LIMIT_K = 0.01
"""Issue 2: the fast inversion must hold 0.01 K against quadrature over 300-3300 K."""


@pytest.mark.parametrize(("start", "end"), BANDS)
@pytest.mark.parametrize("t", [300.0, 1000.0, 3300.0])
def test_flat_band_matches_adaptive_quadrature(start: float, end: float, t: float) -> None:
    ref, _ = quad(lambda x: float(planck_radiance(x, t)), start * 1e-6, end * 1e-6, epsabs=0, epsrel=1e-13)
    assert float(Band(start, end).signal(t)) == pytest.approx(ref, rel=1e-10)


def test_tabulated_response_matches_adaptive_quadrature() -> None:
    lam = np.array([0.7, 0.8, 0.9, 1.0, 1.1])
    resp = np.array([0.0, 0.6, 1.0, 0.8, 0.1])
    band = Band.from_response(lam, resp)
    t = 1200.0
    ref = sum(
        quad(lambda x: float(planck_radiance(x * 1e-6, t)) * np.interp(x, lam, resp) * 1e-6, a, b, epsrel=1e-13)[0]
        for a, b in zip(lam[:-1], lam[1:])
    )
    assert float(band.signal(t)) == pytest.approx(ref, rel=1e-10)


@pytest.mark.parametrize(("start", "end"), BANDS)
def test_fast_inversion_within_limit_over_300_3300_k(start: float, end: float) -> None:
    band = Band(start, end)
    t = np.linspace(300.0, 3300.0, 30001)
    err = band.temperature_k(band.signal(t)) - t
    assert np.max(np.abs(err)) < INVERSION_LIMIT_K
    fwd = np.exp(band.log_signal(t)) / band.signal(t) - 1.0
    assert np.max(np.abs(fwd)) < 2e-6  # the forward table, relative (regression bound)


def test_csv_response(tmp_path: Path) -> None:
    path = tmp_path / "resp.csv"
    path.write_text("# a silicon detector\nwavelength_um,response\n0.8,0.5\n0.9,1.0\n1.1,0.2\n")
    band = Band.from_csv(path)
    assert (band.start_um, band.end_um) == (0.8, 1.1)
    direct = Band.from_response([0.8, 0.9, 1.1], [0.5, 1.0, 0.2])
    assert float(band.signal(1000.0)) == pytest.approx(float(direct.signal(1000.0)), rel=1e-14)


def test_csv_errors_name_file_and_line(tmp_path: Path) -> None:
    path = tmp_path / "bad.csv"
    path.write_text("wavelength_um,response\n0.8,0.5\n0.9,oops\n")
    with pytest.raises(ValueError, match=r"bad.csv:3: expected 'wavelength_um,response'"):
        Band.from_csv(path)
    path.write_text("0.9,1\n0.8,1\n")
    with pytest.raises(ValueError, match="strictly increasing"):
        Band.from_csv(path)
    with pytest.raises(FileNotFoundError):
        Band.from_csv(tmp_path / "missing.csv")


@pytest.mark.parametrize(("start", "end"), [(1.1, 0.8), (0.0, 1.0), (-1.0, 1.0), (1.0, 1.0), (np.nan, 1.0)])
def test_bad_band_raises(start: float, end: float) -> None:
    with pytest.raises(ValueError, match="0 < start < end"):
        Band(start, end)


def test_out_of_table_temperatures() -> None:
    band = Band(0.8, 1.1)
    with pytest.raises(RangeError, match="outside 200..4000 K"):
        band.log_signal(5000.0)
    with pytest.warns(OutOfRangeWarning, match="1 of 2"):
        out = band.log_signal(np.array([1000.0, 5000.0]))
    assert np.isnan(out[1])
    assert np.isnan(band.temperature_k(np.array([0.0, -1.0, np.nan]))).all()


def test_shapes() -> None:
    band = Band(1.5, 1.7)
    assert band.signal(np.full((2, 3), 900.0)).shape == (2, 3)
    assert band.temperature_k(band.signal(np.full((4, 1), 900.0))).shape == (4, 1)


# -- issue 15: the tables read without numpy.interp's search give numpy.interp's results, to the bit ----------------


def _tables(band: Band) -> list[tuple[_Knots, np.ndarray, np.ndarray]]:
    """(knots, xp, fp) of the band's forward (ln S over ln T) and inverse (ln T over ln S) tables."""
    log_t, log_s = band._table
    return [(_GRID, log_t, log_s), (_Knots(log_s), log_s, log_t)]


def _awkward(xp: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """Arguments in random order over and beyond the knots, every knot, its neighbours in the last place, NaN and inf."""
    pad = 0.01 * (xp[-1] - xp[0])
    return np.concatenate([
        rng.uniform(xp[0] - pad, xp[-1] + pad, 20_000), xp, np.nextafter(xp, -np.inf), np.nextafter(xp, np.inf),
        [np.nan, np.inf, -np.inf, xp[0] - 1e300, xp[-1] + 1e300],
    ])


@pytest.mark.parametrize(("start", "end"), BANDS)
def test_bucket_lookup_is_numpy_interp_to_the_bit(start: float, end: float) -> None:
    # issue 15: the buckets must find numpy.interp's interval for every argument, at the knots, a last place either
    # side of them, outside the table and for NaN and inf; numpy.interp is the reference (a general-purpose library)
    rng = np.random.default_rng(15)
    for knots, xp, fp in _tables(Band(start, end)):
        x = _awkward(xp, rng)
        order = rng.permutation(x.size)
        got = knots.interp(x[order], knots.slopes(fp))[0]
        want = np.interp(x[order], xp, fp, left=np.nan, right=np.nan)
        np.testing.assert_array_equal(got, want)
        assert np.isnan(got).sum() == np.isnan(want).sum() > 0


def test_no_two_knots_share_a_bucket() -> None:
    # the exactness argument of _Knots rests on this (checked when built; a regression check here)
    for band in (Band(0.65, 0.66), Band(0.8, 1.1), Band(8.0, 14.0)):
        for knots, xp, _ in _tables(band):
            bucket = knots._bucket(xp)
            assert bucket[0] >= 1 and np.all(np.diff(bucket) >= 1)


def test_ordered_and_few_arguments_go_to_numpy_interp_and_agree() -> None:
    # numpy.interp's guess makes it the cheaper for readings in time order; both ways give the same doubles
    band = Band(0.8, 1.1)
    t = np.linspace(300.0, 3300.0, 50_000)
    ordered = np.log(t)
    scattered = ordered[np.random.default_rng(3).permutation(ordered.size)]
    assert _GRID.searched(ordered) and not _GRID.searched(scattered) and _GRID.searched(scattered[:100])
    log_t, log_s = band._table
    np.testing.assert_array_equal(band.log_signal(t), np.interp(ordered, log_t, log_s))
    np.testing.assert_array_equal(band.log_signal(np.exp(scattered)), np.interp(np.log(np.exp(scattered)), log_t, log_s))
    ls = band.log_signal(np.exp(scattered))
    np.testing.assert_array_equal(band.temperature_from_log_signal(ls), np.exp(np.interp(ls, log_s, log_t)))


def test_slices_and_shapes_change_nothing(monkeypatch: pytest.MonkeyPatch) -> None:
    band = Band(1.5, 1.7)
    x = np.exp(np.random.default_rng(4).uniform(np.log(250.0), np.log(3900.0), (3, 7001)))
    whole = band.log_signal(x)
    monkeypatch.setattr(bands, "_SLICE", 1000)  # slices ending mid-row
    np.testing.assert_array_equal(band.log_signal(x), whole)
    assert whole.shape == (3, 7001)


_PROPERTY_TABLES = {edges: _tables(Band(*edges)) for edges in [(0.65, 0.66), (0.8, 1.1), (8.0, 14.0)]}


@settings(max_examples=200, deadline=None)
@given(st.sampled_from(sorted(_PROPERTY_TABLES)), st.integers(0, 1),
       st.lists(st.tuples(st.floats(-0.01, 1.01), st.integers(0, 8191), st.integers(-2, 2), st.booleans()),
                min_size=1, max_size=40),
       st.lists(st.sampled_from([np.nan, np.inf, -np.inf]), max_size=3))
def test_property_bucket_lookup_is_numpy_interp(edges: tuple[float, float], which: int, points: list[tuple[float, int, int, bool]],
                                                odd: list[float]) -> None:
    # anywhere over and a little beyond the table, or on a knot moved by up to two places in the last digit
    knots, xp, fp = _PROPERTY_TABLES[edges][which]
    x = []
    for frac, i, ulps, on_knot in points:
        v = xp[i] if on_knot else xp[0] + frac * (xp[-1] - xp[0])
        for _ in range(abs(ulps)):
            v = np.nextafter(v, np.inf if ulps > 0 else -np.inf)
        x.append(v)
    y = np.array(x + odd, dtype=float)
    got = knots.value(knots.place(y), *knots.slopes(fp))
    np.testing.assert_array_equal(got, np.interp(y, xp, fp, left=np.nan, right=np.nan))


def test_knots_too_uneven_for_buckets_are_read_by_numpy_interp() -> None:
    # two knots 1e-9 apart over a span of 1 would need 10^9 buckets: numpy.interp reads such a table instead
    xp = np.array([0.0, 0.5, 0.5 + 1e-9, 1.0])
    knots = _Knots(xp)
    x = np.random.default_rng(5).uniform(-0.1, 1.1, 5000)
    assert knots.searched(x)
    fp = np.array([0.0, 1.0, 2.0, 4.0])
    np.testing.assert_array_equal(knots.interp(x, knots.slopes(fp))[0], np.interp(x, xp, fp, left=np.nan, right=np.nan))
