"""Modbus register maps: decoding, 4-20 mA loops, request planning, and the poll record a parser reads.

A poll of Modbus devices becomes one *poll record*, a line of ASCII text
holding every register block as read (or why it could not be read). The
poller (:mod:`firewatch.transport.modbus_poll`) writes it; :class:`ModbusParser`
turns it into a :class:`~firewatch.transport.records.ReadingSet` exactly as
the line parsers do, so the recorder, the firing log (which keeps every
record raw) and replay treat Modbus input like any line. Format::

    MB1 <seq> <poll-ms> <block> [<block> ...]

* ``<seq>``: the poll's number since the poller started.
* ``<poll-ms>``: how long the poll took, milliseconds (jitter stays visible).
* ``<block>``: ``<unit>:<i|h><start>=<hhhh>,<hhhh>,...`` for registers read
  from unit ``unit``'s input (``i``, function 4) or holding (``h``,
  function 3) table from 0-based address ``start``, each register as four
  hex digits; or ``<unit>:<i|h><start>+<count>!<why>`` for a block that
  failed: ``timeout`` (no answer), ``xNN`` (exception response code NN,
  hex) or ``bad`` (a malformed reply).

Example: ``MB1 7 3.1 1:i0=0006,4C58,0001,7584,09B0,1388 2:h0+2!x06``.

References (docs/references.md): Modbus2012 (function codes 3 and 4,
0-based addresses, at most 125 registers per read, exception codes),
NAMURNE43 (the 4-20 mA signal levels).

Only :mod:`struct` decodes here, not pymodbus: a firing log recorded over
Modbus must replay where pymodbus is not installed, and one ``struct`` call
per value is all decoding needs.
"""

from __future__ import annotations

import math
import struct
from collections.abc import Iterable, Sequence
from dataclasses import dataclass

from firewatch.transport.batch import Columns, gather
from firewatch.transport.records import Malformed, ReadingSet, Status, Value

__all__ = [
    "TYPES",
    "TABLES",
    "EXCEPTION_NAMES",
    "MAX_REGISTERS",
    "RegisterMap",
    "Request",
    "BlockResult",
    "decode",
    "loop_status",
    "loop_to_celsius",
    "plan_requests",
    "encode_poll",
    "ModbusParser",
]

TYPES: dict[str, tuple[str, int]] = {
    "int16": (">h", 1),
    "uint16": (">H", 1),
    "int32": (">i", 2),
    "uint32": (">I", 2),
    "float32": (">f", 2),
}
"""Register types: struct format (big-endian within a word, as Modbus sends bytes) and width in registers."""

TABLES: dict[str, str] = {"input": "i", "holding": "h"}
"""Register tables and their letter in a poll record: input registers (function 4), holding registers (function 3)."""

FUNCTION: dict[str, int] = {"input": 4, "holding": 3}

MAX_REGISTERS = 125
"""Most registers one read may ask for (Modbus2012, functions 3 and 4: quantity 1 to 125)."""

EXCEPTION_NAMES: dict[int, str] = {
    1: "illegal function",
    2: "illegal data address",
    3: "illegal data value",
    4: "server device failure",
    5: "acknowledge",
    6: "server device busy",
    8: "memory parity error",
    10: "gateway path unavailable",
    11: "gateway target device failed to respond",
}
"""Exception codes and their names (Modbus2012, section 7)."""

# NAMUR NE 43 signal levels, mA (NAMURNE43, from memory of the recommendation's figures)
LOOP_LOW_MA = 4.0
LOOP_HIGH_MA = 20.0
LOOP_FAIL_LOW_MA = 3.6
"""Below this a loop signals a failure (broken wire, failed transmitter)."""
LOOP_FAIL_HIGH_MA = 21.0
"""Above this a loop signals a failure (short circuit, failed transmitter)."""
_EPS_MA = 1e-9  # a register scaled by 0.001 lands a hair off the boundaries


@dataclass(frozen=True)
class RegisterMap:
    """Where one channel's value is, and how to read it.

    ``value = raw * scale + offset`` in ``unit``; with ``unit == "mA"`` the
    current maps linearly from 4-20 mA onto ``range_c`` (degC). The status
    lists hold decoded raw numbers meaning open circuit, under range, over
    range or a device error.
    """

    channel: str
    unit_id: int
    register: int
    table: str = "input"
    type: str = "int16"
    word_order: str = "big"
    scale: float = 1.0
    offset: float = 0.0
    unit: str = "C"
    range_c: tuple[float, float] | None = None
    open: tuple[float, ...] = ()
    under: tuple[float, ...] = ()
    over: tuple[float, ...] = ()
    error: tuple[float, ...] = ()

    @property
    def width(self) -> int:
        """Registers the value spans (1 or 2)."""
        return TYPES[self.type][1]

    @property
    def function(self) -> int:
        """The Modbus function that reads it: 4 (input registers) or 3 (holding registers)."""
        return FUNCTION[self.table]

    @property
    def value_unit(self) -> str:
        """The unit of the reading it becomes: degC for a loop, else its own."""
        return "C" if self.unit == "mA" else self.unit


@dataclass(frozen=True)
class Request:
    """One read: ``count`` registers from ``start`` of a unit's table."""

    unit_id: int
    table: str
    start: int
    count: int

    @property
    def label(self) -> str:
        """For messages: ``unit 1 input 0-5``."""
        return f"unit {self.unit_id} {self.table} {self.start}-{self.start + self.count - 1}"


@dataclass(frozen=True)
class BlockResult:
    """What a request returned: its registers, or why not (``timeout``, ``xNN``, ``bad``)."""

    request: Request
    words: tuple[int, ...] | None
    failure: str | None = None

    @property
    def answered(self) -> bool:
        """The device said something (registers, an exception response or a malformed reply)."""
        return self.failure != "timeout"


def decode(words: Sequence[int], type: str, word_order: str = "big") -> int | float:
    """Decode the registers of one value.

    Parameters
    ----------
    words : sequence of int
        The value's registers, 0..65535 each, in the order read.
    type : str
        One of :data:`TYPES`.
    word_order : str
        For 32-bit types: ``big`` (high word first) or ``little`` (low word
        first); 16-bit types ignore it.

    Examples
    --------
    >>> decode([0xFFFE], "int16"), decode([0xFFFE], "uint16")
    (-2, 65534)
    >>> decode([0x0001, 0x0002], "uint32"), decode([0x0002, 0x0001], "uint32", "little")
    (65538, 65538)
    >>> decode([0x4496, 0x8000], "float32")
    1204.0
    """
    fmt, width = TYPES[type]
    if len(words) != width:
        raise ValueError(f"{type} takes {width} register(s), got {len(words)}")
    if width == 2 and word_order == "little":
        words = (words[1], words[0])
    return struct.unpack(fmt, struct.pack(f">{width}H", *words))[0]


def loop_status(current_ma: float) -> Status:
    """The status of a 4-20 mA signal (NAMURNE43).

    Below 3.6 mA or above 21 mA the loop signals a failure (``ERROR``);
    from 3.6 mA to just under 4 mA it is under range, above 20 mA to 21 mA
    over range. NE 43 names 3.8-4 and 20-20.5 mA as the under- and over-range
    measurement bands and leaves 3.6-3.8 and 20.5-21 mA to neither; firewatch
    reports them as under and over range, since the loop is not signalling
    a failure there.

    Examples
    --------
    >>> [loop_status(i).name for i in (3.5, 3.7, 3.9, 12.0, 20.2, 20.7, 21.5)]
    ['ERROR', 'UNDER', 'UNDER', 'OK', 'OVER', 'OVER', 'ERROR']
    """
    if not math.isfinite(current_ma) or current_ma < LOOP_FAIL_LOW_MA - _EPS_MA or current_ma > LOOP_FAIL_HIGH_MA + _EPS_MA:
        return Status.ERROR
    if current_ma < LOOP_LOW_MA - _EPS_MA:
        return Status.UNDER
    if current_ma > LOOP_HIGH_MA + _EPS_MA:
        return Status.OVER
    return Status.OK


def loop_to_celsius(current_ma: float, range_c: tuple[float, float]) -> float:
    """Linear map of a 4-20 mA current onto ``range_c``: low + (I - 4 mA) / 16 mA x (high - low).

    Examples
    --------
    >>> loop_to_celsius(4.0, (700.0, 1800.0)), loop_to_celsius(12.0, (700.0, 1800.0)), loop_to_celsius(20.0, (700.0, 1800.0))
    (700.0, 1250.0, 1800.0)
    """
    low, high = range_c
    return low + (current_ma - LOOP_LOW_MA) / (LOOP_HIGH_MA - LOOP_LOW_MA) * (high - low)


def plan_requests(maps: Iterable[RegisterMap], last: RegisterMap | None = None, max_count: int = MAX_REGISTERS) -> tuple[Request, ...]:
    """The reads that cover every map: contiguous registers of one unit and table in one request.

    Registers are merged only when they touch or overlap (reading across a
    hole could meet an address the device does not implement); a block
    grows to at most ``max_count`` registers and never splits a value. The
    block holding ``last`` (the device's clock) is read last, so that a
    clock read after the values dates them.

    Examples
    --------
    >>> maps = [RegisterMap("a", 1, 0, type="int32"), RegisterMap("b", 1, 2), RegisterMap("c", 1, 5), RegisterMap("d", 2, 0, "holding")]
    >>> [r.label for r in plan_requests(maps)]
    ['unit 1 input 0-2', 'unit 1 input 5-5', 'unit 2 holding 0-0']
    """
    spans: dict[tuple[int, str], list[tuple[int, int]]] = {}
    everything = list(maps) + ([last] if last is not None else [])
    for m in everything:
        spans.setdefault((m.unit_id, m.table), []).append((m.register, m.register + m.width))
    out: list[Request] = []
    for (unit, table), items in sorted(spans.items()):
        items.sort()
        start, end = items[0]
        for s, e in items[1:]:
            if s <= end and max(end, e) - start <= max_count:
                end = max(end, e)
            else:
                out.append(Request(unit, table, start, end - start))
                start, end = s, e
        out.append(Request(unit, table, start, end - start))
    if last is not None:
        holding = [r for r in out if r.unit_id == last.unit_id and r.table == last.table and r.start <= last.register < r.start + r.count]
        out = [r for r in out if r not in holding] + holding
    return tuple(out)


def encode_poll(seq: int, duration_s: float, results: Iterable[BlockResult]) -> bytes:
    """A poll record (see the module docstring).

    Examples
    --------
    >>> r = Request(1, "input", 0, 2)
    >>> encode_poll(3, 0.0042, [BlockResult(r, (1, 0xABCD)), BlockResult(Request(2, "holding", 0, 2), None, "x06")])
    b'MB1 3 4.2 1:i0=0001,ABCD 2:h0+2!x06'
    """
    parts = [f"MB1 {int(seq)} {duration_s * 1000.0:.1f}"]
    for res in results:
        req = res.request
        head = f"{req.unit_id}:{TABLES[req.table]}{req.start}"
        if res.words is None:
            parts.append(f"{head}+{req.count}!{res.failure or 'bad'}")
        else:
            parts.append(head + "=" + ",".join(f"{w:04X}" for w in res.words))
    return " ".join(parts).encode("ascii")


@dataclass(frozen=True)
class _Compiled:
    """A register map prepared for fast parsing."""

    m: RegisterMap
    key: tuple[int, str]
    fmt: str
    swap: bool
    nbytes: int
    codes: tuple[tuple[frozenset[float], Status], ...]


def _float32(x: float) -> float:
    """``x`` rounded to the nearest float32, as a register would carry it."""
    return struct.unpack(">f", struct.pack(">f", x))[0]


def _compile(m: RegisterMap) -> _Compiled:
    fmt, width = TYPES[m.type]
    norm = _float32 if m.type == "float32" else float
    codes = tuple(
        (frozenset(norm(v) for v in values), status)
        for values, status in ((m.error, Status.ERROR), (m.open, Status.OPEN), (m.under, Status.UNDER), (m.over, Status.OVER))
        if values
    )
    return _Compiled(m, (m.unit_id, TABLES[m.table]), fmt, width == 2 and m.word_order == "little", 2 * width, codes)


_LETTERS = {"i", "h"}
_REASONS = {"timeout", "bad"}


class ModbusParser:
    """Turn poll records into :class:`ReadingSet` (or :class:`Malformed`), per a register map.

    A channel whose block failed reads ``ERROR``; one whose registers are in
    no block of the record is left out (``MISSING`` downstream). Never
    raises on bad bytes.

    Parameters
    ----------
    maps : sequence of RegisterMap
    device_time : RegisterMap, optional
        The device's clock, UTC seconds (``raw * scale + offset``); when
        absent or unreadable a reading set has no device time.
    need_time : bool
        The firing runs on the device's clock: a record whose clock could
        not be read cannot be placed in time, so it is malformed (kept raw).
    """

    name = "modbus"

    def __init__(self, maps: Sequence[RegisterMap], device_time: RegisterMap | None = None, need_time: bool = False) -> None:
        self.maps = tuple(maps)
        self.device_time = device_time
        self.need_time = need_time and device_time is not None
        self._compiled = [_compile(m) for m in self.maps]
        self._clock = _compile(device_time) if device_time is not None else None

    def parse_batch(self, lines: Sequence[tuple[float, bytes]], channels: Sequence[str], clock: str) -> Columns:
        """A batch of ``(received, line)`` as columns: :meth:`parse` line by line, gathered."""
        return gather(self.parse, lines, channels, clock)

    def parse(self, line: bytes, received: float) -> ReadingSet | Malformed:
        line = line.rstrip(b"\r\n")
        try:
            text = line.decode("ascii")
        except UnicodeDecodeError:
            return Malformed(received, line, "non-ASCII bytes in a Modbus poll record")
        fields = text.split(" ")
        if len(fields) < 3 or fields[0] != "MB1":
            return Malformed(received, line, "not a Modbus poll record ('MB1 <seq> <poll-ms> ...')")
        try:
            seq = int(fields[1])
            float(fields[2])
        except ValueError:
            return Malformed(received, line, "bad poll number or duration in a Modbus poll record")
        blocks: dict[tuple[int, str], list[tuple[int, int, bytes | None]]] = {}
        for field in fields[3:]:
            block = _block(field)
            if isinstance(block, str):
                return Malformed(received, line, block)
            key, start, count, data = block
            blocks.setdefault(key, []).append((start, count, data))
        values = []
        for c in self._compiled:
            found = _value(c, blocks)
            if found is not None:
                values.append(found)
        device_time = None
        if self._clock is not None:
            t = _value(self._clock, blocks)
            if t is not None and t.status == Status.OK and math.isfinite(t.value):
                device_time = t.value
            elif self.need_time:
                return Malformed(received, line, "the device's clock could not be read, and the firing runs on it")
        return ReadingSet(received, device_time, seq, tuple(values), line)


def _block(field: str) -> tuple[tuple[int, str], int, int, bytes | None] | str:
    """One block of a poll record, or a reason it is malformed."""
    unit_text, colon, rest = field.partition(":")
    if not colon or not unit_text.isdigit() or not rest or rest[0] not in _LETTERS:
        return f"bad block {field[:40]!r} in a Modbus poll record"
    unit, letter = int(unit_text), rest[0]
    head, eq, words = rest[1:].partition("=")
    if eq:
        parts = words.split(",")
        if not head.isdigit() or not all(len(p) == 4 for p in parts):
            return f"bad block {field[:40]!r} in a Modbus poll record"
        try:
            data = bytes.fromhex("".join(parts))
        except ValueError:
            return f"bad registers in block {field[:40]!r}"
        return (unit, letter), int(head), len(parts), data
    span, bang, why = head.partition("!")
    start_text, plus, count_text = span.partition("+")
    if not bang or not plus or not start_text.isdigit() or not count_text.isdigit():
        return f"bad block {field[:40]!r} in a Modbus poll record"
    if why not in _REASONS and not (len(why) == 3 and why[0] == "x" and all(ch in "0123456789ABCDEF" for ch in why[1:])):
        return f"bad failure reason in block {field[:40]!r}"
    return (unit, letter), int(start_text), int(count_text), None


def _value(c: _Compiled, blocks: dict[tuple[int, str], list[tuple[int, int, bytes | None]]]) -> Value | None:
    """The channel's value from the blocks that cover it, or None when none does."""
    m = c.m
    for start, count, data in blocks.get(c.key, ()):
        if not (start <= m.register and m.register + m.width <= start + count):
            continue
        if data is None:
            return Value(m.channel, math.nan, m.value_unit, Status.ERROR)
        at = 2 * (m.register - start)
        raw_bytes = data[at : at + c.nbytes]
        if c.swap:
            raw_bytes = raw_bytes[2:] + raw_bytes[:2]
        raw = struct.unpack(c.fmt, raw_bytes)[0]
        if raw != raw or raw in (math.inf, -math.inf):  # a float32 NaN or infinity is no reading
            return Value(m.channel, math.nan, m.value_unit, Status.ERROR)
        for codes, status in c.codes:
            if raw in codes:
                return Value(m.channel, math.nan, m.value_unit, status)
        value = raw * m.scale + m.offset
        if m.unit == "mA":
            status = loop_status(value)
            if status != Status.OK:
                return Value(m.channel, math.nan, "C", status)
            assert m.range_c is not None
            return Value(m.channel, loop_to_celsius(value, m.range_c), "C", Status.OK)
        return Value(m.channel, float(value), m.unit, Status.OK)
    return None
