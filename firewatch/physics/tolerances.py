"""Tolerance classes of new thermocouple wire, as data, and the standard uncertainty they imply.

Two standards are tabulated, each as ranges with a rule:

* ASTM E230/E230M, Table 1, "standard" and "special" tolerances on initial
  values [ASTME230]_: the greater of a fixed value and a percentage of |t|,
  above 0 degC and, in the table's second part, below it (types E, K and T
  standard, E and T special; there are no special tolerances for type K
  below 0 degC, and none for B, J, N, R and S there).
* IEC 60584-1:2013, Table 2, classes 1, 2 and 3 [IEC60584]_: a fixed value
  on one part of the range, a fraction of |t| on the other (type R and S
  class 1: 1 + 0.003 (t - 1100) degC above 1100 degC). Class 3 covers the
  low temperatures for E, K, N and T (down to -200 degC) and the high ones
  for B; J, R and S have no class 3.

Where a standard gives no value for a type, class and temperature the
result is NaN, so that a caller can tell "not covered" from a number.

The values were entered from memory of the standards' tables; a site with a
calibration certificate should give the channel's own uncertainty instead.
In service, base-metal thermocouples drift beyond these (type K by several
degrees after time at 250-550 degC [Webster2021]_), which is why the
divergence alarms also allow for lag and watch for drift.

References
----------
See ``ASTME230``, ``IEC60584`` and ``Webster2021`` in docs/references.md.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

from firewatch.physics.thermocouples import check_type

__all__ = ["TOLERANCE_CLASSES", "tolerance", "tolerance_uncertainty"]

# (t_low_c, t_high_c, fixed_c, fraction, offset_c): tolerance is
# max(fixed, fraction*|t|) when offset is None, else fixed + fraction*(t - offset).
_Rule = tuple[float, float, float, float, float | None]

_K_N_ASTM_STD: tuple[_Rule, ...] = ((0.0, 1260.0, 2.2, 0.0075, None),)
_K_N_ASTM_SPE: tuple[_Rule, ...] = ((0.0, 1260.0, 1.1, 0.004, None),)

TOLERANCE_CLASSES: dict[str, dict[str, tuple[_Rule, ...]]] = {
    "astm-standard": {
        "B": ((870.0, 1700.0, 0.0, 0.005, None),),
        "E": ((-200.0, 0.0, 1.7, 0.01, None), (0.0, 870.0, 1.7, 0.005, None)),
        "J": ((0.0, 760.0, 2.2, 0.0075, None),),
        "K": ((-200.0, 0.0, 2.2, 0.02, None),) + _K_N_ASTM_STD,
        "N": _K_N_ASTM_STD,
        "R": ((0.0, 1480.0, 1.5, 0.0025, None),),
        "S": ((0.0, 1480.0, 1.5, 0.0025, None),),
        "T": ((-200.0, 0.0, 1.0, 0.015, None), (0.0, 370.0, 1.0, 0.0075, None)),
    },
    "astm-special": {
        "B": ((870.0, 1700.0, 0.0, 0.0025, None),),
        "E": ((-200.0, 0.0, 1.0, 0.005, None), (0.0, 870.0, 1.0, 0.004, None)),
        "J": ((0.0, 760.0, 1.1, 0.004, None),),
        "K": _K_N_ASTM_SPE,
        "N": _K_N_ASTM_SPE,
        "R": ((0.0, 1480.0, 0.6, 0.001, None),),
        "S": ((0.0, 1480.0, 0.6, 0.001, None),),
        "T": ((-200.0, 0.0, 0.5, 0.008, None), (0.0, 370.0, 0.5, 0.004, None)),
    },
    "iec-1": {
        "E": ((-40.0, 375.0, 1.5, 0.0, None), (375.0, 800.0, 0.0, 0.004, None)),
        "J": ((-40.0, 375.0, 1.5, 0.0, None), (375.0, 750.0, 0.0, 0.004, None)),
        "K": ((-40.0, 375.0, 1.5, 0.0, None), (375.0, 1000.0, 0.0, 0.004, None)),
        "N": ((-40.0, 375.0, 1.5, 0.0, None), (375.0, 1000.0, 0.0, 0.004, None)),
        "R": ((0.0, 1100.0, 1.0, 0.0, None), (1100.0, 1600.0, 1.0, 0.003, 1100.0)),
        "S": ((0.0, 1100.0, 1.0, 0.0, None), (1100.0, 1600.0, 1.0, 0.003, 1100.0)),
        "T": ((-40.0, 125.0, 0.5, 0.0, None), (125.0, 350.0, 0.0, 0.004, None)),
    },
    "iec-2": {
        "B": ((600.0, 1700.0, 0.0, 0.0025, None),),
        "E": ((-40.0, 333.0, 2.5, 0.0, None), (333.0, 900.0, 0.0, 0.0075, None)),
        "J": ((-40.0, 333.0, 2.5, 0.0, None), (333.0, 750.0, 0.0, 0.0075, None)),
        "K": ((-40.0, 333.0, 2.5, 0.0, None), (333.0, 1200.0, 0.0, 0.0075, None)),
        "N": ((-40.0, 333.0, 2.5, 0.0, None), (333.0, 1200.0, 0.0, 0.0075, None)),
        "R": ((0.0, 600.0, 1.5, 0.0, None), (600.0, 1600.0, 0.0, 0.0025, None)),
        "S": ((0.0, 600.0, 1.5, 0.0, None), (600.0, 1600.0, 0.0, 0.0025, None)),
        "T": ((-40.0, 133.0, 1.0, 0.0, None), (133.0, 350.0, 0.0, 0.0075, None)),
    },
    "iec-3": {
        "B": ((600.0, 800.0, 4.0, 0.0, None), (800.0, 1700.0, 0.0, 0.005, None)),
        "E": ((-167.0, 40.0, 2.5, 0.0, None), (-200.0, -167.0, 0.0, 0.015, None)),
        "K": ((-167.0, 40.0, 2.5, 0.0, None), (-200.0, -167.0, 0.0, 0.015, None)),
        "N": ((-167.0, 40.0, 2.5, 0.0, None), (-200.0, -167.0, 0.0, 0.015, None)),
        "T": ((-67.0, 40.0, 1.0, 0.0, None), (-200.0, -67.0, 0.0, 0.015, None)),
    },
}
"""Tolerance rules by class name and type letter."""


def tolerance(tc_type: str, temperature_c: ArrayLike, tolerance_class: str = "astm-standard") -> NDArray[np.float64]:
    """The tolerance (a +/- bound, degC) of new wire of a type and class at a temperature.

    Parameters
    ----------
    tc_type : str
        Type letter.
    temperature_c : array_like
        Temperature, degC.
    tolerance_class : str
        One of ``astm-standard``, ``astm-special``, ``iec-1``, ``iec-2``, ``iec-3``.

    Returns
    -------
    numpy.ndarray
        The bound in degC; NaN where the class does not cover the
        temperature (or the type).

    Raises
    ------
    ValueError
        For an unknown class or type.

    References
    ----------
    [ASTME230]_, [IEC60584]_.

    Examples
    --------
    >>> float(tolerance("K", 1000.0))
    7.5
    """
    letter = check_type(tc_type)
    try:
        rules = TOLERANCE_CLASSES[tolerance_class].get(letter, ())
    except KeyError:
        raise ValueError(
            f"unknown tolerance class {tolerance_class!r}; expected one of {', '.join(TOLERANCE_CLASSES)}"
        ) from None
    t = np.asarray(temperature_c, dtype=float)
    out = np.full(t.shape, np.nan)
    for lo, hi, fixed, frac, offset in rules:
        mask = (t >= lo) & (t <= hi) & np.isnan(out)
        if offset is None:
            value = np.maximum(fixed, frac * np.abs(t))
        else:
            value = fixed + frac * (t - offset)
        out = np.where(mask, value, out)
    return out


def tolerance_uncertainty(tc_type: str, temperature_c: ArrayLike, tolerance_class: str = "astm-standard") -> NDArray[np.float64]:
    """Standard uncertainty implied by a tolerance taken as a rectangular bound: tol/sqrt(3), degC.

    References
    ----------
    [GUM2008]_ section 4.3.7 (rectangular distribution).
    """
    u: NDArray[np.float64] = tolerance(tc_type, temperature_c, tolerance_class) / np.sqrt(3.0)  # numpy's stubs type float ufunc results as Any
    return u
