"""firewatch: kiln and furnace firing monitor reconciling thermocouples and pyrometers.

A monitoring aid, never a safety device: the kiln's own controller and an
independent over-temperature cut-out stay in charge.
"""

from __future__ import annotations

__version__ = "0.1.0"
__all__ = ["__version__"]
