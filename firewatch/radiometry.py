"""Radiation thermometry: Planck's law, instrument bands, windows and pyrometer corrections.

The public face of :mod:`firewatch.physics.planck`, :mod:`~firewatch.physics.bands`,
:mod:`~firewatch.physics.windows`, :mod:`~firewatch.physics.corrections` and
:mod:`~firewatch.physics.montecarlo`.

>>> from firewatch.radiometry import Band, correct_single_band
>>> round(float(correct_single_band(1200.0, Band(0.8, 1.1), emissivity=0.85)), 1)
1224.5

Where first-order uncertainty is unreliable (``UncertaintyWarning``), the
Monte Carlo propagation of JCGM 101:2008 gives an asymmetric 95 % interval:

>>> r = monte_carlo_single_band(1200.0, Band(0.8, 1.1), 0.5, emissivity_u=0.1, seed=1)
>>> round(float(r.low_c)), round(float(r.high_c))
(1256, 1399)
"""

from __future__ import annotations

from firewatch.physics._warnings import OutOfRangeWarning, RangeError, UncertaintyWarning
from firewatch.physics.bands import Band, band_radiance
from firewatch.physics.constants import C1L, C2, C2_ITS90, SIGMA, WIEN_B
from firewatch.physics.corrections import (
    LINEARITY_LIMIT,
    correct_ratio,
    correct_single_band,
    effective_transmission,
    indicated_ratio,
    indicated_single_band,
    wien_ratio,
    wien_single_band,
)
from firewatch.physics.montecarlo import MonteCarloResult, monte_carlo_single_band
from firewatch.physics.planck import (
    blackbody_fraction,
    planck_radiance,
    rayleigh_jeans_radiance,
    total_radiance,
    wien_radiance,
)
from firewatch.physics.windows import (
    MATERIALS,
    Window,
    band_effective_transmission,
    refractive_index,
    slab_transmission,
    spectral_transmission,
)

__all__ = [
    "Band",
    "C1L",
    "C2",
    "C2_ITS90",
    "LINEARITY_LIMIT",
    "MATERIALS",
    "MonteCarloResult",
    "OutOfRangeWarning",
    "RangeError",
    "UncertaintyWarning",
    "SIGMA",
    "WIEN_B",
    "Window",
    "band_effective_transmission",
    "band_radiance",
    "blackbody_fraction",
    "correct_ratio",
    "correct_single_band",
    "effective_transmission",
    "indicated_ratio",
    "indicated_single_band",
    "monte_carlo_single_band",
    "planck_radiance",
    "rayleigh_jeans_radiance",
    "refractive_index",
    "slab_transmission",
    "spectral_transmission",
    "total_radiance",
    "wien_radiance",
    "wien_ratio",
    "wien_single_band",
]
