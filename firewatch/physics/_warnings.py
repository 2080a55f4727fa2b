"""Warning and error classes shared by the physics modules.

Three levels of input checking, kept true in every physics function:

* impossible input (a wavelength or temperature at or below zero, an
  emissivity outside (0, 1]) raises :class:`ValueError` quoting the value;
* input outside a model's range of validity warns with
  :class:`OutOfRangeWarning` and carries on (arrays get NaN where a value
  cannot be computed at all);
* any silent adjustment warns with :class:`AdjustmentWarning` saying what
  changed;
* a first-order uncertainty that the model's curvature makes unreliable
  warns with :class:`UncertaintyWarning`.

Messages quote a rejected value exactly (:func:`exact`), never rounded.
"""

from __future__ import annotations

__all__ = ["FirewatchWarning", "OutOfRangeWarning", "AdjustmentWarning", "UncertaintyWarning", "RangeError", "exact"]


class FirewatchWarning(UserWarning):
    """Base class of every warning firewatch raises."""


class OutOfRangeWarning(FirewatchWarning):
    """An input lies outside the range where the model is defined or valid."""


class AdjustmentWarning(FirewatchWarning):
    """An input was adjusted (clipped, substituted) before use."""


class UncertaintyWarning(FirewatchWarning):
    """A first-order (linear) uncertainty is unreliable here; a Monte Carlo propagation should replace it."""


class RangeError(ValueError):
    """A single value lies outside the range where a function is defined."""


def exact(value: float) -> str:
    """The value as typed back exactly (Python's shortest round-trip form), without a trailing ``.0``.

    Messages quote rejected values this way, so that a value just past a
    limit never reads as the limit itself (``1372.0001``, not ``1372``).

    >>> exact(1372.0001), exact(2000.0), exact(-0.5)
    ('1372.0001', '2000', '-0.5')
    """
    text = repr(float(value))
    return text[:-2] if text.endswith(".0") else text
