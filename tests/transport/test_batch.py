"""Batch parsing (issue 15, item 3): ``parse_batch`` gives exactly what ``parse`` gives line by line.

The reference here gathers per-line results with its own plain loop, so that the batch path's
gathering is checked too, not only compared with itself.
"""

from __future__ import annotations

import math

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from firewatch.transport.generic import ChannelMap, GenericParser
from firewatch.transport.modbus import ModbusParser, RegisterMap
from firewatch.transport.native import MAX_SHAPES, NativeParser, crc16, encode
from firewatch.transport.records import Malformed, Status, Value

CHANNELS = ("cj", "tc1", "tc2", "py1")
"""Channels wanted; lines also carry ``extra`` (an unknown channel) and may lack some of these."""


def reference(parse, lines: list[tuple[float, bytes]], channels: tuple[str, ...], clock: str):
    """Per-line parsing gathered by hand: raw, samples, values and status per channel."""
    raw, samples, rows = [], [], []
    for received, line in lines:
        item = parse(line, received)
        if isinstance(item, Malformed):
            raw.append((item.received, item.raw, False, item.reason))
            continue
        raw.append((item.received, item.raw, True, ""))
        t = item.device_time if clock == "device" and item.device_time is not None else item.received
        samples.append((len(raw) - 1, t, item.received, item.device_time, item.seq))
        rows.append({v.channel: v for v in item.values})
    values = {c: np.array([r[c].value if c in r else math.nan for r in rows], dtype=float) for c in channels}
    status = {c: np.array([int(r[c].status) if c in r else int(Status.MISSING) for r in rows], dtype=np.int64) for c in channels}
    return raw, samples, values, status


def assert_same(cols, expected) -> None:
    raw, samples, values, status = expected
    assert cols.raw == raw
    assert cols.samples == samples
    assert set(cols.values) == set(values) == set(cols.status)
    for c in values:
        # bit for bit: the same float64 (NaN and -0.0 included)
        assert cols.values[c].dtype == np.float64 and cols.values[c].view(np.int64).tolist() == values[c].view(np.int64).tolist(), c
        assert cols.status[c].tolist() == status[c].tolist(), c


def _line(text: bytes) -> bytes:
    return text + b" *%04X\r\n" % crc16(text)


GOOD = encode([Value("cj", 24.8, "C"), Value("tc1", 41.276, "mV"), Value("tc2", 9.587, "mV"), Value("py1", 1198.4, "C")], 1024, 1764590400.25)

CASES: list[bytes] = [
    GOOD,
    GOOD,  # the second of a shape takes the fast path
    encode([Value("cj", -0.0, "C"), Value("tc1", -1.5, "mV"), Value("tc2", 0.0, "mV"), Value("py1", 999999999.0, "C")], 1025, -3.5),
    # status words, a missing channel, an unknown one, no sequence number or time
    encode([Value("cj", 24.8, "C"), Value("tc1", math.nan, "", Status.OPEN), Value("py1", math.nan, "", Status.UNDER)], 7, 1.0),
    encode([Value("cj", 24.8, "C"), Value("tc1", math.nan, "", Status.OPEN), Value("py1", math.nan, "", Status.UNDER)], 8, 2.0),
    encode([Value("tc2", math.nan, "", Status.OVER), Value("py1", math.nan, "", Status.ERROR), Value("extra", 3.0, "C")]),
    encode([Value("tc2", math.nan, "", Status.OVER), Value("py1", math.nan, "", Status.ERROR), Value("extra", 3.0, "C")]),
    # odd but valid: a sign, an exponent, underscores, a lower-case checksum, 19 digits of sequence
    _line(b"FW1 5 10 cj=+24.8C tc1=4.1e1mV tc2=1_0.5mV py1=.5C"),
    _line(b"FW1 5 10 cj=+24.8C tc1=4.1e1mV tc2=1_0.5mV py1=.5C"),
    b"FW1 6 11 cj=24.80C *%04x" % crc16(b"FW1 6 11 cj=24.80C"),
    b"FW1 6 11 cj=24.80C *%04x" % crc16(b"FW1 6 11 cj=24.80C"),
    _line(b"FW1 9223372036854775807 1e10 cj=1C"),
    _line(b"FW1 007 0010.5000 cj=007.50C"),
    _line(b"FW1 008 0011.5000 cj=007.50C"),
    # malformed: every reason the per-line parser gives
    b"FW1 1 - tc1=1.0mV",
    b"FW1 1 - tc1=1.0mV *ZZZZ",
    b"FW1 1 - tc1=1.0mV *0000",
    _line(b"XX1 1 - tc1=1.0mV"),
    _line(b"FW1 x - tc1=1.0mV"),
    _line(b"FW1 9223372036854775808 - tc1=1.0mV"),
    _line(b"FW1 1 nan tc1=1.0mV"),
    _line(b"FW1 1 2e11 tc1=1.0mV"),
    _line(b"FW1 1 - tc1=1.0V"),
    _line(b"FW1 1 - tc1=1.0mV tc1=2.0mV"),
    _line(b"FW1 1 - tc 1=1.0mV"),
    _line(b"FW1 1 -"),
    _line(b"FW1 1 - tc1=nanmV"),
    _line(b"FW1 1 - tc1=1.0mV"),
    _line(b"FW1 1 - tc1=1234567890.5mV"),  # beyond 1e9, in a known shape
    _line(b"FW1 1 - tc1=-999999999.999999999999mV"),  # just within
    _line(b"FW1 1 12345678901.5 tc1=1.0mV"),  # a device time beyond 1e11, in a known shape
    _line(b"FW1 1 99999999999.5 tc1=1.0mV"),  # just within
    _line(b"FW1 12345678901234567890 - tc1=1.0mV"),  # a sequence number beyond 2^63-1
    _line(b"FW1 1 - tc1=OPENmV"),
    _line(b"FW1 1 - tc1=open"),
    b"",
    b"\r\n",
    b"\xff\xfe garbage \x00 *1234\r\n",
    GOOD[:30] + b"\r\n",  # truncated
    GOOD.replace(b"41.2760", b"41.2761"),  # one digit changed: the checksum fails
]


def test_native_batch_equals_per_line_on_every_case() -> None:
    lines = [(1000.0 + i * 0.5, line) for i, line in enumerate(CASES)]
    parser = NativeParser()
    for clock in ("device", "wall"):
        for size in (1, 3, len(lines)):  # shapes learned in one batch serve the next
            for start in range(0, len(lines), size):
                part = lines[start : start + size]
                assert_same(parser.parse_batch(part, CHANNELS, clock), reference(NativeParser().parse, part, CHANNELS, clock))


def test_native_fast_path_is_taken_for_a_known_shape() -> None:
    """The second line of a shape is not parsed by ``parse`` (the fast path), and still agrees."""
    parser = NativeParser()
    calls = []
    slow = parser.parse
    parser.parse = lambda line, received: calls.append(line) or slow(line, received)  # type: ignore[method-assign]
    lines = [(1.0, GOOD), (2.0, GOOD), (3.0, GOOD.replace(b"41.2760", b"41.2761"))]
    cols = parser.parse_batch(lines, CHANNELS, "wall")
    assert calls == [GOOD.rstrip(b"\r\n"), lines[2][1].rstrip(b"\r\n")]
    assert_same(cols, reference(NativeParser().parse, lines, CHANNELS, "wall"))


def test_native_shapes_are_bounded() -> None:
    """A stream of ever new shapes keeps at most MAX_SHAPES compiled, and still agrees."""
    parser = NativeParser()
    lines = [(float(i), encode([Value(f"c{i}", 1.0, "C")], i, float(i))) for i in range(MAX_SHAPES + 10)]
    lines += lines
    assert_same(parser.parse_batch(lines, ("c1", "c70"), "device"), reference(NativeParser().parse, lines, ("c1", "c70"), "device"))
    assert len(parser._shapes) == MAX_SHAPES


def test_native_shapes_beyond_the_tried_come_forward() -> None:
    """Shapes alternating among more than are tried first still reach the fast path once parsed again."""
    parser = NativeParser()
    calls = []
    slow = parser.parse
    parser.parse = lambda line, received: calls.append(line) or slow(line, received)  # type: ignore[method-assign]
    shapes = [encode([Value(f"c{k}", 1.0, "C")], 1, 1.0) for k in range(8)]
    lines = [(float(i), shapes[i % 8]) for i in range(80)]
    # eight shapes in turn: each has fallen beyond the four tried by the time it comes again, so all go through parse
    cols = parser.parse_batch(lines, ("c0",), "wall")
    assert len(calls) == 80 and len(cols.samples) == 80
    assert_same(cols, reference(NativeParser().parse, lines, ("c0",), "wall"))
    calls.clear()
    again = [(float(i), shapes[0]) for i in range(10)]
    parser.parse_batch(again, ("c0",), "wall")
    assert len(calls) == 1  # the eighth shape back: parsed once and brought forward, then fast


_NAMES = st.sampled_from(["cj", "tc1", "tc2", "py1", "extra", "tc 1", "", "a=b"])
_NUMBERS = st.one_of(
    st.floats(allow_nan=True, allow_infinity=True).map(lambda x: repr(x)),
    st.floats(-2e9, 2e9).map(lambda x: f"{x:.4f}"),
    st.integers(-10**10, 10**10).map(str),
    st.sampled_from(["+1.5", "1e3", "1_0", ".5", "5.", "-0", "00.0", "", "x", "1.2.3"]),
)
_VALUES = st.one_of(
    st.tuples(_NUMBERS, st.sampled_from(["mV", "C", "V", ""])).map(lambda p: p[0] + p[1]),
    st.sampled_from(["OPEN", "UNDER", "OVER", "ERR", "open"]),
)
_FIELD = st.tuples(_NAMES, _VALUES)
_HEAD = st.tuples(
    st.one_of(st.just("-"), st.integers(0, 2**64).map(str), st.sampled_from(["+1", "1_0", "x"])),
    st.one_of(st.just("-"), st.floats(-2e11, 2e11).map(lambda x: f"{x:.3f}"), st.sampled_from(["nan", "1e3", "inf"])),
)


def _framed(head: tuple[str, str], fields: list[tuple[str, str]]) -> bytes:
    body = " ".join(["FW1", *head, *(f"{name}={value}" for name, value in fields)]).encode("ascii")
    return body + b" *%04X\r\n" % crc16(body)


@st.composite
def native_lines(draw) -> tuple[bytes, bytes]:
    """A line, and a plain line of its shape (every number 1.5) that teaches the parser the shape first."""
    head = draw(_HEAD)
    fields = draw(st.lists(_FIELD, max_size=6))
    teacher = _framed(("1", "2.5"), [(n, "1.5" + v[-2:] if v.endswith("mV") else "1.5C" if v.endswith("C") else v) for n, v in fields])
    kind = draw(st.sampled_from(["good", "good", "good", "spoiled", "garbage"]))
    if kind == "garbage":
        return teacher, draw(st.binary(max_size=80))
    line = _framed(head, fields)
    if kind == "spoiled":
        at = draw(st.integers(0, len(line) - 1))
        line = line[:at] + bytes([line[at] ^ draw(st.integers(1, 255))]) + line[at + 1 :]
    return teacher, line


@settings(max_examples=400, deadline=None)
@given(st.lists(native_lines(), max_size=12), st.sampled_from(["device", "wall"]))
def test_native_batch_equals_per_line_on_any_bytes(pairs: list[tuple[bytes, bytes]], clock: str) -> None:
    lines = [teacher for teacher, _ in pairs] + [line for _, line in pairs]
    batch = [(float(i), line) for i, line in enumerate(lines)]
    assert_same(NativeParser().parse_batch(batch, CHANNELS, clock), reference(NativeParser().parse, batch, CHANNELS, clock))


def test_generic_batch_equals_per_line() -> None:
    parser = GenericParser(
        "csv",
        (ChannelMap("tc1", "T1", "mV", scale=0.001), ChannelMap("py1", "PY", "C", offset=-0.5, under_tokens=("LO",)), ChannelMap("tc2", "T2", "mV", open_tokens=("-9999",))),
        columns=("time", "T1", "T2", "PY"),
        time_field="time",
    )
    lines = [(float(i), line) for i, line in enumerate([b"12.5, 41276, -9999, 1200.5\r\n", b"1,2,3,LO", b"1,2,3", b"x,2,3,4", b"1,2,x,4", b"\xff,1,2,3", b""])]
    for clock in ("device", "wall"):
        assert_same(parser.parse_batch(lines, CHANNELS, clock), reference(parser.parse, lines, CHANNELS, clock))


def test_modbus_batch_equals_per_line() -> None:
    maps = [
        RegisterMap("tc1", 1, 0, type="int32", scale=0.0001, unit="mV", open=(2147483647,), under=(-2147483648,)),
        RegisterMap("cj", 1, 2, scale=0.01, error=(-32768,)),
        RegisterMap("py1", 1, 4, type="uint16", scale=0.001, unit="mA", range_c=(550.0, 1600.0)),
    ]
    parser = ModbusParser(maps, RegisterMap("device_time", 1, 100, type="uint32"))
    records = [
        b"MB1 1 3.1 1:i0=0006,4C58,0001,7584,2EE0 1:i100=6900,0000",
        b"MB1 2 3.1 1:i0=7FFF,FFFF,8000,7584,0000",
        b"MB1 3 3.0 1:i0+5!timeout",
        b"MB1 4 3.0 2:h0+2!x06",
        b"MB1 x 3.0",
        b"MB2 1 1.0",
        b"MB1 5 1.0 1:i0=12",
        b"\xff",
    ]
    lines = [(float(i), r) for i, r in enumerate(records)]
    for clock in ("device", "wall"):
        assert_same(parser.parse_batch(lines, CHANNELS, clock), reference(parser.parse, lines, CHANNELS, clock))
