"""The native line format, its checksum, and the framer, tested with byte strings and no port."""

from __future__ import annotations

import math

from hypothesis import given, settings
from hypothesis import strategies as st

from firewatch.transport.framing import LineFramer
from firewatch.transport.native import NativeParser, crc16, encode
from firewatch.transport.records import Malformed, ReadingSet, Status, Value

PARSER = NativeParser()


def test_crc16_ccitt_false_check_value() -> None:
    # CRC-16/CCITT-FALSE of "123456789" is 0x29B1 (the catalogue check value, common practice, no source).
    assert crc16(b"123456789") == 0x29B1


def test_round_trip() -> None:
    values = [Value("tc1", 41.276, "mV"), Value("cj", 24.8, "C"), Value("py1", math.nan, "", Status.UNDER), Value("tc2", math.nan, "", Status.OPEN)]
    line = encode(values, 1024, 1764590400.25)
    assert line.endswith(b"\r\n")
    got = PARSER.parse(line, 5.0)
    assert isinstance(got, ReadingSet)
    assert got.seq == 1024 and got.device_time == 1764590400.25 and got.received == 5.0
    assert got.get("tc1").value == 41.276 and got.get("tc1").unit == "mV"
    assert got.get("py1").status == Status.UNDER and got.get("tc2").status == Status.OPEN


def test_no_seq_or_time() -> None:
    got = PARSER.parse(encode([Value("tc1", 1.0, "mV")]), 0.0)
    assert isinstance(got, ReadingSet) and got.seq is None and got.device_time is None


def _body(text: bytes) -> bytes:
    return text + b" *%04X" % crc16(text)


def test_reasons() -> None:
    cases = {
        b"FW1 1 - tc1=1.0mV": "no checksum",
        b"FW1 1 - tc1=1.0mV *ZZZZ": "not hexadecimal",
        b"FW1 1 - tc1=1.0mV *0000": "checksum mismatch",
        _body(b"XX1 1 - tc1=1.0mV"): "does not start with",
        _body(b"FW1 x - tc1=1.0mV"): "bad sequence number",
        _body(b"FW1 1 - tc1=1.0V"): "bad value",
        _body(b"FW1 1 - tc1=1.0mV tc1=2.0mV"): "twice",
        _body(b"FW1 1 - tc 1=1.0mV"): "bad field",
        _body(b"FW1 1 -"): "no channel values",
        _body(b"FW1 1 - tc1=nanmV"): "bad value",
    }
    for line, reason in cases.items():
        got = PARSER.parse(line, 0.0)
        assert isinstance(got, Malformed), line
        assert reason in got.reason, (line, got.reason)


def test_truncated_line_is_detected() -> None:
    line = encode([Value("tc1", 41.276, "mV"), Value("tc2", 40.1, "mV")], 1, 2.0)
    for cut in range(1, len(line) - 2):
        assert isinstance(PARSER.parse(line[:cut], 0.0), Malformed)


@settings(max_examples=500, deadline=None)
@given(st.binary(max_size=300))
def test_garbage_never_crashes_and_is_counted(data: bytes) -> None:
    framer = LineFramer()
    lines, overlong = framer.feed(data + b"\n")
    results = [PARSER.parse(line, 0.0) for line in lines + overlong]
    assert all(isinstance(r, (Malformed, ReadingSet)) for r in results)
    assert len(results) == data.count(b"\n") + 1


@settings(max_examples=300, deadline=None)
@given(st.integers(0, 10**6), st.floats(0, 2e9), st.lists(st.floats(-100, 2000, allow_nan=False), min_size=1, max_size=8), st.data())
def test_spoiled_lines_never_pass(seq, t, temps, data) -> None:
    values = [Value(f"ch{i}", v, "C") for i, v in enumerate(temps)]
    line = encode(values, seq, t).rstrip(b"\r\n")
    i = data.draw(st.integers(0, len(line) - 1))
    flip = data.draw(st.integers(1, 255))
    spoiled = line[:i] + bytes([line[i] ^ flip]) + line[i + 1 :]
    got = PARSER.parse(spoiled, 0.0)
    # a CRC-16 catches every single-byte error (common practice, no source)
    assert isinstance(got, Malformed)


def test_framer_keeps_partial_lines_and_bounds_length() -> None:
    framer = LineFramer(max_line=50)
    lines, over = framer.feed(b"abc")
    assert lines == [] and over == []
    lines, over = framer.feed(b"def\nghi")
    assert lines == [b"abcdef"]
    assert framer.flush() == b"ghi"
    lines, over = framer.feed(b"x" * 60)
    assert over and lines == []
    lines, over = framer.feed(b"tail\nnext\n")
    assert lines == [b"next"]  # the overlong line's tail is dropped with it


# -- issue 10: numbers a float or SQLite cannot hold make a line malformed, never an exception ----------


def test_sequence_numbers_beyond_sqlite_integers_are_malformed() -> None:
    """Issue 10: a sequence number of 2^63 crashed the writer (SQLite integers are signed 64-bit,
    SQLite documentation, "Datatypes In SQLite")."""
    top = PARSER.parse(_body(b"FW1 9223372036854775807 - tc1=1.0mV"), 0.0)
    assert isinstance(top, ReadingSet) and top.seq == 2**63 - 1
    for seq in (b"9223372036854775808", b"1" + b"0" * 30, b"-1", b"+5", b"1_000", b"0x10"):
        got = PARSER.parse(_body(b"FW1 " + seq + b" - tc1=1.0mV"), 0.0)
        assert isinstance(got, Malformed) and "bad sequence number" in got.reason, seq


def test_values_and_times_beyond_a_float_are_malformed() -> None:
    """Issue 10: 1e309 overflows a float (IEEE 754 double, largest finite about 1.8e308)."""
    cases = {
        b"FW1 1 - tc1=1e309mV": "not a finite number",
        b"FW1 1 - tc1=-1e309C": "not a finite number",
        b"FW1 1 - tc1=infC": "not a finite number",
        b"FW1 1 - tc1=1e10C": "beyond",
        b"FW1 1 - tc1=1e308mV": "beyond",
        b"FW1 1 1e309 tc1=1.0mV": "bad device time",
        b"FW1 1 nan tc1=1.0mV": "bad device time",
        b"FW1 1 1e12 tc1=1.0mV": "bad device time",
        b"FW1 1 12:00 tc1=1.0mV": "bad device time",
    }
    for text, reason in cases.items():
        got = PARSER.parse(_body(text), 0.0)
        assert isinstance(got, Malformed) and reason in got.reason, (text, got)
    edge = PARSER.parse(_body(b"FW1 1 -1e11 tc1=-1e9C"), 0.0)
    assert isinstance(edge, ReadingSet) and edge.get("tc1").value == -1e9 and edge.device_time == -1e11


@settings(max_examples=300, deadline=None)
@given(st.integers(-(2**70), 2**70), st.floats(allow_nan=True, allow_infinity=True), st.floats(allow_nan=True, allow_infinity=True))
def test_any_number_in_any_field_parses_or_is_malformed(seq: int, t: float, value: float) -> None:
    got = PARSER.parse(_body(f"FW1 {seq} {t!r} tc1={value!r}mV".encode()), 0.0)
    assert isinstance(got, (Malformed, ReadingSet))
    if isinstance(got, ReadingSet):  # what passes is something SQLite and numpy hold
        assert 0 <= got.seq <= 2**63 - 1 and abs(got.device_time) <= 1e11 and abs(got.get("tc1").value) <= 1e9
