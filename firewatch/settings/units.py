"""Temperature units at the edges: what people type and read (degC, degF, K).

Inside, the physics works in kelvin; the model and the firing log in degC.
:class:`Units` words temperatures, differences and rates for people, the same
on every screen and in the report: a difference is labelled ``K`` in °C and K
and ``°F`` in °F, never a bare number.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

__all__ = ["UNITS", "Units", "check_unit", "delta_from_celsius", "from_celsius", "symbol", "to_celsius"]

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


def delta_from_celsius(delta_c: ArrayLike, unit: str) -> NDArray[np.float64]:
    """Convert a temperature difference (or rate) in degC to ``unit``."""
    v = np.asarray(delta_c, dtype=float)
    return v * 9.0 / 5.0 if check_unit(unit) == "F" else v


def symbol(unit: str) -> str:
    """Display symbol: degC, degF or K."""
    return {"C": "°C", "F": "°F", "K": "K"}[check_unit(unit)]


@dataclass(frozen=True)
class Units:
    """Temperatures, differences and rates in °C, °F or K (differences in °F are labelled as such)."""

    unit: str = "C"

    @property
    def symbol(self) -> str:
        return symbol(self.unit)

    @property
    def delta_symbol(self) -> str:
        """What a temperature difference is labelled with: ``°F`` in °F, ``K`` otherwise."""
        return "°F" if self.unit == "F" else "K"

    def number(self, c: float | None, digits: int = 1) -> str:
        """A temperature without its unit, for a column whose heading names it.

        Examples
        --------
        >>> Units("F").number(1000.0), Units("C").number(float("nan"))
        ('1832.0', '—')
        """
        if c is None or not math.isfinite(c):
            return "—"
        return f"{float(from_celsius(c, self.unit)):.{digits}f}"

    def temperature(self, c: float | None, digits: int = 1) -> str:
        """
        Examples
        --------
        >>> Units("C").temperature(1220.0), Units("F").temperature(1220.0, 0)
        ('1220.0 °C', '2228 °F')
        """
        if c is None or not math.isfinite(c):
            return "—"
        return f"{float(from_celsius(c, self.unit)):.{digits}f} {self.symbol}"

    def delta(self, k: float | None, digits: int = 1, signed: bool = True) -> str:
        """
        Examples
        --------
        >>> Units("C").delta(-3.16), Units("F").delta(10.0, 0, signed=False)
        ('−3.2 K', '18 °F')
        """
        if k is None or not math.isfinite(k):
            return "—"
        v = float(delta_from_celsius(k, self.unit))
        text = f"{v:+.{digits}f}" if signed else f"{abs(v):.{digits}f}"
        return text.replace("-", "−") + " " + self.delta_symbol

    def rate(self, c_per_h: float | None, digits: int = 0, signed: bool = False) -> str:
        """
        Examples
        --------
        >>> Units("C").rate(-60.0), Units("F").rate(100.0, signed=True)
        ('−60 °C/h', '+180 °F/h')
        """
        if c_per_h is None or not math.isfinite(c_per_h):
            return "—"
        v = float(delta_from_celsius(c_per_h, self.unit))
        return f"{v:{'+' if signed else ''}.{digits}f} {self.symbol}/h".replace("-", "−")
