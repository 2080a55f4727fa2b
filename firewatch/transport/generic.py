"""A configurable parser for third-party bridges: CSV columns or key=value pairs mapped to channels.

Configured from the site profile's ``[input]`` table (see docs/line-format.md)::

    [input]
    format = "csv"                 # or "keyvalue"
    delimiter = ","                # csv: between columns
    columns = ["time", "T1", "T2", "CJ", "PYRO"]
    time_field = "time"            # optional: the device's time, seconds
    [input.channels.tc1]
    field = "T1"                   # the column (csv) or key (keyvalue)
    unit = "mV"                    # "mV" or "C"
    scale = 1.0                    # value = raw * scale + offset
    offset = 0.0
    open = ["OPEN", "-9999"]       # raw tokens that mean an open thermocouple

For ``keyvalue`` lines such as ``T1=41.2 T2=40.9 CJ=24.1``, ``pair_separator``
(default: any white space) and ``kv_separator`` (default ``=``) replace
``delimiter`` and ``columns``. Lines without a checksum cannot prove they are
whole, so a line missing a configured field is malformed.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field

from firewatch.transport.batch import Columns, gather
from firewatch.transport.records import Malformed, ReadingSet, Status, Value, check_number, check_time

__all__ = ["ChannelMap", "GenericParser"]


@dataclass(frozen=True)
class ChannelMap:
    """How one channel is read from a field."""

    channel: str
    field: str
    unit: str = "C"
    scale: float = 1.0
    offset: float = 0.0
    open_tokens: tuple[str, ...] = ("OPEN",)
    under_tokens: tuple[str, ...] = ("UNDER",)
    over_tokens: tuple[str, ...] = ("OVER",)


@dataclass(frozen=True)
class GenericParser:
    """Parse CSV or key=value lines according to a channel map."""

    format: str
    channels: tuple[ChannelMap, ...]
    delimiter: str = ","
    columns: tuple[str, ...] = ()
    time_field: str | None = None
    pair_separator: str | None = None
    kv_separator: str = "="
    _index: dict[str, int] = field(init=False, repr=False, compare=False, default_factory=dict)

    def __post_init__(self) -> None:
        if self.format not in ("csv", "keyvalue"):
            raise ValueError(f"generic format must be 'csv' or 'keyvalue', got {self.format!r}")
        if self.format == "csv":
            index = {name: i for i, name in enumerate(self.columns)}
            for ch in self.channels:
                if ch.field not in index:
                    raise ValueError(f"channel {ch.channel!r}: field {ch.field!r} is not among the columns")
            if self.time_field is not None and self.time_field not in index:
                raise ValueError(f"time_field {self.time_field!r} is not among the columns")
            object.__setattr__(self, "_index", index)

    @property
    def name(self) -> str:
        return self.format

    def _fields(self, text: str) -> dict[str, str] | str:
        if self.format == "csv":
            cells = [c.strip() for c in text.split(self.delimiter)]
            if len(cells) != len(self.columns):
                return f"expected {len(self.columns)} columns, got {len(cells)}"
            return {name: cells[i] for name, i in self._index.items()}
        pairs = text.split(self.pair_separator) if self.pair_separator else text.split()
        out: dict[str, str] = {}
        for pair in pairs:
            if not pair:
                continue
            key, sep, value = pair.partition(self.kv_separator)
            if not sep:
                return f"expected key{self.kv_separator}value, got {pair[:40]!r}"
            out[key.strip()] = value.strip()
        return out

    def parse_batch(self, lines: Sequence[tuple[float, bytes]], channels: Sequence[str], clock: str) -> Columns:
        """A batch of ``(received, line)`` as columns: :meth:`parse` line by line, gathered."""
        return gather(self.parse, lines, channels, clock)

    def parse(self, line: bytes, received: float) -> ReadingSet | Malformed:
        line = line.rstrip(b"\r\n")
        try:
            text = line.decode("ascii")
        except UnicodeDecodeError:
            return Malformed(received, line, "non-ASCII bytes")
        if not text.strip():
            return Malformed(received, line, "empty line")
        fields = self._fields(text)
        if isinstance(fields, str):
            return Malformed(received, line, fields)
        device_time = None
        if self.time_field is not None:
            try:
                device_time = float(fields[self.time_field])
            except (KeyError, ValueError):
                return Malformed(received, line, f"bad or missing time field {self.time_field!r}")
            problem = check_time(device_time)
            if problem:
                return Malformed(received, line, f"time field {self.time_field!r}: {fields[self.time_field][:24]!r} is {problem}")
        values: list[Value] = []
        for ch in self.channels:
            raw = fields.get(ch.field)
            if raw is None:
                return Malformed(received, line, f"missing field {ch.field!r}")
            if raw in ch.open_tokens:
                values.append(Value(ch.channel, math.nan, ch.unit, Status.OPEN))
            elif raw in ch.under_tokens:
                values.append(Value(ch.channel, math.nan, ch.unit, Status.UNDER))
            elif raw in ch.over_tokens:
                values.append(Value(ch.channel, math.nan, ch.unit, Status.OVER))
            else:
                try:
                    number = float(raw)
                except ValueError:
                    return Malformed(received, line, f"field {ch.field!r}: {raw[:20]!r} is not a number")
                value = number * ch.scale + ch.offset
                problem = check_number(value)
                if problem:
                    return Malformed(received, line, f"field {ch.field!r}: {raw[:20]!r} is {problem}")
                values.append(Value(ch.channel, value, ch.unit))
        return ReadingSet(received, device_time, None, tuple(values), line)
