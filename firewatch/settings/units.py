"""Temperature units at the edges: what people type and read (degC, degF, K).

Inside, the physics works in kelvin; the model and the firing log in degC.
:class:`Units` words temperatures, differences and rates for people, the same
on every screen and in the report: a difference is labelled ``K`` in °C and K
and ``°F`` in °F, never a bare number.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

__all__ = ["UNITS", "Units", "check_unit", "delta_from_celsius", "delta_to_celsius", "from_celsius", "symbol", "to_celsius"]

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
        >>> Units("C").delta(-3.16), Units("F").delta(10.0, 0, signed=False), Units("C").delta(-0.02)
        ('−3.2 K', '18 °F', '+0.0 K')
        """
        if k is None or not math.isfinite(k):
            return "—"
        v = float(delta_from_celsius(k, self.unit))
        if abs(v) < 0.5 * 10.0**-digits:
            v = 0.0  # never "−0.0"
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
        if abs(v) < 0.5 * 10.0**-digits:
            v = 0.0
        return f"{v:{'+' if signed else ''}.{digits}f} {self.symbol}/h".replace("-", "−")

    def restate(self, text: str) -> str:
        """A logged text (an alarm's message, an event's detail) with its °C and K figures in these units.

        The log keeps °C and kelvin; on a screen switched to °F every figure
        reads in °F, differences labelled as °F too. Figures keep as many
        decimals as they were logged with.

        Examples
        --------
        >>> f = Units("F")
        >>> f.restate("py1 -11.5 K from tc2 (allowed ±5.9 K)")
        'py1 −20.7 °F from tc2 (allowed ±10.6 °F)'
        >>> f.restate("faster than 120 °C/h through quartz (550-600 °C); tc2 departs at +6.5 K/h; type K")
        'faster than 216 °F/h through quartz (1022-1112 °F); tc2 departs at +11.7 °F/h; type K'
        >>> f.restate("both depart from tc2 (+1.0 and -2.5 K/h)"), Units("C").restate("-2 K")
        ('both depart from tc2 (+1.8 and −4.5 °F/h)', '-2 K')
        """
        if self.unit != "F":
            return text
        text = _RANGE_C.sub(lambda m: f"{self._figure(m[1], False)}-{self._figure(m[2], False)} °F", text)
        text = _PAIR_KH.sub(lambda m: f"{self._figure(m[1], True)} and {self._figure(m[2], True)} °F/h", text)

        def one(m: re.Match[str]) -> str:
            unit = m["unit"]
            absolute = unit == "°C"  # a temperature; everything else (K, K/h, °C/h) is a difference or a rate
            return f"{self._figure(m['num'], not absolute)} °F{'/h' if unit.endswith('/h') else ''}"

        return _FIGURE.sub(one, text)

    def _figure(self, number: str, difference: bool) -> str:
        sign = number[0] if number[0] in "±+-−" else ""
        digits = number[len(sign):]
        value = float(digits) * (-1.0 if sign in "-−" and sign else 1.0)
        decimals = len(digits.split(".")[1]) if "." in digits else 0
        out = value * 9.0 / 5.0 if difference else value * 9.0 / 5.0 + 32.0
        text = f"{abs(out):.{decimals}f}"
        if sign == "±":
            return "±" + text
        if out < 0:
            return "−" + text
        return ("+" if sign == "+" else "") + text


_NUM = r"[±+\-−]?\d+(?:\.\d+)?"
_FIGURE = re.compile(rf"(?P<num>{_NUM}) (?P<unit>°C/h|°C|K/h|K)(?![\w/])")
_RANGE_C = re.compile(r"(\d+(?:\.\d+)?)-(\d+(?:\.\d+)?) °C(?![\w/])")
_PAIR_KH = re.compile(rf"({_NUM}) and ({_NUM}) K/h")
