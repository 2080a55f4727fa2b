"""Physical constants at full precision, SI units.

The defining constants h, c and k are exact in the 2019 SI (CODATA 2018,
repeated unchanged in CODATA 2022), so they are written here as defined, and
the radiation constants derived from them are exact too. They were read from
scipy.constants before; importing that module costs about 0.13 s at every
start of every command, for three numbers fixed by definition. The test of
this module checks each value against scipy.constants.

References
----------
See ``CODATA2018`` and ``PrestonThomas1990`` in docs/references.md.
"""

from __future__ import annotations

import math

__all__ = [
    "C1L",
    "C2",
    "C2_ITS90",
    "SIGMA",
    "WIEN_B",
    "WIEN_X",
    "ZERO_CELSIUS",
    "H",
    "C",
    "K_B",
]

H: float = 6.62607015e-34
"""Planck constant, J s (exact, 2019 SI)."""
C: float = 299792458.0
"""Speed of light in vacuum, m/s (exact)."""
K_B: float = 1.380649e-23
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
SIGMA: float = 2.0 * math.pi**5 * K_B**4 / (15.0 * H**3 * C**2)
"""Stefan-Boltzmann constant, 2 pi^5 k^4 / (15 h^3 c^2), W m^-2 K^-4 (CODATA, exact)."""
WIEN_X: float = 4.965114231744276
"""The root of x = 5 (1 - exp(-x)), where the spectral radiance in wavelength peaks: 5 + W0(-5 exp(-5)) with
Lambert's W, to the last bit of a float64 (a float64 Newton iteration lands one unit in the last place away)."""
WIEN_B: float = H * C / (K_B * WIEN_X)
"""Wien wavelength displacement constant, hc / (k x), m K (CODATA)."""
ZERO_CELSIUS: float = 273.15
"""0 degC in kelvin, 273.15 K (the definition of the Celsius scale)."""
