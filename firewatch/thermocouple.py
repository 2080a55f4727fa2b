"""Thermocouple conversions (ITS-90, NIST Monograph 175) and tolerance classes.

The public face of :mod:`firewatch.physics.thermocouples` and
:mod:`firewatch.physics.tolerances`; see those modules for the equations.

>>> from firewatch.thermocouple import emf_to_temperature, temperature_to_emf
>>> round(float(emf_to_temperature(41.276, "K")), 1)
1000.0
"""

from __future__ import annotations

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
from firewatch.physics.tolerances import TOLERANCE_CLASSES, tolerance, tolerance_uncertainty

__all__ = [
    "TYPES",
    "TOLERANCE_CLASSES",
    "OutOfRangeWarning",
    "RangeError",
    "emf_range",
    "emf_to_temperature",
    "inverse_error_band",
    "inverse_polynomial",
    "seebeck",
    "temperature_range",
    "temperature_to_emf",
    "tolerance",
    "tolerance_uncertainty",
]
