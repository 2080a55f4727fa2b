"""Tolerance classes as data: ASTM E230 and IEC 60584-1 values (entered from memory of the standards)."""

from __future__ import annotations

import numpy as np
import pytest

from firewatch.physics.tolerances import tolerance, tolerance_uncertainty


@pytest.mark.parametrize(
    ("tc_type", "t_c", "cls", "expected"),
    [
        # ASTM E230: K and N, +/-2.2 degC or 0.75 %, standard; 1.1 degC or 0.4 % special
        # (ASTM E230/E230M, Table 1)
        ("K", 100.0, "astm-standard", 2.2),
        ("K", 1000.0, "astm-standard", 7.5),
        ("N", 1000.0, "astm-special", 4.0),
        ("K", 200.0, "astm-special", 1.1),
        # ASTM E230 R and S: 1.5 degC or 0.25 %; 0.6 degC or 0.1 % (ASTM E230/E230M, Table 1)
        ("S", 400.0, "astm-standard", 1.5),
        ("R", 1400.0, "astm-standard", 3.5),
        ("S", 1400.0, "astm-special", 1.4),
        # ASTM E230 B: 0.5 % / 0.25 % over 870-1700 degC (ASTM E230/E230M, Table 1)
        ("B", 1200.0, "astm-standard", 6.0),
        ("B", 1200.0, "astm-special", 3.0),
        # IEC 60584-1 class 2, K: 2.5 degC to 333 degC, 0.0075 |t| above (from memory)
        ("K", 300.0, "iec-2", 2.5),
        ("K", 1000.0, "iec-2", 7.5),
        # IEC 60584-1 class 1, S above 1100: 1 + 0.003 (t - 1100) (from memory)
        ("S", 1300.0, "iec-1", 1.6),
    ],
)
def test_tolerance_values(tc_type: str, t_c: float, cls: str, expected: float) -> None:
    assert float(tolerance(tc_type, t_c, cls)) == pytest.approx(expected)


def test_outside_class_range_is_nan() -> None:
    assert np.isnan(tolerance("K", 1300.0, "astm-standard"))  # ASTM K limits stop at 1260 degC
    assert np.isnan(tolerance("B", 500.0, "astm-standard"))  # B from 870 degC
    assert np.isnan(tolerance("B", 1000.0, "iec-1"))  # no class 1 for B


def test_rectangular_standard_uncertainty() -> None:
    # tolerance as a rectangular bound: u = tol/sqrt(3) (GUM, JCGM 100:2008, 4.3.7)
    assert float(tolerance_uncertainty("K", 1000.0)) == pytest.approx(7.5 / np.sqrt(3))


def test_unknown_class_and_shape() -> None:
    with pytest.raises(ValueError, match="unknown tolerance class"):
        tolerance("K", 100.0, "gold")
    assert tolerance("K", np.full((2, 3), 500.0)).shape == (2, 3)
