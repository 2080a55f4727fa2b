"""firewatch's native line format: one reading set per line, with a checksum.

Format (ASCII, one line, ended by LF or CR LF)::

    FW1 <seq> <device-time> <channel>=<value> [<channel>=<value> ...] *<crc>

* ``FW1``: the format tag and version.
* ``<seq>``: a decimal sequence number, incrementing by one per line
  (wrapping is allowed), 0 to 2^63 - 1 (what SQLite stores); ``-`` when
  the device has none.
* ``<device-time>``: the device's time, decimal seconds (the simulator sends
  UTC seconds since the epoch with millisecond resolution), at most 1e11 in
  magnitude; ``-`` for none.
* ``<channel>``: a name of letters, digits, ``_``, ``.`` or ``-``.
* ``<value>``: a decimal number with a unit suffix, ``mV`` or ``C``
  (``41.276mV``, ``1203.4C``), finite and at most 1e9 in magnitude, or a
  status word: ``OPEN`` (thermocouple
  open circuit), ``UNDER`` (below range), ``OVER`` (above range, saturated),
  ``ERR`` (device error).
* ``*<crc>``: CRC-16/CCITT-FALSE (polynomial 0x1021, initial 0xFFFF) of every
  byte before the space that precedes ``*``, as four upper-case hex digits.

Example::

    FW1 1024 1773464400.000 cj=24.80C tc1=41.2760mV tc2=9.5870mV py1=1198.40C py2=UNDER *CEF9

The checksum detects line noise and truncation: any line that fails it is
counted and logged as malformed, never half-used. See docs/line-format.md.
"""

from __future__ import annotations

import binascii
import math
import re
from collections.abc import Sequence

import numpy as np

from firewatch.transport.batch import Columns, Gatherer
from firewatch.transport.records import SEQ_MAX, Malformed, ReadingSet, Status, Value, check_number, check_time

__all__ = ["TAG", "crc16", "encode", "NativeParser"]

TAG = b"FW1"
_CHANNEL = re.compile(rb"^[A-Za-z0-9_.\-]{1,32}$")
_OK = Status.OK
_STATUS_WORDS = {b"OPEN": Status.OPEN, b"UNDER": Status.UNDER, b"OVER": Status.OVER, b"ERR": Status.ERROR}
_WORDS = {status: word for word, status in _STATUS_WORDS.items()}

# The fast path's strict forms, each a subset of what ``parse`` accepts and bounded so that its
# checks cannot fail: a sequence number of at most 18 digits is below SEQ_MAX, a device time of at
# most 10 integer digits within TIME_LIMIT_S, a value of at most 9 within VALUE_LIMIT. Anything
# else (a sign, an exponent, more digits) goes through ``parse``.
# Possessive quantifiers (``{m,n}+``, ``?+``): what follows a run of digits is never a digit, so
# giving digits back can never help a match; not trying halves the time of a wide line's match.
_SEQ = rb"(-|\d{1,18}+)"
_TIME = rb"(-|-?\d{1,10}+(?:\.\d{1,9}+)?+)"
_NUMBER = rb"(-?\d{1,9}+(?:\.\d{1,12}+)?+)"
MAX_SHAPES = 64
"""Line shapes (channels in order, each with its unit or status word) a parser keeps compiled."""
_TRIED = 4
"""Shapes tried, most recently matched first, before a line goes through ``parse``."""


def crc16(data: bytes) -> int:
    """CRC-16/CCITT-FALSE (poly 0x1021, init 0xFFFF), via :func:`binascii.crc_hqx`."""
    return binascii.crc_hqx(data, 0xFFFF)


def _format_value(value: Value) -> str:
    if value.status == Status.OK:
        digits = 4 if value.unit == "mV" else 2
        return f"{value.channel}={value.value:.{digits}f}{value.unit}"
    word = {Status.OPEN: "OPEN", Status.UNDER: "UNDER", Status.OVER: "OVER"}.get(value.status, "ERR")
    return f"{value.channel}={word}"


def encode(values: list[Value] | tuple[Value, ...], seq: int | None = None, device_time: float | None = None) -> bytes:
    """Encode one reading set as a native line, with its CRC and a CR LF ending."""
    head = [
        "FW1",
        "-" if seq is None else str(int(seq)),
        "-" if device_time is None else f"{device_time:.3f}",
    ]
    body = " ".join(head + [_format_value(v) for v in values]).encode("ascii")
    return body + b" *%04X\r\n" % crc16(body)


class NativeParser:
    """Parse native lines into :class:`ReadingSet` or :class:`Malformed`."""

    name = "native"

    def __init__(self) -> None:
        self._names: dict[bytes, str] = {}
        """Channel names already checked, bytes to str."""
        self._shapes: list[_Shape] = []
        """Compiled shapes of lines seen, the most recently matched first (at most :data:`MAX_SHAPES`)."""
        self._by_key: dict[tuple[tuple[str, str], ...], _Shape] = {}

    def parse_batch(self, lines: Sequence[tuple[float, bytes]], channels: Sequence[str], clock: str) -> Columns:
        """Parse a batch of ``(received, line)`` into :class:`~firewatch.transport.batch.Columns`.

        Gives what :meth:`parse` gives line by line, gathered. A line whose
        checksum is right and whose shape (its channels in order, each with
        its unit or status word) was seen before is read by that shape's
        compiled pattern, and its numbers are converted with the others of
        its shape in one numpy call; any other line goes through
        :meth:`parse`, which also teaches the parser its shape.
        """
        g = Gatherer(channels, clock)
        raw, samples = g.raw, g.samples
        device = g.device
        shapes = self._shapes
        rows: dict[int, tuple[_Shape, list[int], list[tuple[bytes, ...]]]] = {}
        crc = binascii.crc_hqx
        for received, line in lines:
            line = line.rstrip(b"\r\n")
            body = line[:-6]
            if line[-6:-4] == b" *" and line[-4:] == b"%04X" % crc(body, 0xFFFF):
                for shape in shapes[:_TRIED]:
                    m = shape.match(body)
                    if m is None:
                        continue
                    groups = m.groups()
                    seq_text, time_text = groups[0], groups[1]
                    device_time = None if time_text == b"-" else float(time_text)
                    raw.append((received, line, True, ""))
                    t = device_time if device and device_time is not None else received
                    samples.append((len(raw) - 1, t, received, device_time, None if seq_text == b"-" else int(seq_text)))
                    found = rows.get(id(shape))
                    if found is None:
                        found = rows[id(shape)] = (shape, [], [])
                        if shape is not shapes[0]:
                            shapes.remove(shape)
                            shapes.insert(0, shape)
                    found[1].append(len(samples) - 1)
                    found[2].append(groups)
                    break
                else:
                    self._single(g, line, received)
            else:
                self._single(g, line, received)
        for shape, index, texts in rows.values():
            # one conversion for the block: fixed-width byte strings to float64 in C, no Python float per value
            numbers = np.array(texts, dtype=bytes)[:, 2:].astype(np.float64) if shape.numbers else None
            values = {name: numbers[:, j] for j, name in enumerate(shape.numbers)} if numbers is not None else {}
            g.block(np.array(index, dtype=np.intp), values, shape.words)
        return g.columns()

    def _single(self, g: Gatherer, line: bytes, received: float) -> None:
        """One line through :meth:`parse`; a good line's shape is learned for the lines after it."""
        item = self.parse(line, received)
        g.item(item)
        if isinstance(item, ReadingSet):
            key = tuple((v.channel, v.unit if v.status == _OK else _WORDS[v.status].decode()) for v in item.values)
            shape = self._by_key.get(key)
            if shape is not None:  # known but beyond the shapes tried: bring it forward
                self._shapes.remove(shape)
            else:
                if len(self._shapes) >= MAX_SHAPES:  # forget the one matched longest ago
                    del self._by_key[self._shapes.pop().key]
                shape = self._by_key[key] = _Shape(key)
            self._shapes.insert(0, shape)

    def parse(self, line: bytes, received: float) -> ReadingSet | Malformed:
        line = line.rstrip(b"\r\n")
        star = line.rfind(b" *")
        if star < 0 or len(line) - star != 6:
            return Malformed(received, line, "no checksum ' *XXXX' at the end")
        body, given = line[:star], line[star + 2 :]
        try:
            expected = int(given, 16)
        except ValueError:
            return Malformed(received, line, f"checksum {given!r} is not hexadecimal")
        if crc16(body) != expected:
            return Malformed(received, line, "checksum mismatch (line noise or truncation)")
        fields = body.split(b" ")
        if len(fields) < 3 or fields[0] != TAG:
            return Malformed(received, line, "does not start with 'FW1 <seq> <time>'")
        seq_text, time_text = fields[1], fields[2]
        seq = None
        if seq_text != b"-":
            # digits only (int() would take "+7" and "1_000"), and no more than SQLite's integers hold
            if not seq_text.isdigit() or len(seq_text) > 19 or int(seq_text) > SEQ_MAX:
                return Malformed(received, line, f"bad sequence number {seq_text[:24]!r}: not a decimal from 0 to 2^63-1")
            seq = int(seq_text)
        device_time = None
        if time_text != b"-":
            try:
                device_time = float(time_text)
            except ValueError:
                return Malformed(received, line, f"bad device time {time_text[:24]!r}: not a number")
            problem = check_time(device_time)
            if problem:
                return Malformed(received, line, f"bad device time {time_text[:24]!r}: {problem}")
        values: list[Value] = []
        seen: set[str] = set()
        names = self._names
        for field in fields[3:]:
            raw_name, eq, text = field.partition(b"=")
            channel = names.get(raw_name)
            if channel is None:
                if not eq or not _CHANNEL.match(raw_name):
                    return Malformed(received, line, f"bad field {field[:40]!r}")
                channel = names[raw_name] = raw_name.decode("ascii")
            if channel in seen:
                return Malformed(received, line, f"channel {channel!r} twice")
            seen.add(channel)
            last = text[-1:]
            if last == b"V" and text[-2:-1] == b"m":
                unit, number_text = "mV", text[:-2]
            elif last == b"C":
                unit, number_text = "C", text[:-1]
            else:
                status = _STATUS_WORDS.get(text)
                if status is None or not eq:
                    return Malformed(received, line, f"bad value {field[:40]!r} (expected a number with mV or C, or OPEN/UNDER/OVER/ERR)")
                values.append(Value(channel, math.nan, "", status))
                continue
            try:
                number = float(number_text)
            except ValueError:
                return Malformed(received, line, f"bad value {field[:40]!r} (expected a number with mV or C, or OPEN/UNDER/OVER/ERR)")
            problem = check_number(number)
            if problem:
                return Malformed(received, line, f"bad value {field[:40]!r}: {problem}")
            values.append(Value(channel, number, unit, _OK))
        if not values:
            return Malformed(received, line, "no channel values")
        return ReadingSet(received, device_time, seq, tuple(values), line)


class _Shape:
    """The compiled pattern of one line shape: its channels in order, each with its unit or status word."""

    def __init__(self, key: tuple[tuple[str, str], ...]) -> None:
        parts = [b"FW1 " + _SEQ + b" " + _TIME]
        numbers: list[str] = []
        words: dict[str, int] = {}
        for channel, form in key:
            name = re.escape(channel.encode("ascii"))
            if form in ("mV", "C"):
                parts.append(name + b"=" + _NUMBER + form.encode("ascii"))
                numbers.append(channel)
            else:
                parts.append(name + b"=" + form.encode("ascii"))
                words[channel] = int(_STATUS_WORDS[form.encode("ascii")])
        self.key = key
        self.match = re.compile(b" ".join(parts)).fullmatch
        self.numbers = tuple(numbers)
        self.words = words
