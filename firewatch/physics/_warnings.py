"""Warning and error classes shared by the physics modules.

Three levels of input checking, kept true in every physics function:

* impossible input (a wavelength or temperature at or below zero, an
  emissivity outside (0, 1]) raises :class:`ValueError` quoting the value;
* input outside a model's range of validity warns with
  :class:`OutOfRangeWarning` and carries on (arrays get NaN where a value
  cannot be computed at all);
* any silent adjustment warns with :class:`AdjustmentWarning` saying what
  changed.
"""

from __future__ import annotations

__all__ = ["FirewatchWarning", "OutOfRangeWarning", "AdjustmentWarning", "RangeError"]


class FirewatchWarning(UserWarning):
    """Base class of every warning firewatch raises."""


class OutOfRangeWarning(FirewatchWarning):
    """An input lies outside the range where the model is defined or valid."""


class AdjustmentWarning(FirewatchWarning):
    """An input was adjusted (clipped, substituted) before use."""


class RangeError(ValueError):
    """A single value lies outside the range where a function is defined."""
