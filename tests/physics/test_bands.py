"""Band integrals and their fast inversion against adaptive quadrature (scipy.integrate)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from scipy.integrate import quad

from firewatch.physics._warnings import OutOfRangeWarning, RangeError
from firewatch.physics.bands import Band
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
