"""Argument types shared by the subcommands; each raises ``ArgumentTypeError`` naming the accepted form."""

from __future__ import annotations

import argparse
import math

__all__ = ["UsageError", "number", "fraction", "positive", "band", "unit"]


class UsageError(Exception):
    """A bad command line: printed as one line, exit status 2 (``firewatch.cli.main`` catches it)."""


def number(text: str) -> float:
    """A finite number."""
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a number, got {text!r}") from None
    if not math.isfinite(value):
        raise argparse.ArgumentTypeError(f"expected a finite number, got {text!r}")
    return value


def fraction(text: str) -> float:
    """A number in (0, 1]: an emissivity or a transmission."""
    value = number(text)
    if not 0.0 < value <= 1.0:
        raise argparse.ArgumentTypeError(f"must be in (0, 1], got {text}")
    return value


def positive(text: str) -> float:
    """A number > 0."""
    value = number(text)
    if value <= 0:
        raise argparse.ArgumentTypeError(f"must be > 0, got {text}")
    return value


def non_negative(text: str) -> float:
    """A number >= 0."""
    value = number(text)
    if value < 0:
        raise argparse.ArgumentTypeError(f"must be >= 0, got {text}")
    return value


def band(text: str) -> tuple[float, float]:
    """A band START:END in um, 0 < START < END."""
    parts = text.split(":")
    if len(parts) != 2:
        raise argparse.ArgumentTypeError(f"expected START:END in um (for example 0.8:1.1), got {text!r}")
    try:
        start, end = float(parts[0]), float(parts[1])
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected START:END in um (for example 0.8:1.1), got {text!r}") from None
    if not (math.isfinite(start) and math.isfinite(end) and 0 < start < end):
        raise argparse.ArgumentTypeError(f"band must satisfy 0 < START < END um, got {text!r}")
    return start, end


def unit(text: str) -> str:
    """C, F or K."""
    u = text.strip().upper()
    if u not in ("C", "F", "K"):
        raise argparse.ArgumentTypeError(f"expected C, F or K, got {text!r}")
    return u
