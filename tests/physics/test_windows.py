"""Window materials against their published dispersion equations."""

from __future__ import annotations

import numpy as np
import pytest

from firewatch.physics.bands import Band
from firewatch.physics.corrections import indicated_single_band
from firewatch.physics.windows import (
    MATERIALS,
    Window,
    band_effective_transmission,
    refractive_index,
    slab_transmission,
    spectral_transmission,
)

DATA_INDEX = [
    ("fused-silica", 0.90, 1.45175, 5e-5),  # Malitson 1965
    ("sapphire", 1.60, 1.74530, 5e-5),  # Malitson & Dodge 1972, ordinary ray
    ("fused-silica", 0.5876, 1.4585, 2e-4),  # Malitson 1965, d line, from memory
    ("calcium-fluoride", 0.5876, 1.4338, 2e-4),  # Malitson 1963, d line, from memory
    ("sapphire", 0.5876, 1.7682, 3e-4),  # Malitson & Dodge 1972, n_o at the d line, from memory
    ("borosilicate", 0.5876, 1.5168, 2e-4),  # Schott N-BK7 data sheet n_d, from memory
]


@pytest.mark.parametrize(("name", "lam_um", "n", "tol"), DATA_INDEX)
def test_refractive_index(name: str, lam_um: float, n: float, tol: float) -> None:
    assert float(refractive_index(name, lam_um * 1e-6)) == pytest.approx(n, abs=tol)


def test_slab_transmission_check_values() -> None:
    # 2n/(n^2+1) (Born & Wolf 1999) at Malitson 1965's n = 1.45175 (fused silica, 0.90 um) -> 0.9343 and
    # Malitson & Dodge 1972's n_o = 1.74530 (sapphire, 1.60 um) -> 0.8627.
    assert float(slab_transmission(1.45175)) == pytest.approx(0.9343, abs=5e-5)
    assert float(slab_transmission(1.74530)) == pytest.approx(0.8627, abs=5e-5)
    # a slab of index 1 loses nothing (Fresnel, common practice)
    assert float(slab_transmission(1.0)) == 1.0


@pytest.mark.parametrize(
    ("name", "expected"),
    # band-effective values for a 0.9 um band: 2n/(n^2+1) (Born & Wolf 1999) at the published indexes near 0.9 um
    # (Malitson 1965, Malitson & Dodge 1972, Malitson 1963), from memory
    [("fused-silica", 0.934), ("sapphire", 0.860), ("calcium-fluoride", 0.939)],
)
def test_band_effective_near_design_values(name: str, expected: float) -> None:
    tau = float(band_effective_transmission(Band(0.8, 1.0), Window(name), 1273.15))
    assert tau == pytest.approx(expected, abs=0.002)


def test_glass_passes_no_thermal_band() -> None:
    # Glass windows do not pass 8-14 um (common practice, no source);
    # calcium fluoride passes part of it (cut-off 9-10 um, from memory).
    thermal = Band(8.0, 14.0)
    for name in ("fused-silica", "sapphire", "borosilicate"):
        assert float(band_effective_transmission(thermal, Window(name), 600.0)) < 1e-6
    assert 0.1 < float(band_effective_transmission(thermal, Window("calcium-fluoride"), 600.0)) < 0.8


def test_cutoffs_in_expected_order() -> None:
    # cut-offs: borosilicate ~2.7, fused silica ~4-4.5, sapphire ~5-5.5, CaF2 ~9-10 um (from memory)
    lam = np.linspace(1.0, 12.0, 2000) * 1e-6
    half = {n: lam[np.argmax(spectral_transmission(n, lam) < 0.45)] * 1e6 for n in MATERIALS}
    assert 2.5 < half["borosilicate"] < 2.9
    assert 4.0 < half["fused-silica"] < 4.5
    assert 5.0 < half["sapphire"] < 5.5
    assert 9.0 < half["calcium-fluoride"] < 10.0


def test_clean_fused_silica_reads_about_7_k_low() -> None:
    # an uncorrected clean fused-silica window reads about 7 K low at 1000 degC and 0.9 um: the Wien form
    # (DeWitt & Nutter 1988) gives lambda T^2/c2 ln(1/0.9343) = 6.9 K.
    low = 1000.0 - float(indicated_single_band(1000.0, Band(0.89, 0.91), 1.0, Window("fused-silica")))
    assert 6.5 < low < 7.5


def test_fouling_is_gray_factor_and_measured_curve_overrides() -> None:
    band = Band(0.8, 1.1)
    clean = float(band_effective_transmission(band, Window("sapphire"), 1200.0))
    assert float(band_effective_transmission(band, Window("sapphire", fouling=0.5), 1200.0)) == pytest.approx(0.5 * clean)
    measured = Window(measured=((0.5, 2.0), (0.9, 0.9)))
    assert float(band_effective_transmission(band, measured, 1200.0)) == pytest.approx(0.9, rel=1e-12)


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [
        ({"material": "glass"}, "unknown window material 'glass'"),
        ({"material": "sapphire", "fouling": 0.0}, r"fouling factor must be in \(0, 1\]"),
        ({"material": "sapphire", "fouling": 1.5}, r"fouling factor must be in \(0, 1\]"),
        ({}, "needs a material or a measured curve"),
        ({"measured": ((1.0, 0.5), (0.9, 0.9))}, "increasing wavelength"),
        ({"measured": ((0.5, 1.0), (0.9, 1.2))}, r"lie in \[0, 1\]"),
    ],
)
def test_bad_windows(kwargs: dict, message: str) -> None:
    with pytest.raises(ValueError, match=message):
        Window(**kwargs)


def test_shapes_and_bad_index() -> None:
    assert spectral_transmission("sapphire", np.full((2, 5), 1e-6)).shape == (2, 5)
    with pytest.raises(ValueError, match="refractive index must be >= 1"):
        slab_transmission(0.9)


def test_array_fouling_works_everywhere() -> None:
    # issue 12: Window(..., fouling=array) raised a TypeError although arrays are documented
    from firewatch.physics.corrections import correct_single_band

    band = Band(0.8, 1.1)
    factors = np.array([1.0, 0.9, 0.7])
    window = Window("fused-silica", fouling=factors)
    assert window.transmission(0.9e-6).shape == (3,)
    assert window.transmission(0.9e-6)[2] == pytest.approx(0.7 * float(Window("fused-silica").transmission(0.9e-6)))
    assert window == Window("fused-silica", fouling=[1.0, 0.9, 0.7]) and window != Window("fused-silica", fouling=0.9)
    assert hash(window) == hash(Window("fused-silica", fouling=factors.copy()))
    assert window.name == "fused-silica, fouled"
    # one correction over the array equals the corrections one factor at a time
    readings = np.array([1000.0, 1000.0, 1000.0])
    together = correct_single_band(readings, band, 0.9, window)
    one_by_one = [float(correct_single_band(1000.0, band, 0.9, Window("fused-silica", fouling=f))) for f in factors]
    np.testing.assert_allclose(together, one_by_one, rtol=0, atol=1e-9)
    np.testing.assert_allclose(band_effective_transmission(band, window, 1273.15),
                               factors * float(band_effective_transmission(band, Window("fused-silica"), 1273.15)))
    # the window keeps its own copy: changing the caller's array changes nothing
    factors[0] = 0.1
    assert float(window.fouling[0]) == 1.0
    with pytest.raises(ValueError):
        window.fouling[0] = 0.5  # read-only, like the frozen window
