"""Temperature units at the edges: what people type and read (degC, degF, K).

Inside, the physics works in kelvin; the model and the firing log in degC.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

__all__ = ["UNITS", "to_celsius", "from_celsius", "delta_to_celsius", "delta_from_celsius", "symbol", "check_unit"]

UNITS = ("C", "F", "K")
"""The accepted unit letters."""


def check_unit(unit: str) -> str:
    """Upper-case unit letter, or ``ValueError`` naming the accepted forms."""
    u = str(unit).strip().upper().removeprefix("°").removeprefix("DEG")
    if u not in UNITS:
        raise ValueError(f"unknown temperature unit {unit!r}; expected C, F or K")
    return u


def to_celsius(value: ArrayLike, unit: str) -> NDArray[np.float64]:
    """Convert a temperature in ``unit`` to degC."""
    v = np.asarray(value, dtype=float)
    u = check_unit(unit)
    if u == "F":
        return (v - 32.0) * 5.0 / 9.0
    if u == "K":
        return v - 273.15
    return v


def from_celsius(value_c: ArrayLike, unit: str) -> NDArray[np.float64]:
    """Convert a temperature in degC to ``unit``."""
    v = np.asarray(value_c, dtype=float)
    u = check_unit(unit)
    if u == "F":
        return v * 9.0 / 5.0 + 32.0
    if u == "K":
        return v + 273.15
    return v


def delta_to_celsius(delta: ArrayLike, unit: str) -> NDArray[np.float64]:
    """Convert a temperature difference (or rate) in ``unit`` to degC."""
    v = np.asarray(delta, dtype=float)
    return v * 5.0 / 9.0 if check_unit(unit) == "F" else v


def delta_from_celsius(delta_c: ArrayLike, unit: str) -> NDArray[np.float64]:
    """Convert a temperature difference (or rate) in degC to ``unit``."""
    v = np.asarray(delta_c, dtype=float)
    return v * 9.0 / 5.0 if check_unit(unit) == "F" else v


def symbol(unit: str) -> str:
    """Display symbol: degC, degF or K."""
    return {"C": "°C", "F": "°F", "K": "K"}[check_unit(unit)]
