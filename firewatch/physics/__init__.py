"""Pure, vectorised physics: thermocouples, Planck radiometry, windows, pyrometer corrections.

Imports numpy and scipy only; nothing here knows about ports, files or screens.
"""

from __future__ import annotations

from firewatch.physics._warnings import AdjustmentWarning, FirewatchWarning, OutOfRangeWarning, RangeError, UncertaintyWarning

__all__ = ["AdjustmentWarning", "FirewatchWarning", "OutOfRangeWarning", "RangeError", "UncertaintyWarning"]
