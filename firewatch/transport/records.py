"""Typed, frozen reading records: what a parser makes of one line.

Recording and replay use the same types.
"""

from __future__ import annotations

import enum
from typing import NamedTuple

__all__ = ["Status", "Value", "ReadingSet", "Malformed", "VALUE_LIMIT", "TIME_LIMIT_S", "SEQ_MAX", "check_number", "check_time"]

VALUE_LIMIT = 1e9
"""Largest magnitude of a value a line may carry, mV or degC: far beyond any instrument, and small
enough that the physics' sums and powers stay finite. A larger value makes the line malformed."""
TIME_LIMIT_S = 1e11
"""Largest magnitude of a device time, s (about 3,000 years of seconds)."""
SEQ_MAX = 2**63 - 1
"""Largest sequence number: the largest integer SQLite stores."""


def check_number(number: float) -> str | None:
    """Why a parsed value cannot be kept (not finite, or beyond :data:`VALUE_LIMIT`); None when it can."""
    if number - number != 0.0:  # inf or nan, without a call into math
        return "not a finite number"
    if not -VALUE_LIMIT <= number <= VALUE_LIMIT:
        return f"beyond ±{VALUE_LIMIT:g}"
    return None


def check_time(seconds: float) -> str | None:
    """Why a device time cannot be kept (not finite, or beyond :data:`TIME_LIMIT_S`); None when it can."""
    if seconds - seconds != 0.0:
        return "not a finite number"
    if not -TIME_LIMIT_S <= seconds <= TIME_LIMIT_S:
        return f"beyond ±{TIME_LIMIT_S:g} s"
    return None


class Status(enum.IntEnum):
    """The state of one value as the instrument or bridge reported it."""

    OK = 0
    OPEN = 1
    """A thermocouple's open-circuit flag (burn-out)."""
    UNDER = 2
    """Below the instrument's measuring range."""
    OVER = 3
    """Above the measuring range (saturated)."""
    ERROR = 4
    """The device reported an error for this channel."""
    OUT_OF_RANGE = 5
    """The value could not be converted (outside a thermocouple type's range)."""
    MISSING = 6
    """Expected but absent from the line."""


class Value(NamedTuple):
    """One channel's value in a reading set (immutable).

    ``value`` is NaN unless ``status`` is OK; ``unit`` is ``"mV"`` or ``"C"``.
    A named tuple rather than a frozen dataclass: a replay builds millions,
    and tuples are made several times faster.
    """

    channel: str
    value: float
    unit: str
    status: Status = Status.OK


class ReadingSet(NamedTuple):
    """All channels of one line.

    Attributes
    ----------
    received : float
        Wall-clock time the line was received, UTC seconds since the epoch.
    device_time : float or None
        The device's own time stamp, when the line carries one (UTC seconds
        for the simulator; whatever the device counts otherwise).
    seq : int or None
        The device's sequence number, when the line carries one.
    values : tuple of Value
    raw : bytes
        The line as received, without its line ending.
    """

    received: float
    device_time: float | None
    seq: int | None
    values: tuple[Value, ...]
    raw: bytes

    def get(self, channel: str) -> Value | None:
        for v in self.values:
            if v.channel == channel:
                return v
        return None


class Malformed(NamedTuple):
    """A line that could not be parsed, with the reason."""

    received: float
    raw: bytes
    reason: str
