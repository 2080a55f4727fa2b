"""A batch of received lines as columns: raw lines, samples, and one array per channel.

Every parser has ``parse_batch(lines, channels, clock) -> Columns`` beside
its per-line ``parse``. The batch path follows exactly the per-line path's
rules (a test holds them together on every kind of line): the native parser
reads well-formed lines through a compiled fast path that makes no Python
object per value; any line the fast path does not recognise goes through
``parse`` and is gathered here, so odd but valid lines, garbage and status
words keep their per-line meaning.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from typing import NamedTuple

import numpy as np

from firewatch.transport.records import Malformed, ReadingSet, Status

__all__ = ["Columns", "Gatherer", "gather"]

_MISSING = int(Status.MISSING)


class Columns(NamedTuple):
    """Lines of one batch as columns.

    Attributes
    ----------
    raw : list of (received, line, good, reason)
        Every line in arrival order, without its line ending; ``reason`` is
        why a line is malformed (empty for a good one).
    samples : list of (raw index, t, received, device_time, seq)
        One per good line; ``t`` is the device's time when the clock is the
        device's and the line has one, else the time of receipt.
    values : dict of str to float64 array
        Per wanted channel, aligned with ``samples``; NaN unless the status is OK.
    status : dict of str to int64 array
        :class:`~firewatch.transport.records.Status` codes; MISSING where a line lacks the channel.
    """

    raw: list[tuple[float, bytes, bool, str]]
    samples: list[tuple[int, float, float, float | None, int | None]]
    values: dict[str, np.ndarray]
    status: dict[str, np.ndarray]


class Gatherer:
    """Collects one batch: lines parsed one by one and blocks of samples read column-wise.

    Parameters
    ----------
    channels : sequence of str
        The channels wanted; others in a line are ignored.
    clock : str
        ``device`` or ``wall`` (see :class:`Columns`).
    """

    def __init__(self, channels: Sequence[str], clock: str) -> None:
        self.raw: list[tuple[float, bytes, bool, str]] = []
        self.samples: list[tuple[int, float, float, float | None, int | None]] = []
        self.device = clock == "device"
        self._names = tuple(channels)
        self._single: list[tuple[int, ReadingSet]] = []
        """Samples parsed one by one: their index and record."""
        self._blocks: list[tuple[np.ndarray, dict[str, np.ndarray], dict[str, int]]] = []
        """Samples read column-wise: their indices, values per channel, and a status per channel."""

    def malformed(self, received: float, line: bytes, reason: str) -> None:
        self.raw.append((received, line, False, reason))

    def sample(self, received: float, line: bytes, device_time: float | None, seq: int | None) -> int:
        """Add a good line; return its sample index (its values come from :meth:`block`)."""
        raw = self.raw
        raw.append((received, line, True, ""))
        t = device_time if self.device and device_time is not None else received
        self.samples.append((len(raw) - 1, t, received, device_time, seq))
        return len(self.samples) - 1

    def item(self, item: ReadingSet | Malformed) -> None:
        """Add one line as the per-line parser gave it."""
        if isinstance(item, Malformed):
            self.raw.append((item.received, item.raw, False, item.reason))
            return
        self._single.append((self.sample(item.received, item.raw, item.device_time, item.seq), item))

    def block(self, index: np.ndarray, values: dict[str, np.ndarray], status: dict[str, int]) -> None:
        """Values of several samples at once: ``values`` per OK channel, ``status`` per channel given by a word."""
        self._blocks.append((index, values, status))

    def columns(self) -> Columns:
        n = len(self.samples)
        vals = {name: np.full(n, math.nan) for name in self._names}
        stats = {name: np.full(n, _MISSING, dtype=np.int64) for name in self._names}
        for index, block_values, block_status in self._blocks:
            for name, column in block_values.items():
                if name in vals:
                    vals[name][index] = column
                    stats[name][index] = 0
            for name, code in block_status.items():
                if name in stats:
                    stats[name][index] = code
        for i, s in self._single:
            for v in s.values:
                if v.channel in vals:
                    vals[v.channel][i] = v.value
                    stats[v.channel][i] = v.status
        return Columns(self.raw, self.samples, vals, stats)


def gather(parse: Callable[[bytes, float], ReadingSet | Malformed], lines: Sequence[tuple[float, bytes]], channels: Sequence[str], clock: str) -> Columns:
    """A batch through a per-line parser: for parsers without a column-wise fast path."""
    g = Gatherer(channels, clock)
    for received, line in lines:
        g.item(parse(line, received))
    return g.columns()
