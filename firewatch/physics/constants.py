"""Physical constants at full precision, SI units.

The defining constants h, c and k are exact in the 2019 SI; scipy.constants
carries them (CODATA 2018, repeated unchanged in CODATA 2022), so the
radiation constants derived here are exact too.

References
----------
See ``CODATA2018`` and ``PrestonThomas1990`` in docs/references.md.
"""

from __future__ import annotations

from scipy import constants as _sc

__all__ = [
    "C1L",
    "C2",
    "C2_ITS90",
    "SIGMA",
    "WIEN_B",
    "ZERO_CELSIUS",
    "H",
    "C",
    "K_B",
]

H: float = _sc.h
"""Planck constant, J s (exact, 2019 SI)."""
C: float = _sc.c
"""Speed of light in vacuum, m/s (exact)."""
K_B: float = _sc.k
"""Boltzmann constant, J/K (exact, 2019 SI)."""

C1L: float = 2.0 * H * C**2
"""First radiation constant for spectral radiance, 2hc^2 = 1.191042972e-16 W m^2 sr^-1."""
C2: float = H * C / K_B
"""Second radiation constant, hc/k = 1.438776877e-2 m K (CODATA, exact). firewatch uses this value."""
C2_ITS90: float = 0.014388
"""Second radiation constant fixed by ITS-90 for radiation thermometry, m K [PrestonThomas1990].

Using it instead of :data:`C2` raises a temperature derived from a ratio to a
reference by the factor C2_ITS90/C2, about +1.6e-5 T (0.02 K at 1000 degC);
firewatch uses :data:`C2` throughout and tests the size of that difference.
"""
SIGMA: float = _sc.Stefan_Boltzmann
"""Stefan-Boltzmann constant, W m^-2 K^-4 (CODATA, exact)."""
WIEN_B: float = _sc.Wien
"""Wien wavelength displacement constant, m K (CODATA)."""
ZERO_CELSIUS: float = _sc.zero_Celsius
"""0 degC in kelvin, 273.15 K."""
