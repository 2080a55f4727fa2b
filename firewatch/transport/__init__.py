"""Input: serial URLs, line framing and parsers that turn bytes into reading records.

Imports nothing from the model, the physics or the interface.
"""

from __future__ import annotations

from firewatch.transport.records import Malformed, ReadingSet, Status, Value

__all__ = ["Malformed", "ReadingSet", "Status", "Value"]
